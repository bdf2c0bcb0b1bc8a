//! The process-wide thread pool that every kernel call runs on.
//!
//! Kernels take the pool as an argument; this module only owns the one pool the Python
//! package uses, sized by [`set_num_threads`] or, before the first call, by the environment
//! variable `ORTHOCLIMB_NUM_THREADS` (default: all available cores).
//!
//! A process made by `fork` (Python's `multiprocessing` on Linux before 3.14, `os.fork`)
//! inherits the pool's bookkeeping but none of its threads, so a job handed to it would wait
//! forever. The pool therefore records the process it was built in, and a call from another
//! process builds a fresh pool of the same size. The inherited one is leaked, not dropped:
//! dropping it would signal threads that do not exist, through locks they may have held.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, RwLock};

use rayon::{ThreadPool, ThreadPoolBuilder};

use crate::error::CoreError;
use crate::exec::Exec;

/// The pool's thread count, the id of the process that built it, and the pool.
type Slot = Option<(usize, u32, Arc<ThreadPool>)>;

static POOL: RwLock<Slot> = RwLock::new(None);

/// Name of the environment variable read for the default thread count.
pub const ENV_VAR: &str = "ORTHOCLIMB_NUM_THREADS";

/// Most threads a pool may have. A larger request is a typo, not a machine: building it
/// would try to start that many OS threads before failing (seconds to minutes, and memory).
pub const MAX_THREADS: usize = 1024;

/// `Ok(k)` for 1 <= k <= [`MAX_THREADS`], else the error naming k.
pub fn check_threads(k: usize) -> Result<usize, CoreError> {
    if (1..=MAX_THREADS).contains(&k) {
        Ok(k)
    } else {
        Err(CoreError::InvalidThreads {
            detail: format!("thread count must be in 1..{MAX_THREADS}, got {k}"),
        })
    }
}

fn build(k: usize) -> Result<Arc<ThreadPool>, CoreError> {
    check_threads(k)?;
    ThreadPoolBuilder::new()
        .num_threads(k)
        .thread_name(|i| format!("orthoclimb-{i}"))
        .build()
        .map(Arc::new)
        .map_err(|e| CoreError::InvalidThreads {
            detail: format!("cannot start a pool of {k} threads: {e}"),
        })
}

/// The default thread count: `ORTHOCLIMB_NUM_THREADS` if set, else the available cores. Set
/// to nothing or blanks (`ORTHOCLIMB_NUM_THREADS= python ...`, a job script's empty
/// substitution) counts as not set, as the CLI already read it.
pub fn default_threads() -> Result<usize, CoreError> {
    match std::env::var(ENV_VAR) {
        Ok(text) if text.trim().is_empty() => Ok(available_threads()),
        Ok(text) => text
            .trim()
            .parse::<usize>()
            .ok()
            .and_then(|k| check_threads(k).ok())
            .ok_or_else(|| CoreError::InvalidThreads {
                detail: format!("{ENV_VAR} must be an integer in 1..{MAX_THREADS}, got {text:?}"),
            }),
        Err(std::env::VarError::NotUnicode(raw)) => Err(CoreError::InvalidThreads {
            detail: format!("{ENV_VAR} must be an integer in 1..{MAX_THREADS}, got {raw:?}"),
        }),
        Err(std::env::VarError::NotPresent) => Ok(available_threads()),
    }
}

/// The available cores, capped at [`MAX_THREADS`]: a host of more logical processors would
/// otherwise make every call fail its thread check.
fn available_threads() -> usize {
    std::thread::available_parallelism()
        .map(|n| n.get().min(MAX_THREADS))
        .unwrap_or(1)
}

/// Puts `pool` of `k` threads in `slot`. A pool inherited through `fork` is leaked (see the
/// module doc); one of this process is dropped once its running calls let go of it.
fn install(slot: &mut Slot, k: usize, pool: Arc<ThreadPool>) {
    let old = slot.replace((k, std::process::id(), pool));
    if let Some((_, pid, stale)) = old {
        if pid != std::process::id() {
            std::mem::forget(stale);
        }
    }
}

/// Replaces the shared pool by one with `k` threads.
pub fn set_num_threads(k: usize) -> Result<(), CoreError> {
    let pool = build(k)?;
    install(
        &mut POOL.write().unwrap_or_else(|e| e.into_inner()),
        k,
        pool,
    );
    Ok(())
}

/// The shared pool: built on first use, and built again (same size) in a forked child.
pub fn shared_pool() -> Result<Arc<ThreadPool>, CoreError> {
    let here = std::process::id();
    if let Some((_, pid, p)) = POOL.read().unwrap_or_else(|e| e.into_inner()).as_ref() {
        if *pid == here {
            return Ok(Arc::clone(p));
        }
    }
    let mut guard = POOL.write().unwrap_or_else(|e| e.into_inner());
    let k = match guard.as_ref() {
        Some((_, pid, p)) if *pid == here => return Ok(Arc::clone(p)),
        Some((k, _, _)) => *k, // inherited through fork: the same size, new threads
        None => default_threads()?,
    };
    let pool = build(k)?;
    install(&mut guard, k, Arc::clone(&pool));
    Ok(pool)
}

/// Threads of the shared pool.
pub fn num_threads() -> Result<usize, CoreError> {
    shared_pool().map(|p| p.current_num_threads())
}

