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
//! threads, beams are prepared once per chunk and shared by all tiles ([`jobs`]), and
//! [`schedule`] decides which tile applies which chunk when: each tile its chunks in order,
//! with no barrier between chunks, so tiles run ahead of the busy ones around the robot. How a
//! job's cells are found inside a tile is in [`walk`], what happens to them in [`sinks`];
//! `docs/fast-rebuild.md` states the invariants.

mod jobs;
pub(crate) mod schedule;
mod sinks;
mod walk;

use super::MapBuilder;
use crate::params::FusionRule;
use jobs::{Job, Span};
use schedule::{Board, Task, TaskTimes};
use sinks::{Apply, FrameBest};
use std::ops::Range;
use std::sync::{Condvar, Mutex, RwLock};
use std::time::Instant;

/// Side of a tile, cells, on one thread (where a frame's tile is whole rows of tiles) and
/// on a few (a power of two).
const TILE: i64 = 256;
const _: () = assert!(TILE.count_ones() == 1, "TILE must be a power of two");

/// Side of a tile, cells, on many threads: smaller tiles share out the cells around the robot,
/// where a chunk's beams crowd, at the cost of more beams that cross a tile edge.
const SMALL_TILE: i64 = 128;
const _: () = assert!(
    SMALL_TILE.count_ones() == 1,
    "SMALL_TILE must be a power of two"
);

/// Side of a tile for a parallel rebuild on `workers` threads, cells.
fn tile_side(workers: usize) -> i64 {
    if workers > 4 { SMALL_TILE } else { TILE }
}

/// Beams prepared per chunk (bounds memory; a chunk is shared by all tiles).
const CHUNK_BEAMS: usize = 1 << 17;

/// Chunks held at once by a parallel rebuild on `workers` threads: enough for tiles to run
/// several chunks ahead of a busy one, bounded in memory (a chunk's jobs take about 20 MB).
fn window_for(workers: usize) -> usize {
    (2 * workers).clamp(4, 16)
}

