//! Footprints: which cells one beam touches.
//!
//! `Ray` beams use exact grid traversal (Amanatides & Woo, "A Fast Voxel Traversal Algorithm
//! for Ray Tracing", Eurographics 1987): from the cell holding the beam origin, step to the
//! neighbour whose boundary the segment crosses first, until the reach. `Cone` beams take every
//! cell whose centre lies inside the sector, plus the origin's cell.
//!
//! Design decision: crossing parameters are integers. The distance along the segment at which
//! it leaves column `c` is kept in fixed point ([`UNITS_PER_METRE`] units per metre) as
//! `first + k * step` for the k-th column along the walk, so stepping is an exact integer
//! addition, and a walk that starts part-way along a segment (as a parallel worker owning a
//! tile does) computes the same integers directly and reproduces the cells of a walk from the
//! origin bit for bit. The parameters are rounded once per segment, to 2^-40 m, which only
//! matters where a segment passes within about a picometre of a cell corner (where the
//! contract accepts either neighbour order).

use crate::geometry::{Point2, wrap_angle};
use crate::grid::{CellIndex, GridSpec, WorldBox};
use std::f64::consts::{FRAC_PI_2, PI};

/// Fixed-point units of a crossing parameter per metre.
pub const UNITS_PER_METRE: f64 = (1u64 << 40) as f64;

/// A crossing parameter too large to be reached by any segment (an axis never crossed).
const NEVER: i64 = i64::MAX / 4;

/// A distance along a segment in fixed point, [`UNITS_PER_METRE`] units per metre; saturates
/// at [`NEVER`] for distances beyond any segment (and infinity).
pub fn param(metres: f64) -> i64 {
    let u = metres * UNITS_PER_METRE;
    if u >= NEVER as f64 {
        NEVER
    } else if u <= -(NEVER as f64) {
        -NEVER
    } else {
        crate::grid::floor_i64(u + 0.5)
    }
}

/// Metres of a fixed-point distance along a segment.
pub fn metres(p: i64) -> f64 {
    p as f64 / UNITS_PER_METRE
}

