//! Fixed work decomposition and deterministic reduction.
//!
//! A kernel pass splits the packed blocks into *groups*, each with its own accumulator, and
//! each group into [`WorkItem`]s (chunks) of at most [`CHUNK`] coefficients that its leaf
//! processes in order. Both boundaries depend only on n, the degrees and a piece count, never
//! on the number of threads. Each item covers the monomials whose first index i1 lies in
//! `lo..hi` (for p = 1: the indices `lo..hi` themselves), which are the contiguous coefficient
//! range `start..start+len` (the degree-3 Hessian re-cuts some groups into items that share
//! that range and split the second indices, [`WorkItem::second`]). [`reduce`] combines
//! per-group results along a binary tree that is fixed by the group count, so every thread
//! count gives bitwise-identical results; between chunks it polls the call's stop flag
//! ([`Exec`]).

use std::ops::Range;

use rayon::prelude::*;

use crate::combinatorics::{count_with_first, first_index_offset};
use crate::error::CoreError;
use crate::exec::{on_pool, Exec};
use crate::scratch;

/// Multiply-adds in one chunk: the granularity at which a pass notices a stop request
/// (about a millisecond of work). A chunk holds `CHUNK / width` coefficients for a kernel
/// doing `width` multiply-adds per coefficient, and never less than one first index.
pub const CHUNK: usize = 1 << 19;

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
    /// Second indices (i2) whose coefficients this item walks: `second.0..second.1`. All of
    /// them (0..n) in a [`plan`]; the degree-3 Hessian's row slabs give several items the same
    /// first indices and coefficients and each a slab of second indices (`kernels::hessian`).
    pub second: (usize, usize),
}

/// The work of one pass: chunks in storage order, and the groups of consecutive chunks that
/// share one accumulator.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Plan {
    pub items: Vec<WorkItem>,
    pub groups: Vec<Range<usize>>,
}

impl Plan {
    /// The chunks of group `g`.
    pub fn group(&self, g: usize) -> &[WorkItem] {
        &self.items[self.groups[g].clone()]
    }
}

/// The run length of first indices for kernels that take them four at a time (the degree-3
/// passes): with `quantum = QUANTUM` every group and chunk starts at a multiple of it.
pub const QUANTUM: usize = 4;

/// Cuts first indices `lo..hi` of a degree-p block into consecutive ranges of about `target`
/// coefficients each, each a whole number of runs of `quantum` first indices (the last one
/// may be shorter).
fn cut(
    n: usize,
    p: usize,
    (lo, hi): (usize, usize),
    target: usize,
    quantum: usize,
) -> Vec<(usize, usize)> {
    let (target, quantum) = (target.max(1), quantum.max(1));
    let mut out = Vec::new();
    let mut a = lo;
    while a < hi {
        let b = if p == 1 {
            (a + target.next_multiple_of(quantum)).min(hi)
        } else {
            let (mut b, mut count) = (a, 0usize);
            while b < hi && count < target {
                for s in b..(b + quantum).min(hi) {
                    count += count_with_first(n, p, s);
                }
                b = (b + quantum).min(hi);
            }
            b
        };
        out.push((a, b));
        a = b;
    }
    out
}

/// Splits the blocks (given as (degree, length) pairs) into about `pieces` groups of balanced
/// coefficient counts, each cut into chunks of about `chunk` coefficients; groups and chunks
/// hold whole runs of `quantum` first indices (1, or [`QUANTUM`] for the grouped kernels).
pub fn plan(
    n: usize,
    blocks: &[(usize, usize)],
    pieces: usize,
    chunk: usize,
    quantum: usize,
) -> Plan {
    let target = group_target(blocks, pieces);
    let (mut items, mut groups) = (Vec::new(), Vec::new());
    for (bi, &(p, len)) in blocks.iter().enumerate() {
        for (glo, ghi) in cut(n, p, (0, n), target, quantum) {
            let first = items.len();
            for (lo, hi) in cut(n, p, (glo, ghi), chunk, quantum) {
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
                    second: (0, n),
                });
            }
            groups.push(first..items.len());
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
    Plan { items, groups }
}

/// Coefficients per group that [`plan`] aims at: the total over `pieces`, at least 1.
fn group_target(blocks: &[(usize, usize)], pieces: usize) -> usize {
    let total: usize = blocks.iter().map(|b| b.1).sum();
    total.div_ceil(pieces.max(1)).max(1)
}

