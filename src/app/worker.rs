//! The rebuild worker: one background thread that makes the map builder for new parameters
//! and replays the session to the frame the window shows, so no UI frame ever integrates beams
//! or walks the session.
//!
//! Jobs go in over a channel; `Built`, `Progress` (with a coarse preview of the grid now and
//! then, never a full copy), `Ready` (the grids around the frame, shared, not copied) and
//! `Failed` come back. Each job carries its own cancel flag, raised when a newer job is sent.
//! Design decision: a failure, a refused builder or even a panic in the worker is answered with
//! `Failed` for that job, so the window says what went wrong and keeps its last good state; the
//! thread then carries on with the next job.

use super::jobs::panic_message;
use crate::fusion::MapBuilder;
use crate::grid::{Grid, GridSpec};
use crate::params::Params;
use crate::replay::Replay;
use crate::session::Session;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{Receiver, RecvTimeoutError, Sender, TryRecvError, channel};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// Cells on the longer side of a progress preview.
const PREVIEW_SIDE: u32 = 1024;

/// How the worker gets the builder of a job.
#[derive(Clone)]
pub enum Setup {
    /// Keep the current one.
    Keep,
    /// Use this one (made elsewhere, e.g. when a session was opened).
    Use(Arc<MapBuilder>),
    /// Make one for these parameters (the grid's extent may need a pass over every beam).
    Make {
        /// The session.
        session: Arc<Session>,
        /// The parameters, already validated.
        params: Box<Params>,
        /// Largest grid allowed, cells.
        budget: u64,
    },
}

/// Work for the thread.
struct Job {
    generation: u64,
    setup: Setup,
    frame: usize,
    /// Test hook: the job panics (to exercise recovery).
    crash: bool,
    cancel: Arc<AtomicBool>,
}

/// What the thread reports.
#[derive(Debug)]
pub enum Reply {
    /// A builder was made for this generation.
    Built {
        /// Generation.
        generation: u64,
        /// The builder.
        builder: Arc<MapBuilder>,
    },
    /// Frames integrated so far; now and then with a coarse preview of the grid.
    Progress {
        /// Generation.
        generation: u64,
        /// Frames done.
        done: usize,
        /// Frames to do.
        total: usize,
        /// A coarse copy of the grid so far (at most [`PREVIEW_SIDE`] cells a side).
        preview: Option<Arc<Grid>>,
    },
    /// The grids around the requested frame.
    Ready {
        /// Generation.
        generation: u64,
        /// The frame.
        frame: usize,
        /// The grid after frames `0..frame` (shared with the worker's replay).
        before: Arc<Grid>,
        /// The grid after frames `0..=frame`.
        after: Arc<Grid>,
        /// The builder that made them.
        builder: Arc<MapBuilder>,
    },
    /// The job could not be done; what was shown before stays valid.
    Failed {
        /// Generation.
        generation: u64,
        /// Why.
        message: String,
    },
}

/// The window's handle on a worker thread.
pub struct Worker {
    jobs: Sender<Job>,
    replies: Receiver<Reply>,
    cancel: Arc<AtomicBool>,
    repaint: Arc<Mutex<Option<egui::Context>>>,
    snapshot_budget: usize,
    /// (generation, frame) of the last job sent and not yet answered.
    pending: Option<(u64, usize)>,
    /// Latest progress of the pending job.
    pub progress: Option<(usize, usize)>,
}

impl Worker {
    /// Starts a thread whose replay keeps snapshots within `snapshot_budget` bytes.
    pub fn spawn(snapshot_budget: usize) -> Worker {
        let (jobs, job_rx) = channel::<Job>();
        let (reply_tx, replies) = channel::<Reply>();
        let repaint: Arc<Mutex<Option<egui::Context>>> = Arc::default();
        let repaint_thread = repaint.clone();
        let _ = std::thread::Builder::new()
            .name("gridscope-rebuild".into())
            .spawn(move || run(job_rx, reply_tx, repaint_thread, snapshot_budget));
        Worker {
            jobs,
            replies,
            cancel: Arc::new(AtomicBool::new(false)),
            repaint,
            snapshot_budget,
            pending: None,
            progress: None,
        }
    }

    /// Lets the thread wake the window when it has news.
    pub fn set_repaint_context(&self, ctx: &egui::Context) {
        let mut slot = self.repaint.lock().unwrap_or_else(|e| e.into_inner());
        if slot.is_none() {
            *slot = Some(ctx.clone());
        }
    }

    /// Asks for the grids around `frame` of `generation`, with a new builder per `setup`.
    /// Cancels the job before.
    pub fn request(&mut self, generation: u64, setup: Setup, frame: usize) {
        if matches!(setup, Setup::Keep) && self.pending == Some((generation, frame)) {
            return;
        }
        self.send(generation, setup, frame, false);
    }

    /// Test hook: the next job panics inside the worker, as a fault would (recovery is what is
    /// tested).
    #[doc(hidden)]
    pub fn crash_next(&mut self, generation: u64, frame: usize) {
        self.send(generation, Setup::Keep, frame, true);
    }

