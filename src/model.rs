//! Inverse sensor models: the log-odds increment a reading gives a cell at distance d.
//!
//! The formulas of the contract (section 4) are here once, as `*_probability` functions. The
//! fusion loop does not call `exp` and `ln` per cell: a [`PreparedModel`] tabulates the
//! Gaussian model's increment against `d - z`, and a [`ConeFreeTable`] a cone cell's free
//! increment against the tangent of its bearing, both interpolated linearly. Tables are refined
//! at construction until they stay within [`TABLE_TOLERANCE`] of the formula, checked at every
//! interval's midpoint and thirds, far inside the contract's 1e-4.

use crate::footprint::cone_weight;
use crate::logodds::logit;
use crate::params::ModelSpec;

/// Largest allowed difference, log-odds, between a tabulated increment and the formula at the
/// points where the table is checked while it is built.
pub const TABLE_TOLERANCE: f64 = 2e-5;

/// Gaussian shape g(x) = exp(-x^2 / (2 sigma^2)), computed as exp(-(x / sigma)^2 / 2) so that a
/// tiny sigma (whose square underflows to 0) still gives g(0) = 1 and g(x != 0) = 0.
#[inline]
fn gauss(x: f64, sigma: f64) -> f64 {
    let u = x / sigma;
    if u.is_nan() {
        // 0 / 0 cannot happen for sigma > 0; keep the formula's value at the peak anyway.
        return 1.0;
    }
    (-0.5 * u * u).exp()
}

/// The radial profile p(d | z) for a hit at range `z` (metres) and a cell centre at distance
/// `d` (metres), by the contract's formulas. For `Band`, cells past the band (d > z + t/2) get
/// 0.5: they carry no information (they are only ever touched as the last cell of a traversal).
pub fn hit_probability(spec: &ModelSpec, d: f64, z: f64) -> f64 {
    match *spec {
        ModelSpec::Gaussian {
            sigma,
            p_occ,
            p_free,
            ..
        } => {
            let g = gauss(d - z, sigma);
            if d <= z {
                p_free.max(p_occ * g)
            } else {
                0.5 + (p_occ - 0.5) * g
            }
        }
        ModelSpec::Band {
            thickness,
            p_occ,
            p_free,
        } => {
            let half = thickness / 2.0;
            if (d - z).abs() <= half {
                p_occ
            } else if d < z - half {
                p_free
            } else {
                0.5
            }
        }
    }
}

/// A cone cell's probability: the deviation of the radial profile from 0.5 scaled by the
/// angular weight w(bearing).
pub fn cone_probability(p_radial: f64, bearing: f64, width: f64) -> f64 {
    0.5 + cone_weight(bearing, width) * (p_radial - 0.5)
}

/// Piecewise-linear table of `f(x)` on `[lo, hi]` with evenly spaced nodes: for interval i,
/// the value at its start and the rise across it.
#[derive(Clone, Debug)]
struct Table {
    lo: f64,
    inv_step: f64,
    intervals: Vec<(f64, f64)>,
}

impl Table {
    /// Builds a table of `f` on `[lo, hi]`, doubling the node count until interpolation stays
    /// within `tol` of `f` at each interval's midpoint and thirds (or the table has 2^20
    /// intervals).
    fn build(lo: f64, hi: f64, tol: f64, f: impl Fn(f64) -> f64) -> Table {
        Self::build_within(lo, hi, tol, 1 << 20, f).unwrap_or_else(|t| t)
    }

    /// As [`Table::build`] with at most `max_n` intervals: `Err` holds the last table tried
    /// when even that many intervals miss `tol`.
    fn build_within(
        lo: f64,
        hi: f64,
        tol: f64,
        max_n: usize,
        f: impl Fn(f64) -> f64,
    ) -> Result<Table, Table> {
        let mut n = 64usize;
        loop {
            let step = (hi - lo) / n as f64;
            let nodes: Vec<f64> = (0..=n).map(|i| f(lo + i as f64 * step)).collect();
            let t = Table {
                lo,
                inv_step: if hi > lo { 1.0 / step } else { 0.0 },
                intervals: nodes.windows(2).map(|w| (w[0], w[1] - w[0])).collect(),
            };
            let worst = (0..n)
                .flat_map(|i| [1.0 / 3.0, 0.5, 2.0 / 3.0].map(|u| lo + (i as f64 + u) * step))
                .map(|x| (t.eval(x) - f(x)).abs())
                .fold(0.0, f64::max);
            if worst <= tol {
                return Ok(t);
            }
            if n >= max_n {
                return Err(t);
            }
            n *= 2;
        }
    }

