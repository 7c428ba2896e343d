//! The fast rebuild: the same rule as the plain loop, bit for bit, split across threads.
//!
//! Clamping makes the order of a cell's updates matter, so threads cannot share cells. The
//! grid is cut into square tiles; each tile takes every beam of a chunk of frames that can
//! reach it, in the contract's order, and writes only its own cells, so every cell still sees
//! its updates in order whichever thread runs the tile. A beam's walk enters a tile part-way
//! along its segment (at a row with [`RayWalk::enter_row`], at a column by the same
//! comparison the walk makes), which reproduces the sequential walk exactly because crossing
//! parameters are computed from cell indices. Tiles rather than row bands, because a robot in
//! a corridor puts most of a chunk's work into a few rows.
//!
//! On one thread there is a single tile, the whole grid, and each frame's beams are prepared
//! and applied at once, while they are in cache.
//!
//! What makes the inner loop cheap without changing a single bit of the result:
//! - a beam touches each cell once, so within a beam the order of its cells does not matter;
//!   beams that run within a few degrees of an axis are applied as stretches of consecutive
//!   cells in a row (or column), found with one comparison per row rather than one per cell;
//! - the others are walked cell by cell with a known count: how many cells the walk takes in
//!   the tile, and how many of them are free (below), are found ahead by integer division, so
//!   the loop tests nothing per cell, and it keeps one number (the column's leaving parameter
//!   minus the row's) from which each step selects column or row without a branch;
//! - most cells of a hit beam lie well in front of the reading, where every model gives exactly
//!   logit(p_free). A cell entered at parameter t has its centre within res * sqrt(2)/2 of the
//!   entry point, so while t + res * 0.70711 is below the model's free zone the increment is that
//!   constant and neither the distance to the centre nor the table is needed; and when no cell
//!   of the grid is above the upper clamp bound (checked once per call), such a cell can only
//!   meet the lower bound, so its update is an addition and one comparison;
//! - on several threads, beams are prepared once per chunk (origin, direction, traversal
//!   constants, the cells they can reach) and shared by all tiles; the tiles with the most
//!   beams go first to whichever thread is free.

use super::{MapBuilder, SensorPlan, takes_largest};
use crate::footprint::{RayWalk, crossings_before, for_each_cone_cell, param};
use crate::geometry::Point2;
use crate::grid::CellIndex;
use crate::logodds::Clamp;
use crate::params::FusionRule;
use crate::session::{Reading, SensorKind};
use rayon::prelude::*;
use std::ops::Range;
use std::sync::atomic::{AtomicUsize, Ordering};

/// Slightly more than sqrt(2)/2 (by 3e-6): how far a cell's centre can be from a point inside
/// the cell, in cells, with room for rounding.
const CENTRE_REACH: f64 = std::f64::consts::FRAC_1_SQRT_2 + 3e-6;

/// Beams crossing at least this many columns per row (or rows per column) are applied in
/// stretches; closer to the diagonal they are walked cell by cell. A stretch costs two integer
/// divisions per row, which the masked cell-by-cell walk beats until rows are about a dozen
/// cells long (measured with `gridscope bench`: 3 gave a 20% slower rebuild than 12).
const RUN_RATIO: f64 = 12.0;

/// Side of a tile, cells, when running in parallel (a power of two).
const TILE: i64 = 256;
const _: () = assert!(TILE.count_ones() == 1, "TILE must be a power of two");

/// Beams prepared per chunk (bounds memory; a chunk is shared by all tiles).
const CHUNK_BEAMS: usize = 1 << 17;

/// One beam, ready for the inner loop.
#[derive(Clone, Copy, Debug)]
enum Job {
    Ray {
        sensor: u32,
        walk: RayWalk,
        /// Offsets giving the vector from the origin to cell (c, r)'s centre: c * res + ex0.
        ex0: f64,
        ey0: f64,
        /// The reading, metres (unused for a no-return).
        z: f64,
        /// Cells entered before this fixed-point parameter get exactly logit(p_free); i64::MAX
        /// for a cleared no-return, free all the way.
        free_until: i64,
    },
    Cone {
        sensor: u32,
        origin: Point2,
        heading: f64,
        reach_m: f64,
        reading: Reading,
    },
    /// A slot a frame left unused (a beam that touches nothing); never listed for a tile.
    Skipped,
}

