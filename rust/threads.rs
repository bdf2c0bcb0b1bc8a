//! The process-wide thread pool that every kernel call runs on.
//!
//! Kernels take the pool as an argument; this module only owns the one pool the Python
//! package uses, sized by [`set_num_threads`] or, before the first call, by the environment
//! variable `ORTHOCLIMB_NUM_THREADS` (default: all available cores).

use std::sync::{Arc, RwLock};

use rayon::{ThreadPool, ThreadPoolBuilder};

use crate::error::CoreError;

static POOL: RwLock<Option<(usize, Arc<ThreadPool>)>> = RwLock::new(None);

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
            detail: format!("thread count must be in 1..={MAX_THREADS}, got {k}"),
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
            detail: e.to_string(),
        })
}

/// The default thread count: `ORTHOCLIMB_NUM_THREADS` if set, else the available cores.
pub fn default_threads() -> Result<usize, CoreError> {
    match std::env::var(ENV_VAR) {
        Ok(text) => match text.trim().parse::<usize>() {
            Ok(k) if (1..=MAX_THREADS).contains(&k) => Ok(k),
            _ => Err(CoreError::InvalidThreads {
                detail: format!("{ENV_VAR} must be an integer in 1..={MAX_THREADS}, got {text:?}"),
            }),
        },
        Err(_) => Ok(std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)),
    }
}

/// Replaces the shared pool by one with `k` threads.
pub fn set_num_threads(k: usize) -> Result<(), CoreError> {
    let pool = build(k)?;
    *POOL.write().unwrap_or_else(|e| e.into_inner()) = Some((k, pool));
    Ok(())
}

/// The shared pool (built on first use).
pub fn shared_pool() -> Result<Arc<ThreadPool>, CoreError> {
    if let Some((_, p)) = POOL.read().unwrap_or_else(|e| e.into_inner()).as_ref() {
        return Ok(Arc::clone(p));
    }
    let mut guard = POOL.write().unwrap_or_else(|e| e.into_inner());
    if let Some((_, p)) = guard.as_ref() {
        return Ok(Arc::clone(p));
    }
    let k = default_threads()?;
    let pool = build(k)?;
    *guard = Some((k, Arc::clone(&pool)));
    Ok(pool)
}

/// Threads of the shared pool.
pub fn num_threads() -> Result<usize, CoreError> {
    shared_pool().map(|p| p.current_num_threads())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn set_and_get() {
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
}