    #[inline(always)]
    fn eval(&self, x: f64) -> f64 {
        let u = (x - self.lo) * self.inv_step;
        let i = (u as usize).min(self.intervals.len() - 1);
        let frac = u - i as f64;
        let (a, rise) = self.intervals[i];
        a + frac * rise
    }
}

/// Increments of cone cells where the radial profile is exactly p_free (a cleared no-return,
/// or in front of a hit's free zone), tabulated against s = |tan(bearing)| on
/// [0, tan(width / 2)]: logit(0.5 + w(atan s) (p_free - 0.5)). The footprint hands over s,
/// found with one division, for cells clearly inside the cone, so such a cell needs neither
/// `atan2` nor `ln`.
#[derive(Clone, Debug)]
pub struct ConeFreeTable {
    table: Table,
}

impl ConeFreeTable {
    /// Widest cone tabulated, radians: past it tan(width / 2) grows steeply and cells take the
    /// formula.
    pub const MAX_WIDTH: f64 = 2.6;

    /// The table for a model and a cone width (radians), or `None` when the cone is wider than
    /// [`ConeFreeTable::MAX_WIDTH`] or 2^16 intervals cannot keep within [`TABLE_TOLERANCE`]
    /// of the formula (a p_free very close to 0).
    pub fn new(model: &PreparedModel, width: f64) -> Option<ConeFreeTable> {
        if !(width > 0.0 && width <= Self::MAX_WIDTH) {
            return None;
        }
        let p_free = model.spec.p_free();
        let f = |s: f64| logit(cone_probability(p_free, s.atan(), width));
        Table::build_within(0.0, (width / 2.0).tan(), TABLE_TOLERANCE, 1 << 16, f)
            .ok()
            .map(|table| ConeFreeTable { table })
    }

    /// The increment of a free cone cell whose bearing has tangent `s` in absolute value
    /// (`0 <= s <= tan(width / 2)`).
    #[inline(always)]
    pub fn eval(&self, s: f64) -> f64 {
        self.table.eval(s)
    }
}

/// A model ready for the fusion loop: formulas plus the Gaussian increment table.
#[derive(Clone, Debug)]
pub struct PreparedModel {
    spec: ModelSpec,
    /// Increment of a free cell, logit(p_free).
    l_free: f64,
    /// Increment at the reading, logit(p_occ).
    l_occ: f64,
    /// Gaussian only: below `front` (< 0) the increment is l_free; tables cover
    /// [front, 0] and [0, back]; past `back` the formula is used.
    front: f64,
    back: f64,
    before: Option<Table>,
    after: Option<Table>,
}

impl PreparedModel {
    /// Prepares `spec` (assumed valid; see [`ModelSpec::validate`]).
    pub fn new(spec: ModelSpec) -> PreparedModel {
        let l_free = logit(spec.p_free());
        let l_occ = logit(spec.p_occ());
        let mut m = PreparedModel {
            spec,
            l_free,
            l_occ,
            front: 0.0,
            back: 0.0,
            before: None,
            after: None,
        };
        if let ModelSpec::Gaussian {
            sigma,
            p_occ,
            p_free,
            cutoff,
        } = spec
        {
            // In front of the reading, p_occ g(x) falls to p_free at x = -sigma sqrt(2 ln(p_occ/p_free));
            // the floor takes over there, so the table starts exactly at that kink.
            m.front = -sigma * (2.0 * (p_occ / p_free).ln()).sqrt();
            m.back = (cutoff.max(1.0) + 3.0) * sigma;
            let before = |x: f64| logit(p_free.max(p_occ * gauss(x, sigma)));
            let after = |x: f64| logit(0.5 + (p_occ - 0.5) * gauss(x, sigma));
            // Below a nanometre a table's steps would underflow; such a model takes the formula.
            if sigma >= 1e-9 {
                m.before = Some(Table::build(m.front, 0.0, TABLE_TOLERANCE, before));
                m.after = Some(Table::build(0.0, m.back, TABLE_TOLERANCE, after));
            }
        }
        m
    }

    /// The model's parameters.
    pub fn spec(&self) -> &ModelSpec {
        &self.spec
    }

    /// logit(p_free), log-odds.
    pub fn free_increment(&self) -> f64 {
        self.l_free
    }

    /// For a hit at `z` metres: every cell whose centre is closer than this (metres from the
    /// origin) gets exactly [`PreparedModel::free_increment`] from [`PreparedModel::hit_increment`].
    pub fn free_below(&self, z: f64) -> f64 {
        match self.spec {
            ModelSpec::Gaussian { .. } => z + self.front,
            ModelSpec::Band { thickness, .. } => z - thickness / 2.0,
        }
    }

    /// How far a hit at `z` metres reaches, metres from the beam origin.
    pub fn hit_reach(&self, z: f64) -> f64 {
        z + self.spec.reach_past_hit()
    }

