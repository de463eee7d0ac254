//! All netCDF-C calls run on one dedicated thread.
//!
//! netCDF-C is not thread-safe (the netcdf crate serialises calls behind a
//! lock), and the HDF5 library under it keeps its error-reporting switch per
//! thread: netCDF-C silences HDF5's diagnostics only on the thread that first
//! initialised it, so calls from other threads print spurious "HDF5-DIAG"
//! traces for attributes that are merely absent. Running every call on one
//! thread avoids both problems; the physics stays parallel.
//!
//! Invariant: work sent here does no parallel (rayon) work of its own, since
//! rayon's workers may be the very threads waiting on this one (a deadlock
//! seen once, when unpacking ran here under the step-by-step runner).

use std::sync::mpsc::{channel, Sender};
use std::sync::{Mutex, OnceLock};

type Job = Box<dyn FnOnce() + Send>;

fn sender() -> &'static Mutex<Sender<Job>> {
    static SENDER: OnceLock<Mutex<Sender<Job>>> = OnceLock::new();
    SENDER.get_or_init(|| {
        let (tx, rx) = channel::<Job>();
        std::thread::Builder::new()
            .name("baroc-netcdf".into())
            .spawn(move || {
                // HDF5 (thread-safe build) keeps its error printing per
                // thread; netCDF-C switches it off only on the thread that
                // first called it. netCDF-C probes attributes that may be
                // absent and reports every failure itself, so HDF5's own
                // printing on this thread would only repeat noise on stderr.
                {
                    let _lock = netcdf_sys::libnetcdf_lock.lock();
                    // SAFETY: a plain HDF5 setting for the calling thread's
                    // default error stack, under netCDF's lock.
                    unsafe { hdf5_metno_sys::h5e::H5Eset_auto2(hdf5_metno_sys::h5e::H5E_DEFAULT, None, std::ptr::null_mut()) };
                }
                for job in rx {
                    job();
                }
            })
            .expect("the netCDF thread starts");
        Mutex::new(tx)
    })
}

/// Runs `work` on the netCDF thread and waits for its result. `work` may
/// borrow from the caller: `call` does not return before `work` has run to
/// completion (a panic inside it is caught there and resumed here), so the
/// borrows outlive it, the same argument as for scoped threads.
pub fn call<'a, R: Send + 'a>(work: impl FnOnce() -> R + Send + 'a) -> R {
    let (tx, rx) = channel::<std::thread::Result<R>>();
    let job: Box<dyn FnOnce() + Send + 'a> = Box::new(move || {
        let result = std::panic::catch_unwind(std::panic::AssertUnwindSafe(work));
        let _ = tx.send(result);
    });
    // SAFETY: the job only runs while this function waits on `rx` below; it
    // always sends (panics are caught), and if it cannot be sent it is
    // handed back and dropped here. So nothing it borrows ends before it.
    let job: Job = unsafe { std::mem::transmute::<Box<dyn FnOnce() + Send + 'a>, Job>(job) };
    let sent = sender().lock().unwrap_or_else(|e| e.into_inner()).send(job);
    if let Err(returned) = sent {
        drop(returned);
        panic!("the netCDF thread has stopped");
    }
    match rx.recv() {
        Ok(Ok(value)) => value,
        Ok(Err(panic)) => std::panic::resume_unwind(panic),
        Err(_) => panic!("the netCDF thread stopped during a call"),
    }
}