/// Exact traversal of one segment across a grid's lattice.
#[derive(Clone, Copy, Debug)]
pub struct RayWalk {
    /// Cell holding the segment origin.
    pub start: CellIndex,
    /// Column step, -1, 0 or +1.
    pub step_col: i64,
    /// Row step, -1, 0 or +1.
    pub step_row: i64,
    /// Segment length, fixed point: cells entered at or past it are not touched.
    pub len: i64,
    /// Fixed-point parameter at which the segment leaves the start column, and the increase
    /// per column step ([`NEVER`] when it has no column step); likewise for rows.
    col_first: i64,
    col_step: i64,
    row_first: i64,
    row_step: i64,
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
        let axis = |d: f64, o: f64, p: f64, c: i64| -> (i64, i64, i64) {
            if d == 0.0 || !d.is_finite() {
                return (0, NEVER, NEVER);
            }
            let step = if d > 0.0 { 1 } else { -1 };
            let boundary = if d > 0.0 {
                o + (c as f64 + 1.0) * res
            } else {
                o + c as f64 * res
            };
            (step, param((boundary - p) / d), param(res / d.abs()).max(1))
        };
        let (step_col, col_first, col_step) = axis(dx, spec.origin.x, origin.x, start.col);
        let (step_row, row_first, row_step) = axis(dy, spec.origin.y, origin.y, start.row);
        RayWalk {
            start,
            step_col,
            step_row,
            len: param(length),
            col_first,
            col_step,
            row_first,
            row_step,
        }
    }

    /// Fixed-point parameter at which the segment leaves column `c` (for columns at or after
    /// the start along the walk).
    #[inline(always)]
    pub fn leave_col(&self, c: i64) -> i64 {
        if self.step_col == 0 {
            return NEVER;
        }
        let k = (c - self.start.col) * self.step_col;
        self.col_first
            .saturating_add(k.saturating_mul(self.col_step))
    }

    /// Fixed-point parameter at which the segment leaves row `r`.
    #[inline(always)]
    pub fn leave_row(&self, r: i64) -> i64 {
        if self.step_row == 0 {
            return NEVER;
        }
        let k = (r - self.start.row) * self.step_row;
        self.row_first
            .saturating_add(k.saturating_mul(self.row_step))
    }

    /// Increase of the leaving parameter per column step ([`NEVER`] without column steps).
    pub fn col_step(&self) -> i64 {
        self.col_step
    }

    /// Increase of the leaving parameter per row step ([`NEVER`] without row steps).
    pub fn row_step(&self) -> i64 {
        self.row_step
    }

    /// The cell after `c` along the segment, or `None` when the segment ends inside `c`.
    /// At an exact corner the row step is taken first.
    #[inline(always)]
    pub fn next(&self, c: CellIndex) -> Option<CellIndex> {
        let tc = self.leave_col(c.col);
        let tr = self.leave_row(c.row);
        if tc < tr {
            (tc < self.len).then_some(CellIndex::new(c.col + self.step_col, c.row))
        } else {
            (tr < self.len).then_some(CellIndex::new(c.col, c.row + self.step_row))
        }
    }

    /// Calls `visit(cell, t_enter)` on every cell of the segment, in order from the origin,
    /// with the fixed-point parameter at which it is entered (0 for the first), until `visit`
    /// returns `false` or the segment ends. Steps are integer additions.
    #[inline]
    pub fn for_each_entered(&self, visit: impl FnMut(CellIndex, i64) -> bool) {
        self.for_each_entered_from(self.start, 0, visit);
    }

    /// As [`RayWalk::for_each_entered`], starting part-way at cell `from`, entered at
    /// parameter `t_enter` (as [`RayWalk::enter_box`] finds them): the same cells a walk from
    /// the origin visits from there on.
    #[inline]
    pub fn for_each_entered_from(
        &self,
        from: CellIndex,
        t_enter: i64,
        mut visit: impl FnMut(CellIndex, i64) -> bool,
    ) {
        let mut c = from;
        let (mut tc, mut tr) = (self.leave_col(c.col), self.leave_row(c.row));
        let mut t_enter = t_enter;
        loop {
            if !visit(c, t_enter) {
                return;
            }
            if tc < tr {
                if tc >= self.len {
                    return;
                }
                c.col += self.step_col;
                t_enter = tc;
                tc = tc.saturating_add(self.col_step);
            } else {
                if tr >= self.len {
                    return;
                }
                c.row += self.step_row;
                t_enter = tr;
                tr = tr.saturating_add(self.row_step);
            }
        }
    }

    /// The first cell of the segment inside the box of rows `rows` and columns `cols`, with the
    /// parameter at which the walk enters it, exactly as a walk from the origin reaches it;
    /// `None` when the segment never enters the box. A straight segment leaves a box at most
    /// once, so the box's cells are those walked from here until the first one outside.
    pub fn enter_box(
        &self,
        rows: std::ops::Range<i64>,
        cols: std::ops::Range<i64>,
    ) -> Option<(CellIndex, i64)> {
        let (sc, sr) = (self.step_col, self.step_row);
        let mut c = self.start;
        let mut t_enter = 0i64;
        if !rows.contains(&c.row) {
            let entry = if sr > 0 && c.row < rows.start {
                rows.start
            } else if sr < 0 && c.row >= rows.end {
                rows.end - 1
            } else {
                return None;
            };
            (c, t_enter) = self.enter_row(entry)?;
        }
        if !cols.contains(&c.col) {
            let entry = if sc > 0 && c.col < cols.start {
                cols.start
            } else if sc < 0 && c.col >= cols.end {
                cols.end - 1
            } else {
                return None;
            };
            // The walk steps from column entry - sc into entry at tc, from the first row it
            // leaves strictly after tc (while a row is left at or before tc it steps rows).
            let tc = self.leave_col(entry - sc);
            if tc >= self.len {
                return None;
            }
            let row = if sr != 0 {
                self.first_row_leaving(c.row, tc, true)
            } else {
                c.row
            };
            if !rows.contains(&row) {
                return None;
            }
            c = CellIndex::new(entry, row);
            t_enter = tc;
        }
        Some((c, t_enter))
    }

    /// Calls `visit` on every cell of the segment, in order from the origin, until it returns
    /// `false` or the segment ends.
    #[inline]
    pub fn for_each(&self, mut visit: impl FnMut(CellIndex) -> bool) {
        self.for_each_entered(|c, _| visit(c));
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

    /// How many column crossings the segment makes per row crossing (infinite when it never
    /// crosses a row boundary, 0 when it never crosses a column boundary).
    pub fn cols_per_row(&self) -> f64 {
        if self.step_col == 0 {
            0.0
        } else if self.step_row == 0 {
            f64::INFINITY
        } else {
            self.row_step as f64 / self.col_step as f64
        }
    }

    /// The first column from `from` (at or after the start, in the walk's column direction)
    /// that the segment leaves at a parameter `>= t` (or `> t` when `strict`). Exact integer
    /// arithmetic. Requires a column step.
    #[inline(always)]
    pub fn first_col_leaving(&self, from: i64, t: i64, strict: bool) -> i64 {
        from + self.step_col * steps_until(self.leave_col(from), self.col_step, t, strict)
    }

    /// The first row from `from` that the segment leaves at a parameter `>= t` (or `> t` when
    /// `strict`). Requires a row step.
    #[inline(always)]
    pub fn first_row_leaving(&self, from: i64, t: i64, strict: bool) -> i64 {
        from + self.step_row * steps_until(self.leave_row(from), self.row_step, t, strict)
    }

    /// The first cell of the segment whose row is `row` or beyond (in the walk's row
    /// direction), exactly as a walk from the origin would reach it, with the parameter at
    /// which it is entered; `None` if the segment ends first. Requires a row step (a segment
    /// moving north or south) and `row` past the start row.
    pub fn enter_row(&self, row: i64) -> Option<(CellIndex, i64)> {
        debug_assert!(self.step_row != 0);
        // The walk reaches `row` by a row step out of row `row - step` at parameter t_r,
        // taken from the first column c with leave_col(c) >= t_r (a column step is taken only
        // while leave_col(c) < leave_row).
        let t_r = self.leave_row(row - self.step_row);
        if t_r >= self.len {
            return None;
        }
        let c = if self.step_col != 0 {
            self.first_col_leaving(self.start.col, t_r, false)
        } else {
            self.start.col
        };
        Some((CellIndex::new(c, row), t_r))
    }
}