/// The grid's tiles of `side` cells, row by row.
fn tiles_of(w: i64, h: i64, side: i64) -> Vec<Tile> {
    let (tw, th) = ((w + side - 1) / side, (h + side - 1) / side);
    (0..th)
        .flat_map(|ty| {
            (0..tw).map(move |tx| Tile {
                r0: ty * side,
                r1: ((ty + 1) * side).min(h),
                c0: tx * side,
                c1: ((tx + 1) * side).min(w),
            })
        })
        .collect()
}

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
/// (`Cells` is `Send`, and a chunk holds plain data, so the buffers may sit in a lock.)
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

    /// The frames of each chunk (about [`CHUNK_BEAMS`] beams), and the beams in all.
    fn chunks_of(&self, frames: Range<usize>) -> (Vec<Range<usize>>, usize) {
        let mut chunks = Vec::new();
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
        (chunks, total_beams)
    }

    /// Prepares a chunk: every frame's jobs into its own slots, then each tile's list, in
    /// order, of the jobs that can reach it. Returns each tile's job count.
    fn fill_chunk(
        &self,
        range: Range<usize>,
        c: &mut Chunk,
        tiles: usize,
        tw: usize,
        shift: u32,
    ) -> Vec<u32> {
        c.slot_ends.clear();
        c.counts.clear();
        let mut total = 0;
        for f in range.clone() {
            total += self.frame_slots(f);
            c.slot_ends.push(total);
        }
        if c.jobs.len() < total {
            c.jobs.resize(total, Job::Skipped);
            c.spans.resize(total, Span::EMPTY);
        }
        let mut at = 0;
        for (f, &end) in range.zip(&c.slot_ends) {
            let n = self.fill_frame_jobs(f, &mut c.jobs[at..end], &mut c.spans[at..end], shift);
            c.counts.push(n);
            at = end;
        }
        c.lists.resize_with(tiles, Vec::new);
        c.lists.iter_mut().for_each(Vec::clear);
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
        c.lists.iter().map(|l| l.len() as u32).collect()
    }

    /// Runs the chunks on the tiles under [`schedule`]'s rules on `workers` threads: the
    /// calling thread and `workers - 1` tasks of the current rayon pool (a worker that never
    /// starts costs nothing: any worker can run any task). Only the calling thread calls
    /// `after_chunk`, as chunks complete. With `times`, each task's time is recorded.
    #[allow(clippy::too_many_arguments)]
    fn run_schedule(
        &self,
        chunks: &[Range<usize>],
        side: i64,
        cells: Cells,
        below_hi: bool,
        workers: usize,
        window: usize,
        start: usize,
        after_chunk: &mut dyn FnMut(usize) -> bool,
        times: Option<&Mutex<TaskTimes>>,
    ) {
        let (w, h) = (self.spec.width as i64, self.spec.height as i64);
        let tiles = &tiles_of(w, h, side)[..];
        let tw = ((w + side - 1) / side) as usize;
        let shift = side.trailing_zeros();
        let buffers: Vec<RwLock<Chunk>> = (0..window.min(chunks.len()).max(1))
            .map(|_| RwLock::new(Chunk::default()))
            .collect();
        // The board, and whether to stop (asked by `after_chunk`).
        let state = Mutex::new((Board::new(chunks.len(), tiles.len(), buffers.len()), false));
        let changed = Condvar::new();
        let lock = || state.lock().unwrap_or_else(|e| e.into_inner());
        // Runs tasks until the board is finished or stopped; `report` is called by the
        // calling thread's loop with the chunks completed so far.
        let work = |report: &mut dyn FnMut(usize) -> bool| {
            let mut scratch = FrameBest::default();
            let mut reported = 0;
            let mut guard = lock();
            loop {
                if guard.0.completed() > reported {
                    reported = guard.0.completed();
                    drop(guard);
                    if !report(reported) {
                        lock().1 = true;
                        changed.notify_all();
                    }
                    guard = lock();
                    continue;
                }
                if guard.1 || guard.0.finished() {
                    return;
                }
                let Some(task) = guard.0.pick() else {
                    if guard.0.finished() || guard.0.completed() > reported {
                        // Picking passed empty lists and so completed chunks: say so.
                        changed.notify_all();
                    } else {
                        guard = changed.wait(guard).unwrap_or_else(|e| e.into_inner());
                    }
                    continue;
                };
                drop(guard);
                let began = Instant::now();
                match task {
                    Task::Prepare { chunk, slot } => {
                        let mut c = buffers[slot].write().unwrap_or_else(|e| e.into_inner());
                        let lens =
                            self.fill_chunk(chunks[chunk].clone(), &mut c, tiles.len(), tw, shift);
                        drop(c);
                        if let Some(t) = times {
                            let mut t = t.lock().unwrap_or_else(|e| e.into_inner());
                            t.prepare[chunk] = began.elapsed().as_secs_f64();
                            for (a, &n) in t.apply[chunk].iter_mut().zip(&lens) {
                                a.0 = n;
                            }
                        }
                        guard = lock();
                        guard.0.prepared(chunk, lens);
                    }
                    Task::Tile { tile, chunk, slot } => {
                        let c = buffers[slot].read().unwrap_or_else(|e| e.into_inner());
                        // SAFETY: tiles are disjoint, and the board gives a tile to one task
                        // at a time.
                        unsafe {
                            self.run_tile(
                                &c.lists[tile],
                                &c.slot_ends,
                                &c.jobs,
                                tiles[tile],
                                cells,
                                below_hi,
                                &mut scratch,
                            )
                        };
                        drop(c);
                        if let Some(t) = times {
                            let mut t = t.lock().unwrap_or_else(|e| e.into_inner());
                            t.apply[chunk][tile].1 = began.elapsed().as_secs_f64();
                        }
                        guard = lock();
                        guard.0.applied(tile, chunk);
                    }
                }
                changed.notify_all();
            }
        };
        // In place: the calling thread runs its share here (and alone reports progress).
        rayon::in_place_scope(|s| {
            for _ in 1..workers {
                s.spawn(|_| work(&mut |_| true));
            }
            work(&mut |done| after_chunk(chunks[done - 1].end - start));
        });
    }

    /// Runs the parallel route over every frame on one worker and returns each task's time,
    /// for [`schedule::simulate`] to tell what many cores would make of it (the grid built is
    /// thrown away). `window` is the number of chunks the simulated run would hold, `side`
    /// its tiles' side in cells.
    pub(crate) fn task_times(&self, window: usize, side: i64) -> TaskTimes {
        let n = self.session.frames.len();
        let (chunks, _) = self.chunks_of(0..n);
        let tiles = tiles_of(self.spec.width as i64, self.spec.height as i64, side);
        let mut grid = self.blank();
        let times = Mutex::new(TaskTimes {
            tiles: tiles.len(),
            window,
            prepare: vec![0.0; chunks.len()],
            apply: vec![vec![(0, 0.0); tiles.len()]; chunks.len()],
        });
        let cells = Cells(grid.values_mut().as_mut_ptr());
        self.run_schedule(
            &chunks,
            side,
            cells,
            false,
            1,
            window,
            0,
            &mut |_| true,
            Some(&times),
        );
        times.into_inner().unwrap_or_else(|e| e.into_inner())
    }

    /// How long a full rebuild would take under the parallel schedule on each count of free
    /// cores in `workers`, seconds: every task timed on one worker (with the tiles that many
    /// threads use), then replayed on that many ([`schedule::simulate`]) with the window such
    /// a run would hold. Each entry also gives the tasks' total (the schedule on one worker).
    pub(crate) fn schedule_times(&self, workers: &[usize]) -> Vec<(f64, f64)> {
        let mut measured: Vec<(i64, TaskTimes)> = Vec::new();
        workers
            .iter()
            .map(|&n| {
                let side = tile_side(n);
                if !measured.iter().any(|(s, _)| *s == side) {
                    measured.push((side, self.task_times(window_for(n), side)));
                }
                let times = &mut measured
                    .iter_mut()
                    .find(|(s, _)| *s == side)
                    .expect("measured above")
                    .1;
                times.window = window_for(n);
                (times.total(), schedule::simulate(times, n))
            })
            .collect()
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
        let (chunks, total_beams) = self.chunks_of(frames.clone());
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
                    let n = self.fill_frame_jobs(f, &mut jobs, &mut spans, TILE.trailing_zeros());
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
        let workers = rayon::current_num_threads();
        self.run_schedule(
            &chunks,
            tile_side(workers),
            cells,
            below_hi,
            workers,
            window_for(workers),
            frames.start,
            after_chunk,
            None,
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::demo;
    use crate::params::FusionRule;
    use std::sync::Arc;

    /// The schedule with chunks of a few frames (many chunks, so tiles run ahead of each other
    /// by up to the window) on 8 and 16 workers gives the plain loop's grid bit for bit.
    #[test]
    fn small_chunks_many_workers_and_narrow_windows_match_the_plain_loop() {
        let session = Arc::new(demo::session("sonar-ring").unwrap());
        for fusion in [FusionRule::EveryBeam, FusionRule::OncePerCell] {
            let mut params = demo::params("sonar-ring").unwrap();
            params.fusion = fusion;
            params.resolution = 0.02; // more tiles
            let builder = MapBuilder::new(session.clone(), params).unwrap();
            let n = session.frames.len();
            let mut plain = builder.blank();
            builder.integrate_plain(&mut plain, 0..n);
            let chunks: Vec<Range<usize>> = (0..n).step_by(7).map(|f| f..(f + 7).min(n)).collect();
            let (w, h) = (builder.spec.width as i64, builder.spec.height as i64);
            assert!(tiles_of(w, h, SMALL_TILE).len() > 4);
            for (workers, window) in [(8, 2), (16, 3), (16, 16)] {
                let pool = rayon::ThreadPoolBuilder::new()
                    .num_threads(workers)
                    .build()
                    .unwrap();
                let mut grid = builder.blank();
                let cells = Cells(grid.values_mut().as_mut_ptr());
                let mut reported = Vec::new();
                pool.install(|| {
                    builder.run_schedule(
                        &chunks,
                        tile_side(workers),
                        cells,
                        false,
                        workers,
                        window,
                        0,
                        &mut |done| {
                            reported.push(done);
                            true
                        },
                        None,
                    )
                });
                assert!(
                    grid.values()
                        .iter()
                        .zip(plain.values())
                        .all(|(a, b)| a.to_bits() == b.to_bits()),
                    "{fusion:?}, {workers} workers, window {window}"
                );
                // Progress arrives in order and ends with every frame.
                assert!(reported.windows(2).all(|p| p[0] < p[1]));
                assert_eq!(reported.last(), Some(&n));
            }
        }
    }

    #[test]
    fn a_stop_asked_between_chunks_is_honoured() {
        let session = Arc::new(demo::session("door-cycle").unwrap());
        let builder =
            MapBuilder::new(session.clone(), demo::params("door-cycle").unwrap()).unwrap();
        let n = session.frames.len();
        let chunks: Vec<Range<usize>> = (0..n).step_by(10).map(|f| f..(f + 10).min(n)).collect();
        let mut grid = builder.blank();
        let cells = Cells(grid.values_mut().as_mut_ptr());
        let mut calls = 0;
        let pool = rayon::ThreadPoolBuilder::new()
            .num_threads(4)
            .build()
            .unwrap();
        pool.install(|| {
            builder.run_schedule(
                &chunks,
                TILE,
                cells,
                false,
                4,
                4,
                0,
                &mut |_| {
                    calls += 1;
                    calls < 3
                },
                None,
            )
        });
        // It stops within the window of chunks held, well before the end.
        assert!(
            calls >= 3 && calls < chunks.len() / 2,
            "{calls} of {}",
            chunks.len()
        );
    }
}
