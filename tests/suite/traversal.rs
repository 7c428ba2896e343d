//! Exact traversal of `Ray` beams checked against outside references.

use super::{TestRng, enters_box};
use gridscope::footprint::RayWalk;
use gridscope::{CellIndex, GridSpec, Point2};
use line_drawing::{VoxelOrigin, WalkVoxels};

fn spec() -> GridSpec {
    GridSpec {
        resolution: 0.05,
        origin: Point2::new(-2.0, -3.0),
        width: 400,
        height: 400,
    }
}

/// Random segments with float end points inside the grid.
fn segments(n: usize, seed: u64) -> Vec<(Point2, Point2)> {
    let mut r = TestRng(seed);
    (0..n)
        .map(|_| {
            let a = Point2::new(r.range(-1.9, 17.9), r.range(-2.9, 16.9));
            let b = Point2::new(r.range(-1.9, 17.9), r.range(-2.9, 16.9));
            (a, b)
        })
        .collect()
}

fn walk(s: &GridSpec, a: Point2, b: Point2) -> Vec<CellIndex> {
    let len = a.distance(b);
    RayWalk::from_direction(s, a, (b.x - a.x) / len, (b.y - a.y) / len, len).cells()
}

#[test]
fn agrees_with_the_line_drawing_crate_on_random_segments() {
    // Reference crate: line_drawing 1.0, `WalkVoxels` with `VoxelOrigin::Corner` walks every
    // voxel a float segment crosses, in order, taking orthogonal steps. Run in grid units on
    // the plane z = 0.5.
    let s = spec();
    let to_grid = |p: Point2| {
        (
            (p.x - s.origin.x) / s.resolution,
            (p.y - s.origin.y) / s.resolution,
            0.5,
        )
    };
    let mut differing = 0;
    let total = 5000;
    for (a, b) in segments(total, 0x9E3779B97F4A7C15) {
        let ours: Vec<(i64, i64)> = walk(&s, a, b).iter().map(|c| (c.col, c.row)).collect();
        let theirs: Vec<(i64, i64)> =
            WalkVoxels::<f64, i64>::new(to_grid(a), to_grid(b), &VoxelOrigin::Corner)
                .map(|(x, y, _)| (x, y))
                .collect();
        if ours != theirs {
            differing += 1;
            // Any difference must be a near-tie at a corner: same cells as a set, same ends.
            assert_eq!(ours.first(), theirs.first());
            assert_eq!(ours.last(), theirs.last());
            assert_eq!(ours.len(), theirs.len(), "{a:?} -> {b:?}");
        }
    }
    // Random float segments essentially never pass within rounding of a corner.
    assert!(differing <= total / 1000, "{differing} of {total} differ");
}

#[test]
fn visits_exactly_the_cells_whose_interior_the_segment_crosses() {
    // Geometry of a simple case, by brute force: test every cell of the segment's bounding box
    // for an open-interior crossing, order by entry parameter, compare with the walk.
    let s = spec();
    for (a, b) in segments(800, 77) {
        let ours = walk(&s, a, b);
        let ca = s.cell_at(a);
        let cb = s.cell_at(b);
        let mut brute: Vec<(f64, CellIndex)> = Vec::new();
        for row in ca.row.min(cb.row)..=ca.row.max(cb.row) {
            for col in ca.col.min(cb.col)..=ca.col.max(cb.col) {
                let c = CellIndex::new(col, row);
                let lo = Point2::new(
                    s.origin.x + col as f64 * s.resolution,
                    s.origin.y + row as f64 * s.resolution,
                );
                let hi = Point2::new(lo.x + s.resolution, lo.y + s.resolution);
                if let Some(t) = enters_box(a, b, lo, hi) {
                    brute.push((t, c));
                }
            }
        }
        brute.sort_by(|x, y| x.0.total_cmp(&y.0));
        let brute: Vec<CellIndex> = brute.into_iter().map(|(_, c)| c).collect();
        assert_eq!(ours, brute, "{a:?} -> {b:?}");
    }
}

#[test]
fn starting_mid_segment_at_a_row_reproduces_the_walk() {
    // The property parallel rebuilds rely on: entering the walk at any later row gives the
    // same cells as walking from the origin.
    let s = spec();
    for (a, b) in segments(2000, 4242) {
        let len = a.distance(b);
        let w = RayWalk::from_direction(&s, a, (b.x - a.x) / len, (b.y - a.y) / len, len);
        if w.step_row == 0 {
            continue;
        }
        let cells = w.cells();
        let last_row = cells.last().unwrap().row;
        let mut row = w.start.row + w.step_row;
        while row != last_row + w.step_row {
            let (entry, _) = w.enter_row(row).expect("row lies on the segment");
            let k = cells.iter().position(|c| c.row == row).unwrap();
            assert_eq!(entry, cells[k]);
            let mut rest = Vec::new();
            let mut c = entry;
            loop {
                rest.push(c);
                match w.next(c) {
                    Some(n) => c = n,
                    None => break,
                }
            }
            assert_eq!(rest, cells[k..]);
            row += w.step_row;
        }
    }
}