    /// Increment (log-odds) for a cell whose centre is `d` metres from the origin of a beam
    /// that hit at `z` metres, from the table where there is one.
    #[inline(always)]
    pub fn hit_increment(&self, d: f64, z: f64) -> f64 {
        let x = d - z;
        match (&self.before, &self.after) {
            (Some(before), Some(after)) => {
                if x > self.back {
                    return self.hit_increment_exact(d, z);
                }
                // Both tables are read and one value chosen, rather than branching: which
                // side of the reading a cell centre lies on is unpredictable.
                let b = before.eval(x.clamp(self.front, 0.0));
                let a = after.eval(x.clamp(0.0, self.back));
                let v = if x <= 0.0 { b } else { a };
                if x <= self.front { self.l_free } else { v }
            }
            _ => {
                // Band: piecewise constant, no table needed.
                if let ModelSpec::Band { thickness, .. } = self.spec {
                    let half = thickness / 2.0;
                    if x.abs() <= half {
                        self.l_occ
                    } else if x < -half {
                        self.l_free
                    } else {
                        0.0
                    }
                } else {
                    self.hit_increment_exact(d, z)
                }
            }
        }
    }

    /// Increment (log-odds) for a hit by the contract's formula, no table.
    pub fn hit_increment_exact(&self, d: f64, z: f64) -> f64 {
        logit(hit_probability(&self.spec, d, z))
    }

    /// Increment (log-odds) of a cone cell for a hit, with the angular weight.
    pub fn cone_hit_increment(&self, d: f64, z: f64, bearing: f64, width: f64) -> f64 {
        logit(cone_probability(
            hit_probability(&self.spec, d, z),
            bearing,
            width,
        ))
    }

