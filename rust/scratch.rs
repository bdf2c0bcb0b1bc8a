//! A small cache of zeroed f64 buffers for kernel accumulators.
//!
//! The Hessian needs one n x n accumulator per work group; allocating them afresh on every
//! call costs a page fault per 4 KiB touched (and freeing them a TLB flush on every core),
//! which at n = 400 is as long as the arithmetic and at n = 120 with 16 groups a tenth of
//! the call. Buffers handed back after a merge are kept here, at most [`MAX_KEPT`] of them
//! of any lengths and [`MAX_KEPT_LEN`] numbers (256 MiB) in all (the oldest is dropped first,
//! so a gradient at large n does not push out the Hessian buffers of the same n), and zeroed
//! again on reuse. The total bound keeps a process that computes Hessians over a range of
//! large n from holding one n x n buffer per size for its whole life. Allocation failure is
//! an error, never an abort.

use std::sync::Mutex;

use crate::error::{try_zeroed, CoreError};

/// Most buffers kept between calls.
pub const MAX_KEPT: usize = 16;
/// Most numbers kept in all (2^25 f64, 256 MiB); a longer buffer is never kept. The
/// accumulators of a p = 3 Hessian fit up to n = 2000 (8 of 32 MB; the pass itself reads
/// 10.7 GB there).
pub const MAX_KEPT_LEN: usize = 1 << 25;
/// Buffers shorter than this (16 KiB) are left to the allocator. Larger ones were what came
/// back as page faults: glibc returns freed memory to the system once its free top block
/// passes 128 KiB, which a few freed 115 KB accumulators (n = 120) already make.
pub const MIN_CACHED_LEN: usize = 1 << 11;

/// Buffers by age, oldest first; at most `MAX_KEPT` of them and `MAX_KEPT_LEN` numbers.
struct Kept(Vec<Vec<f64>>);

impl Kept {
    /// Takes out the most recently kept buffer of exactly `len` numbers.
    fn take(&mut self, len: usize) -> Option<Vec<f64>> {
        let at = self.0.iter().rposition(|b| b.len() == len)?;
        Some(self.0.remove(at))
    }

    /// Keeps `buf` and returns what no longer fits: the oldest buffers while there are more
    /// than `MAX_KEPT` or more than `MAX_KEPT_LEN` numbers, or `buf` itself when it alone is
    /// longer than that.
    fn keep(&mut self, buf: Vec<f64>) -> Vec<Vec<f64>> {
        if buf.len() > MAX_KEPT_LEN {
            return vec![buf];
        }
        self.0.push(buf);
        let mut total: usize = self.0.iter().map(Vec::len).sum();
        let mut dropped = Vec::new();
        while self.0.len() > MAX_KEPT || total > MAX_KEPT_LEN {
            let oldest = self.0.remove(0);
            total -= oldest.len();
            dropped.push(oldest);
        }
        dropped
    }
}

static KEPT: Mutex<Kept> = Mutex::new(Kept(Vec::new()));

/// The cache, or None while another thread holds it: then the caller goes without it (a
/// fresh buffer, or one dropped) instead of waiting. The lock is held only to move a buffer
/// in or out, so this is rare; and a process made by `fork` while a worker held the lock
/// inherits it locked forever, where waiting would hang its every Hessian.
fn kept() -> Option<std::sync::MutexGuard<'static, Kept>> {
    match KEPT.try_lock() {
        Ok(guard) => Some(guard),
        Err(std::sync::TryLockError::Poisoned(e)) => Some(e.into_inner()),
        Err(std::sync::TryLockError::WouldBlock) => None,
    }
}

/// A zeroed buffer of `len` numbers, reused from the cache when one of that length is there
/// (zeroed after the lock is released).
pub fn take(len: usize) -> Result<Vec<f64>, CoreError> {
    if len >= MIN_CACHED_LEN {
        let hit = kept().and_then(|mut k| k.take(len));
        if let Some(mut buf) = hit {
            buf.fill(0.0);
            return Ok(buf);
        }
    }
    try_zeroed(len)
}

/// Returns a buffer to the cache; the oldest ones are dropped past [`MAX_KEPT`] buffers or
/// [`MAX_KEPT_LEN`] numbers (and `buf` itself when the cache is busy).
pub fn give(buf: Vec<f64>) {
    if buf.len() < MIN_CACHED_LEN {
        return;
    }
    let evicted = match kept() {
        Some(mut k) => k.keep(buf),
        None => vec![buf],
    };
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
        assert!(k.keep(vec![5.0; 40]).is_empty());
        for i in 0..3 {
            assert!(k.keep(vec![i as f64; 30]).is_empty());
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
            assert!(k.keep(vec![1.0; 30]).is_empty());
        }
        assert_eq!(k.0.len(), MAX_KEPT);
        assert_eq!(
            k.keep(vec![1.0; 30]),
            vec![vec![0.0; 30]],
            "oldest dropped first"
        );
        assert_eq!(k.keep(vec![1.0; 30]), vec![vec![1.0; 30]]);
        assert_eq!(k.keep(vec![1.0; 30]), vec![vec![9.0; 40]]);
        assert_eq!(k.0.len(), MAX_KEPT);
        assert_eq!(k.take(40), None);
    }

    /// At most MAX_KEPT_LEN numbers stay: a large buffer pushes out as many old ones as it
    /// needs, and one longer than the bound is handed back at once.
    #[test]
    fn kept_buffers_stay_within_the_total_length() {
        let mut k = Kept(Vec::new());
        let (quarter, small) = (MAX_KEPT_LEN / 4, MIN_CACHED_LEN);
        assert!(k.keep(vec![1.0; small]).is_empty());
        for _ in 0..3 {
            assert!(k.keep(vec![0.0; quarter]).is_empty());
        }
        let dropped = k.keep(vec![0.0; 2 * quarter]);
        assert_eq!(
            dropped.iter().map(Vec::len).collect::<Vec<_>>(),
            vec![small, quarter],
            "oldest first, until the total fits"
        );
        assert_eq!(k.0.iter().map(Vec::len).sum::<usize>(), MAX_KEPT_LEN);
        let whole = k.keep(vec![0.0; MAX_KEPT_LEN + 1]);
        assert_eq!(whole.len(), 1);
        assert_eq!(whole[0].len(), MAX_KEPT_LEN + 1, "too long to keep at all");
        assert_eq!(k.0.len(), 3, "and nothing else was pushed out for it");
    }

    /// While another thread holds the cache (as a worker of the parent may at a `fork`, in
    /// which case it stays held in the child), `take` and `give` go without it instead of
    /// waiting: a fresh zeroed buffer, a dropped one.
    #[test]
    fn a_held_cache_is_skipped_not_waited_on() {
        let len = MIN_CACHED_LEN + 5; // a length no other test uses
        give(vec![3.0; len]);
        let held = KEPT.lock().unwrap_or_else(|e| e.into_inner());
        let (tx, rx) = std::sync::mpsc::channel();
        std::thread::spawn(move || {
            let buf = take(len).unwrap();
            give(vec![4.0; len]);
            let _ = tx.send(buf);
        });
        let got = rx.recv_timeout(std::time::Duration::from_secs(10));
        drop(held);
        assert_eq!(
            got.expect("take/give waited on a held cache"),
            vec![0.0; len]
        );
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
