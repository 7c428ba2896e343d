//! Scoring a map against a reference map, and finding cells whose class changed.
//!
//! The compared cells are the cells of the two grids' overlap that the reference decides
//! (reference probability not 0.5), whatever the map says there. With y = 1 where the reference
//! is occupied and p the map's probability:
//!
//! - cross-entropy, bits per cell: mean of -(y log2 p + (1 - y) log2(1 - p)), computed from
//!   log-odds so that saturated cells stay finite (Shannon's log loss; the evidence-grid
//!   scoring of Martin & Moravec, "Robot Evidence Grids", CMU-RI-TR-96-06, 1996, from memory);
//! - Brier score: mean of (p - y)^2 (Brier, "Verification of forecasts expressed in terms of
//!   probability", Monthly Weather Review, 1950);
//! - ROC AUC: the probability that a random occupied cell gets a higher p than a random free one,
//!   ties counting one half (Hanley & McNeil, "The meaning and use of the area under a receiver
//!   operating characteristic (ROC) curve", Radiology, 1982);
//! - precision and recall of "occupied" at p > 0.5, and the confusion counts.
//!
//! Design decision: a map is compared with a reference of any resolution and, with a rigid
//! transform, in any frame, by one stated rule: each map cell is compared with the reference
//! cell that contains the map cell's centre (moved by the transform into the reference's
//! frame); map cells whose centre falls outside the reference, or on a cell the reference
//! leaves undecided, are not compared. On two grids of one lattice that is cell for cell. The
//! transform between two frames can be fitted ([`crate::align::fit_rigid`]). Class changes
//! between two maps of one builder ([`class_changes`]) stay cell for cell on one lattice.

use crate::geometry::{Point2, Pose2};
use crate::grid::{CellIndex, Grid, GridSpec};
use serde::Serialize;

/// Counts of the map's call (p > 0.5 occupied, p < 0.5 free, p = 0.5 unknown) against the
/// reference's (occupied or free).
#[derive(Clone, Copy, Debug, Default, PartialEq, Eq, Serialize)]
pub struct Confusion {
    /// Map occupied, reference occupied.
    pub true_occupied: u64,
    /// Map occupied, reference free.
    pub false_occupied: u64,
    /// Map free, reference free.
    pub true_free: u64,
    /// Map free, reference occupied.
    pub false_free: u64,
    /// Map unknown (exactly 0.5), reference occupied.
    pub unknown_occupied: u64,
    /// Map unknown (exactly 0.5), reference free.
    pub unknown_free: u64,
}

/// The scores of one map against one reference.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct Score {
    /// Cells compared (decided by the reference, inside both grids).
    pub cells_compared: u64,
    /// Mean log loss, bits per cell (lower is better).
    pub cross_entropy_bits: f64,
    /// Mean squared error of the probability (lower is better).
    pub brier: f64,
    /// Area under the ROC curve (higher is better); NaN when either class is absent.
    pub auc: f64,
    /// Occupied calls that are right; NaN when the map calls nothing occupied.
    pub precision: f64,
    /// Occupied reference cells the map calls occupied; NaN when the reference has none.
    pub recall: f64,
    /// The counts behind precision and recall.
    pub confusion: Confusion,
}

/// Why two grids cannot be compared.
#[derive(Clone, Debug, PartialEq, thiserror::Error)]
pub enum CompareError {
    /// Different cell sizes.
    #[error(
        "the grids have different resolutions ({0} m and {1} m); compare maps of equal resolution"
    )]
    Resolution(f64, f64),
    /// Origins not a whole number of cells apart.
    #[error(
        "the grids' origins are not a whole number of cells apart, so their cells do not line up"
    )]
    Misaligned,
    /// No cell in common, or none decided by the reference.
    #[error("the grids share no cell that the reference decides")]
    Empty,
}

