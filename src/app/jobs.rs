//! One-off background jobs for the diagnosis panels (cell histories, change searches, sweeps):
//! a thread, a progress counter, a cancel flag and a result to poll.
//!
//! The map itself is rebuilt by the long-lived [`super::worker`]; these are for answers that
//! are computed once per question.

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::mpsc::{Receiver, channel};
use std::time::Duration;

/// A job running on its own thread.
pub struct Job<T> {
    result: Receiver<T>,
    cancel: Arc<AtomicBool>,
    done: Arc<AtomicUsize>,
    /// Units of work in all (for the progress bar).
    pub total: usize,
}

impl<T: Send + 'static> Job<T> {
    /// Starts `work(cancel, done)` on a new thread; `ctx` is woken when it finishes.
    pub fn spawn(
        ctx: Option<egui::Context>,
        total: usize,
        work: impl FnOnce(&AtomicBool, &AtomicUsize) -> T + Send + 'static,
    ) -> Job<T> {
        let (tx, result) = channel();
        let cancel = Arc::new(AtomicBool::new(false));
        let done = Arc::new(AtomicUsize::new(0));
        let (c, d) = (cancel.clone(), done.clone());
        std::thread::spawn(move || {
            let out = work(&c, &d);
            let _ = tx.send(out);
            if let Some(ctx) = ctx {
                ctx.request_repaint();
            }
        });
        Job {
            result,
            cancel,
            done,
            total,
        }
    }

    /// The result, once it is there.
    pub fn poll(&self) -> Option<T> {
        self.result.try_recv().ok()
    }

    /// Waits for the result (tests and batch use only).
    pub fn wait(&self) -> Option<T> {
        self.result.recv_timeout(Duration::from_secs(300)).ok()
    }

    /// Units of work done so far.
    pub fn done(&self) -> usize {
        self.done.load(Ordering::Relaxed)
    }

    /// Asks the job to stop.
    pub fn cancel(&self) {
        self.cancel.store(true, Ordering::Relaxed);
    }
}

impl<T> Drop for Job<T> {
    fn drop(&mut self) {
        // A job nobody waits for any more should stop working.
        self.cancel.store(true, Ordering::Relaxed);
    }
}
