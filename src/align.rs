//! Rigid alignment of points to a map by correlative search over a likelihood field.
//!
//! A likelihood field turns a map's occupied cells into a smooth score: each place gets
//! exp(-d^2 / (2 sigma^2)), d its distance to the nearest occupied cell (the likelihood field
//! sensor model of Thrun, Burgard & Fox, *Probabilistic Robotics*, MIT Press 2005, ch. 6.4).
//! Distances come from an exact Euclidean distance transform (Felzenszwalb & Huttenlocher,
//! "Distance Transforms of Sampled Functions", Theory of Computing 8, 2012). A set of points
//! is aligned by trying every pose of a window on a lattice of steps and keeping the one whose
//! points score highest (correlative matching, Olson, "Real-time correlative scan matching",
//! ICRA 2009); [`fit_rigid`] does so coarse to fine for two whole maps in unrelated frames.
//!
//! Design decision: the same search serves scoring a map against a reference drawn in
//! another frame and re-aligning single frames of a run, so both are checked the same way.

use crate::geometry::{Point2, Pose2};
use crate::grid::{Grid, GridSpec, WorldBox};

/// A rigid transform applied to a point: rotate by `pose.theta`, then move by (x, y).
#[inline]
pub fn transform(pose: &Pose2, p: Point2) -> Point2 {
    let (s, c) = pose.theta.sin_cos();
    Point2::new(pose.x + c * p.x - s * p.y, pose.y + s * p.x + c * p.y)
}

/// Squared distances (in cells) from every cell to the nearest marked cell, row-major;
/// `f64::INFINITY` everywhere when nothing is marked. Exact (Felzenszwalb & Huttenlocher 2012:
/// the lower envelope of parabolas, once along rows and once along columns).
pub fn squared_distances(width: usize, height: usize, marked: &[bool]) -> Vec<f64> {
    const FAR: f64 = 1e20;
    let mut d: Vec<f64> = marked.iter().map(|&m| if m { 0.0 } else { FAR }).collect();
    let mut line = Vec::new();
    let mut out = Vec::new();
    for c in 0..width {
        line.clear();
        line.extend((0..height).map(|r| d[r * width + c]));
        transform_line(&line, &mut out);
        for r in 0..height {
            d[r * width + c] = out[r];
        }
    }
    for r in 0..height {
        line.clear();
        line.extend_from_slice(&d[r * width..(r + 1) * width]);
        transform_line(&line, &mut out);
        d[r * width..(r + 1) * width].copy_from_slice(&out);
    }
    for v in &mut d {
        if *v >= FAR / 2.0 {
            *v = f64::INFINITY;
        }
    }
    d
}

/// The one-dimensional squared-distance transform of sampled values `f`: for each q, the
/// least `(q - p)^2 + f[p]` over all p, from the lower envelope of those parabolas.
fn transform_line(f: &[f64], out: &mut Vec<f64>) {
    let n = f.len();
    out.clear();
    out.resize(n, 0.0);
    if n == 0 {
        return;
    }
    // v: the parabolas of the envelope (by their p); z: where each one takes over.
    let mut v = vec![0usize; n];
    let mut z = vec![0.0f64; n + 1];
    let mut k = 0usize;
    z[0] = f64::NEG_INFINITY;
    z[1] = f64::INFINITY;
    for q in 1..n {
        let meet =
            |p: usize| ((f[q] + (q * q) as f64) - (f[p] + (p * p) as f64)) / (2.0 * (q - p) as f64);
        // z[0] is minus infinity, so k never goes below 0.
        let mut s = meet(v[k]);
        while s <= z[k] {
            k -= 1;
            s = meet(v[k]);
        }
        k += 1;
        v[k] = q;
        z[k] = s;
        z[k + 1] = f64::INFINITY;
    }
    k = 0;
    for (q, o) in out.iter_mut().enumerate() {
        while z[k + 1] < q as f64 {
            k += 1;
        }
        let dq = q as f64 - v[k] as f64;
        *o = dq * dq + f[v[k]];
    }
}

