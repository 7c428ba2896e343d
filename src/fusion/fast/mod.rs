//! The fast rebuild: the same rule as the plain loop, bit for bit, split across threads.
//!
//! Clamping makes the order of a cell's updates matter, so threads cannot share cells. The
//! grid is cut into square tiles; each tile takes every beam of a chunk of frames that can
//! reach it, in the contract's order, and writes only its own cells, so every cell still sees
//! its updates in order whichever thread runs the tile. A beam's walk enters a tile part-way
//! along its segment, which reproduces the sequential walk exactly because crossing
//! parameters are computed from cell indices (see [`crate::footprint`]).
//!
//! On one thread there is a single tile, the rows of the grid a frame's beams reach, and each
//! frame's beams are prepared and applied at once, while they are in cache. On several
//! threads, beams are prepared once per chunk and shared by all tiles ([`jobs`]); the tiles
//! with the most beams go first to whichever thread is free, and the next chunk is prepared
//! while the current one runs. How a job's cells are found inside a tile is in [`walk`], what
//! happens to them in [`sinks`]; `docs/fast-rebuild.md` states the invariants.

mod jobs;
mod sinks;
mod walk;

use super::MapBuilder;
use crate::params::FusionRule;
use jobs::{Job, Span};
use rayon::prelude::*;
use sinks::{Apply, FrameBest};
use std::ops::Range;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Side of a tile, cells, when running in parallel (a power of two).
const TILE: i64 = 256;
const _: () = assert!(TILE.count_ones() == 1, "TILE must be a power of two");

/// Beams prepared per chunk (bounds memory; a chunk is shared by all tiles).
const CHUNK_BEAMS: usize = 1 << 17;

/// A rectangle of cells: rows `r0..r1`, columns `c0..c1`.
#[derive(Clone, Copy, Debug)]
pub(super) struct Tile {
    r0: i64,
    r1: i64,
    c0: i64,
    c1: i64,
}

/// The grid's values, written by tiles that never share a cell.
#[derive(Clone, Copy)]
pub(super) struct Cells(*mut f32);

// SAFETY: `Cells` is only dereferenced at indices of cells inside the tile a task owns, and
// each tile of a chunk is owned by exactly one task (see `integrate_fast`). What a hostile file
// controls (poses, mounts, angles, ranges, the extent within the cell budget) only decides
// which cells a beam's walk visits; every index written is the walk's cell clipped to the
// running tile's rows and columns (`RayWalk::enter_box`, the counts taken inside the tile, the
// cone's rows and columns), and the tile lies inside the grid the values were sized for.
unsafe impl Send for Cells {}
unsafe impl Sync for Cells {}

/// A prepared chunk of frames: job slots and the tiles they can reach (frame k owns slots
/// `slot_ends[k - 1]..slot_ends[k]` and fills the first `counts[k]` of them), and each tile's
/// list, in order, of the jobs that can reach it. The buffers are reused from chunk to chunk.
#[derive(Default)]
struct Chunk {
    jobs: Vec<Job>,
    spans: Vec<Span>,
    slot_ends: Vec<usize>,
    counts: Vec<usize>,
    lists: Vec<Vec<u32>>,
}

impl MapBuilder {
    /// Applies one tile's share of a chunk: `list` holds, in order, the jobs that can reach the
    /// tile; `frame_ends[k]` is the end of frame k's job slots. `below_hi`: no cell of the
    /// grid is above the upper clamp bound.
    ///
    /// # Safety
    /// `cells` must point at the grid's values, and no other thread may touch cells of `tile`
    /// while this runs.
    #[allow(clippy::too_many_arguments)]
    unsafe fn run_tile(
        &self,
        list: &[u32],
        frame_ends: &[usize],
        jobs: &[Job],
        tile: Tile,
        cells: Cells,
        below_hi: bool,
        scratch: &mut FrameBest,
    ) {
        let bounds = self.bounds;
        match self.params.fusion {
            FusionRule::EveryBeam if below_hi => {
                self.jobs_in_tile(list, jobs, tile, &mut Apply::<true> { cells, bounds })
            }
            FusionRule::EveryBeam => {
                self.jobs_in_tile(list, jobs, tile, &mut Apply::<false> { cells, bounds })
            }
            FusionRule::OncePerCell => {
                // Frame by frame: collect each cell's strongest increment, then apply it.
                let w = self.spec.width as usize;
                scratch.cover(tile.r0 as usize * w, (tile.r1 - tile.r0) as usize * w);
                let mut k = 0;
                let mut frame = 0;
                while k < list.len() {
                    while frame_ends[frame] <= list[k] as usize {
                        frame += 1;
                    }
                    scratch.next_frame();
                    while k < list.len() && (list[k] as usize) < frame_ends[frame] {
                        self.job_in_tile(&jobs[list[k] as usize], tile, scratch);
                        k += 1;
                    }
                    for (i, inc) in scratch.chosen() {
                        // SAFETY: `i` is a cell of this tile (the sink only receives those).
                        let v = unsafe { &mut *cells.0.add(i) };
                        *v = bounds.update(*v, inc);
                    }
                }
            }
        }
    }