/// The number of groups, so of accumulators, that [`plan`] makes of these blocks (it does
/// not depend on the chunk length): each block is cut on its own, so a polynomial of several
/// degrees may have up to `pieces` + (number of blocks) groups. O(n) per block.
pub fn group_count(n: usize, blocks: &[(usize, usize)], pieces: usize, quantum: usize) -> usize {
    let target = group_target(blocks, pieces);
    blocks
        .iter()
        .map(|&(p, _)| cut(n, p, (0, n), target, quantum).len())
        .sum()
}

/// Runs `leaf(item, &mut acc)` for every chunk of every group on the pool of `exec` and
/// merges the group accumulators along a fixed binary tree (`merge(left, right)` adds right
/// into left). Once a stop is requested the remaining chunks are skipped and the result is
/// `Err(Interrupted)`.
pub fn reduce<R, Z, L, M>(
    exec: &Exec,
    plan: &Plan,
    zero: Z,
    leaf: L,
    merge: M,
) -> Result<R, CoreError>
where
    R: Send,
    Z: Fn() -> R + Sync,
    L: Fn(&WorkItem, &mut R) + Sync,
    M: Fn(&mut R, R) + Sync,
{
    struct Pass<'a, R> {
        exec: &'a Exec,
        plan: &'a Plan,
        zero: &'a (dyn Fn() -> R + Sync),
        leaf: &'a (dyn Fn(&WorkItem, &mut R) + Sync),
        merge: &'a (dyn Fn(&mut R, R) + Sync),
    }
    fn rec<R: Send>(pass: &Pass<'_, R>, groups: Range<usize>) -> R {
        if groups.len() <= 1 {
            let mut acc = (pass.zero)();
            for g in groups {
                for it in pass.plan.group(g) {
                    if pass.exec.stop_requested() {
                        return acc;
                    }
                    (pass.leaf)(it, &mut acc);
                }
            }
            return acc;
        }
        let mid = groups.start + groups.len() / 2;
        let (mut left, right) = if on_pool() {
            rayon::join(
                || rec(pass, groups.start..mid),
                || rec(pass, mid..groups.end),
            )
        } else {
            (rec(pass, groups.start..mid), rec(pass, mid..groups.end))
        };
        (pass.merge)(&mut left, right);
        left
    }
    let pass = Pass {
        exec,
        plan,
        zero: &zero,
        leaf: &leaf,
        merge: &merge,
    };
    let out = exec.install(|| rec(&pass, 0..plan.groups.len()));
    exec.check()?;
    Ok(out)
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
    exec: &Exec,
    plan: &Plan,
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
        exec,
        plan,
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
            add_into(&mut left.a, &right.a);
            add_into(&mut left.b, &right.b);
            scratch::give(right.a);
            scratch::give(right.b);
        },
    )?;
    match sums.err {
        Some(err) => Err(err),
        None => Ok((sums.a, sums.b)),
    }
}

/// Accumulators at least this long are summed by several threads (the merges run on the
/// pool, and the last one is otherwise a serial pass over n^2 numbers for a Hessian).
pub const PARALLEL_ADD_MIN: usize = 1 << 16;