/// The offset (in cells) of `other`'s lattice relative to `spec`'s: cell (c, r) of `spec` is
/// cell (c + dc, r + dr) of `other`. Refuses grids that do not share a lattice.
pub fn lattice_offset(spec: &GridSpec, other: &GridSpec) -> Result<(i64, i64), CompareError> {
    let (a, b) = (spec.resolution, other.resolution);
    if ((a - b) / a).abs() > 1e-9 {
        return Err(CompareError::Resolution(a, b));
    }
    let dc = (spec.origin.x - other.origin.x) / a;
    let dr = (spec.origin.y - other.origin.y) / a;
    if (dc - dc.round()).abs() > 1e-6 || (dr - dr.round()).abs() > 1e-6 {
        return Err(CompareError::Misaligned);
    }
    Ok((dc.round() as i64, dr.round() as i64))
}

/// Calls `f(map_value, other_value, map_cell)` for every cell the two grids share.
pub fn for_each_shared(
    map: &Grid,
    other: &Grid,
    mut f: impl FnMut(f32, f32, CellIndex),
) -> Result<(), CompareError> {
    let (dc, dr) = lattice_offset(map.spec(), other.spec())?;
    let ms = map.spec();
    let os = other.spec();
    let c0 = (-dc).max(0);
    let r0 = (-dr).max(0);
    let c1 = (ms.width as i64).min(os.width as i64 - dc);
    let r1 = (ms.height as i64).min(os.height as i64 - dr);
    for r in r0..r1 {
        for c in c0..c1 {
            let here = CellIndex::new(c, r);
            let there = CellIndex::new(c + dc, r + dr);
            if let (Some(i), Some(j)) = (ms.index(here), os.index(there)) {
                f(map.values()[i], other.values()[j], here);
            }
        }
    }
    Ok(())
}

/// ln(1 + e^x) without overflow.
fn softplus(x: f64) -> f64 {
    if x > 30.0 {
        x + (-x).exp().ln_1p()
    } else {
        x.exp().ln_1p()
    }
}

/// Calls `f(map_value, reference_value)` for every map cell whose centre, moved by `pose` into
/// the reference's frame, lies in a reference cell.
pub fn for_each_sampled(map: &Grid, reference: &Grid, pose: &Pose2, mut f: impl FnMut(f32, f32)) {
    let ms = map.spec();
    let rs = reference.spec();
    let w = ms.width as usize;
    let (s, c) = pose.theta.sin_cos();
    for (i, &l) in map.values().iter().enumerate() {
        let p = ms.centre(CellIndex::new((i % w) as i64, (i / w) as i64));
        let q = Point2::new(pose.x + c * p.x - s * p.y, pose.y + s * p.x + c * p.y);
        if let Some(j) = rs.index(rs.cell_at(q)) {
            f(l, reference.values()[j]);
        }
    }
}

/// Scores `map` against `reference` (log-odds grids, of any resolutions) in one frame.
pub fn score(map: &Grid, reference: &Grid) -> Result<Score, CompareError> {
    score_moved(map, reference, &Pose2::default())
}

/// Scores `map` against `reference` with the map moved by `pose` into the reference's frame
/// (see the module notes for the rule).
pub fn score_moved(map: &Grid, reference: &Grid, pose: &Pose2) -> Result<Score, CompareError> {
    let mut n = 0u64;
    let mut log_loss = 0.0f64;
    let mut brier = 0.0f64;
    let mut conf = Confusion::default();
    // (log-odds, is occupied) of every compared cell, for the ROC.
    let mut ranked: Vec<(f32, bool)> = Vec::new();
    for_each_sampled(map, reference, pose, |l, r| {
        if r == 0.0 {
            return; // the reference leaves this cell undecided
        }
        let y = r > 0.0;
        let l64 = l as f64;
        let p = crate::logodds::probability(l64);
        n += 1;
        // -log2 p = softplus(-l) / ln 2 ; -log2 (1 - p) = softplus(l) / ln 2.
        log_loss += if y { softplus(-l64) } else { softplus(l64) } / std::f64::consts::LN_2;
        let e = p - if y { 1.0 } else { 0.0 };
        brier += e * e;
        match (l.partial_cmp(&0.0), y) {
            (Some(std::cmp::Ordering::Greater), true) => conf.true_occupied += 1,
            (Some(std::cmp::Ordering::Greater), false) => conf.false_occupied += 1,
            (Some(std::cmp::Ordering::Less), false) => conf.true_free += 1,
            (Some(std::cmp::Ordering::Less), true) => conf.false_free += 1,
            (_, true) => conf.unknown_occupied += 1,
            (_, false) => conf.unknown_free += 1,
        }
        ranked.push((l, y));
    });
    if n == 0 {
        return Err(CompareError::Empty);
    }
    let called = conf.true_occupied + conf.false_occupied;
    let actual = conf.true_occupied + conf.false_free + conf.unknown_occupied;
    Ok(Score {
        cells_compared: n,
        cross_entropy_bits: log_loss / n as f64,
        brier: brier / n as f64,
        auc: roc_auc(&mut ranked),
        precision: conf.true_occupied as f64 / called as f64,
        recall: conf.true_occupied as f64 / actual as f64,
        confusion: conf,
    })
}

