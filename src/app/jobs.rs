//! One-off background jobs of the window (opening files, exports, scores, cell histories,
//! change searches, sweeps): a thread, a progress counter, a cancel flag and a result to poll.
//!
//! Design decision: a job that panics is a failure with a message, never a silent hang: the
//! thread catches the panic and reports it like any other error, and a thread that vanishes
//! without reporting is noticed when its channel closes. The map itself is rebuilt by the
//! long-lived [`super::worker`].

use std::sync::Arc;
use std::sync::atomic::{AtomicBool, AtomicUsize, Ordering};
use std::sync::mpsc::{Receiver, TryRecvError, channel};
use std::time::Duration;

/// How a job ended when it gave no result.
#[derive(Clone, Debug, PartialEq, Eq)]
pub enum JobFailure {
    /// It panicked; the panic's message.
    Panicked(String),
    /// Its thread stopped without a word (or could not start).
    Vanished,
}

impl std::fmt::Display for JobFailure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            JobFailure::Panicked(m) => write!(f, "stopped on an internal error: {m}"),
            JobFailure::Vanished => f.write_str("stopped without a result"),
        }
    }
}

/// The message of a caught panic.
pub fn panic_message(payload: &(dyn std::any::Any + Send)) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "no message".to_string())
}

/// A job running on its own thread.
pub struct Job<T> {
    result: Receiver<Result<T, JobFailure>>,
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
        let started = std::thread::Builder::new()
            .name("gridscope-job".into())
            .spawn(move || {
                let out = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| work(&c, &d)))
                    .map_err(|p| JobFailure::Panicked(panic_message(p.as_ref())));
                let _ = tx.send(out);
                if let Some(ctx) = ctx {
                    ctx.request_repaint();
                }
            });
        if started.is_err() {
            // The receiver sees a closed channel: the job reports `Vanished`.
        }
        Job {
            result,
            cancel,
            done,
            total,
        }
    }

    /// The outcome, once it is there.
    pub fn poll(&self) -> Option<Result<T, JobFailure>> {
        match self.result.try_recv() {
            Ok(r) => Some(r),
            Err(TryRecvError::Empty) => None,
            Err(TryRecvError::Disconnected) => Some(Err(JobFailure::Vanished)),
        }
    }

    /// Waits for the outcome (tests and benchmarks only).
    pub fn wait(&self) -> Result<T, JobFailure> {
        self.result
            .recv_timeout(Duration::from_secs(600))
            .unwrap_or(Err(JobFailure::Vanished))
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

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_panicking_job_reports_its_message() {
        let job: Job<u32> = Job::spawn(None, 1, |_, _| panic!("deliberately"));
        assert_eq!(job.wait(), Err(JobFailure::Panicked("deliberately".into())));
        let job = Job::spawn(None, 1, |_, done| {
            done.store(1, Ordering::Relaxed);
            7
        });
        assert_eq!(job.wait(), Ok(7));
        assert_eq!(job.done(), 1);
    }
}
