//! Where one kernel call runs: a thread pool (or the calling thread) plus that call's stop
//! request.
//!
//! Every kernel takes an [`Exec`]. The pool fixes the threads; the stop flag lets the caller
//! end a long call early. Kernels poll the flag between work chunks (a chunk is at most
//! [`crate::partition::CHUNK`] multiply-adds, about a millisecond of work), skip the chunks that
//! remain once it is set, and return [`CoreError::Interrupted`] instead of a partial result.
//! The flag is per call, so stopping one call never disturbs another running at the same time.
//!
//! [`Exec::run_watched`] runs a call on the pool while the calling thread wakes up at a fixed
//! interval to ask a `watch` closure whether to stop (the binding layer checks for Ctrl-C
//! there), so a 10-second pass answers an interrupt within about one interval plus one chunk.
//! A call may also count the work it has finished ([`Exec::add_done`]; sampling counts
//! coefficients), which the watching thread reads with [`Exec::done`] to report progress.
//!
//! [`Exec::inline`] runs a call on the calling thread alone: handing a call to the pool and
//! back costs two thread wake-ups, tens of microseconds on a virtual machine, more than a
//! small call's whole work. The call keeps its work items and their merge order, and the
//! parallel loops inside kernels run only on a pool's threads ([`on_pool`]), sequentially
//! elsewhere, so an inline call returns the same bits as on any pool.

use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};
use std::sync::mpsc::{sync_channel, RecvTimeoutError};
use std::sync::Arc;
use std::time::Duration;

use rayon::{ThreadPool, ThreadPoolBuilder};

use crate::error::CoreError;

/// A thread pool (none: the calling thread), one call's stop flag and its count of finished
/// work (cheap to clone; clones share all three).
#[derive(Clone)]
pub struct Exec {
    pool: Option<Arc<ThreadPool>>,
    stop: Arc<AtomicBool>,
    done: Arc<AtomicU64>,
}

impl Exec {
    /// Runs on `pool`, with a fresh stop flag.
    pub fn new(pool: Arc<ThreadPool>) -> Self {
        Exec {
            pool: Some(pool),
            stop: Arc::new(AtomicBool::new(false)),
            done: Arc::new(AtomicU64::new(0)),
        }
    }

    /// Runs on the calling thread alone, with a fresh stop flag (small calls, see the
    /// module doc).
    pub fn inline() -> Self {
        Exec {
            pool: None,
            stop: Arc::new(AtomicBool::new(false)),
            done: Arc::new(AtomicU64::new(0)),
        }
    }

    /// A private pool of `k` threads (tests and embedding code).
    pub fn with_threads(k: usize) -> Result<Self, CoreError> {
        crate::threads::check_threads(k)?;
        ThreadPoolBuilder::new()
            .num_threads(k)
            .build()
            .map(|p| Exec::new(Arc::new(p)))
            .map_err(|e| CoreError::InvalidThreads {
                detail: e.to_string(),
            })
    }

    /// Threads of the pool (1 inline).
    pub fn num_threads(&self) -> usize {
        self.pool.as_ref().map_or(1, |p| p.current_num_threads())
    }

    /// Runs `f` inside the pool (directly when already on one of its threads, or inline).
    pub fn install<R: Send>(&self, f: impl FnOnce() -> R + Send) -> R {
        match &self.pool {
            Some(pool) => pool.install(f),
            None => f(),
        }
    }

    /// Asks the running call to stop at its next chunk boundary.
    pub fn request_stop(&self) {
        self.stop.store(true, Ordering::Relaxed);
    }

    /// Whether a stop was requested.
    #[inline]
    pub fn stop_requested(&self) -> bool {
        self.stop.load(Ordering::Relaxed)
    }

    /// Counts `units` more of finished work (a call chooses its unit and documents it).
    #[inline]
    pub fn add_done(&self, units: u64) {
        self.done.fetch_add(units, Ordering::Relaxed);
    }