/// ROC AUC by the rank-sum (Mann-Whitney) form, ties sharing their average rank.
fn roc_auc(cells: &mut [(f32, bool)]) -> f64 {
    cells.sort_by(|a, b| a.0.total_cmp(&b.0));
    let positives = cells.iter().filter(|c| c.1).count() as f64;
    let negatives = cells.len() as f64 - positives;
    if positives == 0.0 || negatives == 0.0 {
        return f64::NAN;
    }
    let mut rank_sum = 0.0f64;
    let mut i = 0;
    while i < cells.len() {
        let mut j = i;
        while j < cells.len() && cells[j].0 == cells[i].0 {
            j += 1;
        }
        // Ranks i+1 ..= j share their mean.
        let mean_rank = (i + 1 + j) as f64 / 2.0;
        rank_sum += mean_rank * cells[i..j].iter().filter(|c| c.1).count() as f64;
        i = j;
    }
    (rank_sum - positives * (positives + 1.0) / 2.0) / (positives * negatives)
}

/// What a cell is called: occupied (p > 0.5), free (p < 0.5) or unknown (exactly 0.5).
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash, PartialOrd, Ord, Serialize)]
pub enum CellClass {
    /// p < 0.5.
    Free,
    /// p = 0.5.
    Unknown,
    /// p > 0.5.
    Occupied,
}

impl CellClass {
    /// The class of a log-odds value.
    pub fn of(l: f32) -> CellClass {
        if l > 0.0 {
            CellClass::Occupied
        } else if l < 0.0 {
            CellClass::Free
        } else {
            CellClass::Unknown
        }
    }
}

/// A connected group of cells (4-neighbours) that changed class the same way.
#[derive(Clone, Debug, PartialEq)]
pub struct ChangeCluster {
    /// Class in the first grid.
    pub from: CellClass,
    /// Class in the second grid.
    pub to: CellClass,
    /// The cells, in the first grid's indices.
    pub cells: Vec<CellIndex>,
}

impl ChangeCluster {
    /// Mean cell position (column, row).
    pub fn centre(&self) -> (f64, f64) {
        let n = self.cells.len().max(1) as f64;
        let c = self.cells.iter().map(|c| c.col as f64).sum::<f64>() / n;
        let r = self.cells.iter().map(|c| c.row as f64).sum::<f64>() / n;
        (c, r)
    }
}