/// The work, in coefficient passes (one read of a coefficient with one multiply-add, about
/// 0.3 ns on one thread of the Xeon measured), below which a call on two threads runs
/// inline ([`runs_inline`]). Handing a call to the pool and back costs two thread wake-ups
/// plus one for the second worker: 45-55 us for a call of no work on that virtual machine,
/// against 9-12 us inline. Measured with two threads, in blocks of 60 calls at p = 3, inline
/// time over pool time: single-point energy, gradient and Hessian 0.17-0.40 at n = 20-50,
/// 0.61-0.84 at n = 100-130, 0.76-0.87 at n = 160 and 0.80-1.03 at n = 200 (1.35 M
/// coefficients); a batch of 32 points (5 passes) 0.86 at n = 80-100 and 1.03 at n = 130
/// (1.9 M passes).
pub const INLINE_PASSES: u64 = 1 << 20;

/// Whether a call of `work` coefficient passes runs on the calling thread alone rather than
/// on a pool of `k` threads. The pool saves at most (1 - 1/k) of the call's time and costs a
/// fixed hand-over, so the bound is [`INLINE_PASSES`] at two threads and falls towards half
/// of it with many; one thread gains nothing from the pool but the Ctrl-C watch, which only
/// calls of more than about 5 ms (16 [`INLINE_PASSES`]) need.
///
/// `bound` stands for [`INLINE_PASSES`] ([`set_inline_passes`] changes it; 0: never inline).
pub fn runs_inline(work: u64, k: usize, bound: u64) -> bool {
    if k <= 1 {
        return u128::from(work) < 16 * u128::from(bound);
    }
    u128::from(work) * 2 * (k as u128 - 1) < u128::from(bound) * k as u128
}

/// The bound [`exec_for`] uses, [`INLINE_PASSES`] unless set.
static INLINE_BOUND: AtomicU64 = AtomicU64::new(INLINE_PASSES);

/// Sets the bound of [`runs_inline`] for later calls and returns the previous one (0 sends
/// every call to the pool: tests use it to compare the two ways of running bit for bit).
pub fn set_inline_passes(bound: u64) -> u64 {
    INLINE_BOUND.swap(bound, Ordering::Relaxed)
}

/// Where a call of `work` coefficient passes split into `items` work items runs: inline
/// ([`Exec::inline`]) when [`runs_inline`] says so for the threads that can share it (the
/// shared pool's, at most `items`), else on the shared pool. A call of one item gains
/// nothing from the pool (a p = 3 Hessian at n = 150, two threads: 491 us there, 361 us
/// inline).
pub fn exec_for(work: u64, items: usize) -> Result<Exec, CoreError> {
    let pool = shared_pool()?;
    let bound = INLINE_BOUND.load(Ordering::Relaxed);
    let sharing = pool.current_num_threads().min(items.max(1));
    Ok(if runs_inline(work, sharing, bound) {
        Exec::inline()
    } else {
        Exec::new(pool)
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::sync::Mutex;

    /// Held by the tests that change the shared pool, which cargo runs on parallel threads.
    static SHARED: Mutex<()> = Mutex::new(());

    #[test]
    fn set_and_get() {
        let _one = SHARED.lock().unwrap_or_else(|e| e.into_inner());
        set_num_threads(3).unwrap();
        assert_eq!(num_threads().unwrap(), 3);
        assert!(set_num_threads(0).is_err());
        assert!(set_num_threads(MAX_THREADS + 1).is_err());
        assert!(set_num_threads(usize::MAX).is_err());
        assert_eq!(
            num_threads().unwrap(),
            3,
            "a refused setting keeps the old pool"
        );
    }

    /// A pool recorded under another process id (what a forked child sees) is replaced by a
    /// new pool of the same size that runs work, and the inherited one is not dropped.
    #[test]
    fn a_pool_inherited_through_fork_is_rebuilt_at_its_size() {
        let _one = SHARED.lock().unwrap_or_else(|e| e.into_inner());
        let stale = build(2).unwrap();
        let watch = Arc::downgrade(&stale);
        {
            let mut guard = POOL.write().unwrap_or_else(|e| e.into_inner());
            *guard = Some((2, std::process::id().wrapping_add(1), stale));
        }
        let fresh = shared_pool().unwrap();
        assert_eq!(fresh.current_num_threads(), 2);
        assert!(fresh.install(|| rayon::current_thread_index().is_some()));
        assert!(
            watch.upgrade().is_some(),
            "the inherited pool is leaked, not dropped"
        );
        let again = shared_pool().unwrap();
        assert!(Arc::ptr_eq(&fresh, &again), "built once per process");
    }

    /// The inline bound: INLINE_PASSES at two threads, lower with more threads (never below
    /// half), 16 times higher on one thread, and no overflow at the largest work.
    #[test]
    fn small_calls_run_inline() {
        let bound = |k: usize| {
            let (mut lo, mut hi) = (0u64, 64 * INLINE_PASSES);
            while lo < hi {
                let mid = (lo + hi) / 2;
                if runs_inline(mid, k, INLINE_PASSES) {
                    lo = mid + 1;
                } else {
                    hi = mid;
                }
            }
            lo
        };
        assert_eq!(bound(2), INLINE_PASSES);
        assert_eq!(bound(1), 16 * INLINE_PASSES);
        assert!(bound(4) < bound(2) && bound(4) > bound(64) && bound(64) >= INLINE_PASSES / 2);
        for k in [1, 2, 64, MAX_THREADS] {
            assert!(runs_inline(0, k, INLINE_PASSES), "{k} threads");
            assert!(!runs_inline(u64::MAX, k, INLINE_PASSES), "{k} threads");
            // u128 arithmetic: the largest work and bound neither overflow nor panic
            let largest = runs_inline(u64::MAX - 1, k, u64::MAX);
            assert_eq!(largest, k <= 2, "{k} threads");
            assert!(!runs_inline(0, k, 0), "a bound of 0 never runs inline");
        }
    }
}