/// A likelihood field over a lattice: how close each place is to an occupied cell of a map.
#[derive(Clone, Debug)]
pub struct LikelihoodField {
    spec: GridSpec,
    values: Vec<f32>,
}

impl LikelihoodField {
    /// The field of `grid`'s occupied cells (log-odds > 0), on a lattice of cells `factor`
    /// times as large as the grid's (a coarse cell is occupied when any of its cells is), with
    /// `sigma` = one coarse cell.
    pub fn of_grid(grid: &Grid, factor: u32) -> LikelihoodField {
        Self::of_grid_above(grid, factor, 0.0)
    }

    /// As [`LikelihoodField::of_grid`], a cell occupied when its log-odds exceed `threshold`.
    pub fn of_grid_above(grid: &Grid, factor: u32, threshold: f32) -> LikelihoodField {
        let factor = factor.max(1);
        let s = grid.spec();
        let spec = GridSpec {
            resolution: s.resolution * factor as f64,
            origin: s.origin,
            width: s.width.div_ceil(factor),
            height: s.height.div_ceil(factor),
        };
        let mut marked = vec![false; spec.cells()];
        let w = s.width as usize;
        for (i, &l) in grid.values().iter().enumerate() {
            if l > threshold {
                let (c, r) = (i % w, i / w);
                let k = (r / factor as usize) * spec.width as usize + c / factor as usize;
                marked[k] = true;
            }
        }
        Self::from_marked(spec, &marked)
    }

    /// The field of the marked cells of `spec` (row-major), sigma one cell.
    pub fn from_marked(spec: GridSpec, marked: &[bool]) -> LikelihoodField {
        let d2 = squared_distances(spec.width as usize, spec.height as usize, marked);
        let values = d2.iter().map(|&d| (-0.5 * d).exp() as f32).collect();
        LikelihoodField { spec, values }
    }

    /// The field's lattice.
    pub fn spec(&self) -> &GridSpec {
        &self.spec
    }

    /// The field at a world point (0 outside the lattice).
    #[inline]
    pub fn at(&self, p: Point2) -> f32 {
        self.spec
            .index(self.spec.cell_at(p))
            .map_or(0.0, |i| self.values[i])
    }

    /// The field at a world point, interpolated bilinearly between the lattice's cell centres
    /// (0 outside the lattice): continuous in the point, for searches finer than a cell.
    pub fn at_smooth(&self, p: Point2) -> f32 {
        let s = &self.spec;
        let u = (p.x - s.origin.x) / s.resolution - 0.5;
        let v = (p.y - s.origin.y) / s.resolution - 0.5;
        if !(u.is_finite() && v.is_finite()) {
            return 0.0;
        }
        let (c0, r0) = (u.floor(), v.floor());
        let (fu, fv) = ((u - c0) as f32, (v - r0) as f32);
        let (c0, r0) = (c0 as i64, r0 as i64);
        let get = |c: i64, r: i64| {
            s.index(crate::grid::CellIndex::new(c, r))
                .map_or(0.0, |i| self.values[i])
        };
        let top = get(c0, r0) * (1.0 - fu) + get(c0 + 1, r0) * fu;
        let bottom = get(c0, r0 + 1) * (1.0 - fu) + get(c0 + 1, r0 + 1) * fu;
        top * (1.0 - fv) + bottom * fv
    }

    /// Mean field value of `points` moved by `pose` (0 for no points): 1 when every point lies
    /// on an occupied cell.
    pub fn score(&self, points: &[Point2], pose: &Pose2) -> f64 {
        if points.is_empty() {
            return 0.0;
        }
        let (s, c) = pose.theta.sin_cos();
        let sum: f64 = points
            .iter()
            .map(|p| {
                let q = Point2::new(pose.x + c * p.x - s * p.y, pose.y + s * p.x + c * p.y);
                self.at(q) as f64
            })
            .sum();
        sum / points.len() as f64
    }
}