    fn send(&mut self, generation: u64, setup: Setup, frame: usize, crash: bool) {
        self.cancel.store(true, Ordering::Relaxed);
        self.cancel = Arc::new(AtomicBool::new(false));
        self.pending = Some((generation, frame));
        self.progress = None;
        let job = Job {
            generation,
            setup,
            frame,
            crash,
            cancel: self.cancel.clone(),
        };
        if self.jobs.send(job).is_err() {
            // The thread is gone: start a new one (the next job brings what it needs).
            *self = Worker::spawn(self.snapshot_budget);
        }
    }

    /// Whether a job is outstanding.
    pub fn busy(&self) -> bool {
        self.pending.is_some()
    }

    /// Replies that arrived, without waiting. Marks the worker idle when the pending job's
    /// answer is among them; a thread that died is reported as a failure and replaced.
    pub fn drain(&mut self) -> Vec<Reply> {
        let mut out = Vec::new();
        loop {
            match self.replies.try_recv() {
                Ok(r) => {
                    self.note(&r);
                    out.push(r);
                }
                Err(TryRecvError::Empty) => break,
                Err(TryRecvError::Disconnected) => {
                    if let Some((generation, _)) = self.pending.take() {
                        out.push(Reply::Failed {
                            generation,
                            message: "the rebuild stopped unexpectedly; it was restarted".into(),
                        });
                    }
                    *self = Worker::spawn(self.snapshot_budget);
                    break;
                }
            }
        }
        out
    }

    /// Waits (at most `limit`) for the pending job's answer and returns every reply received.
    /// For tests and benchmarks; the window never blocks.
    pub fn wait(&mut self, limit: Duration) -> Vec<Reply> {
        let mut out = Vec::new();
        let deadline = Instant::now() + limit;
        while self.pending.is_some() {
            let left = deadline.saturating_duration_since(Instant::now());
            match self.replies.recv_timeout(left) {
                Ok(r) => {
                    self.note(&r);
                    out.push(r);
                }
                Err(RecvTimeoutError::Timeout) => break,
                Err(RecvTimeoutError::Disconnected) => {
                    out.extend(self.drain());
                    break;
                }
            }
        }
        out
    }

    fn note(&mut self, r: &Reply) {
        let pending = self.pending;
        match r {
            Reply::Progress {
                generation,
                done,
                total,
                ..
            } if pending.map(|p| p.0) == Some(*generation) => {
                self.progress = Some((*done, *total));
            }
            Reply::Ready {
                generation, frame, ..
            } if pending == Some((*generation, *frame)) => {
                self.pending = None;
                self.progress = None;
            }
            Reply::Failed { generation, .. } if pending.map(|p| p.0) == Some(*generation) => {
                self.pending = None;
                self.progress = None;
            }
            _ => {}
        }
    }
}

/// A coarse copy of `grid` for display while a rebuild runs: blocks of cells, each showing its
/// most decided cell (the largest value if any is above 0.5, else the smallest).
pub fn preview(grid: &Grid, side: u32) -> Grid {
    let s = grid.spec();
    let k = s.width.max(s.height).div_ceil(side).max(1);
    if k == 1 {
        return grid.clone();
    }
    let spec = GridSpec {
        resolution: s.resolution * k as f64,
        origin: s.origin,
        width: s.width.div_ceil(k),
        height: s.height.div_ceil(k),
    };
    let (w, cw) = (s.width as usize, spec.width as usize);
    let mut max = vec![f32::NEG_INFINITY; spec.cells()];
    let mut min = vec![f32::INFINITY; spec.cells()];
    for (i, &v) in grid.values().iter().enumerate() {
        let j = (i / w / k as usize) * cw + (i % w) / k as usize;
        max[j] = max[j].max(v);
        min[j] = min[j].min(v);
    }
    let values = max
        .iter()
        .zip(&min)
        .map(|(&a, &b)| if a > 0.0 { a } else { b })
        .collect();
    Grid::from_values(spec, values).expect("sized from the spec")
}

fn run(
    jobs: Receiver<Job>,
    replies: Sender<Reply>,
    repaint: Arc<Mutex<Option<egui::Context>>>,
    snapshot_budget: usize,
) {
    let wake = || {
        if let Some(ctx) = repaint.lock().ok().and_then(|c| c.clone()) {
            ctx.request_repaint();
        }
    };
    let mut replay: Option<(u64, Replay)> = None;
    while let Ok(mut job) = jobs.recv() {
        // Only the newest job matters; keep a builder or set-up that a skipped job brought.
        while let Ok(next) = jobs.try_recv() {
            let setup = match (&next.setup, job.setup) {
                (Setup::Keep, older) => older,
                (newer, _) => newer.clone(),
            };
            job = Job { setup, ..next };
        }
        let generation = job.generation;
        let outcome = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
            serve(&mut job, &mut replay, snapshot_budget, &replies, &wake)
        }));
        let failure = match outcome {
            Ok(Ok(())) => None,
            Ok(Err(message)) => Some(message),
            Err(p) => {
                // The replay may be half-way through an update: start afresh next time.
                replay = None;
                Some(format!(
                    "the rebuild stopped on an internal error ({}); what was shown is kept",
                    panic_message(p.as_ref())
                ))
            }
        };
        if let Some(message) = failure {
            let _ = replies.send(Reply::Failed {
                generation,
                message,
            });
            wake();
        }
    }
}