/// The tiles a job can reach: tile columns `tx0..=tx1` and tile rows `ty0..=ty1` (tiles of
/// [`TILE`] cells, counted from the grid's corner); empty (`ty0 > ty1`) when it reaches no cell
/// of the grid. Found while jobs are prepared, in parallel, so that listing jobs per tile is
/// only pushes; kept beside the jobs rather than in them, so that the listing reads little
/// memory.
#[derive(Clone, Copy, Debug)]
struct Span {
    tx0: u32,
    tx1: u32,
    ty0: u32,
    ty1: u32,
}

impl Span {
    /// The span of an unused slot, or of a job that reaches no cell of the grid.
    const EMPTY: Span = Span {
        tx0: 1,
        tx1: 0,
        ty0: 1,
        ty1: 0,
    };

    /// The tiles holding cells `a..=b` (corners, inclusive) of a `w` x `h` grid.
    #[inline(always)]
    fn of_cells(a: CellIndex, b: CellIndex, w: i64, h: i64) -> Span {
        if b.col < 0 || b.row < 0 || a.col >= w || a.row >= h {
            return Span::EMPTY;
        }
        // Tile coordinates are cell coordinates shifted right (TILE is a power of two).
        let shift = TILE.trailing_zeros();
        Span {
            tx0: (a.col.max(0) >> shift) as u32,
            tx1: (b.col.min(w - 1) >> shift) as u32,
            ty0: (a.row.max(0) >> shift) as u32,
            ty1: (b.row.min(h - 1) >> shift) as u32,
        }
    }

    fn is_empty(&self) -> bool {
        self.ty0 > self.ty1
    }
}

/// A rectangle of cells: rows `r0..r1`, columns `c0..c1`.
#[derive(Clone, Copy, Debug)]
struct Tile {
    r0: i64,
    r1: i64,
    c0: i64,
    c1: i64,
}

/// The grid's values, written by tiles that never share a cell.
#[derive(Clone, Copy)]
struct Cells(*mut f32);

// SAFETY: `Cells` is only dereferenced at indices of cells inside the tile a task owns, and
// each tile of a chunk is owned by exactly one task (see `integrate_bands`).
unsafe impl Send for Cells {}
unsafe impl Sync for Cells {}

impl MapBuilder {
    /// Slots frame `f` needs for its jobs: one per beam of its scans (an upper bound: beams
    /// that touch nothing leave their slot unused).
    fn frame_slots(&self, f: usize) -> usize {
        self.session.frames[f]
            .scans
            .iter()
            .map(|s| self.session.sensors[s.sensor].beam_count())
            .sum()
    }