/// Cells whose class differs between `a` and `b` (same lattice), grouped into connected
/// clusters of equal transition, largest first.
pub fn class_changes(a: &Grid, b: &Grid) -> Result<Vec<ChangeCluster>, CompareError> {
    let spec = *a.spec();
    let w = spec.width as usize;
    let mut change: Vec<Option<(CellClass, CellClass)>> = vec![None; spec.cells()];
    let mut any = false;
    for_each_shared(a, b, |x, y, cell| {
        let (ca, cb) = (CellClass::of(x), CellClass::of(y));
        if ca != cb {
            change[spec.index(cell).expect("shared cells are inside")] = Some((ca, cb));
            any = true;
        }
    })?;
    let mut clusters = Vec::new();
    if !any {
        return Ok(clusters);
    }
    let mut seen = vec![false; change.len()];
    for start in 0..change.len() {
        let Some(kind) = change[start] else { continue };
        if seen[start] {
            continue;
        }
        let mut stack = vec![start];
        seen[start] = true;
        let mut cells = Vec::new();
        while let Some(i) = stack.pop() {
            cells.push(spec.cell_of_index(i));
            let (c, r) = (i % w, i / w);
            let mut push = |j: usize| {
                if !seen[j] && change[j] == Some(kind) {
                    seen[j] = true;
                    stack.push(j);
                }
            };
            if c > 0 {
                push(i - 1);
            }
            if c + 1 < w {
                push(i + 1);
            }
            if r > 0 {
                push(i - w);
            }
            if r + 1 < spec.height as usize {
                push(i + w);
            }
        }
        cells.sort();
        clusters.push(ChangeCluster {
            from: kind.0,
            to: kind.1,
            cells,
        });
    }
    clusters.sort_by(|x, y| {
        y.cells
            .len()
            .cmp(&x.cells.len())
            .then(x.cells[0].cmp(&y.cells[0]))
    });
    Ok(clusters)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::logodds::logit;

    fn grid(origin_cells: (i64, i64), w: u32, h: u32, values: &[f64]) -> Grid {
        let spec = GridSpec {
            resolution: 0.5,
            origin: Point2::new(origin_cells.0 as f64 * 0.5, origin_cells.1 as f64 * 0.5),
            width: w,
            height: h,
        };
        let v = values
            .iter()
            .map(|&p| if p == 0.5 { 0.0 } else { logit(p) as f32 })
            .collect();
        Grid::from_values(spec, v).unwrap()
    }

    #[test]
    fn hand_computed_scores_on_a_tiny_grid() {
        // Reference: occupied, free, occupied, undecided. Map: 0.8, 0.4, 0.5, 0.9.
        let reference = grid((0, 0), 4, 1, &[0.98, 0.02, 0.98, 0.5]);
        let map = grid((0, 0), 4, 1, &[0.8, 0.4, 0.5, 0.9]);
        let s = score(&map, &reference).unwrap();
        assert_eq!(s.cells_compared, 3);
        // Cross-entropy (Shannon log loss, base 2), by hand:
        // -(log2 0.8 + log2 0.6 + log2 0.5) / 3 = (0.32193 + 0.73697 + 1) / 3 = 0.68630.
        assert!(
            (s.cross_entropy_bits - 0.686_30).abs() < 1e-4,
            "{}",
            s.cross_entropy_bits
        );
        // Brier (1950): ((0.8-1)^2 + (0.4-0)^2 + (0.5-1)^2) / 3 = (0.04 + 0.16 + 0.25) / 3 = 0.15.
        assert!((s.brier - 0.15).abs() < 1e-6, "{}", s.brier);
        // ROC AUC (Hanley & McNeil 1982): positives {0.8, 0.5}, negative {0.4}: both above -> 1.
        assert!((s.auc - 1.0).abs() < 1e-12);
        // Occupied at p > 0.5: one true call (0.8), no false call; one occupied cell unknown.
        assert_eq!(s.precision, 1.0);
        assert_eq!(s.recall, 0.5);
        assert_eq!(s.confusion.true_occupied, 1);
        assert_eq!(s.confusion.true_free, 1);
        assert_eq!(s.confusion.unknown_occupied, 1);
    }

    #[test]
    fn auc_counts_ties_as_half() {
        // Two occupied cells at 0.6 and 0.3, two free at 0.6 and 0.2: pairs (pos > neg):
        // 0.6 vs 0.6 tie (1/2), 0.6 vs 0.2 (1), 0.3 vs 0.6 (0), 0.3 vs 0.2 (1) -> 2.5 / 4.
        let reference = grid((0, 0), 4, 1, &[0.9, 0.9, 0.1, 0.1]);
        let map = grid((0, 0), 4, 1, &[0.6, 0.3, 0.6, 0.2]);
        assert!((score(&map, &reference).unwrap().auc - 0.625).abs() < 1e-12);
    }

    #[test]
    fn each_map_cell_meets_the_reference_cell_holding_its_centre() {
        // Worked by hand with the rule of the module notes. Map cells (0.5 m) centred at
        // x = 0.25, 0.75, 1.25, 1.75; the reference starts at x = 1.0: only the overlap counts.
        let map = grid((0, 0), 4, 1, &[0.9, 0.9, 0.8, 0.2]);
        let reference = grid((2, 0), 4, 1, &[0.98, 0.02, 0.98, 0.98]);
        let s = score(&map, &reference).unwrap();
        assert_eq!(s.cells_compared, 2);
        assert_eq!(s.confusion.true_occupied, 1);
        assert_eq!(s.confusion.true_free, 1);
        // Shifted by a fifth of a cell: centres 1.25 and 1.75 still fall in cells 0 and 1.
        let mut spec = *reference.spec();
        spec.origin.x += 0.1;
        let shifted = Grid::from_values(spec, reference.values().to_vec()).unwrap();
        assert_eq!(score(&map, &shifted).unwrap(), s);
        // A reference of 1 m cells from x = 1: both centres fall in its first (occupied) cell.
        let mut coarse = *reference.spec();
        coarse.resolution = 1.0;
        let coarse = Grid::from_values(coarse, reference.values().to_vec()).unwrap();
        let c = score(&map, &coarse).unwrap();
        assert_eq!(c.cells_compared, 2);
        assert_eq!((c.confusion.true_occupied, c.confusion.false_free), (1, 1));
        // Turned half a turn about the origin, the map lands west of the reference.
        let turned = Pose2::new(0.0, 0.0, std::f64::consts::PI);
        assert_eq!(
            score_moved(&map, &reference, &turned).unwrap_err(),
            CompareError::Empty
        );
        // Moved 1 m east, map cells 0..3 (p 0.9, 0.9, 0.8, 0.2) meet reference cells 0..3
        // (occupied, free, occupied, occupied).
        let moved = score_moved(&map, &reference, &Pose2::new(1.0, 0.0, 0.0)).unwrap();
        assert_eq!(moved.cells_compared, 4);
        let c = moved.confusion;
        assert_eq!((c.true_occupied, c.false_occupied, c.false_free), (2, 1, 1));
        let far = grid((100, 0), 1, 1, &[0.9]);
        assert_eq!(score(&map, &far).unwrap_err(), CompareError::Empty);
    }

    #[test]
    fn saturated_cells_keep_a_finite_loss() {
        let reference = grid((0, 0), 1, 1, &[0.02]);
        let spec = *reference.spec();
        let map = Grid::from_values(spec, vec![50.0]).unwrap();
        let s = score(&map, &reference).unwrap();
        // -log2(1 - p) = log2(1 + e^50) = 50 / ln 2 + tiny.
        assert!((s.cross_entropy_bits - 50.0 / std::f64::consts::LN_2).abs() < 1e-9);
    }

    #[test]
    fn changes_cluster_by_transition() {
        let a = grid((0, 0), 4, 2, &[0.9, 0.9, 0.2, 0.5, 0.9, 0.2, 0.2, 0.5]);
        let b = grid((0, 0), 4, 2, &[0.2, 0.2, 0.2, 0.9, 0.2, 0.2, 0.9, 0.9]);
        let c = class_changes(&a, &b).unwrap();
        // Occupied -> free: (0,0) (1,0) (0,1) connected; unknown -> occupied: (3,0) (3,1);
        // free -> occupied: (2,1) alone.
        assert_eq!(c.len(), 3);
        assert_eq!(
            (c[0].from, c[0].to, c[0].cells.len()),
            (CellClass::Occupied, CellClass::Free, 3)
        );
        assert_eq!(
            (c[1].from, c[1].to, c[1].cells.len()),
            (CellClass::Unknown, CellClass::Occupied, 2)
        );
        assert_eq!(c[2].cells, vec![CellIndex::new(2, 1)]);
    }
}