/// A window of poses around a centre: half-widths (metres, metres, radians) and steps.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Window {
    /// Half-width in x and y, metres.
    pub reach: f64,
    /// Step in x and y, metres.
    pub step: f64,
    /// Half-width in heading, radians.
    pub turn: f64,
    /// Step in heading, radians.
    pub turn_step: f64,
}

/// The pose of `window` around `centre` under which `points` score highest on `field`, with
/// its score. Exhaustive over the window's lattice; among equal scores the one nearest the
/// centre (first in the order tried) is kept.
pub fn search(
    points: &[Point2],
    field: &LikelihoodField,
    centre: Pose2,
    window: Window,
) -> (Pose2, f64) {
    let steps = |half: f64, step: f64| {
        if step > 0.0 && half > 0.0 {
            (half / step).round().min(10_000.0) as i64
        } else {
            0
        }
    };
    let (n, m) = (
        steps(window.reach, window.step),
        steps(window.turn, window.turn_step),
    );
    let order = |k: i64| -> i64 {
        // 0, 1, -1, 2, -2, ...: nearest the centre first.
        if k % 2 == 1 { (k + 1) / 2 } else { -(k / 2) }
    };
    let mut best = (centre, field.score(points, &centre));
    for a in 0..=2 * m {
        let theta = centre.theta + order(a) as f64 * window.turn_step;
        for i in 0..=2 * n {
            for j in 0..=2 * n {
                let pose = Pose2::new(
                    centre.x + order(i) as f64 * window.step,
                    centre.y + order(j) as f64 * window.step,
                    theta,
                );
                let s = field.score(points, &pose);
                if s > best.1 {
                    best = (pose, s);
                }
            }
        }
    }
    best
}

/// The rigid transform found between two maps, and how well it fits.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Fit {
    /// Map frame to reference frame: a map point p lies at `transform(&pose, p)` in the
    /// reference's frame.
    pub pose: Pose2,
    /// Mean likelihood-field value of the map's occupied cells at the finest level, 0..1.
    pub score: f64,
}

/// Centres of `grid`'s occupied cells, at most one per block of `factor` x `factor` cells
/// (the block's first), as world points.
fn occupied_points(grid: &Grid, factor: u32) -> Vec<Point2> {
    let s = grid.spec();
    let f = factor.max(1) as usize;
    let (w, h) = (s.width as usize, s.height as usize);
    let mut out = Vec::new();
    for br in (0..h).step_by(f) {
        for bc in (0..w).step_by(f) {
            'block: for r in br..(br + f).min(h) {
                for c in bc..(bc + f).min(w) {
                    if grid.values()[r * w + c] > 0.0 {
                        out.push(s.centre(crate::grid::CellIndex::new(c as i64, r as i64)));
                        break 'block;
                    }
                }
            }
        }
    }
    out
}