    /// Writes the jobs of frame `f`, in the contract's order, to the front of `out` and the
    /// tiles they can reach to the front of `spans` (both at least
    /// [`MapBuilder::frame_slots`] long), and returns how many there are.
    fn fill_frame_jobs(&self, f: usize, out: &mut [Job], spans: &mut [Span]) -> usize {
        let mut n = 0;
        let spec = &self.spec;
        let res = spec.resolution;
        let (w, h) = (spec.width as i64, spec.height as i64);
        let span = |a: CellIndex, b: CellIndex| {
            // One cell of slack for end points on cell boundaries.
            Span::of_cells(
                CellIndex::new(a.col.min(b.col) - 1, a.row.min(b.row) - 1),
                CellIndex::new(a.col.max(b.col) + 1, a.row.max(b.row) + 1),
                w,
                h,
            )
        };
        self.for_each_included_beam(f, |b| {
            let s = b.sensor as u32;
            match b.plan.kind {
                SensorKind::Ray => {
                    let (dy, dx) = b.heading.sin_cos();
                    let walk = RayWalk::from_direction(spec, b.origin, dx, dy, b.reach);
                    let end = Point2::new(b.origin.x + b.reach * dx, b.origin.y + b.reach * dy);
                    let (z, free_until) = match b.reading {
                        // Rounding to fixed point moves this by 1e-12 m, far inside the margin
                        // of CENTRE_REACH over sqrt(2)/2 (1.5e-7 m at 5 cm cells).
                        Reading::Hit(z) => {
                            (z, param(b.plan.model.free_below(z) - res * CENTRE_REACH))
                        }
                        _ => (0.0, i64::MAX),
                    };
                    out[n] = Job::Ray {
                        sensor: s,
                        walk,
                        ex0: spec.origin.x + 0.5 * res - b.origin.x,
                        ey0: spec.origin.y + 0.5 * res - b.origin.y,
                        z,
                        free_until,
                    };
                    spans[n] = span(walk.start, spec.cell_at(end));
                    n += 1;
                }
                SensorKind::Cone => {
                    let bounds = crate::footprint::cone_bounds(
                        b.origin,
                        b.heading,
                        b.plan.cone_width,
                        b.reach,
                    );
                    out[n] = Job::Cone {
                        sensor: s,
                        origin: b.origin,
                        heading: b.heading,
                        reach_m: b.reach,
                        reading: b.reading,
                    };
                    spans[n] = span(spec.cell_at(bounds.min), spec.cell_at(bounds.max));
                    n += 1;
                }
            }
        });
        n
    }