/// How many of the crossings `first`, `first + step`, `first + 2 * step`, ... lie below `t`
/// (fixed point): exact integer division. With `first` = [`RayWalk::leave_col`] of a column and
/// `step` = [`RayWalk::col_step`], the column crossings a walk from that column makes before `t`.
#[inline(always)]
pub fn crossings_before(first: i64, step: i64, t: i64) -> i64 {
    // No segment reaches NEVER, so a larger `t` (i64::MAX for "no limit") counts the same.
    steps_until(first, step, t.min(NEVER), false)
}

/// Steps k >= 0 from a position whose parameter is `at`, the parameter growing by `step` per
/// step, until the parameter is `>= t` (or `> t` when `strict`): exact integer division.
#[inline(always)]
fn steps_until(at: i64, step: i64, t: i64, strict: bool) -> i64 {
    let need = if strict { t.saturating_add(1) } else { t };
    if at >= need || step >= NEVER {
        return if at >= need { 0 } else { NEVER };
    }
    // Smallest k with at + k * step >= need.
    (need - at + step - 1) / step
}

/// The cells of a `Cone` beam with their distance and bearing, metres and radians.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct ConeCell {
    /// The cell.
    pub cell: CellIndex,
    /// Distance from the beam origin to the cell centre, metres.
    pub distance: f64,
    /// Where the centre lies from the beam axis.
    pub angle: ConeAngle,
}

/// The angle of a cone cell's centre from the beam axis.
#[derive(Clone, Copy, Debug, PartialEq)]
pub enum ConeAngle {
    /// The bearing, radians in [-pi, pi] (0 for the origin cell).
    Bearing(f64),
    /// The absolute value of the bearing's tangent, given instead of the bearing for cells
    /// clearly inside the cone that the caller asked for (see [`for_each_cone_cell`]).
    Tan(f64),
}