/// left += right, entry by entry (so the result does not depend on how it is split).
fn add_into(left: &mut [f64], right: &[f64]) {
    const PART: usize = 1 << 13;
    if left.len() < PARALLEL_ADD_MIN || !on_pool() {
        left.iter_mut().zip(right).for_each(|(x, y)| *x += y);
        return;
    }
    left.par_chunks_mut(PART)
        .zip(right.par_chunks(PART))
        .for_each(|(l, r)| l.iter_mut().zip(r).for_each(|(x, y)| *x += y));
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::combinatorics::num_multisets;

    #[test]
    fn parallel_add_equals_serial_add_on_any_pool() {
        let len = PARALLEL_ADD_MIN + 12_345;
        let right: Vec<f64> = (0..len).map(|i| (i as f64 * 0.37).sin()).collect();
        let base: Vec<f64> = (0..len).map(|i| (i as f64 * 0.11).cos()).collect();
        let want: Vec<f64> = base.iter().zip(&right).map(|(a, b)| a + b).collect();
        for k in [1, 2, 3] {
            let mut left = base.clone();
            Exec::with_threads(k)
                .unwrap()
                .install(|| add_into(&mut left, &right));
            assert_eq!(left, want, "{k} threads");
        }
    }

    #[test]
    fn plan_covers_each_block_exactly_once() {
        for n in [1usize, 2, 7, 50, 200] {
            let blocks: Vec<(usize, usize)> = [1usize, 2, 3, 5]
                .iter()
                .filter(|&&p| n < 100 || p <= 3)
                .map(|&p| (p, num_multisets(n, p).unwrap()))
                .collect();
            for (pieces, chunk) in [(1usize, CHUNK), (3, 1000), (16, CHUNK), (64, 1 << 12)] {
                let quantum = if pieces % 2 == 0 { QUANTUM } else { 1 };
                let plan = plan(n, &blocks, pieces, chunk, quantum);
                for (bi, &(p, len)) in blocks.iter().enumerate() {
                    let mine: Vec<_> = plan.items.iter().filter(|i| i.block == bi).collect();
                    assert_eq!(mine.first().unwrap().start, 0);
                    assert_eq!(mine.first().unwrap().lo, 0);
                    assert_eq!(mine.last().unwrap().hi, n);
                    for w in mine.windows(2) {
                        assert_eq!(w[0].hi, w[1].lo);
                        assert_eq!(w[0].start + w[0].len, w[1].start);
                    }
                    assert_eq!(mine.iter().map(|i| i.len).sum::<usize>(), len);
                    // chunks start at multiples of the quantum and exceed `chunk` only by
                    // their last run of `quantum` first indices
                    for it in &mine {
                        assert_eq!(it.second, (0, n), "a plan's items take every second index");
                        assert_eq!(it.lo % quantum, 0);
                        let run = it.hi.saturating_sub(quantum).max(it.lo)..it.hi;
                        let last: usize = if p == 1 {
                            run.len()
                        } else {
                            run.map(|s| count_with_first(n, p, s)).sum()
                        };
                        assert!(it.len < chunk + last, "chunk of {} coefficients", it.len);
                    }
                }
                // groups tile the chunks in order, and a group never mixes blocks
                let mut next = 0;
                for g in &plan.groups {
                    assert_eq!(g.start, next);
                    assert!(g.end > g.start);
                    let b = plan.items[g.start].block;
                    assert!(plan.items[g.clone()].iter().all(|i| i.block == b));
                    next = g.end;
                }
                assert_eq!(next, plan.items.len());
                // the count of groups alone, without cutting chunks, is the plan's
                assert_eq!(group_count(n, &blocks, pieces, quantum), plan.groups.len());
            }
        }
    }

    #[test]
    fn reduce_is_deterministic_across_pools() {
        let blocks = [(3usize, num_multisets(200, 3).unwrap())];
        let plan = plan(200, &blocks, 4, 1 << 16, QUANTUM);
        assert!(
            plan.items.len() > plan.groups.len(),
            "groups hold several chunks"
        );
        let run = |k: usize| {
            reduce(
                &Exec::with_threads(k).unwrap(),
                &plan,
                || 0.0f64,
                |it, acc| *acc += (it.start as f64 + 0.1).sqrt() * 1e-3 + 1.0 / (it.len as f64),
                |a, b| *a += b,
            )
            .unwrap()
        };
        let one = run(1);
        for k in [2, 3, 4] {
            assert_eq!(run(k).to_bits(), one.to_bits());
        }
    }

    #[test]
    fn a_stop_request_skips_the_remaining_chunks() {
        let blocks = [(3usize, num_multisets(150, 3).unwrap())];
        let plan = plan(150, &blocks, 1, CHUNK, 1);
        let exec = Exec::with_threads(1).unwrap();
        let seen = std::sync::atomic::AtomicUsize::new(0);
        let out = reduce(
            &exec,
            &plan,
            || (),
            |_, _| {
                if seen.fetch_add(1, std::sync::atomic::Ordering::Relaxed) == 1 {
                    exec.request_stop();
                }
            },
            |_, _| (),
        );
        assert_eq!(out, Err(CoreError::Interrupted));
        assert_eq!(seen.into_inner(), 2, "no chunk runs after the request");
    }
}