    /// Sends every cell of a ray job inside `tile` to `sink` (by grid index): as stretches of
    /// cells in one row (or one column) that the walk visits one after another, or cell by cell
    /// near the diagonal. Each cell of the walk inside the tile is sent exactly once.
    #[inline(always)]
    #[allow(clippy::too_many_arguments)]
    fn ray_in_tile(
        &self,
        plan: &SensorPlan,
        walk: &RayWalk,
        ex0: f64,
        ey0: f64,
        z: f64,
        free_until: i64,
        tile: Tile,
        sink: &mut impl Sink,
    ) {
        let Tile { r0, r1, c0, c1 } = tile;
        let w = self.spec.width as i64;
        let res = self.spec.resolution;
        let (sc, sr) = (walk.step_col, walk.step_row);
        // The first cell of the walk inside the tile, and the parameter at which it is entered.
        let mut c = walk.start;
        let mut t_enter = 0i64;
        if c.row < r0 || c.row >= r1 {
            let entry = if sr > 0 && c.row < r0 {
                r0
            } else if sr < 0 && c.row >= r1 {
                r1 - 1
            } else {
                return;
            };
            match walk.enter_row(entry) {
                Some((e, t)) => {
                    t_enter = t;
                    c = e;
                }
                None => return,
            }
        }
        if c.col < c0 || c.col >= c1 {
            let entry = if sc > 0 && c.col < c0 {
                c0
            } else if sc < 0 && c.col >= c1 {
                c1 - 1
            } else {
                return;
            };
            // The walk steps from column entry - sc into entry at tc, from the first row it
            // leaves strictly after tc (while a row is left at or before tc it steps rows).
            let tc = walk.leave_col(entry - sc);
            if tc >= walk.len {
                return;
            }
            let row = if sr != 0 {
                walk.first_row_leaving(c.row, tc, true)
            } else {
                c.row
            };
            if row < r0 || row >= r1 {
                return;
            }
            c = CellIndex::new(entry, row);
            t_enter = tc;
        }
        let free = plan.model.free_increment() as f32;
        // The exact increment of one cell (what the plain loop computes for it). Only cells
        // entered at or after `free_until` come here, so only those of a hit.
        let exact = ExactCell {
            model: &plan.model,
            res,
            ex0,
            ey0,
            z,
        };
        let ahead = |x: i64, limit: i64, step: i64| (x - limit) * step >= 0;
        let ratio = walk.cols_per_row();
        if ratio >= RUN_RATIO {
            // Mostly along x: in row r the walk takes columns c..=last, where `last` is the
            // first column it leaves at or after min(leave_row(r), length).
            loop {
                let tr = walk.leave_row(c.row);
                let last = walk.first_col_leaving(c.col, tr.min(walk.len), false);
                // Cells entered before `free_until` get the free increment: the first cell if
                // t_enter is, and every later cell whose previous column is left before it.
                let last_enter = if last == c.col {
                    t_enter
                } else {
                    walk.leave_col(last - sc)
                };
                let free_last = if last_enter < free_until {
                    last
                } else if t_enter < free_until {
                    walk.first_col_leaving(c.col, free_until, false)
                } else {
                    c.col - sc
                };
                let row_base = c.row * w;
                if ahead(free_last, c.col, sc) {
                    let (a, b) = (
                        c.col.min(free_last).max(c0),
                        c.col.max(free_last).min(c1 - 1),
                    );
                    if a <= b {
                        sink.free_run((row_base + a) as usize, 1, (b - a + 1) as usize, free);
                    }
                }
                let mut col = free_last + sc;
                while ahead(last, col, sc) && col >= c0 && col < c1 {
                    sink.cell((row_base + col) as usize, exact.increment(col, c.row));
                    col += sc;
                }
                // Past the tile's columns the walk never comes back.
                if !(c0..c1).contains(&last) {
                    return;
                }
                let tc = walk.leave_col(last);
                if tc < tr || tr >= walk.len {
                    return;
                }
                c = CellIndex::new(last, c.row + sr);
                t_enter = tr;
                if c.row < r0 || c.row >= r1 {
                    return;
                }
            }
        } else if ratio <= 1.0 / RUN_RATIO {
            // Mostly along y: in column c the walk takes rows while a row's leaving parameter
            // is at most leave_col(c) and below the length.
            let end_row = walk.first_row_leaving(c.row, walk.len, false);
            loop {
                let tc = walk.leave_col(c.col);
                let last = if tc < walk.len {
                    let by_col = walk.first_row_leaving(c.row, tc, true);
                    if ahead(by_col, end_row, sr) {
                        end_row
                    } else {
                        by_col
                    }
                } else {
                    end_row
                };
                let last_enter = if last == c.row {
                    t_enter
                } else {
                    walk.leave_row(last - sr)
                };
                let free_last = if last_enter < free_until {
                    last
                } else if t_enter < free_until {
                    walk.first_row_leaving(c.row, free_until, false)
                } else {
                    c.row - sr
                };
                if ahead(free_last, c.row, sr) {
                    let (a, b) = (
                        c.row.min(free_last).max(r0),
                        c.row.max(free_last).min(r1 - 1),
                    );
                    if a <= b {
                        sink.free_run(
                            (a * w + c.col) as usize,
                            w as usize,
                            (b - a + 1) as usize,
                            free,
                        );
                    }
                }
                let mut row = free_last + sr;
                while ahead(last, row, sr) && row >= r0 && row < r1 {
                    sink.cell((row * w + c.col) as usize, exact.increment(c.col, row));
                    row += sr;
                }
                if !(r0..r1).contains(&last) {
                    return;
                }
                let tr = walk.leave_row(last);
                if tc >= tr || tc >= walk.len {
                    return;
                }
                c = CellIndex::new(c.col + sc, last);
                t_enter = tc;
                if c.col < c0 || c.col >= c1 {
                    return;
                }
            }
        } else {
            // Near the diagonal stretches are short: walk cell by cell. How many cells the walk
            // takes inside the tile, and how many of them are entered before `free_until`, are
            // counted first (exact integer division), so the loops below run a known number of
            // times with no test of the tile, the length or the free zone per cell.
            let (tc, tr) = (walk.leave_col(c.col), walk.leave_row(c.row));
            let (ca, ra) = (walk.col_step(), walk.row_step());
            // Column (row) crossings left before the walk would step out of the tile, and the
            // parameter of that stepping out.
            let kc = if sc > 0 { c1 - 1 - c.col } else { c.col - c0 };
            let kr = if sr > 0 { r1 - 1 - c.row } else { c.row - r0 };
            let (out_c, out_r) = (tc + kc * ca, tr + kr * ra);
            // A column crossing is taken below the length and strictly before the row exit (at a
            // tie the row step comes first); a row crossing below the length and at or before
            // the column exit.
            let n_col = kc.min(crossings_before(tc, ca, walk.len.min(out_r)));
            let n_row = kr.min(crossings_before(tr, ra, walk.len.min(out_c + 1)));
            let total = 1 + n_col + n_row;
            let n_free = if t_enter >= free_until {
                0
            } else if free_until >= walk.len.min(out_r).max(walk.len.min(out_c + 1)) {
                // Every crossing taken lies below free_until (the usual case in a tile the
                // beam only passes through).
                total
            } else {
                1 + n_col.min(crossings_before(tc, ca, free_until))
                    + n_row.min(crossings_before(tr, ra, free_until))
            };
            let mut step = DiagonalStep {
                i: (c.row * w + c.col) as isize,
                e: tc - tr,
                ca,
                ra,
                di_col: sc as isize,
                di_row: (sr * w) as isize,
            };
            let in_tile = |i: isize| {
                let (col, row) = (i as i64 % w, i as i64 / w);
                i >= 0 && (c0..c1).contains(&col) && (r0..r1).contains(&row)
            };
            for _ in 0..n_free {
                debug_assert!(in_tile(step.i), "free cell outside the tile");
                sink.free_cell(step.i as usize, free);
                step.advance();
            }
            if n_free < total {
                // Where the free prefix left the walk: after `cols` column steps and
                // n_free - cols row steps the difference of the two parameters has grown by
                // cols * ca - (n_free - cols) * ra.
                let cols = (step.e - (tc - tr) + n_free * ra) / (ca + ra);
                let rows = n_free - cols;
                let (mut col, mut row) = (c.col + cols * sc, c.row + rows * sr);
                for _ in n_free..total {
                    debug_assert!(in_tile(step.i), "exact cell outside the tile");
                    sink.cell(step.i as usize, exact.increment(col, row));
                    let x = step.advance();
                    col += if x { sc } else { 0 };
                    row += if x { 0 } else { sr };
                }
            }
        }
    }

