//! Wide beams: every cell whose centre lies inside the beam's sector, plus the origin's cell,
//! and the angular weight that scales a cone cell's deviation from 0.5 (contract section 5).

use crate::geometry::{Point2, wrap_angle};
use crate::grid::{CellIndex, GridSpec, WorldBox};
use std::f64::consts::{FRAC_PI_2, PI};

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
