//! A small cache of zeroed f64 buffers for kernel accumulators.
//!
//! The Hessian needs one n x n accumulator per work group; allocating them afresh on every
//! call costs a page fault per 4 KiB touched (and freeing them a TLB flush on every core),
//! which at n = 400 is as long as the arithmetic and at n = 120 with 16 groups a tenth of
//! the call. Buffers handed back after a merge are kept here, at most [`MAX_KEPT`] of them
//! of any lengths (the oldest is dropped first, so a gradient at large n does not push out
//! the Hessian buffers of the same n), and zeroed again on reuse. Allocation failure is an
//! error, never an abort.

use std::sync::Mutex;

use crate::error::{try_zeroed, CoreError};

/// Most buffers kept between calls.
pub const MAX_KEPT: usize = 16;
/// Buffers shorter than this (16 KiB) are left to the allocator. Larger ones were what came
/// back as page faults: glibc returns freed memory to the system once its free top block
/// passes 128 KiB, which a few freed 115 KB accumulators (n = 120) already make.
pub const MIN_CACHED_LEN: usize = 1 << 11;

/// Buffers by age, oldest first; at most `MAX_KEPT`.
struct Kept(Vec<Vec<f64>>);

impl Kept {
    /// Takes out the most recently kept buffer of exactly `len` numbers.
    fn take(&mut self, len: usize) -> Option<Vec<f64>> {
        let at = self.0.iter().rposition(|b| b.len() == len)?;
        Some(self.0.remove(at))
    }

    /// Keeps `buf`, returning the oldest buffer when that makes one too many.
    fn keep(&mut self, buf: Vec<f64>) -> Option<Vec<f64>> {
        let oldest = (self.0.len() >= MAX_KEPT).then(|| self.0.remove(0));
        self.0.push(buf);
        oldest
    }
}

static KEPT: Mutex<Kept> = Mutex::new(Kept(Vec::new()));

fn kept() -> std::sync::MutexGuard<'static, Kept> {
    KEPT.lock().unwrap_or_else(|e| e.into_inner())
}

/// A zeroed buffer of `len` numbers, reused from the cache when one of that length is there.
pub fn take(len: usize) -> Result<Vec<f64>, CoreError> {
    if len >= MIN_CACHED_LEN {
        if let Some(mut buf) = kept().take(len) {
            buf.fill(0.0);
            return Ok(buf);
        }
    }
    try_zeroed(len)
}

/// Returns a buffer to the cache; when [`MAX_KEPT`] are kept already, the oldest is dropped.
pub fn give(buf: Vec<f64>) {
    if buf.len() < MIN_CACHED_LEN {
        return;
    }
    let evicted = kept().keep(buf);
    drop(evicted); // freed after the lock is released
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reuse by exact length, newest first, and the oldest buffer dropped past `MAX_KEPT`
    /// (on a private cache, so tests running at the same time cannot interfere).
    #[test]
    fn kept_buffers_are_reused_by_length_and_the_oldest_goes_first() {
        let mut k = Kept(Vec::new());
        assert!(k.keep(vec![5.0; 40]).is_none());
        for i in 0..3 {
            assert!(k.keep(vec![i as f64; 30]).is_none());
        }
        assert_eq!(k.take(30), Some(vec![2.0; 30]), "newest of that length");
        assert_eq!(
            k.take(40),
            Some(vec![5.0; 40]),
            "another length is not pushed out"
        );
        assert_eq!(k.take(41), None);
        k.keep(vec![9.0; 40]); // behind [0.0; 30] and [1.0; 30]
        for _ in 0..MAX_KEPT - 3 {
            assert!(k.keep(vec![1.0; 30]).is_none());
        }
        assert_eq!(k.0.len(), MAX_KEPT);
        assert_eq!(
            k.keep(vec![1.0; 30]),
            Some(vec![0.0; 30]),
            "oldest dropped first"
        );
        assert_eq!(k.keep(vec![1.0; 30]), Some(vec![1.0; 30]));
        assert_eq!(k.keep(vec![1.0; 30]), Some(vec![9.0; 40]));
        assert_eq!(k.0.len(), MAX_KEPT);
        assert_eq!(k.take(40), None);
    }

    /// The global cache hands back zeroed buffers, and never caches small ones.
    #[test]
    fn take_returns_zeroed_buffers() {
        let len = MIN_CACHED_LEN + 3; // a length no other test uses
        give(vec![7.0; len]);
        assert_eq!(take(len).unwrap(), vec![0.0; len]);
        give(vec![7.0; 3]);
        assert_eq!(take(3).unwrap(), vec![0.0; 3]);
    }
}