    /// Work finished so far, in the running call's units (0 for calls that do not count).
    pub fn done(&self) -> u64 {
        self.done.load(Ordering::Relaxed)
    }

    /// `Err(Interrupted)` once a stop was requested.
    pub fn check(&self) -> Result<(), CoreError> {
        if self.stop_requested() {
            Err(CoreError::Interrupted)
        } else {
            Ok(())
        }
    }

    /// Runs `work` on the pool; meanwhile the calling thread calls `watch` every `every` and
    /// requests a stop the first time it answers true. Returns what `work` returned (which,
    /// after a stop, is the kernel's `Err(Interrupted)`). A panic in `work` propagates.
    /// Inline, `work` runs on the calling thread and `watch` is never called.
    pub fn run_watched<T: Send>(
        &self,
        every: Duration,
        work: impl FnOnce(&Exec) -> T + Send,
        mut watch: impl FnMut() -> bool,
    ) -> T {
        let Some(pool) = &self.pool else {
            return work(self);
        };
        let (tx, rx) = sync_channel(1);
        let out = pool.in_place_scope(|scope| {
            scope.spawn(move |_| {
                let _ = tx.send(work(self));
            });
            let mut asked = false;
            loop {
                match rx.recv_timeout(every) {
                    Ok(v) => return Some(v),
                    Err(RecvTimeoutError::Timeout) => {
                        if !asked && watch() {
                            asked = true;
                            self.request_stop();
                        }
                    }
                    // `work` panicked before sending; the scope re-raises that panic.
                    Err(RecvTimeoutError::Disconnected) => return None,
                }
            }
        });
        out.expect("the scope re-raises a panic of the work before this point")
    }
}

/// Whether parallel loops may run here: only on a pool's thread. Elsewhere (an inline call)
/// rayon would hand them to its global pool, so they run sequentially, in the same pieces.
#[inline]
pub fn on_pool() -> bool {
    rayon::current_thread_index().is_some()
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::time::Instant;

    #[test]
    fn watched_call_returns_its_value() {
        let ex = Exec::with_threads(2).unwrap();
        let v = ex.run_watched(Duration::from_millis(5), |_| 41 + 1, || false);
        assert_eq!(v, 42);
        assert!(!ex.stop_requested());
    }

    #[test]
    fn watch_stops_a_long_call() {
        let ex = Exec::with_threads(1).unwrap();
        let start = Instant::now();
        let out = ex.run_watched(
            Duration::from_millis(10),
            |e| {
                // a call that polls its flag every millisecond and would take 10 s otherwise
                for _ in 0..10_000 {
                    e.check()?;
                    std::thread::sleep(Duration::from_millis(1));
                }
                Ok(())
            },
            || start.elapsed() > Duration::from_millis(50),
        );
        assert_eq!(out, Err(CoreError::Interrupted));
        assert!(start.elapsed() < Duration::from_secs(2));
    }

    #[test]
    fn finished_work_adds_up_across_threads() {
        use rayon::prelude::*;
        let ex = Exec::with_threads(2).unwrap();
        assert_eq!(ex.done(), 0);
        ex.install(|| (0..1000u64).into_par_iter().for_each(|i| ex.add_done(i)));
        assert_eq!(ex.done(), 999 * 1000 / 2);
        assert_eq!(ex.clone().done(), ex.done(), "clones share the count");
    }

    #[test]
    fn inline_runs_on_the_calling_thread() {
        let ex = Exec::inline();
        let caller = std::thread::current().id();
        let (on, id) = ex.run_watched(
            Duration::from_millis(5),
            |e| e.install(|| (on_pool(), std::thread::current().id())),
            || panic!("an inline call is not watched"),
        );
        assert_eq!((on, id), (false, caller));
        assert_eq!(ex.num_threads(), 1);
        let pooled = Exec::with_threads(2).unwrap();
        assert!(pooled.install(on_pool));
    }

    #[test]
    fn zero_threads_is_refused() {
        assert!(matches!(
            Exec::with_threads(0),
            Err(CoreError::InvalidThreads { .. })
        ));
    }
}