    /// Increment (log-odds) of a cone cell for a cleared no-return, with the angular weight.
    pub fn cone_free_increment(&self, bearing: f64, width: f64) -> f64 {
        logit(cone_probability(self.spec.p_free(), bearing, width))
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use statrs::distribution::{Continuous, Normal};

    fn gaussian() -> ModelSpec {
        ModelSpec::Gaussian {
            sigma: 0.05,
            p_occ: 0.8,
            p_free: 0.35,
            cutoff: 3.0,
        }
    }

    #[test]
    fn gaussian_shape_against_statrs() {
        // Reference crate statrs: the normal density scaled to 1 at its mean is g(x).
        let sigma = 0.05;
        let normal = Normal::new(0.0, sigma).unwrap();
        let peak = normal.pdf(0.0);
        let spec = gaussian();
        let z = 2.0;
        for k in -300..=150 {
            let d = z + k as f64 * 0.001;
            let g = normal.pdf(d - z) / peak;
            let want = if d <= z {
                (0.8 * g).max(0.35)
            } else {
                0.5 + 0.3 * g
            };
            assert!(
                (hit_probability(&spec, d, z) - want).abs() < 1e-12,
                "d = {d}"
            );
        }
        // Behind the obstacle the profile tends back to 0.5; far in front it is floored.
        assert!((hit_probability(&spec, z + 1.0, z) - 0.5).abs() < 1e-12);
        assert_eq!(hit_probability(&spec, 0.3, z), 0.35);
        assert_eq!(hit_probability(&spec, z, z), 0.8);
    }

    #[test]
    fn band_model_follows_the_textbook_case_analysis() {
        // Thrun, Burgard & Fox, Probabilistic Robotics (2005), Table 9.2 (inverse range sensor
        // model), read with alpha = thickness: beyond z + alpha/2 the cell keeps its prior (no
        // change, p = 0.5 here); within alpha/2 of z it is occupied; in front of that, free.
        // The probabilities are the file contract's example band model (section 3).
        let spec = ModelSpec::Band {
            thickness: 0.1,
            p_occ: 0.68,
            p_free: 0.38,
        };
        let m = PreparedModel::new(spec);
        let z = 3.0;
        assert_eq!(hit_probability(&spec, 2.0, z), 0.38);
        assert_eq!(hit_probability(&spec, 2.96, z), 0.68);
        assert_eq!(hit_probability(&spec, 3.04, z), 0.68);
        assert_eq!(hit_probability(&spec, 3.06, z), 0.5);
        assert!((m.hit_increment(2.0, z) - logit(0.38)).abs() < 1e-15);
        assert!((m.hit_increment(3.0, z) - logit(0.68)).abs() < 1e-15);
        assert_eq!(m.hit_increment(3.2, z), 0.0);
        assert!((m.hit_reach(z) - 3.05).abs() < 1e-12);
        assert_eq!(m.free_below(z), 2.95);
        assert_eq!(m.hit_increment(2.9499, z), m.free_increment());
    }

    #[test]
    fn table_stays_within_contract_tolerance() {
        // The contract allows 1e-4 log-odds between table and formula; probe densely, including
        // steep models (p_occ near 1, narrow sigma) and points off the checked nodes.
        let specs = [
            gaussian(),
            ModelSpec::Gaussian {
                sigma: 0.01,
                p_occ: 0.99,
                p_free: 0.05,
                cutoff: 2.0,
            },
            ModelSpec::Gaussian {
                sigma: 0.3,
                p_occ: 0.55,
                p_free: 0.45,
                cutoff: 0.0,
            },
            ModelSpec::Gaussian {
                sigma: 0.002,
                p_occ: 0.999,
                p_free: 0.001,
                cutoff: 5.0,
            },
        ];
        let mut seed = 12345u64;
        for spec in specs {
            let m = PreparedModel::new(spec);
            let z = 4.0;
            let mut worst = 0.0f64;
            for _ in 0..200_000 {
                seed = seed
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                let u = (seed >> 11) as f64 / (1u64 << 53) as f64;
                let d = z + (u - 0.7) * 10.0 * spec.reach_past_hit().max(0.05);
                let err = (m.hit_increment(d, z) - m.hit_increment_exact(d, z)).abs();
                worst = worst.max(err);
            }
            assert!(worst <= 1e-4, "{spec:?}: worst error {worst}");
            // In front of free_below the table gives exactly logit(p_free).
            let edge = m.free_below(z);
            for k in 1..100 {
                let d = edge - k as f64 * 1e-3;
                assert_eq!(m.hit_increment(d, z), m.free_increment(), "{spec:?} at {d}");
            }
        }
    }

    #[test]
    fn cone_weighting() {
        let spec = gaussian();
        let m = PreparedModel::new(spec);
        // On the axis the cone cell gets the radial value; at the edge nothing.
        assert!((m.cone_hit_increment(2.0, 2.0, 0.0, 0.4) - logit(0.8)).abs() < 1e-12);
        assert!(m.cone_hit_increment(2.0, 2.0, 0.2, 0.4).abs() < 1e-12);
        // At a quarter width the deviation from 0.5 is scaled by 3/4.
        let p = cone_probability(0.8, 0.1, 0.4);
        assert!((p - (0.5 + 0.75 * 0.3)).abs() < 1e-12);
        assert!((m.cone_free_increment(0.0, 0.4) - logit(0.35)).abs() < 1e-12);
    }

    /// The free cone table keeps within the contract's 1e-4 (section 4: a table may replace
    /// the formula within 1e-4 log-odds) of the formula, checked densely between its nodes,
    /// for narrow and wide cones and for p_free near the ends of its range; past its widest
    /// cone it declines.
    #[test]
    fn cone_free_table_within_the_contract() {
        for p_free in [0.02, 0.2, 0.35, 0.49] {
            let m = PreparedModel::new(ModelSpec::Band {
                thickness: 0.1,
                p_occ: 0.9,
                p_free,
            });
            for width in [0.005, 0.26, 0.44, 1.0, 2.0, ConeFreeTable::MAX_WIDTH] {
                let table = ConeFreeTable::new(&m, width).expect("a table");
                let top = (width / 2.0).tan();
                let worst = (0..=20_000)
                    .map(|i| top * i as f64 / 20_000.0)
                    .map(|s| (table.eval(s) - m.cone_free_increment(s.atan(), width)).abs())
                    .fold(0.0, f64::max);
                assert!(worst < 1e-4, "p_free {p_free} width {width}: {worst}");
            }
            assert!(ConeFreeTable::new(&m, ConeFreeTable::MAX_WIDTH + 0.1).is_none());
        }
    }

    #[test]
    fn a_vanishing_sigma_keeps_the_peak_at_the_reading() {
        // The contract's formula at d = z: g(0) = 1, so p = max(p_free, p_occ) = p_occ, however
        // small sigma is (its square underflows to 0 below about 1e-154).
        for sigma in [1e-200, 1e-310, 1e-12, 0.05] {
            let spec = ModelSpec::Gaussian {
                sigma,
                p_occ: 0.8,
                p_free: 0.35,
                cutoff: 3.0,
            };
            assert_eq!(hit_probability(&spec, 2.0, 2.0), 0.8, "{sigma}");
            let m = PreparedModel::new(spec);
            assert!(
                (m.hit_increment(2.0, 2.0) - logit(0.8)).abs() < 1e-4,
                "{sigma}"
            );
            assert!(
                (m.hit_increment(1.0, 2.0) - logit(0.35)).abs() < 1e-12,
                "{sigma}"
            );
        }
    }
}
