//! The exact traversal of `Ray` beams checked against outside references: a reference crate,
//! a brute-force test of every cell (as properties over random segments, with proptest), and
//! the property the tiled rebuild relies on (a walk entered part-way is the walk from the
//! origin).

use super::RayWalk;
use crate::geometry::Point2;
use crate::grid::{CellIndex, GridSpec};
use line_drawing::{VoxelOrigin, WalkVoxels};
use proptest::prelude::*;

fn spec() -> GridSpec {
    GridSpec {
        resolution: 0.05,
        origin: Point2::new(-2.0, -3.0),
        width: 400,
        height: 400,
    }
}

/// Points inside the grid of [`spec`], metres.
fn point() -> impl Strategy<Value = Point2> {
    (-1.9f64..17.9, -2.9f64..16.9).prop_map(|(x, y)| Point2::new(x, y))
}

fn walk_of(s: &GridSpec, a: Point2, b: Point2) -> RayWalk {
    let len = a.distance(b);
    RayWalk::from_direction(s, a, (b.x - a.x) / len, (b.y - a.y) / len, len)
}

/// Whether the segment a->b passes through the open interior of the box [lo, hi], and the
/// parameter (0..1) at which it enters. Liang-Barsky clipping, written apart from the walk.
fn enters_box(a: Point2, b: Point2, lo: Point2, hi: Point2) -> Option<f64> {
    let (mut t0, mut t1) = (0.0f64, 1.0f64);
    for (p, d, l, h) in [(a.x, b.x - a.x, lo.x, hi.x), (a.y, b.y - a.y, lo.y, hi.y)] {
        if d == 0.0 {
            if p <= l || p >= h {
                return None;
            }
        } else {
            let (ta, tb) = ((l - p) / d, (h - p) / d);
            t0 = t0.max(ta.min(tb));
            t1 = t1.min(ta.max(tb));
        }
    }
    (t0 < t1).then_some(t0)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 600, failure_persistence: None, ..ProptestConfig::default() })]

    /// Geometry of a simple case, by brute force: every cell of the segment's bounding box is
    /// tested for an open-interior crossing, the crossed ones ordered by entry parameter; the
    /// walk must give exactly those, in that order (contract section 5).
    #[test]
    fn visits_exactly_the_cells_whose_interior_the_segment_crosses(a in point(), b in point()) {
        prop_assume!(a.distance(b) > 1e-6);
        let s = spec();
        let ours = walk_of(&s, a, b).cells();
        let (ca, cb) = (s.cell_at(a), s.cell_at(b));
        let mut brute: Vec<(f64, CellIndex)> = Vec::new();
        for row in ca.row.min(cb.row)..=ca.row.max(cb.row) {
            for col in ca.col.min(cb.col)..=ca.col.max(cb.col) {
                let lo = Point2::new(
                    s.origin.x + col as f64 * s.resolution,
                    s.origin.y + row as f64 * s.resolution,
                );
                let hi = Point2::new(lo.x + s.resolution, lo.y + s.resolution);
                if let Some(t) = enters_box(a, b, lo, hi) {
                    brute.push((t, CellIndex::new(col, row)));
                }
            }
        }
        brute.sort_by(|x, y| x.0.total_cmp(&y.0));
        let brute: Vec<CellIndex> = brute.into_iter().map(|(_, c)| c).collect();
        prop_assert_eq!(ours, brute);
    }

    /// The property the tiled rebuild relies on: entering the walk at a box of rows and columns
    /// anywhere along it gives the same cells as walking from the origin.
    #[test]
    fn a_walk_entered_part_way_is_the_walk_from_the_origin(
        a in point(), b in point(), r0 in 0i64..400, c0 in 0i64..400, h in 1i64..200, w in 1i64..200,
    ) {
        prop_assume!(a.distance(b) > 1e-6);
        let s = spec();
        let walk = walk_of(&s, a, b);
        let cells = walk.cells();
        let (rows, cols) = (r0..r0 + h, c0..c0 + w);
        let inside: Vec<CellIndex> = cells
            .iter()
            .copied()
            .filter(|c| rows.contains(&c.row) && cols.contains(&c.col))
            .collect();
        match walk.enter_box(rows.clone(), cols.clone()) {
            None => prop_assert!(inside.is_empty()),
            Some((first, t)) => {
                let mut from_entry = Vec::new();
                walk.for_each_entered_from(first, t, |c, _| {
                    let keep = rows.contains(&c.row) && cols.contains(&c.col);
                    if keep {
                        from_entry.push(c);
                    }
                    keep
                });
                prop_assert_eq!(from_entry, inside);
            }
        }
    }
}

#[test]
fn agrees_with_the_line_drawing_crate_on_random_segments() {
    // Reference crate: line_drawing 1.0, `WalkVoxels` with `VoxelOrigin::Corner` walks every
    // voxel a float segment crosses, in order, taking orthogonal steps. Run in grid units on
    // the plane z = 0.5. Segments from a seeded generator.
    let s = spec();
    let to_grid = |p: Point2| {
        (
            (p.x - s.origin.x) / s.resolution,
            (p.y - s.origin.y) / s.resolution,
            0.5,
        )
    };
    let mut state = 0x9E37_79B9_7F4A_7C15u64;
    let mut unit = || {
        state ^= state << 13;
        state ^= state >> 7;
        state ^= state << 17;
        (state >> 11) as f64 / (1u64 << 53) as f64
    };
    let mut differing = 0;
    let total = 5000;
    for _ in 0..total {
        let a = Point2::new(-1.9 + 19.8 * unit(), -2.9 + 19.8 * unit());
        let b = Point2::new(-1.9 + 19.8 * unit(), -2.9 + 19.8 * unit());
        let ours: Vec<(i64, i64)> = walk_of(&s, a, b)
            .cells()
            .iter()
            .map(|c| (c.col, c.row))
            .collect();
        let theirs: Vec<(i64, i64)> =
            WalkVoxels::<f64, i64>::new(to_grid(a), to_grid(b), &VoxelOrigin::Corner)
                .map(|(x, y, _)| (x, y))
                .collect();
        if ours != theirs {
            differing += 1;
            // Any difference must be a near-tie at a corner: same ends, same count.
            assert_eq!(ours.first(), theirs.first());
            assert_eq!(ours.last(), theirs.last());
            assert_eq!(ours.len(), theirs.len(), "{a:?} -> {b:?}");
        }
    }
    // Random float segments essentially never pass within rounding of a corner.
    assert!(differing <= total / 1000, "{differing} of {total} differ");
}