    /// Integrates frames onto `values` (row-major, the builder's grid): in parallel tiles on
    /// the current rayon pool when `parallel`, else as one tile. `after_chunk(frames_done)` is
    /// called between chunks and returns false to stop.
    pub(in crate::fusion) fn integrate_fast(
        &self,
        values: &mut [f32],
        frames: Range<usize>,
        parallel: bool,
        after_chunk: &mut dyn FnMut(usize) -> bool,
    ) {
        let w = self.spec.width as i64;
        let h = self.spec.height as i64;
        assert_eq!(
            values.len(),
            (w * h) as usize,
            "values of this builder's grid"
        );
        // The frames of each chunk: about CHUNK_BEAMS beams.
        let mut chunks: Vec<Range<usize>> = Vec::new();
        let mut total_beams = 0;
        let mut f = frames.start;
        while f < frames.end {
            let mut end = f;
            let mut beams = 0;
            while end < frames.end && (end == f || beams < CHUNK_BEAMS) {
                beams += self.frame_slots(end);
                end += 1;
            }
            chunks.push(f..end);
            total_beams += beams;
            f = end;
        }
        // Whether every cell is at most the upper bound (true unless the prior lies above it
        // and some cells are untouched, or the grid came from elsewhere). Finding out is a
        // pass over the grid (in blocks, so that it runs in vector instructions), which pays
        // only when the frames bring more updates than the grid has cells: a beam updates a
        // hundred cells or so, so at least one beam per 64 cells.
        let hi = self.bounds.hi;
        let below_hi = total_beams >= values.len() / 64
            && values
                .chunks(4096)
                .all(|b| b.iter().fold(true, |ok, &v| ok & (v <= hi)));
        let cells = Cells(values.as_mut_ptr());
        if !parallel {
            // One thread, one tile: each frame's jobs are prepared into one reused buffer and
            // applied at once, with no chunk to store. The tile is the rows of tiles the
            // frame's jobs can reach (so that OncePerCell's arrays cover those, not the grid).
            let (mut jobs, mut spans, mut list) = (Vec::new(), Vec::new(), Vec::new());
            let mut scratch = FrameBest::default();
            for range in &chunks {
                for f in range.clone() {
                    let slots = self.frame_slots(f);
                    if jobs.len() < slots {
                        jobs.resize(slots, Job::Skipped);
                        spans.resize(slots, Span::EMPTY);
                    }
                    let n = self.fill_frame_jobs(f, &mut jobs, &mut spans);
                    list.clear();
                    list.extend((0..n as u32).filter(|&j| !spans[j as usize].is_empty()));
                    let (ty0, ty1) = list.iter().fold((u32::MAX, 0), |(a, b), &j| {
                        let s = spans[j as usize];
                        (a.min(s.ty0), b.max(s.ty1))
                    });
                    if list.is_empty() {
                        continue;
                    }
                    let rows = Tile {
                        r0: ty0 as i64 * TILE,
                        r1: ((ty1 as i64 + 1) * TILE).min(h),
                        c0: 0,
                        c1: w,
                    };
                    // SAFETY: one task owns the whole grid.
                    unsafe {
                        self.run_tile(&list, &[n], &jobs, rows, cells, below_hi, &mut scratch)
                    };
                }
                if !after_chunk(range.end - frames.start) {
                    return;
                }
            }
            return;
        }
        let (tw, th) = ((w + TILE - 1) / TILE, (h + TILE - 1) / TILE);
        let tiles: Vec<Tile> = (0..th)
            .flat_map(|ty| {
                (0..tw).map(move |tx| Tile {
                    r0: ty * TILE,
                    r1: ((ty + 1) * TILE).min(h),
                    c0: tx * TILE,
                    c1: ((tx + 1) * TILE).min(w),
                })
            })
            .collect();
        // Prepares a chunk: every frame writes its jobs into its own slots, in parallel; then
        // each tile gets the list, in order, of the jobs that can reach it.
        let fill = |range: Range<usize>, c: &mut Chunk| {
            c.slot_ends.clear();
            let mut total = 0;
            for f in range.clone() {
                total += self.frame_slots(f);
                c.slot_ends.push(total);
            }
            if c.jobs.len() < total {
                c.jobs.resize(total, Job::Skipped);
                c.spans.resize(total, Span::EMPTY);
            }
            let mut slices = Vec::with_capacity(range.len());
            let (mut jobs, mut spans) = (&mut c.jobs[..total], &mut c.spans[..total]);
            let mut at = 0;
            for &end in &c.slot_ends {
                let (mine, others) = jobs.split_at_mut(end - at);
                let (my_spans, other_spans) = spans.split_at_mut(end - at);
                slices.push((mine, my_spans));
                (jobs, spans) = (others, other_spans);
                at = end;
            }
            range
                .into_par_iter()
                .zip(slices.into_par_iter())
                .map(|(f, (out, spans))| self.fill_frame_jobs(f, out, spans))
                .collect_into_vec(&mut c.counts);
            c.lists.resize_with(tiles.len(), Vec::new);
            c.lists.iter_mut().for_each(Vec::clear);
            let tw = tw as usize;
            for (k, &n) in c.counts.iter().enumerate() {
                let first = if k == 0 { 0 } else { c.slot_ends[k - 1] };
                for (j, s) in (first as u32..).zip(&c.spans[first..first + n]) {
                    if s.tx0 == s.tx1 && s.ty0 == s.ty1 {
                        // Most beams stay in one tile.
                        c.lists[s.ty0 as usize * tw + s.tx0 as usize].push(j);
                        continue;
                    }
                    // An empty span has no tile row.
                    for ty in s.ty0..s.ty1 + 1 {
                        let row = ty as usize * tw;
                        for list in &mut c.lists[row + s.tx0 as usize..=row + s.tx1 as usize] {
                            list.push(j);
                        }
                    }
                }
            }
        };
        // Runs a prepared chunk on its tiles, in parallel. The tiles with the longest lists
        // go first and each thread takes the next tile when it is free (so the chunk does not
        // end waiting on one busy tile that started late).
        let apply = |c: &Chunk| {
            let mut order: Vec<usize> = (0..tiles.len())
                .filter(|&t| !c.lists[t].is_empty())
                .collect();
            order.sort_by_key(|&t| std::cmp::Reverse(c.lists[t].len()));
            let taken = AtomicUsize::new(0);
            (0..rayon::current_num_threads())
                .into_par_iter()
                .for_each(|_| {
                    let mut scratch = FrameBest::default();
                    while let Some(&t) = order.get(taken.fetch_add(1, Ordering::Relaxed)) {
                        // SAFETY: tiles are disjoint and each is taken by exactly one thread.
                        unsafe {
                            self.run_tile(
                                &c.lists[t],
                                &c.slot_ends,
                                &c.jobs,
                                tiles[t],
                                cells,
                                below_hi,
                                &mut scratch,
                            )
                        };
                    }
                });
        };
        let (mut current, mut next) = (Chunk::default(), Chunk::default());
        let Some(first) = chunks.first() else { return };
        fill(first.clone(), &mut current);
        for k in 0..chunks.len() {
            // Apply chunk k while chunk k + 1 is prepared.
            match chunks.get(k + 1) {
                Some(r) => {
                    rayon::join(|| apply(&current), || fill(r.clone(), &mut next));
                }
                None => apply(&current),
            }
            std::mem::swap(&mut current, &mut next);
            if !after_chunk(chunks[k].end - frames.start) {
                return;
            }
        }
    }
}