/// Fits the rigid transform that best lays `map`'s occupied cells onto `reference`'s, with no
/// prior guess: every heading in 2-degree steps and every shift on a coarse lattice (cells of
/// about 1/48 of the larger map's extent), then the best candidates refined at lattices half as
/// coarse each time, down to the maps' own resolution. `None` when either map has no occupied
/// cell.
pub fn fit_rigid(map: &Grid, reference: &Grid) -> Option<Fit> {
    let ms = map.spec();
    let rs = reference.spec();
    let extent = |s: &GridSpec| (s.width as f64 * s.resolution).max(s.height as f64 * s.resolution);
    let span = extent(ms).max(extent(rs));
    let fine = ms.resolution.max(rs.resolution);
    let coarse = (span / 48.0).max(fine);
    // Levels from coarse to fine, each half the previous cell size.
    let mut levels = vec![coarse];
    while levels.last().is_some_and(|&l| l / 2.0 >= fine * 1.01) {
        levels.push(levels.last().copied().unwrap_or(fine) / 2.0);
    }
    if levels.last() != Some(&fine) {
        levels.push(fine);
    }
    let factor = |cell: f64, res: f64| ((cell / res).round() as u32).max(1);
    // The map's points relative to their centroid, so that a turn moves them least.
    let points_at = |cell: f64| occupied_points(map, factor(cell, ms.resolution));
    let all = points_at(fine);
    if all.is_empty() || !reference.values().iter().any(|&v| v > 0.0) {
        return None;
    }
    let n = all.len() as f64;
    let centroid = Point2::new(
        all.iter().map(|p| p.x).sum::<f64>() / n,
        all.iter().map(|p| p.y).sum::<f64>() / n,
    );
    let centred = |pts: Vec<Point2>| -> Vec<Point2> {
        pts.into_iter()
            .map(|p| Point2::new(p.x - centroid.x, p.y - centroid.y))
            .collect()
    };
    let reference_box = rs.bounds();
    // Level 0: every heading, every shift that puts the centroid inside the reference.
    let field = LikelihoodField::of_grid(reference, factor(coarse, rs.resolution));
    let pts = centred(points_at(coarse));
    let mut candidates: Vec<(Pose2, f64)> = Vec::new();
    let turns = 180;
    for a in 0..turns {
        let theta = a as f64 * std::f64::consts::TAU / turns as f64;
        let centre = Pose2::new(
            (reference_box.min.x + reference_box.max.x) / 2.0,
            (reference_box.min.y + reference_box.max.y) / 2.0,
            theta,
        );
        let half = (reference_box.max.x - reference_box.min.x)
            .max(reference_box.max.y - reference_box.min.y)
            / 2.0;
        let window = Window {
            reach: half,
            step: coarse,
            turn: 0.0,
            turn_step: 0.0,
        };
        candidates.push(search(&pts, &field, centre, window));
    }
    candidates.sort_by(|a, b| b.1.total_cmp(&a.1));
    candidates.truncate(8);
    // Finer levels: a local window around each candidate.
    let mut turn_step = std::f64::consts::TAU / turns as f64;
    let mut cell = coarse;
    for &level in &levels[1..] {
        let field = LikelihoodField::of_grid(reference, factor(level, rs.resolution));
        let pts = centred(points_at(level));
        let window = Window {
            reach: cell,
            step: level,
            turn: turn_step,
            turn_step: turn_step / 2.0,
        };
        for c in &mut candidates {
            *c = search(&pts, &field, c.0, window);
        }
        candidates.sort_by(|a, b| b.1.total_cmp(&a.1));
        candidates.truncate(4);
        turn_step /= 2.0;
        cell = level;
    }
    // Two more passes at the finest level with finer headings.
    let field = LikelihoodField::of_grid(reference, factor(fine, rs.resolution));
    let pts = centred(all);
    for _ in 0..2 {
        let window = Window {
            reach: fine,
            step: fine / 2.0,
            turn: turn_step,
            turn_step: turn_step / 2.0,
        };
        for c in &mut candidates {
            *c = search(&pts, &field, c.0, window);
        }
        turn_step /= 2.0;
    }
    let (best, score) = candidates.into_iter().max_by(|a, b| a.1.total_cmp(&b.1))?;
    // The points were centred: p_ref = R (p - centroid) + t, so the shift is t - R centroid.
    let moved = transform(&Pose2::new(0.0, 0.0, best.theta), centroid);
    let theta = crate::geometry::wrap_angle(best.theta);
    Some(Fit {
        pose: Pose2::new(best.x - moved.x, best.y - moved.y, theta),
        score,
    })
}

