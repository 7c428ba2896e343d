//! Footprints: which cells one beam touches.
//!
//! `Ray` beams use exact grid traversal (Amanatides & Woo, "A Fast Voxel Traversal Algorithm
//! for Ray Tracing", Eurographics 1987): from the cell holding the beam origin, step to the
//! neighbour whose boundary the segment crosses first, until the reach. `Cone` beams take every
//! cell whose centre lies inside the sector, plus the origin's cell.
//!
//! Design decision: the traversal never accumulates crossing parameters. The parameter at
//! which the segment leaves column `c` is computed from `c` itself (`c * a + b`), so a walk
//! that starts part-way along a segment (as a parallel worker owning a band of rows does)
//! reproduces the cells of a walk from the origin bit for bit.

use crate::geometry::{Point2, wrap_angle};
use crate::grid::{CellIndex, GridSpec, WorldBox};
use std::f64::consts::{FRAC_PI_2, PI};

/// Exact traversal of one segment across a grid's lattice.
#[derive(Clone, Copy, Debug)]
pub struct RayWalk {
    /// Cell holding the segment origin.
    pub start: CellIndex,
    /// Column step, -1, 0 or +1.
    pub step_col: i64,
    /// Row step, -1, 0 or +1.
    pub step_row: i64,
    /// Segment length, metres: cells entered at or past it are not touched.
    pub length: f64,
    // Crossing parameter (metres along the segment) of the boundary that leaves column c:
    // c * col_a + col_b; likewise for rows.
    col_a: f64,
    col_b: f64,
    row_a: f64,
    row_b: f64,
}

impl RayWalk {
    /// Prepares the traversal of the segment from `origin` in direction `heading` (radians,
    /// world frame) over `length` metres.
    pub fn new(spec: &GridSpec, origin: Point2, heading: f64, length: f64) -> RayWalk {
        let (dy, dx) = heading.sin_cos();
        Self::from_direction(spec, origin, dx, dy, length)
    }

    /// As [`RayWalk::new`], with a unit direction vector `(dx, dy)`.
    pub fn from_direction(
        spec: &GridSpec,
        origin: Point2,
        dx: f64,
        dy: f64,
        length: f64,
    ) -> RayWalk {
        let start = spec.cell_at(origin);
        let res = spec.resolution;
        // Leaving column c towards +x crosses x = ox + (c + 1) * res; towards -x, x = ox + c * res.
        let axis = |d: f64, o: f64, p: f64| -> (i64, f64, f64) {
            if d > 0.0 {
                let inv = 1.0 / d;
                (1, res * inv, (o + res - p) * inv)
            } else if d < 0.0 {
                let inv = 1.0 / d;
                (-1, res * inv, (o - p) * inv)
            } else {
                (0, 0.0, f64::INFINITY)
            }
        };
        let (step_col, col_a, col_b) = axis(dx, spec.origin.x, origin.x);
        let (step_row, row_a, row_b) = axis(dy, spec.origin.y, origin.y);
        RayWalk {
            start,
            step_col,
            step_row,
            length,
            col_a,
            col_b,
            row_a,
            row_b,
        }
    }

    /// Parameter (metres from the origin) at which the segment leaves column `c`.
    #[inline(always)]
    pub fn leave_col(&self, c: i64) -> f64 {
        c as f64 * self.col_a + self.col_b
    }

    /// Parameter (metres from the origin) at which the segment leaves row `r`.
    #[inline(always)]
    pub fn leave_row(&self, r: i64) -> f64 {
        r as f64 * self.row_a + self.row_b
    }

    /// The cell after `c` along the segment, or `None` when the segment ends inside `c`.
    /// At an exact corner the row step is taken first.
    #[inline(always)]
    pub fn next(&self, c: CellIndex) -> Option<CellIndex> {
        let tc = self.leave_col(c.col);
        let tr = self.leave_row(c.row);
        if tc < tr {
            (tc < self.length).then_some(CellIndex::new(c.col + self.step_col, c.row))
        } else {
            (tr < self.length).then_some(CellIndex::new(c.col, c.row + self.step_row))
        }
    }

    /// Calls `visit` on every cell of the segment, in order from the origin, until it returns
    /// `false` or the segment ends.
    #[inline]
    pub fn for_each(&self, mut visit: impl FnMut(CellIndex) -> bool) {
        let mut c = self.start;
        loop {
            if !visit(c) {
                return;
            }
            match self.next(c) {
                Some(n) => c = n,
                None => return,
            }
        }
    }

    /// All cells of the segment, in order (for tests and inspection; the fusion loop walks
    /// with [`RayWalk::for_each`]).
    pub fn cells(&self) -> Vec<CellIndex> {
        let mut v = Vec::new();
        self.for_each(|c| {
            v.push(c);
            true
        });
        v
    }

