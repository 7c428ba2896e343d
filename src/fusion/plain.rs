//! The plain loop: one beam at a time, one cell at a time, through the same footprint function
//! the inspection tools use. It is the reference the fast rebuild is tested against, bit for
//! bit, and it counts updates for the benchmark.

use super::MapBuilder;
use crate::grid::Grid;
use crate::params::FusionRule;
use crate::rule::Strongest;
use std::collections::{HashMap, HashSet};
use std::hash::{BuildHasherDefault, Hasher};
use std::ops::Range;

/// Hasher for grid indices in the per-frame OncePerCell scratch map: one multiplication.
#[derive(Default)]
struct IndexHasher(u64);

impl Hasher for IndexHasher {
    fn finish(&self) -> u64 {
        self.0
    }
    fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 = (self.0 << 8 | b as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
        }
    }
    fn write_usize(&mut self, i: usize) {
        self.0 = (i as u64).wrapping_mul(0x9E37_79B9_7F4A_7C15);
    }
}

/// Each touched cell's strongest increments of one frame, by grid index.
type FrameScratch = HashMap<usize, Strongest<()>, BuildHasherDefault<IndexHasher>>;

impl MapBuilder {
    /// Integrates frames with the plain loop (see the module notes).
    pub fn integrate_plain(&self, grid: &mut Grid, frames: Range<usize>) {
        assert_eq!(grid.spec(), &self.spec, "grid from another builder");
        let end = frames.end.min(self.session.frames.len());
        let mut scratch = FrameScratch::default();
        for f in frames.start.min(end)..end {
            self.apply_frame(grid.values_mut(), f, &mut scratch);
        }
    }

    fn apply_frame(&self, values: &mut [f32], f: usize, scratch: &mut FrameScratch) {
        match self.params.fusion {
            FusionRule::EveryBeam => {
                self.for_each_beam_touch(f, |_, _, idx, inc| {
                    values[idx] = self.bounds.update(values[idx], inc);
                });
            }
            FusionRule::OncePerCell => {
                scratch.clear();
                self.for_each_beam_touch(f, |_, _, idx, inc| {
                    scratch
                        .entry(idx)
                        .and_modify(|s| s.add(inc, ()))
                        .or_insert_with(|| Strongest::new(inc, ()));
                });
                for (&idx, s) in scratch.iter() {
                    values[idx] = self.bounds.update(values[idx], s.chosen().0);
                }
            }
        }
    }

    /// Number of cell updates that integrating `frames` applies (under OncePerCell: distinct
    /// cells per frame). Counted in parallel over frames.
    pub fn update_count(&self, frames: Range<usize>) -> u64 {
        use rayon::prelude::*;
        let end = frames.end.min(self.session.frames.len());
        (frames.start.min(end)..end)
            .into_par_iter()
            .map(|f| match self.params.fusion {
                FusionRule::EveryBeam => {
                    let mut n = 0u64;
                    self.for_each_beam_touch(f, |_, _, _, _| n += 1);
                    n
                }
                FusionRule::OncePerCell => {
                    let mut cells = HashSet::new();
                    self.for_each_beam_touch(f, |_, _, idx, _| {
                        cells.insert(idx);
                    });
                    cells.len() as u64
                }
            })
            .sum()
    }
}
