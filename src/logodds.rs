//! Log-odds arithmetic of the binary Bayes filter that every grid cell runs.
//!
//! A cell holds l = ln(p / (1 - p)); fusing an independent reading is an addition of the
//! reading's own log-odds, and the sum is clamped to [min, max] so a cell can always change
//! its mind again. Conversions never produce probabilities of exactly 0 or 1 from finite
//! log-odds.

use serde::{Deserialize, Serialize};

/// Log-odds ln(p / (1 - p)) of a probability `p` in (0, 1).
pub fn logit(p: f64) -> f64 {
    (p / (1.0 - p)).ln()
}

/// Probability of a log-odds value: 1 / (1 + e^-l).
pub fn probability(l: f64) -> f64 {
    1.0 / (1.0 + (-l).exp())
}

/// Bounds on a cell's value, in log-odds, with `min < 0 < max`.
#[derive(Clone, Copy, Debug, PartialEq, Serialize, Deserialize)]
pub struct Clamp {
    /// Lower bound, log-odds (negative: the most "free" a cell may become).
    pub min: f64,
    /// Upper bound, log-odds (positive: the most "occupied" a cell may become).
    pub max: f64,
}

impl Default for Clamp {
    fn default() -> Self {
        Self {
            min: -2.0,
            max: 3.5,
        }
    }
}

impl Clamp {
    /// Adds `increment` to `value` and clamps the sum, all in log-odds (f32, as the grid stores).
    /// Written as two comparisons (values are never NaN), which compile to one min and one max
    /// instruction; every fusion path uses this one function so they agree bit for bit.
    #[inline(always)]
    pub fn apply(lo: f32, hi: f32, value: f32, increment: f32) -> f32 {
        let s = value + increment;
        let s = if s < lo { lo } else { s };
        if s > hi { hi } else { s }
    }

    /// The bounds as f32, as the grid's update loop uses them.
    pub fn bounds_f32(&self) -> (f32, f32) {
        (self.min as f32, self.max as f32)
    }

    /// How many consecutive identical readings of log-odds `increment` take a cell from the
    /// opposite bound across 0.5 (to strictly the other side of l = 0). `None` when the
    /// increment points the wrong way or is zero.
    pub fn readings_to_flip(&self, increment: f64) -> Option<u32> {
        let start = if increment < 0.0 {
            self.max
        } else if increment > 0.0 {
            self.min
        } else {
            return None;
        };
        // Smallest n with start + n * increment strictly past 0, applied step by step with
        // clamping (the clamp never bites on the way across because the start is a bound).
        let mut l = start;
        for n in 1..=1_000_000u32 {
            l = (l + increment).clamp(self.min, self.max);
            if (increment < 0.0 && l < 0.0) || (increment > 0.0 && l > 0.0) {
                return Some(n);
            }
        }
        None
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn round_trip_probability_logodds() {
        for k in 1..1000 {
            let p = k as f64 / 1000.0;
            assert!((probability(logit(p)) - p).abs() < 1e-12, "p = {p}");
        }
        for k in -400..400 {
            let l = k as f64 / 20.0;
            // Near p = 1 the round trip loses digits in 1 - p: allow 1e-6 out to l = 20.
            assert!((logit(probability(l)) - l).abs() < 1e-6, "l = {l}");
        }
        assert_eq!(logit(0.5), 0.0);
    }

    #[test]
    fn repeated_readings_of_0_6_from_even_prior() {
        // Common practice, no source: four readings of p = 0.6 from a prior of 0.5 give
        // 0.6, 0.6923, 0.7714, 0.8351 (odds 1.5^n).
        let expected = [0.6, 0.6923, 0.7714, 0.8351];
        let mut l = logit(0.5);
        for want in expected {
            l += logit(0.6);
            assert!(
                (probability(l) - want).abs() < 5e-5,
                "{} vs {want}",
                probability(l)
            );
        }
    }

    #[test]
    fn textbook_door_measurement_updates() {
        // Thrun, Burgard & Fox, Probabilistic Robotics (2005), ch. 2, the door example
        // (values from memory): p(sense_open | open) = 0.6, p(sense_open | closed) = 0.2.
        // From bel(open) = 0.5 one "sense open" gives 0.75; after the "push" prediction
        // bel_bar(open) = 0.95, a second "sense open" gives 0.983.
        let measurement = (0.6f64 / 0.2).ln();
        let first = probability(logit(0.5) + measurement);
        assert!((first - 0.75).abs() < 1e-12);
        let second = probability(logit(0.95) + measurement);
        assert!((second - 0.983).abs() < 5e-4, "{second}");
    }

    #[test]
    fn clamp_bounds_the_sum_and_counts_flips() {
        assert_eq!(Clamp::apply(-2.0, 3.5, 3.0, 1.0), 3.5);
        assert_eq!(Clamp::apply(-2.0, 3.5, -1.5, -1.0), -2.0);
        assert_eq!(Clamp::apply(-2.0, 3.5, 0.0, 1.0), 1.0);
        let c = Clamp {
            min: -2.0,
            max: 3.5,
        };
        // From 3.5, readings of -1.0 reach -0.5 after 4 steps (2.5, 1.5, 0.5, -0.5).
        assert_eq!(c.readings_to_flip(-1.0), Some(4));
        // From -2.0, readings of +0.85 reach 0.55 after 3 steps.
        assert_eq!(c.readings_to_flip(0.85), Some(3));
        assert_eq!(c.readings_to_flip(0.0), None);
    }
}