    /// Sends every cell of a job inside `tile` to `sink`.
    #[inline(always)]
    fn job_in_tile(&self, job: &Job, tile: Tile, sink: &mut impl Sink) {
        match *job {
            Job::Ray {
                sensor,
                ref walk,
                ex0,
                ey0,
                z,
                free_until,
                ..
            } => {
                let plan = &self.plans[sensor as usize];
                self.ray_in_tile(plan, walk, ex0, ey0, z, free_until, tile, sink);
            }
            Job::Skipped => {}
            Job::Cone {
                sensor,
                origin,
                heading,
                reach_m,
                reading,
                ..
            } => {
                let plan = &self.plans[sensor as usize];
                let w = self.spec.width as i64;
                for_each_cone_cell(
                    &self.spec,
                    origin,
                    heading,
                    plan.cone_width,
                    reach_m,
                    tile.r0..tile.r1,
                    plan.cone_tan_until(reading),
                    |cc| {
                        if cc.cell.col < tile.c0 || cc.cell.col >= tile.c1 {
                            return;
                        }
                        let inc = plan.cone_increment(reading, &cc);
                        sink.cell((cc.cell.row * w + cc.cell.col) as usize, inc);
                    },
                );
            }
        }
    }

    /// Sends the cells of the listed jobs inside `tile` to `sink`, job after job.
    #[inline(always)]
    fn jobs_in_tile(&self, list: &[u32], jobs: &[Job], tile: Tile, sink: &mut impl Sink) {
        for &j in list {
            self.job_in_tile(&jobs[j as usize], tile, sink);
        }
    }

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
        let (lo, hi) = (self.lo, self.hi);
        match self.params.fusion {
            FusionRule::EveryBeam if below_hi => {
                self.jobs_in_tile(list, jobs, tile, &mut Apply::<true> { cells, lo, hi })
            }
            FusionRule::EveryBeam => {
                self.jobs_in_tile(list, jobs, tile, &mut Apply::<false> { cells, lo, hi })
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
                        *v = Clamp::apply(lo, hi, *v, inc);
                    }
                }
            }
        }
    }

    /// Integrates frames onto `values` (row-major, the builder's grid): in parallel tiles on
    /// the current rayon pool when `parallel`, else as one tile. `after_chunk(frames_done)` is
    /// called between chunks and returns false to stop.
    pub(super) fn integrate_bands(
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
        let hi = self.hi;
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

/// The exact increment of a cell for one hit beam: the distance from the beam origin to the
/// cell's centre, then the model.
struct ExactCell<'a> {
    model: &'a crate::model::PreparedModel,
    res: f64,
    ex0: f64,
    ey0: f64,
    z: f64,
}

