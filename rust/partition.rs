//! Fixed work decomposition and deterministic reduction.
//!
//! A kernel pass splits the packed blocks into [`WorkItem`]s whose boundaries depend only on
//! n, the degrees and a piece count, never on the number of threads. Each item covers the
//! monomials whose first index i1 lies in `lo..hi` (for p = 1: the indices `lo..hi`
//! themselves), which are the contiguous coefficient range `start..start+len`.
//! [`reduce`] combines per-item results along a binary tree that is fixed by the item count,
//! so every thread count gives bitwise-identical results.

use rayon::ThreadPool;

use crate::combinatorics::{count_with_first, first_index_offset};
use crate::error::CoreError;
use crate::scratch;

/// One contiguous piece of one degree block.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct WorkItem {
    /// Position of the block in the polynomial.
    pub block: usize,
    /// The block's degree p.
    pub degree: usize,
    /// First indices (i1) covered: `lo..hi`.
    pub lo: usize,
    pub hi: usize,
    /// Coefficient range of the block covered by this item.
    pub start: usize,
    pub len: usize,
}

/// Splits the blocks (given as (degree, length) pairs) into about `pieces` items of balanced
/// coefficient counts.
pub fn plan(n: usize, blocks: &[(usize, usize)], pieces: usize) -> Vec<WorkItem> {
    let total: usize = blocks.iter().map(|b| b.1).sum();
    let target = total.div_ceil(pieces.max(1)).max(1);
    let mut items = Vec::new();
    for (bi, &(p, len)) in blocks.iter().enumerate() {
        let mut lo = 0usize;
        while lo < n {
            let hi = if p == 1 {
                (lo + target).min(n)
            } else {
                let mut hi = lo;
                let mut count = 0usize;
                while hi < n && count < target {
                    count += count_with_first(n, p, hi);
                    hi += 1;
                }
                hi
            };
            let (start, end) = if p == 1 {
                (lo, hi)
            } else {
                (first_index_offset(n, p, lo), first_index_offset(n, p, hi))
            };
            items.push(WorkItem {
                block: bi,
                degree: p,
                lo,
                hi,
                start,
                len: end - start,
            });
            lo = hi;
        }
        debug_assert_eq!(
            items
                .iter()
                .filter(|i| i.block == bi)
                .map(|i| i.len)
                .sum::<usize>(),
            len
        );
    }
    items
}

/// Runs `leaf(item, &mut acc)` for every item on `pool` and merges the accumulators along a
/// fixed binary tree (`merge(left, right)` adds right into left).
pub fn reduce<R, Z, L, M>(pool: &ThreadPool, items: &[WorkItem], zero: Z, leaf: L, merge: M) -> R
where
    R: Send,
    Z: Fn() -> R + Sync,
    L: Fn(&WorkItem, &mut R) + Sync,
    M: Fn(&mut R, R) + Sync,
{
    fn rec<R: Send>(
        items: &[WorkItem],
        zero: &(dyn Fn() -> R + Sync),
        leaf: &(dyn Fn(&WorkItem, &mut R) + Sync),
        merge: &(dyn Fn(&mut R, R) + Sync),
    ) -> R {
        if items.len() <= 1 {
            let mut acc = zero();
            for it in items {
                leaf(it, &mut acc);
            }
            return acc;
        }
        let mid = items.len() / 2;
        let (mut left, right) = rayon::join(
            || rec(&items[..mid], zero, leaf, merge),
            || rec(&items[mid..], zero, leaf, merge),
        );
        merge(&mut left, right);
        left
    }
    pool.install(|| rec(items, &zero, &leaf, &merge))
}

/// Per-leaf pair of zeroed f64 accumulators, or the allocation error that prevented them.
struct Sums {
    a: Vec<f64>,
    b: Vec<f64>,
    err: Option<CoreError>,
}

/// [`reduce`] with two f64 accumulators of lengths `a_len` and `b_len` per leaf, summed
/// entry by entry along the fixed tree. `leaf(item, a, b)` adds the item's contribution.
/// An accumulator that cannot be allocated makes the whole call an error (no abort).
/// Accumulators come from, and merged ones go back to, the [`scratch`] cache.
pub fn reduce_sums<L>(
    pool: &ThreadPool,
    items: &[WorkItem],
    a_len: usize,
    b_len: usize,
    leaf: L,
) -> Result<(Vec<f64>, Vec<f64>), CoreError>
where
    L: Fn(&WorkItem, &mut [f64], &mut [f64]) + Sync,
{
    let zero = || match (scratch::take(a_len), scratch::take(b_len)) {
        (Ok(a), Ok(b)) => Sums { a, b, err: None },
        (Err(err), _) | (_, Err(err)) => Sums {
            a: Vec::new(),
            b: Vec::new(),
            err: Some(err),
        },
    };
    let sums = reduce(
        pool,
        items,
        zero,
        |it, acc| {
            if acc.err.is_none() {
                leaf(it, &mut acc.a, &mut acc.b);
            }
        },
        |left, right| {
            if left.err.is_some() {
                return;
            }
            if right.err.is_some() {
                *left = right;
                return;
            }
            for (x, y) in left.a.iter_mut().zip(&right.a) {
                *x += y;
            }
            for (x, y) in left.b.iter_mut().zip(&right.b) {
                *x += y;
            }
            scratch::give(right.a);
            scratch::give(right.b);
        },
    );
    match sums.err {
        Some(err) => Err(err),
        None => Ok((sums.a, sums.b)),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::combinatorics::num_multisets;

    #[test]
    fn plan_covers_each_block_exactly_once() {
        for n in [1usize, 2, 7, 50] {
            let blocks: Vec<(usize, usize)> = [1usize, 2, 3, 5]
                .iter()
                .map(|&p| (p, num_multisets(n, p).unwrap()))
                .collect();
            for pieces in [1usize, 3, 16, 64] {
                let items = plan(n, &blocks, pieces);
                for (bi, &(_, len)) in blocks.iter().enumerate() {
                    let mine: Vec<_> = items.iter().filter(|i| i.block == bi).collect();
                    assert_eq!(mine.first().unwrap().start, 0);
                    assert_eq!(mine.first().unwrap().lo, 0);
                    assert_eq!(mine.last().unwrap().hi, n);
                    for w in mine.windows(2) {
                        assert_eq!(w[0].hi, w[1].lo);
                        assert_eq!(w[0].start + w[0].len, w[1].start);
                    }
                    assert_eq!(mine.iter().map(|i| i.len).sum::<usize>(), len);
                }
            }
        }
    }

    #[test]
    fn reduce_is_deterministic_across_pools() {
        let blocks = [(3usize, num_multisets(60, 3).unwrap())];
        let items = plan(60, &blocks, 32);
        let run = |k: usize| {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(k)
                .build()
                .unwrap();
            reduce(
                &pool,
                &items,
                || 0.0f64,
                |it, acc| *acc += (it.start as f64 + 0.1).sqrt() * 1e-3 + 1.0 / (it.len as f64),
                |a, b| *a += b,
            )
        };
        let one = run(1);
        for k in [2, 3, 4] {
            assert_eq!(run(k).to_bits(), one.to_bits());
        }
    }
}
