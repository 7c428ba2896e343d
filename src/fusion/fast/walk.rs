//! A job's cells inside one tile, sent to a sink: ray beams as stretches along a row or a
//! column, or cell by cell near the diagonal with counts found ahead; cone beams row by row.
//! Every cell the plain walk would visit inside the tile is sent exactly once, with the same
//! increment.

use super::Tile;
use super::jobs::Job;
use super::sinks::Sink;
use crate::footprint::{RayWalk, crossings_before, for_each_cone_cell};
use crate::fusion::MapBuilder;
use crate::fusion::setup::{CentreOffsets, SensorPlan};
use crate::grid::CellIndex;

/// Beams crossing at least this many columns per row (or rows per column) are applied in
/// stretches; closer to the diagonal they are walked cell by cell. A stretch costs two integer
/// divisions per row, which the masked cell-by-cell walk beats until rows are about a dozen
/// cells long.
const RUN_RATIO: f64 = 12.0;

impl MapBuilder {
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
        let Some((mut c, mut t_enter)) = walk.enter_box(r0..r1, c0..c1) else {
            return;
        };
        let free = plan.model.free_increment() as f32;
        // The exact increment of one cell (what the plain loop computes for it). Only cells
        // entered at or after `free_until` come here, so only those of a hit.
        let exact = ExactCell {
            model: &plan.model,
            centres: CentreOffsets { res, ex0, ey0 },
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
    pub(super) fn job_in_tile(&self, job: &Job, tile: Tile, sink: &mut impl Sink) {
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
    pub(super) fn jobs_in_tile(
        &self,
        list: &[u32],
        jobs: &[Job],
        tile: Tile,
        sink: &mut impl Sink,
    ) {
        for &j in list {
            self.job_in_tile(&jobs[j as usize], tile, sink);
        }
    }
}

/// The exact increment of a cell for one hit beam: the distance from the beam origin to the
/// cell's centre, then the model (what the plain loop computes for the cell).
struct ExactCell<'a> {
    model: &'a crate::model::PreparedModel,
    centres: CentreOffsets,
    z: f64,
}

impl ExactCell<'_> {
    #[inline(always)]
    fn increment(&self, col: i64, row: i64) -> f32 {
        self.model
            .hit_increment(self.centres.distance(col, row), self.z) as f32
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
