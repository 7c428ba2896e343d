//! The rebuild worker: one background thread that replays the session to the frame the window
//! shows, so no UI frame ever integrates beams.
//!
//! Jobs go in over a channel; `Progress` (with a partial grid now and then) and `Ready` come
//! back. Each job carries its own cancel flag and the window raises the previous job's flag
//! when it sends a new one, so a newer parameter change or seek cancels an older rebuild. The
//! worker keeps its [`Replay`] (with snapshots) across seeks and starts a new one only when
//! the job brings a new builder.

use crate::fusion::MapBuilder;
use crate::grid::Grid;
use crate::replay::{DEFAULT_SNAPSHOT_BUDGET, Replay};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{Receiver, RecvTimeoutError, Sender, channel};
use std::sync::{Arc, Mutex};
use std::time::{Duration, Instant};

/// Work for the thread.
struct Job {
    /// Which builder generation the result belongs to.
    generation: u64,
    /// A new builder (parameters or session changed), or `None` to keep the current one.
    builder: Option<Arc<MapBuilder>>,
    /// The frame to show.
    frame: usize,
    cancel: Arc<AtomicBool>,
}

/// What the thread reports.
#[derive(Debug)]
pub enum Reply {
    /// Frames integrated so far out of the total this job needs; sometimes with a partial grid
    /// for progressive display.
    Progress {
        /// Builder generation.
        generation: u64,
        /// Frames done.
        done: usize,
        /// Frames to do.
        total: usize,
        /// The grid so far (at most a few times per second).
        partial: Option<Grid>,
    },
    /// The grids around the requested frame.
    Ready {
        /// Builder generation.
        generation: u64,
        /// The frame.
        frame: usize,
        /// The grid after frames `0..frame`.
        before: Grid,
        /// The grid after frames `0..=frame`.
        after: Grid,
    },
}

/// The window's handle on the worker thread.
pub struct Worker {
    jobs: Sender<Job>,
    replies: Receiver<Reply>,
    cancel: Arc<AtomicBool>,
    repaint: Arc<Mutex<Option<egui::Context>>>,
    /// (generation, frame) of the last job sent and not yet answered.
    pending: Option<(u64, usize)>,
    /// Latest progress of the pending job.
    pub progress: Option<(usize, usize)>,
}

impl Default for Worker {
    fn default() -> Self {
        Self::spawn()
    }
}

impl Worker {
    /// Starts the thread.
    pub fn spawn() -> Worker {
        let (jobs, job_rx) = channel::<Job>();
        let (reply_tx, replies) = channel::<Reply>();
        let repaint: Arc<Mutex<Option<egui::Context>>> = Arc::default();
        let repaint_thread = repaint.clone();
        std::thread::Builder::new()
            .name("gridscope-rebuild".into())
            .spawn(move || run(job_rx, reply_tx, repaint_thread))
            .expect("the rebuild thread starts");
        Worker {
            jobs,
            replies,
            cancel: Arc::new(AtomicBool::new(false)),
            repaint,
            pending: None,
            progress: None,
        }
    }

    /// Lets the thread wake the window when it has news.
    pub fn set_repaint_context(&self, ctx: &egui::Context) {
        let mut slot = self.repaint.lock().expect("repaint slot");
        if slot.is_none() {
            *slot = Some(ctx.clone());
        }
    }

    /// Asks for the grids around `frame`, with a new builder if `builder` is given. Cancels
    /// the job before.
    pub fn request(&mut self, generation: u64, builder: Option<Arc<MapBuilder>>, frame: usize) {
        if builder.is_none() && self.pending == Some((generation, frame)) {
            return;
        }
        self.cancel.store(true, Ordering::Relaxed);
        self.cancel = Arc::new(AtomicBool::new(false));
        self.pending = Some((generation, frame));
        self.progress = None;
        let _ = self.jobs.send(Job {
            generation,
            builder,
            frame,
            cancel: self.cancel.clone(),
        });
    }

    /// Whether a job is outstanding.
    pub fn busy(&self) -> bool {
        self.pending.is_some()
    }

    /// Replies that arrived, without waiting. Marks the worker idle when the pending job's
    /// answer is among them.
    pub fn drain(&mut self) -> Vec<Reply> {
        let mut out = Vec::new();
        while let Ok(r) = self.replies.try_recv() {
            self.note(&r);
            out.push(r);
        }
        out
    }

    /// Waits (at most `limit`) for the pending job's answer and returns every reply received.
    /// For tests and batch use; the window never blocks.
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
                Err(RecvTimeoutError::Timeout) | Err(RecvTimeoutError::Disconnected) => break,
            }
        }
        out
    }

    fn note(&mut self, r: &Reply) {
        match r {
            Reply::Progress {
                generation,
                done,
                total,
                ..
            } => {
                if self.pending.map(|p| p.0) == Some(*generation) {
                    self.progress = Some((*done, *total));
                }
            }
            Reply::Ready {
                generation, frame, ..
            } => {
                if self.pending == Some((*generation, *frame)) {
                    self.pending = None;
                    self.progress = None;
                }
            }
        }
    }
}

fn run(jobs: Receiver<Job>, replies: Sender<Reply>, repaint: Arc<Mutex<Option<egui::Context>>>) {
    let wake = || {
        if let Some(ctx) = repaint.lock().ok().and_then(|c| c.clone()) {
            ctx.request_repaint();
        }
    };
    let mut replay: Option<(u64, Replay)> = None;
    while let Ok(mut job) = jobs.recv() {
        // Only the newest job matters; keep a builder that a skipped job brought.
        while let Ok(next) = jobs.try_recv() {
            let builder = next.builder.clone().or(job.builder.take());
            job = Job { builder, ..next };
        }
        if let Some(b) = job.builder.take() {
            replay = Some((job.generation, Replay::new(b, DEFAULT_SNAPSHOT_BUDGET)));
        }
        let Some((generation, r)) = replay.as_mut() else {
            continue;
        };
        if *generation != job.generation {
            // A seek for a generation whose builder never arrived: nothing to do.
            continue;
        }
        let generation = *generation;
        let mut last_partial = Instant::now();
        let result = r.around(job.frame, &job.cancel, &mut |grid, done, total| {
            let partial = if total > 50 && last_partial.elapsed() > Duration::from_millis(250) {
                last_partial = Instant::now();
                Some(grid.clone())
            } else {
                None
            };
            let _ = replies.send(Reply::Progress {
                generation,
                done,
                total,
                partial,
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
            });
            wake();
        }
    }
}