/// The world box a grid covers after moving it by `pose`.
pub fn moved_bounds(spec: &GridSpec, pose: &Pose2) -> WorldBox {
    let b = spec.bounds();
    let corners = [
        b.min,
        Point2::new(b.max.x, b.min.y),
        b.max,
        Point2::new(b.min.x, b.max.y),
    ];
    let mut out = WorldBox::at(transform(pose, corners[0]));
    for c in &corners[1..] {
        out.include(transform(pose, *c));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::grid::CellIndex;

    #[test]
    fn distance_transform_is_exact_on_a_small_case() {
        // Geometry of a simple case: every cell's squared distance to the nearest marked cell
        // by brute force.
        let (w, h) = (9, 7);
        let marked_at = [(1usize, 1usize), (7, 2), (4, 6)];
        let mut marked = vec![false; w * h];
        for &(c, r) in &marked_at {
            marked[r * w + c] = true;
        }
        let d = squared_distances(w, h, &marked);
        for r in 0..h {
            for c in 0..w {
                let brute = marked_at
                    .iter()
                    .map(|&(mc, mr)| {
                        let (dc, dr) = (c as f64 - mc as f64, r as f64 - mr as f64);
                        dc * dc + dr * dr
                    })
                    .fold(f64::INFINITY, f64::min);
                assert_eq!(d[r * w + c], brute, "cell ({c}, {r})");
            }
        }
        assert!(
            squared_distances(3, 2, &[false; 6])
                .iter()
                .all(|v| v.is_infinite())
        );
    }

    /// An L-shaped room of walls, as a grid, drawn in the frame given by `pose`.
    fn room(pose: Pose2, res: f64) -> Grid {
        let walls: Vec<Point2> = (0..400)
            .flat_map(|k| {
                let t = k as f64 * 0.025;
                [
                    Point2::new(t, 0.0),
                    Point2::new(0.0, t * 0.6),
                    Point2::new(t * 0.5, 6.0),
                    Point2::new(10.0, t * 0.3),
                    Point2::new(5.0 + t * 0.5, 3.0),
                    Point2::new(5.0, 3.0 + t * 0.3),
                    Point2::new(2.0 + t * 0.1, 2.0),
                ]
            })
            .collect();
        let moved: Vec<Point2> = walls.iter().map(|p| transform(&pose, *p)).collect();
        let mut b = WorldBox::at(moved[0]);
        moved.iter().for_each(|p| b.include(*p));
        let spec = GridSpec::covering(&b, res, 2, 10_000_000).unwrap();
        let mut g = Grid::filled(spec, -1.0);
        for p in moved {
            let i = spec.index(spec.cell_at(p)).unwrap();
            g.values_mut()[i] = 2.0;
        }
        g
    }

    #[test]
    fn a_moved_map_is_found_again() {
        // The same room drawn in two frames and at two resolutions: the fit recovers the
        // transform between them (geometry of a simple case).
        let truth = Pose2::new(3.2, -1.7, 0.3);
        let reference = room(Pose2::default(), 0.05);
        // The map is the room seen from a frame moved by the inverse of `truth`.
        let (s, c) = truth.theta.sin_cos();
        let inverse = Pose2::new(
            -(c * truth.x + s * truth.y),
            s * truth.x - c * truth.y,
            -truth.theta,
        );
        let map = room(inverse, 0.08);
        let fit = fit_rigid(&map, &reference).expect("a fit");
        assert!(
            (fit.pose.x - truth.x).abs() < 0.1 && (fit.pose.y - truth.y).abs() < 0.1,
            "{:?}",
            fit.pose
        );
        assert!(
            crate::geometry::wrap_angle(fit.pose.theta - truth.theta).abs() < 0.6f64.to_radians(),
            "{:?}",
            fit.pose
        );
        assert!(fit.score > 0.5, "{}", fit.score);
        // A window search from near the truth finds it too, and scores drop away from it.
        let field = LikelihoodField::of_grid(&reference, 1);
        let pts = occupied_points(&map, 1);
        let start = Pose2::new(truth.x + 0.12, truth.y - 0.1, truth.theta + 0.02);
        let w = Window {
            reach: 0.25,
            step: 0.025,
            turn: 0.04,
            turn_step: 0.005,
        };
        let (found, best) = search(&pts, &field, start, w);
        assert!(
            found.position().distance(truth.position()) < 0.06,
            "{found:?}"
        );
        assert!(best > field.score(&pts, &start));
        assert_eq!(
            field.at(reference.spec().centre(CellIndex::new(-5, -5))),
            0.0
        );
    }
}