/// One job: make or take the builder, then replay to the frame. `Err` says why it failed; a
/// cancelled job says nothing (a newer one is already queued).
fn serve(
    job: &mut Job,
    replay: &mut Option<(u64, Replay)>,
    snapshot_budget: usize,
    replies: &Sender<Reply>,
    wake: &dyn Fn(),
) -> Result<(), String> {
    if job.crash {
        panic!("a fault injected by a test");
    }
    let generation = job.generation;
    match std::mem::replace(&mut job.setup, Setup::Keep) {
        Setup::Keep => {}
        Setup::Use(b) => *replay = Some((generation, Replay::new(b, snapshot_budget))),
        Setup::Make {
            session,
            params,
            budget,
        } => {
            let b = MapBuilder::with_budget(session, *params, budget)
                .map_err(|e| format!("parameters not applied: {e}"))?;
            let b = Arc::new(b);
            let _ = replies.send(Reply::Built {
                generation,
                builder: b.clone(),
            });
            wake();
            *replay = Some((generation, Replay::new(b, snapshot_budget)));
        }
    }
    let Some((built_for, r)) = replay.as_mut() else {
        return Err("no session is loaded".into());
    };
    if *built_for != generation {
        // A seek for a generation whose builder never arrived (it failed): nothing to do.
        return Ok(());
    }
    let mut last_preview = Instant::now();
    let result = r.around(job.frame, &job.cancel, &mut |grid, done, total| {
        let preview_due = total > 50 && last_preview.elapsed() > Duration::from_millis(400);
        let preview = preview_due.then(|| {
            last_preview = Instant::now();
            Arc::new(preview(grid, PREVIEW_SIDE))
        });
        let _ = replies.send(Reply::Progress {
            generation,
            done,
            total,
            preview,
        });
        wake();
    });
    // The only failure of a replay is cancellation by a newer job, which is already queued.
    if let Ok((before, after)) = result {
        let _ = replies.send(Reply::Ready {
            generation,
            frame: job.frame,
            before,
            after,
            builder: r.builder().clone(),
        });
        wake();
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::demo;

    #[test]
    fn previews_keep_the_most_decided_cell_of_each_block() {
        let spec = GridSpec {
            resolution: 1.0,
            origin: crate::geometry::Point2::new(0.0, 0.0),
            width: 4,
            height: 2,
        };
        let g =
            Grid::from_values(spec, vec![-1.0, 2.0, -1.0, -3.0, 0.0, -0.5, -2.0, -1.0]).unwrap();
        let p = preview(&g, 2);
        assert_eq!(
            (p.spec().width, p.spec().height, p.spec().resolution),
            (2, 1, 2.0)
        );
        assert_eq!(p.values(), &[2.0, -3.0]);
    }

    #[test]
    fn a_worker_makes_builders_reports_refusals_and_survives_a_fault() {
        let session = Arc::new(demo::session("glass-pass").unwrap());
        let params = demo::params("glass-pass").unwrap();
        let mut w = Worker::spawn(64 << 20);
        let make = |params: Params| Setup::Make {
            session: session.clone(),
            params: Box::new(params),
            budget: 10_000_000,
        };
        w.request(1, make(params.clone()), 10);
        let replies = w.wait(Duration::from_secs(60));
        assert!(
            replies
                .iter()
                .any(|r| matches!(r, Reply::Built { generation: 1, .. }))
        );
        let ready = replies.iter().find_map(|r| match r {
            Reply::Ready {
                before,
                after,
                builder,
                ..
            } => Some((before, after, builder)),
            _ => None,
        });
        let (before, after, builder) = ready.expect("the grids arrived");
        assert_eq!(**after, builder.build(11));
        assert_eq!(**before, builder.build(10));
        // A grid over the budget is refused with a message, not a hang.
        let mut fine = params.clone();
        fine.resolution = 0.0005;
        w.request(2, make(fine), 10);
        let replies = w.wait(Duration::from_secs(60));
        assert!(
            replies.iter().any(|r| matches!(r, Reply::Failed { generation: 2, message } if message.contains("budget"))),
            "{replies:?}"
        );
        // A fault inside the worker is a failure of that job; the next job is served.
        w.crash_next(3, 10);
        let replies = w.wait(Duration::from_secs(60));
        assert!(
            replies.iter().any(|r| matches!(r, Reply::Failed { generation: 3, message } if message.contains("internal error"))),
            "{replies:?}"
        );
        w.request(4, make(params), 5);
        let replies = w.wait(Duration::from_secs(60));
        assert!(replies.iter().any(|r| matches!(
            r,
            Reply::Ready {
                generation: 4,
                frame: 5,
                ..
            }
        )));
    }
}