impl ConeAngle {
    /// The bearing, radians in [-pi, pi]; from a tangent, its absolute value.
    pub fn bearing(&self) -> f64 {
        match *self {
            ConeAngle::Bearing(b) => b,
            ConeAngle::Tan(s) => s.atan(),
        }
    }
}

/// Cells of a sector beam: every cell of `spec` whose centre lies within `reach` metres of
/// `origin` and within `width / 2` radians of `heading`, plus the cell containing the origin
/// (bearing 0), sorted by distance. Cells outside the grid are left out. `tan_until` as for
/// [`for_each_cone_cell`].
pub fn cone_cells(
    spec: &GridSpec,
    origin: Point2,
    heading: f64,
    width: f64,
    reach: f64,
    tan_until: f64,
) -> Vec<ConeCell> {
    let mut out = Vec::new();
    for_each_cone_cell(
        spec,
        origin,
        heading,
        width,
        reach,
        i64::MIN..i64::MAX,
        tan_until,
        |c| out.push(c),
    );
    out.sort_by(|a, b| {
        a.distance
            .total_cmp(&b.distance)
            .then(a.cell.row.cmp(&b.cell.row))
            .then(a.cell.col.cmp(&b.cell.col))
    });
    out
}

/// Margin, in tangent, between a cell's |tan(bearing)| and tan(width / 2) beyond which the
/// cell is inside (or outside) the cone whichever way the two are rounded: far larger than
/// the rounding of either (about 1e-15 relative, and of the bearing itself about
/// 1e-16 * |heading|), far smaller than a cell seen from any distance.
const TAN_MARGIN: f64 = 1e-7;

