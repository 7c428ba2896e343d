//! Where a job's cells go: straight into the grid under EveryBeam ([`Apply`]), or into a
//! frame's strongest increments per cell under OncePerCell ([`FrameBest`]). Both update cells
//! only through the contract's rule ([`crate::rule`]).

use super::Cells;
use crate::rule::{CellBounds, once_per_cell};

/// Where the cells of a beam go, by grid index: stretches of cells that all get the free
/// increment, and single cells.
pub(super) trait Sink {
    /// `count` cells from `start`, `stride` apart, each getting `free`, a free increment
    /// (logit(p_free) < 0: the parameters require p_free < 0.5).
    fn free_run(&mut self, start: usize, stride: usize, count: usize, free: f32);
    /// One cell getting the free increment `free` (< 0).
    fn free_cell(&mut self, i: usize, free: f32);
    /// One cell getting `inc`.
    fn cell(&mut self, i: usize, inc: f32);
}

/// EveryBeam: add and clamp at once. With `BELOW_HI`, every cell of the grid is known to be
/// at most `hi`, so a free (negative) increment can only meet the lower bound:
/// max(lo, v + free) equals the full clamp bit for bit (v + free <= v <= hi when rounding
/// to nearest), and the upper comparison is left out of the commonest update.
pub(super) struct Apply<const BELOW_HI: bool> {
    pub cells: Cells,
    pub bounds: CellBounds,
}

impl<const BELOW_HI: bool> Apply<BELOW_HI> {
    #[inline(always)]
    fn add_free(&self, v: &mut f32, free: f32) {
        *v = if BELOW_HI {
            self.bounds.update_below_hi(*v, free)
        } else {
            self.bounds.update(*v, free)
        };
    }
}

impl<const BELOW_HI: bool> Sink for Apply<BELOW_HI> {
    #[inline(always)]
    fn free_run(&mut self, start: usize, stride: usize, count: usize, free: f32) {
        if stride == 1 {
            // SAFETY: the stretch lies inside the running tile (clipped by `ray_in_tile`).
            let cells = unsafe { std::slice::from_raw_parts_mut(self.cells.0.add(start), count) };
            for v in cells {
                self.add_free(v, free);
            }
        } else {
            for k in 0..count {
                // SAFETY: as above, every cell of the stretch is in the tile.
                let v = unsafe { &mut *self.cells.0.add(start + k * stride) };
                self.add_free(v, free);
            }
        }
    }

    #[inline(always)]
    fn free_cell(&mut self, i: usize, free: f32) {
        // SAFETY: `ray_in_tile` only sends cells of the running tile.
        let v = unsafe { &mut *self.cells.0.add(i) };
        self.add_free(v, free);
    }

    #[inline(always)]
    fn cell(&mut self, i: usize, inc: f32) {
        // SAFETY: `ray_in_tile` and `job_in_tile` only send cells of the running tile.
        let v = unsafe { &mut *self.cells.0.add(i) };
        *v = self.bounds.update(*v, inc);
    }
}

/// OncePerCell: each cell's largest and smallest increment of the current frame, in arrays
/// over the rows of one tile (indexed by grid index minus the tile's first row), with the
/// cells the frame touched listed in order. A frame number per cell tells which entries belong
/// to the current frame, so nothing is cleared between frames; the arrays are reused for every
/// tile a thread runs.
#[derive(Default)]
pub(super) struct FrameBest {
    base: usize,
    frame: Vec<u32>,
    max: Vec<f32>,
    min: Vec<f32>,
    touched: Vec<usize>,
    now: u32,
}

impl FrameBest {
    /// Makes the arrays cover grid indices `base..base + len`.
    pub fn cover(&mut self, base: usize, len: usize) {
        self.base = base;
        if self.frame.len() < len {
            // Fresh zeroed arrays (pages the system zeroes when first touched); frame number
            // 0 is never current.
            self.frame = vec![0; len];
            self.max = vec![0.0; len];
            self.min = vec![0.0; len];
        }
    }

    /// Starts a frame: no cell has an increment yet.
    pub fn next_frame(&mut self) {
        self.touched.clear();
        self.now = self.now.wrapping_add(1);
        if self.now == 0 {
            // After 2^32 frames the numbers come round: forget them all.
            self.frame.fill(0);
            self.now = 1;
        }
    }

    /// The cells of the frame, in the order first touched, with the contract's choice of
    /// increment ([`once_per_cell`]).
    pub fn chosen(&self) -> impl Iterator<Item = (usize, f32)> + '_ {
        self.touched
            .iter()
            .map(|&k| (self.base + k, once_per_cell(self.max[k], self.min[k])))
    }
}

impl Sink for FrameBest {
    fn free_run(&mut self, start: usize, stride: usize, count: usize, free: f32) {
        for k in 0..count {
            self.cell(start + k * stride, free);
        }
    }

    #[inline(always)]
    fn free_cell(&mut self, i: usize, free: f32) {
        self.cell(i, free);
    }

    #[inline(always)]
    fn cell(&mut self, i: usize, inc: f32) {
        let k = i - self.base;
        if self.frame[k] != self.now {
            self.frame[k] = self.now;
            self.max[k] = inc;
            self.min[k] = inc;
            self.touched.push(k);
        } else {
            // As `Strongest::add`: replace only on a strictly larger (smaller) increment.
            if inc > self.max[k] {
                self.max[k] = inc;
            }
            if inc < self.min[k] {
                self.min[k] = inc;
            }
        }
    }
}
