//! The map's state in the window: requests to the rebuild worker and what it answers, seeking,
//! pinning A, the selected beam's footprint, and waiting for background work (tests and
//! benchmarks).

use super::worker::{Reply, Setup};
use super::{GridscopeApp, Notice, Pinned, Shown};
use crate::fusion::TouchRecord;
use crate::{BeamRef, Grid};
use std::sync::Arc;
use std::time::Duration;

impl GridscopeApp {
    /// Asks the worker for the current frame.
    pub(super) fn request_grid(&mut self) {
        if let Some(doc) = &self.doc {
            let setup = if std::mem::take(&mut self.resend_builder) {
                Setup::Use(doc.builder.clone())
            } else {
                Setup::Keep
            };
            let generation = if matches!(setup, Setup::Use(_)) {
                doc.built
            } else {
                doc.generation
            };
            self.worker.request(generation, setup, self.frame);
        }
    }

    /// Moves to a frame (clipped to the session).
    pub fn seek(&mut self, frame: usize) {
        let Some(doc) = &self.doc else { return };
        let last = doc.session.frames.len().saturating_sub(1);
        self.frame = frame.min(last);
        self.request_grid();
        if let Some(p) = &mut self.pinned {
            p.seek(self.frame);
        }
    }

    /// Pins the current parameters as A (its map rebuilds in the background).
    pub fn pin(&mut self) {
        if let Some(doc) = &self.doc {
            self.pinned = Some(Pinned::pin(doc, self.frame, self.repaint.as_ref()));
        }
    }

    /// Test hook: the rebuild worker's next job fails as if by an internal fault, so that
    /// recovery can be checked.
    #[doc(hidden)]
    pub fn crash_worker(&mut self) {
        if let Some(doc) = &self.doc {
            self.worker.crash_next(doc.generation, self.frame);
        }
    }

    // ----- worker results --------------------------------------------------------------------

    pub(super) fn take_replies(&mut self, replies: Vec<Reply>) {
        for r in replies {
            let Some(doc) = &mut self.doc else { return };
            match r {
                Reply::Built {
                    generation,
                    builder,
                } if generation == doc.generation => {
                    doc.builder = builder;
                    doc.built = generation;
                }
                Reply::Progress {
                    generation,
                    preview: Some(grid),
                    ..
                } if generation == doc.generation => {
                    self.partial = Some(grid);
                    self.grid_version += 1;
                }
                Reply::Ready {
                    generation,
                    frame,
                    before,
                    after,
                    builder,
                } if generation == doc.generation => {
                    self.shown = Some(Shown {
                        generation,
                        frame,
                        before,
                        after,
                        builder,
                    });
                    self.partial = None;
                    self.grid_version += 1;
                }
                Reply::Failed {
                    generation,
                    message,
                } => {
                    if generation == doc.generation && doc.built != generation {
                        // New parameters could not be applied: keep the ones that work.
                        doc.params = doc.builder.params().clone();
                        doc.generation = doc.built;
                        self.tuning.reset();
                    }
                    self.partial = None;
                    self.resend_builder = true;
                    self.notice = Some(Notice::Problem(message));
                }
                _ => {}
            }
        }
    }

    /// Blocks until the worker has delivered the current frame (tests and benchmarks only).
    pub fn wait_for_worker(&mut self) {
        let replies = self.worker.wait(Duration::from_secs(300));
        self.take_replies(replies);
    }

    /// Waits for every background answer in flight: file tasks, the map, A, the cell history,
    /// the change search and the sweep (tests and benchmarks only).
    pub fn wait_for_everything(&mut self) {
        self.wait_for_tasks();
        if self.take_pending_params() {
            self.wait_for_tasks();
        }
        self.wait_for_worker();
        if let Some(p) = &mut self.pinned
            && p.drain(true)
        {
            self.grid_version += 1;
        }
        if let Some(doc) = &self.doc {
            self.cell_panel.ensure(doc, self.selection.cell, None);
        }
        self.cell_panel.wait();
        self.changes_panel.wait();
        self.compare_panel.wait();
        self.score_panel.wait();
        self.poses_panel.wait();
        if let Some(doc) = &self.doc {
            let base = doc.params.clone();
            self.sweep_panel.wait(&base);
        }
    }

    /// Whether a rebuild, a seek or a file task is still running.
    pub fn busy(&self) -> bool {
        self.worker.busy() || !self.tasks.is_empty()
    }

    /// Whether the rebuild worker has a job in hand.
    pub fn worker_busy(&self) -> bool {
        self.worker.busy()
    }

    /// Rebuild progress (frames done, frames needed) of the running job.
    pub fn progress(&self) -> Option<(usize, usize)> {
        self.worker.progress
    }

    /// Labels of the file tasks running.
    pub fn task_labels(&self) -> Vec<&str> {
        self.tasks.iter().map(|t| t.label.as_str()).collect()
    }

    /// The grid to display: the current frame's, or a coarse preview while rebuilding.
    pub fn display_grid(&self) -> Option<&Arc<Grid>> {
        self.partial
            .as_ref()
            .or(self.shown.as_ref().map(|s| &s.after))
    }

    /// The selected beam as a reference into the session, in the frame shown.
    pub fn selected_beam(&self) -> Option<BeamRef> {
        let (sensor, beam) = self.selection.beam?;
        Some(BeamRef {
            frame: self.frame,
            sensor,
            beam,
        })
    }

    /// The selected beam's footprint with before/after values, once the frame's grids are in.
    /// One beam's cells and its frame's other beams on those cells only: cheap.
    pub fn footprint_records(&mut self) -> &[TouchRecord] {
        let key = match (&self.shown, self.selection.beam) {
            (Some(s), Some((sensor, beam))) if s.frame == self.frame => {
                Some((s.generation, self.frame, sensor, beam))
            }
            _ => None,
        };
        let Some(key) = key else {
            return &[];
        };
        if self.probe.as_ref().map(|p| p.0) != Some(key) {
            let s = self.shown.as_ref().expect("key implies grids");
            let records = s.builder.probe(
                &s.before,
                BeamRef {
                    frame: key.1,
                    sensor: key.2,
                    beam: key.3,
                },
            );
            self.probe = Some((key, records));
        }
        &self.probe.as_ref().expect("just filled").1
    }
}