/// The cells of [`cone_cells`] whose row lies in `rows`, in no particular order (each once).
///
/// A cell is inside when its bearing, `wrap_angle(atan2(dy, dx) - heading)`, is at most
/// `width / 2` in absolute value. Cells closer than `tan_until` metres come with
/// [`ConeAngle::Tan`] when they are clearly inside (the tangent, one division, decides; only
/// cells within [`TAN_MARGIN`] of the edge take the `atan2`), others with
/// [`ConeAngle::Bearing`]; pass `f64::NEG_INFINITY` for bearings only. Either way the same cells
/// are visited.
#[allow(clippy::too_many_arguments)]
pub fn for_each_cone_cell(
    spec: &GridSpec,
    origin: Point2,
    heading: f64,
    width: f64,
    reach: f64,
    rows: std::ops::Range<i64>,
    tan_until: f64,
    mut visit: impl FnMut(ConeCell),
) {
    let half = width / 2.0;
    let own = spec.cell_at(origin);
    let b = cone_bounds(origin, heading, width, reach);
    let lo = spec.cell_at(b.min);
    let hi = spec.cell_at(b.max);
    let c0 = lo.col.max(0);
    let c1 = hi.col.min(spec.width as i64 - 1);
    let r0 = lo.row.max(0).max(rows.start);
    let r1 = hi.row.min(spec.height as i64 - 1).min(rows.end - 1);
    // A cheap, slightly generous test before the exact one: the angle to the axis is at most
    // half + 1e-6 when the projection on the axis is at least d * cos(half + 1e-6).
    let (sin_h, cos_h) = heading.sin_cos();
    let cos_limit = if half + 1e-6 < PI {
        (half + 1e-6).cos()
    } else {
        -1.0
    };
    // Tangents only for cones narrower than a half turn (so that a centre inside lies ahead of
    // the origin) and headings small enough that the bearing's own rounding stays far below
    // the margin.
    let tan_until = if half < 1.5 && heading.abs() < 1e3 {
        tan_until
    } else {
        f64::NEG_INFINITY
    };
    let tan_half = half.tan();
    let (tan_in, tan_out) = (tan_half - TAN_MARGIN, tan_half + TAN_MARGIN);
    // Per row, only the columns whose centres can be inside are tested: those within the
    // circle and, for a cone narrower than a half turn, on the inner side of both edges (a
    // cone that narrow is where the two half-planes meet). The range is widened by a cell and
    // by far more than its rounding, so the exact tests below alone decide which cells are in.
    let res = spec.resolution;
    let edges =
        (half < FRAC_PI_2 - 1e-6).then(|| ((heading - half).sin_cos(), (heading + half).sin_cos()));
    let mut own_seen = false;
    for row in r0..=r1 {
        let ey = spec.origin.y + (row as f64 + 0.5) * res - origin.y;
        let r2 = (reach + res) * (reach + res) - ey * ey;
        if r2 < 0.0 {
            continue;
        }
        let (mut lo_x, mut hi_x) = (-r2.sqrt(), r2.sqrt());
        if let Some(((s1, k1), (s2, k2))) = edges {
            // Counter-clockwise of the edge at heading - half: k1 * ey - s1 * ex >= 0.
            if s1 > 0.0 {
                hi_x = hi_x.min(k1 * ey / s1);
            } else if s1 < 0.0 {
                lo_x = lo_x.max(k1 * ey / s1);
            }
            // Clockwise of the edge at heading + half: k2 * ey - s2 * ex <= 0.
            if s2 > 0.0 {
                lo_x = lo_x.max(k2 * ey / s2);
            } else if s2 < 0.0 {
                hi_x = hi_x.min(k2 * ey / s2);
            }
        }
        let pad = res + 1e-9 * (lo_x.abs() + hi_x.abs() + reach);
        let col_of = |ex: f64| (origin.x + ex - spec.origin.x) / res - 0.5;
        let first = col_of(lo_x - pad).ceil().max(c0 as f64);
        let last = col_of(hi_x + pad).floor().min(c1 as f64);
        if first > last {
            continue;
        }
        for col in first as i64..=last as i64 {
            let cell = CellIndex::new(col, row);
            let centre = spec.centre(cell);
            let (ex, ey) = (centre.x - origin.x, centre.y - origin.y);
            let d2 = ex * ex + ey * ey;
            if cell == own {
                own_seen = true;
                visit(ConeCell {
                    cell,
                    distance: d2.sqrt(),
                    angle: ConeAngle::Bearing(0.0),
                });
                continue;
            }
            let distance = d2.sqrt();
            let along = ex * cos_h + ey * sin_h;
            if distance > reach || along < distance * cos_limit {
                continue;
            }
            if distance < tan_until {
                // `along` > 0 here: the centre passed the test above with half < 1.5.
                let s = (ey * cos_h - ex * sin_h).abs() / along;
                if s < tan_in {
                    visit(ConeCell {
                        cell,
                        distance,
                        angle: ConeAngle::Tan(s),
                    });
                    continue;
                }
                if s > tan_out {
                    continue;
                }
            }
            let bearing = wrap_angle(ey.atan2(ex) - heading);
            if bearing.abs() <= half {
                visit(ConeCell {
                    cell,
                    distance,
                    angle: ConeAngle::Bearing(bearing),
                });
            }
        }
    }
    if !own_seen && spec.index(own).is_some() && rows.contains(&own.row) {
        visit(ConeCell {
            cell: own,
            distance: spec.centre(own).distance(origin),
            angle: ConeAngle::Bearing(0.0),
        });
    }
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

    /// Counting crossings ahead by division gives what a walk finds by stepping: for segments
    /// in every direction and limits just before, at and just after each crossing (and at the
    /// length, and unlimited), the column (row) steps the walk takes below the limit number
    /// `crossings_before`. The walk itself is the reference; headings and origin are arbitrary.
    #[test]
    fn crossings_counted_ahead_match_the_walk() {
        let spec = unit_grid(64, 64);
        for k in 0..72 {
            let heading = k as f64 * 0.0873 + 0.01;
            let w = RayWalk::new(&spec, Point2::new(32.3, 31.7), heading, 25.0);
            // Parameters at which the walk enters each cell, and whether by a column step.
            let mut entries = Vec::new();
            let mut prev = w.start;
            w.for_each_entered(|c, t| {
                if c != w.start {
                    entries.push((t, c.col != prev.col));
                }
                prev = c;
                true
            });
            for &(limit, _) in &entries {
                for t in [limit - 1, limit, limit + 1, w.len, i64::MAX] {
                    let cols = entries.iter().filter(|e| e.1 && e.0 < t).count() as i64;
                    let rows = entries.iter().filter(|e| !e.1 && e.0 < t).count() as i64;
                    let t_walk = t.min(w.len);
                    if w.step_col != 0 {
                        let counted =
                            crossings_before(w.leave_col(w.start.col), w.col_step(), t_walk);
                        assert_eq!(counted, cols, "heading {heading}, t {t}: columns");
                    }
                    if w.step_row != 0 {
                        let counted =
                            crossings_before(w.leave_row(w.start.row), w.row_step(), t_walk);
                        assert_eq!(counted, rows, "heading {heading}, t {t}: rows");
                    }
                }
            }
        }
    }

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
                assert_eq!(
                    w.enter_row(row).map(|(c, _)| c),
                    want,
                    "row {row}, walk {w:?}"
                );
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

    /// The cone footprint is exactly the contract's set, checked against every cell of the
    /// grid with the bearing test written out (geometry of the definition, no source needed):
    /// with tangents or with bearings only, for random cones and for cones whose edges run
    /// through rows of cell centres (origin on a centre, edges at multiples of 45 degrees).
    /// Cells handed over with a tangent are inside and carry |tan(bearing)|.
    #[test]
    fn cone_cells_are_the_sector_by_brute_force() {
        let spec = GridSpec {
            resolution: 0.1,
            origin: Point2::new(-3.0, -3.0),
            width: 60,
            height: 60,
        };
        let mut rng = crate::sim::Rng::new(77);
        let mut cones = vec![
            (
                Point2::new(0.05, 0.05),
                0.0,
                std::f64::consts::FRAC_PI_2,
                2.0,
            ),
            (
                Point2::new(0.05, 0.05),
                PI / 4.0,
                std::f64::consts::FRAC_PI_2,
                2.5,
            ),
            (Point2::new(-0.05, 0.15), PI, PI / 4.0, 2.9),
        ];
        for _ in 0..60 {
            cones.push((
                Point2::new(rng.uniform() * 4.0 - 2.0, rng.uniform() * 4.0 - 2.0),
                rng.uniform() * 20.0 - 10.0,
                0.01 + rng.uniform() * 3.2,
                0.2 + rng.uniform() * 3.5,
            ));
        }
        for (origin, heading, width, reach) in cones {
            let own = spec.cell_at(origin);
            let mut want = Vec::new();
            for row in 0..spec.height as i64 {
                for col in 0..spec.width as i64 {
                    let cell = CellIndex::new(col, row);
                    let c = spec.centre(cell);
                    let (ex, ey) = (c.x - origin.x, c.y - origin.y);
                    let bearing = wrap_angle(ey.atan2(ex) - heading);
                    let d = (ex * ex + ey * ey).sqrt();
                    if cell == own || (d <= reach && bearing.abs() <= width / 2.0) {
                        want.push((row, col));
                    }
                }
            }
            for tan_until in [f64::NEG_INFINITY, f64::INFINITY, reach / 2.0] {
                let mut got = Vec::new();
                let rows = i64::MIN..i64::MAX;
                for_each_cone_cell(&spec, origin, heading, width, reach, rows, tan_until, |c| {
                    got.push((c.cell.row, c.cell.col));
                    if let ConeAngle::Tan(s) = c.angle {
                        let centre = spec.centre(c.cell);
                        let (ex, ey) = (centre.x - origin.x, centre.y - origin.y);
                        let bearing = wrap_angle(ey.atan2(ex) - heading);
                        assert!(c.distance < tan_until, "a tangent past tan_until");
                        assert!(bearing.abs() < width / 2.0);
                        assert!((s - bearing.tan().abs()).abs() < 1e-9 * (1.0 + s));
                    }
                });
                got.sort_unstable();
                assert_eq!(
                    got, want,
                    "origin {origin:?} heading {heading} width {width} reach {reach}, tangents until {tan_until}"
                );
            }
        }
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
            let cells = cone_cells(&spec, origin, heading, beta, r, f64::NEG_INFINITY);
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
