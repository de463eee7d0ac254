//! The thread that owns the session.
//!
//! All calls into the language run here, one at a time, so the async side
//! (heartbeat, control, iopub) stays responsive while a cell computes. A
//! panic inside a call is caught and handed back as text; the thread and
//! the session survive it.

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::sync::mpsc;

use tokio::sync::oneshot;

use super::session::KernelSession;

type Job = Box<dyn FnOnce(&mut dyn KernelSession) + Send>;

pub struct Worker {
    jobs: mpsc::Sender<Job>,
}

/// A call into the session that did not return normally.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum CallFailure {
    /// The call panicked; the payload's message.
    Panicked(String),
    /// The worker thread is gone (it cannot be restarted in this process).
    WorkerGone,
}

impl Worker {
    pub fn start(mut session: Box<dyn KernelSession>) -> std::io::Result<Self> {
        let (jobs, queue) = mpsc::channel::<Job>();
        std::thread::Builder::new()
            .name("baroc-session".to_string())
            .spawn(move || {
                // Ends when the kernel drops its `Worker` (the sender).
                for job in queue {
                    job(session.as_mut());
                }
            })?;
        Ok(Self { jobs })
    }

    /// Run `call` on the session thread and wait for its value.
    pub async fn run<T, F>(&self, call: F) -> Result<T, CallFailure>
    where
        T: Send + 'static,
        F: FnOnce(&mut dyn KernelSession) -> T + Send + 'static,
    {
        let (answer, answered) = oneshot::channel();
        let job: Job = Box::new(move |session| {
            let outcome = catch_unwind(AssertUnwindSafe(|| call(session))).map_err(|payload| {
                let message = if let Some(text) = payload.downcast_ref::<&str>() {
                    (*text).to_string()
                } else if let Some(text) = payload.downcast_ref::<String>() {
                    text.clone()
                } else {
                    "panic with a non-text payload".to_string()
                };
                CallFailure::Panicked(message)
            });
            let _ = answer.send(outcome);
        });
        self.jobs.send(job).map_err(|_| CallFailure::WorkerGone)?;
        answered.await.unwrap_or(Err(CallFailure::WorkerGone))
    }
}