    /// The first cell of the segment whose row is `row` or beyond (in the walk's row
    /// direction), exactly as a walk from the origin would reach it, or `None` if the segment
    /// ends first. Requires a row step (a segment moving north or south) and `row` past the
    /// start row.
    pub fn enter_row(&self, row: i64) -> Option<CellIndex> {
        debug_assert!(self.step_row != 0);
        // The walk reaches `row` by a row step out of row `row - step` at parameter t_r,
        // taken from the first column c with leave_col(c) >= t_r (a column step is taken only
        // while leave_col(c) < leave_row).
        let prev = row - self.step_row;
        let t_r = self.leave_row(prev);
        if t_r >= self.length {
            return None;
        }
        let mut c = self.start.col;
        if self.step_col != 0 {
            // Estimate the column from the continuous solution, then settle it with the same
            // comparisons the walk makes. leave_col is monotone along the walk.
            let est = ((t_r - self.col_b) / self.col_a).floor();
            let lo = self.start.col as f64;
            let guess = if self.step_col > 0 {
                est.max(lo)
            } else {
                (est + 1.0).min(lo)
            };
            if guess.is_finite() && guess.abs() < 1e15 {
                c = guess as i64;
            }
            // Move back while the previous column would already have taken the row step.
            while c != self.start.col && self.leave_col(c - self.step_col) >= t_r {
                c -= self.step_col;
            }
            // Move forward while this column is left before the row boundary.
            while self.leave_col(c) < t_r {
                c += self.step_col;
            }
        }
        Some(CellIndex::new(c, row))
    }
}

/// The cells of a `Cone` beam with their distance and bearing, metres and radians.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ConeCell {
    /// The cell.
    pub cell: CellIndex,
    /// Distance from the beam origin to the cell centre, metres.
    pub distance: f64,
    /// Bearing of the centre from the beam axis, radians in [-pi, pi] (0 for the origin cell).
    pub bearing: f64,
}

/// Cells of a sector beam: every cell of `spec` whose centre lies within `reach` metres of
/// `origin` and within `width / 2` radians of `heading`, plus the cell containing the origin
/// (bearing 0), sorted by distance. Cells outside the grid are left out.
pub fn cone_cells(
    spec: &GridSpec,
    origin: Point2,
    heading: f64,
    width: f64,
    reach: f64,
) -> Vec<ConeCell> {
    let mut out = Vec::new();
    let half = width / 2.0;
    let own = spec.cell_at(origin);
    let b = cone_bounds(origin, heading, width, reach);
    let lo = spec.cell_at(b.min);
    let hi = spec.cell_at(b.max);
    let c0 = lo.col.max(0);
    let r0 = lo.row.max(0);
    let c1 = hi.col.min(spec.width as i64 - 1);
    let r1 = hi.row.min(spec.height as i64 - 1);
    for row in r0..=r1 {
        for col in c0..=c1 {
            let cell = CellIndex::new(col, row);
            let centre = spec.centre(cell);
            let (ex, ey) = (centre.x - origin.x, centre.y - origin.y);
            let distance = (ex * ex + ey * ey).sqrt();
            let bearing = if cell == own {
                0.0
            } else {
                wrap_angle(ey.atan2(ex) - heading)
            };
            if cell == own || (distance <= reach && bearing.abs() <= half) {
                out.push(ConeCell {
                    cell,
                    distance,
                    bearing,
                });
            }
        }
    }
    if spec.index(own).is_some() && !out.iter().any(|c| c.cell == own) {
        let centre = spec.centre(own);
        out.push(ConeCell {
            cell: own,
            distance: centre.distance(origin),
            bearing: 0.0,
        });
    }
    out.sort_by(|a, b| {
        a.distance
            .total_cmp(&b.distance)
            .then(a.cell.row.cmp(&b.cell.row))
            .then(a.cell.col.cmp(&b.cell.col))
    });
    out
}

/// Angular weight of a cone cell: `max(0, 1 - (2 bearing / width)^2)`.
#[inline]
pub fn cone_weight(bearing: f64, width: f64) -> f64 {
    let u = 2.0 * bearing / width;
    (1.0 - u * u).max(0.0)
}

/// World box holding a segment from `origin` along `heading` over `length` metres.
pub fn ray_bounds(origin: Point2, heading: f64, length: f64) -> WorldBox {
    let mut b = WorldBox::at(origin);
    b.include(Point2::new(
        origin.x + length * heading.cos(),
        origin.y + length * heading.sin(),
    ));
    b
}

/// World box holding a sector of radius `reach` metres and opening `width` radians.
pub fn cone_bounds(origin: Point2, heading: f64, width: f64, reach: f64) -> WorldBox {
    let half = width / 2.0;
    let at = |a: f64| Point2::new(origin.x + reach * a.cos(), origin.y + reach * a.sin());
    let mut b = WorldBox::at(origin);
    b.include(at(heading - half));
    b.include(at(heading + half));
    for k in 0..4 {
        let axis = k as f64 * FRAC_PI_2;
        if wrap_angle(axis - heading).abs() <= half || half >= PI {
            b.include(at(axis));
        }
    }
    b
}

