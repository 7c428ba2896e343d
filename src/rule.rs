//! The contract's cell update (section 6), in one place: every fusion path, the fast rebuild,
//! the plain loop, the footprint probe and the cell history, updates a cell through here.
//!
//! - `EveryBeam`: l = clamp(l + increment, min, max) at once, for each beam ([`CellBounds::update`]).
//! - `OncePerCell`: within a frame, a cell takes the largest increment it received if any was
//!   positive, else the smallest ([`Strongest`], [`once_per_cell`]); then the same update.
//!
//! Values and increments are f32 log-odds, as the grid stores them.

use crate::logodds::Clamp;

/// A cell's bounds as the grid applies them: f32 log-odds, `lo < 0 < hi`.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct CellBounds {
    /// Lower bound, log-odds.
    pub lo: f32,
    /// Upper bound, log-odds.
    pub hi: f32,
}

impl From<Clamp> for CellBounds {
    /// A profile's clamp as the grid applies it (rounded to f32).
    fn from(c: Clamp) -> Self {
        CellBounds {
            lo: c.min as f32,
            hi: c.max as f32,
        }
    }
}

impl CellBounds {
    /// The contract's update: the value plus the increment, clamped to the bounds. Written as two
    /// comparisons (values are never NaN), which compile to one max and one min instruction.
    #[inline(always)]
    pub fn update(self, value: f32, increment: f32) -> f32 {
        let s = value + increment;
        let s = if s < self.lo { self.lo } else { s };
        if s > self.hi { self.hi } else { s }
    }

    /// [`CellBounds::update`] for a negative increment on a value known to be at most `hi`:
    /// then `value + increment <= value <= hi` (rounding to nearest never rounds a sum past an
    /// operand it is below), so the upper comparison cannot bite and this gives the same bits.
    #[inline(always)]
    pub fn update_below_hi(self, value: f32, negative: f32) -> f32 {
        let s = value + negative;
        if s < self.lo { self.lo } else { s }
    }

    /// Whether the update of `value` by `increment` was cut short by the bounds.
    pub fn cuts(self, value: f32, increment: f32) -> bool {
        self.update(value, increment) != value + increment
    }

    /// How many consecutive updates by `increment` take a cell from the opposite bound to
    /// strictly the other side of l = 0 (p = 0.5); `None` when the increment is zero or never
    /// gets there within a million updates.
    pub fn readings_to_flip(self, increment: f32) -> Option<u32> {
        let (mut l, crossed): (f32, fn(f32) -> bool) = if increment < 0.0 {
            (self.hi, |l| l < 0.0)
        } else if increment > 0.0 {
            (self.lo, |l| l > 0.0)
        } else {
            return None;
        };
        (1..=1_000_000u32).find(|_| {
            l = self.update(l, increment);
            crossed(l)
        })
    }
}

/// OncePerCell's choice (contract section 6) for a cell whose largest increment of a frame is
/// `max` and smallest `min`: the largest when it is positive, else the smallest.
#[inline(always)]
pub fn once_per_cell(max: f32, min: f32) -> f32 {
    if max > 0.0 { max } else { min }
}

/// The strongest increments one cell received within one frame, each with where it came from
/// (`S`: a beam, or nothing), for OncePerCell.
#[derive(Clone, Copy, Debug)]
pub struct Strongest<S> {
    max: f32,
    max_from: S,
    min: f32,
    min_from: S,
}

impl<S: Copy> Strongest<S> {
    /// The first increment of the frame.
    pub fn new(increment: f32, from: S) -> Self {
        Strongest {
            max: increment,
            max_from: from,
            min: increment,
            min_from: from,
        }
    }

    /// Another increment; only a strictly larger (smaller) one replaces the largest (smallest),
    /// so among equals the first received is kept.
    #[inline(always)]
    pub fn add(&mut self, increment: f32, from: S) {
        if increment > self.max {
            self.max = increment;
            self.max_from = from;
        }
        if increment < self.min {
            self.min = increment;
            self.min_from = from;
        }
    }

    /// The increment the cell takes, by [`once_per_cell`], and where it came from.
    pub fn chosen(&self) -> (f32, S) {
        let inc = once_per_cell(self.max, self.min);
        // When the largest is not chosen but equals the smallest, every increment was equal
        // and both came from the first.
        let from = if inc == self.max {
            self.max_from
        } else {
            self.min_from
        };
        (inc, from)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    const B: CellBounds = CellBounds { lo: -2.0, hi: 3.5 };

    #[test]
    fn update_adds_and_clamps() {
        assert_eq!(B.update(3.0, 1.0), 3.5);
        assert_eq!(B.update(-1.5, -1.0), -2.0);
        assert_eq!(B.update(0.0, 1.0), 1.0);
        assert!(B.cuts(3.0, 1.0) && !B.cuts(0.0, 1.0));
        // From 3.5, updates of -1.0 reach -0.5 after 4 steps (2.5, 1.5, 0.5, -0.5).
        assert_eq!(B.readings_to_flip(-1.0), Some(4));
        // From -2.0, updates of +0.85 are past 0 after 3 steps (0.55).
        assert_eq!(B.readings_to_flip(0.85), Some(3));
        assert_eq!(B.readings_to_flip(0.0), None);
    }

    #[test]
    fn the_free_shortcut_gives_the_same_bits_below_the_upper_bound() {
        // Exhaustive over a spread of values at or below hi and negative increments.
        let mut v = -3.0f32;
        while v <= B.hi {
            for inc in [-1e-7f32, -0.05, -0.4055, -1.0, -7.5] {
                assert_eq!(
                    B.update_below_hi(v, inc).to_bits(),
                    B.update(v, inc).to_bits()
                );
            }
            v += 0.0137;
        }
    }

    #[test]
    fn once_per_cell_takes_the_largest_if_positive_else_the_smallest() {
        assert_eq!(once_per_cell(0.8, -0.4), 0.8);
        assert_eq!(once_per_cell(-0.1, -0.4), -0.4);
        assert_eq!(once_per_cell(0.0, -0.4), -0.4);
        let mut s = Strongest::new(-0.4, 'a');
        s.add(0.8, 'b');
        s.add(0.8, 'c');
        s.add(-0.9, 'd');
        assert_eq!(s.chosen(), (0.8, 'b'));
        let mut s = Strongest::new(-0.4, 'a');
        s.add(-0.9, 'b');
        s.add(-0.9, 'c');
        assert_eq!(s.chosen(), (-0.9, 'b'));
    }

    use proptest::prelude::*;

    /// Increments of one cell in a frame, and the same increments in another order.
    fn increments_and_a_permutation() -> impl Strategy<Value = (Vec<f32>, Vec<f32>)> {
        proptest::collection::vec(-3.0f32..3.0, 1..12)
            .prop_flat_map(|v| (Just(v.clone()), Just(v).prop_shuffle()))
    }

    proptest! {
        /// The contract lets OncePerCell's choice ignore the order of a frame's beams: the
        /// increment chosen from any permutation of the same increments is the same.
        #[test]
        fn once_per_cell_ignores_the_order_of_a_frames_beams(
            (incs, other) in increments_and_a_permutation()
        ) {
            let choose = |v: &[f32]| {
                let mut s = Strongest::new(v[0], ());
                v[1..].iter().for_each(|&x| s.add(x, ()));
                s.chosen().0
            };
            prop_assert_eq!(choose(&incs).to_bits(), choose(&other).to_bits());
        }
    }
}
