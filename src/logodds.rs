//! Log-odds arithmetic of the binary Bayes filter that every grid cell runs.
//!
//! A cell holds l = ln(p / (1 - p)); fusing an independent reading is an addition of the
//! reading's own log-odds, and the sum is clamped to [min, max] so a cell can always change
//! its mind again (the update itself is [`crate::rule`]). Conversions never produce
//! probabilities of exactly 0 or 1 from finite log-odds.

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
#[serde(deny_unknown_fields)]
pub struct Clamp {
    /// Lower bound, log-odds (negative: the most "free" a cell may become).
    pub min: f64,
    /// Upper bound, log-odds (positive: the most "occupied" a cell may become).
    pub max: f64,
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
}