#[cfg(test)]
mod tests {
    use super::*;

    fn unit_grid(w: u32, h: u32) -> GridSpec {
        GridSpec {
            resolution: 1.0,
            origin: Point2::new(0.0, 0.0),
            width: w,
            height: h,
        }
    }

    #[test]
    fn hand_worked_traversal() {
        // Worked by hand with the tMax / tDelta construction of Amanatides & Woo (1987):
        // from (0.25, 0.25) to (3.75, 1.25) on unit cells. Along the segment (as a fraction
        // of its length) column boundaries fall at 0.214, 0.5, 0.786, 1.07 and the first row
        // boundary at 0.75, so the cells are (0,0) (1,0) (2,0) (2,1) (3,1).
        let spec = unit_grid(5, 5);
        let (dx, dy) = (3.5f64, 1.0f64);
        let len = dx.hypot(dy);
        let w = RayWalk::from_direction(&spec, Point2::new(0.25, 0.25), dx / len, dy / len, len);
        let got: Vec<(i64, i64)> = w.cells().iter().map(|c| (c.col, c.row)).collect();
        assert_eq!(got, vec![(0, 0), (1, 0), (2, 0), (2, 1), (3, 1)]);
    }

    #[test]
    fn axis_aligned_and_backwards() {
        let spec = unit_grid(10, 10);
        let w = RayWalk::new(&spec, Point2::new(5.5, 5.5), PI, 3.2);
        let got: Vec<i64> = w.cells().iter().map(|c| c.col).collect();
        assert_eq!(got, vec![5, 4, 3, 2]);
        assert!(w.cells().iter().all(|c| c.row == 5));
        // A segment ending exactly on a boundary does not enter the next cell.
        let w = RayWalk::new(&spec, Point2::new(5.5, 5.5), FRAC_PI_2, 1.5);
        assert_eq!(w.cells().len(), 2);
    }

    #[test]
    fn entering_a_row_matches_the_full_walk() {
        let spec = GridSpec {
            resolution: 0.05,
            origin: Point2::new(-3.0, -2.0),
            width: 200,
            height: 200,
        };
        let mut seed = 0x2545F4914F6CDD1Du64;
        let mut rnd = || {
            seed ^= seed << 13;
            seed ^= seed >> 7;
            seed ^= seed << 17;
            (seed >> 11) as f64 / (1u64 << 53) as f64
        };
        for _ in 0..3000 {
            let o = Point2::new(-3.0 + 10.0 * rnd(), -2.0 + 10.0 * rnd());
            let heading = 2.0 * PI * rnd();
            let w = RayWalk::new(&spec, o, heading, 6.0 * rnd());
            if w.step_row == 0 {
                continue;
            }
            let cells = w.cells();
            for k in 1..6 {
                let row = w.start.row + k * w.step_row;
                let want = cells.iter().copied().find(|c| c.row == row);
                assert_eq!(w.enter_row(row), want, "row {row}, walk {w:?}");
            }
        }
    }

    #[test]
    fn cone_weight_values() {
        // The angular weight of the contract: 1 on the axis, 3/4 at a quarter width, 0 at the edge.
        let beta = 0.5;
        assert_eq!(cone_weight(0.0, beta), 1.0);
        assert!((cone_weight(beta / 4.0, beta) - 0.75).abs() < 1e-12);
        assert!((cone_weight(-beta / 4.0, beta) - 0.75).abs() < 1e-12);
        assert_eq!(cone_weight(beta / 2.0, beta), 0.0);
    }

    #[test]
    fn cone_cell_count_matches_sector_area() {
        // Geometry of a simple case: a sector of radius r and opening beta covers
        // r^2 beta / 2 square metres, so about that area / res^2 cell centres fall inside.
        // The boundary (two edges of length r plus the arc r beta) crosses about
        // (2r + r beta) / res cells, each of which may fall either way, so the count may differ
        // from the area estimate by up to that many cells; we allow half of it.
        let res = 0.02;
        let spec = GridSpec {
            resolution: res,
            origin: Point2::new(-5.0, -5.0),
            width: 500,
            height: 500,
        };
        for (heading, beta, r) in [(0.3, 0.5, 3.0), (2.0, 0.26, 4.0), (-1.0, 1.2, 2.0)] {
            let origin = Point2::new(0.013, -0.007);
            let cells = cone_cells(&spec, origin, heading, beta, r);
            let area_cells = r * r * beta / 2.0 / (res * res);
            let boundary_cells = (2.0 * r + r * beta) / res;
            let diff = (cells.len() as f64 - area_cells).abs();
            assert!(
                diff <= boundary_cells / 2.0,
                "{} vs {area_cells} (tol {})",
                cells.len(),
                boundary_cells / 2.0
            );
            assert!(
                cells
                    .iter()
                    .all(|c| c.distance <= r || c.cell == spec.cell_at(origin))
            );
        }
    }
}
