//! gridscope's default profile, from a stated rule rather than from habit.
//!
//! The default model is the contract's example Gaussian (sigma 5 cm, one cell at the default
//! 5 cm resolution; p_occ 0.8 at the reading, p_free 0.35 in front; reach three sigma past the
//! reading). The clamp bounds then follow from how quickly a saturated cell must be able to
//! change its mind under that model:
//!
//! - an obstacle that appears (a person stepping in, a pallet set down) must show after
//!   [`HITS_TO_OCCUPY`] = 2 consistent hits on a cell at the lower bound: one hit can be a
//!   spurious return, two consistent ones rarely are;
//! - an obstacle that goes (a door opening, a pallet taken away) must clear after
//!   [`PASSES_TO_FREE`] = 5 consistent free readings on a cell at the upper bound: more than
//!   for appearing, because free evidence comes from every beam passing through a cell while
//!   occupied evidence only from beams ending on it, and a thin obstacle (a pole, a chair leg)
//!   is passed by some beams without having moved. Five passes are half a second of a 10 Hz
//!   scanner.
//!
//! A bound is placed half-way between the values that give N - 1 and N readings, so that
//! rounding it to two decimals (as profiles show it) keeps the count: upper bound
//! (N - 1/2) |logit(p_free)|, lower bound -(M - 1/2) logit(p_occ). For the default model that
//! is clamp (min -2.08, max 2.79).

use super::ModelSpec;
use crate::logodds::{Clamp, logit};

/// Consistent hits that take a cell from the lower bound to occupied (p > 0.5).
pub const HITS_TO_OCCUPY: u32 = 2;

/// Consistent free readings that take a cell from the upper bound to free (p < 0.5).
pub const PASSES_TO_FREE: u32 = 5;

/// The default inverse model.
pub const MODEL: ModelSpec = ModelSpec::Gaussian {
    sigma: 0.05,
    p_occ: 0.8,
    p_free: 0.35,
    cutoff: 3.0,
};

/// The clamp bounds the rule gives a model, rounded to two decimals: a saturated cell flips
/// after `passes` consistent free readings (from the upper bound) and after `hits`
/// consistent hits at the peak (from the lower bound).
pub fn clamp_for(model: &ModelSpec, hits: u32, passes: u32) -> Clamp {
    let round = |v: f64| (v * 100.0).round() / 100.0;
    Clamp {
        min: round(-(hits as f64 - 0.5) * logit(model.p_occ())),
        max: round((passes as f64 - 0.5) * -logit(model.p_free())),
    }
}

/// The default clamp: [`clamp_for`] the default model with the default counts.
pub fn clamp() -> Clamp {
    clamp_for(&MODEL, HITS_TO_OCCUPY, PASSES_TO_FREE)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::rule::CellBounds;

    #[test]
    fn the_default_clamp_keeps_the_rule_after_rounding() {
        let c = clamp();
        assert_eq!((c.min, c.max), (-2.08, 2.79));
        // Counted with the grid's own update (f32), not the algebra above.
        let b = CellBounds::from(c);
        let (l_occ, l_free) = (logit(MODEL.p_occ()) as f32, logit(MODEL.p_free()) as f32);
        assert_eq!(b.readings_to_flip(l_occ), Some(HITS_TO_OCCUPY));
        assert_eq!(b.readings_to_flip(l_free), Some(PASSES_TO_FREE));
        // Other models and counts too.
        for (p_occ, p_free) in [(0.65, 0.42), (0.9, 0.2), (0.6, 0.45)] {
            let m = ModelSpec::Band {
                thickness: 0.1,
                p_occ,
                p_free,
            };
            for (hits, passes) in [(1, 1), (2, 5), (3, 11)] {
                let b = CellBounds::from(clamp_for(&m, hits, passes));
                let (lo, lf) = (logit(p_occ) as f32, logit(p_free) as f32);
                assert_eq!(b.readings_to_flip(lo), Some(hits), "{p_occ} {hits}");
                assert_eq!(b.readings_to_flip(lf), Some(passes), "{p_free} {passes}");
            }
        }
    }
}