impl ExactCell<'_> {
    #[inline(always)]
    fn increment(&self, col: i64, row: i64) -> f32 {
        let ex = col as f64 * self.res + self.ex0;
        let ey = row as f64 * self.res + self.ey0;
        self.model.hit_increment((ex * ex + ey * ey).sqrt(), self.z) as f32
    }
}

/// The state of a cell-by-cell walk near the diagonal: the grid index of the current cell and
/// `e`, the parameter at which the walk leaves its column minus the one at which it leaves its
/// row (the column is left first when `e < 0`; at a tie the row step comes first).
struct DiagonalStep {
    i: isize,
    e: i64,
    ca: i64,
    ra: i64,
    di_col: isize,
    di_row: isize,
}

impl DiagonalStep {
    /// Steps to the next cell and says whether that was a column step. Both outcomes are
    /// computed and one is selected (near the diagonal which axis comes next is
    /// unpredictable), so the only chain from one cell to the next is a compare and a select.
    #[inline(always)]
    fn advance(&mut self) -> bool {
        let col = self.e < 0;
        let (e_col, e_row) = (self.e + self.ca, self.e - self.ra);
        let (i_col, i_row) = (self.i + self.di_col, self.i + self.di_row);
        self.e = if col { e_col } else { e_row };
        self.i = if col { i_col } else { i_row };
        col
    }
}

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

/// Where the cells of a beam go, by grid index: stretches of cells that all get the free
/// increment, and single cells.
trait Sink {
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
struct Apply<const BELOW_HI: bool> {
    cells: Cells,
    lo: f32,
    hi: f32,
}

impl<const BELOW_HI: bool> Apply<BELOW_HI> {
    #[inline(always)]
    fn add_free(&self, v: &mut f32, free: f32) {
        if BELOW_HI {
            let s = *v + free;
            *v = if s < self.lo { self.lo } else { s };
        } else {
            *v = Clamp::apply(self.lo, self.hi, *v, free);
        }
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
        *v = Clamp::apply(self.lo, self.hi, *v, inc);
    }
}

/// OncePerCell: each cell's largest and smallest increment of the current frame, in arrays
/// over the rows of one tile (indexed by grid index minus the tile's first row), with the
/// cells the frame touched listed in order. A frame number per cell tells which entries belong
/// to the current frame, so nothing is cleared between frames; the arrays are reused for every
/// tile a thread runs.
#[derive(Default)]
struct FrameBest {
    base: usize,
    frame: Vec<u32>,
    max: Vec<f32>,
    min: Vec<f32>,
    touched: Vec<usize>,
    now: u32,
}

impl FrameBest {
    /// Makes the arrays cover grid indices `base..base + len`.
    fn cover(&mut self, base: usize, len: usize) {
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
    fn next_frame(&mut self) {
        self.touched.clear();
        self.now = self.now.wrapping_add(1);
        if self.now == 0 {
            // After 2^32 frames the numbers come round: forget them all.
            self.frame.fill(0);
            self.now = 1;
        }
    }

    /// The cells of the frame, in the order first touched, with the contract's choice of
    /// increment ([`takes_largest`]).
    fn chosen(&self) -> impl Iterator<Item = (usize, f32)> + '_ {
        self.touched.iter().map(|&k| {
            let inc = if takes_largest(self.max[k]) {
                self.max[k]
            } else {
                self.min[k]
            };
            (self.base + k, inc)
        })
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
