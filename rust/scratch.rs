//! A small cache of zeroed f64 buffers for kernel accumulators.
//!
//! The Hessian needs one n x n accumulator per work group; allocating them afresh on every
//! call costs a page fault per 4 KiB touched, which at n = 400 is as long as the arithmetic.
//! Buffers handed back after a merge are kept here (only of the most recently used length,
//! at most [`MAX_KEPT`] of them) and zeroed again on reuse. Allocation failure is an error,
//! never an abort.

use std::sync::Mutex;

use crate::error::{try_zeroed, CoreError};

/// Most buffers kept between calls.
pub const MAX_KEPT: usize = 16;
/// Buffers shorter than this are not worth caching (allocation is cheap for them).
pub const MIN_CACHED_LEN: usize = 1 << 14;

static KEPT: Mutex<Vec<Vec<f64>>> = Mutex::new(Vec::new());

/// A zeroed buffer of `len` numbers, reused from the cache when one of that length is there.
pub fn take(len: usize) -> Result<Vec<f64>, CoreError> {
    if len >= MIN_CACHED_LEN {
        let reused = KEPT.lock().unwrap_or_else(|e| e.into_inner()).pop();
        if let Some(mut buf) = reused {
            if buf.len() == len {
                buf.fill(0.0);
                return Ok(buf);
            }
        }
    }
    try_zeroed(len)
}

/// Returns a buffer to the cache. Buffers of another length than the cached ones replace them.
pub fn give(buf: Vec<f64>) {
    if buf.len() < MIN_CACHED_LEN {
        return;
    }
    let mut kept = KEPT.lock().unwrap_or_else(|e| e.into_inner());
    if kept.first().is_some_and(|b| b.len() != buf.len()) {
        kept.clear();
    }
    if kept.len() < MAX_KEPT {
        kept.push(buf);
    }
}

/// Drops every cached buffer.
pub fn clear() {
    KEPT.lock().unwrap_or_else(|e| e.into_inner()).clear();
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn reused_buffers_come_back_zeroed_and_cache_is_bounded() {
        let len = MIN_CACHED_LEN + 3;
        let mut a = take(len).unwrap();
        a.fill(7.0);
        give(a);
        let b = take(len).unwrap();
        assert_eq!(b.len(), len);
        assert!(b.iter().all(|&v| v == 0.0));
        for _ in 0..(MAX_KEPT + 5) {
            give(vec![1.0; len]);
        }
        assert!(KEPT.lock().unwrap().len() <= MAX_KEPT);
        give(vec![1.0; len + 1]);
        assert!(KEPT.lock().unwrap().iter().all(|v| v.len() == len + 1));
        clear();
        assert!(KEPT.lock().unwrap().is_empty());
        let small = take(3).unwrap();
        assert_eq!(small, vec![0.0; 3]);
    }
}
