//! The full Hessian, accumulated as the upper part A of the module formulas of
//! [`crate::kernels`] (A[ij, t] += Q_j a_t, A[ij, ik] += R_jk S) and returned as A + A^T.
//!
//! Each group of work items adds into an n x n accumulator of its own (the number of groups,
//! [`super::accumulator_count`]: about [`super::pieces`] in all, each degree cut on its own,
//! depends on the instance only); the accumulators are merged along a
//! fixed tree and the transpose is added in place by bands of rows, so the result is bitwise
//! the same on any number of threads.

use rayon::prelude::*;

use super::{check_len, four_segments, gather, items_for, pieces, segment3, PrefixProducts};
use crate::error::CoreError;
use crate::exec::{on_pool, Exec};
use crate::partition::{reduce_sums, Plan, WorkItem, QUANTUM};
use crate::prefix::{leave_one_out, leave_two_out, Prefixes, MAX_PREFIX};
use crate::quads::{hessian4_quads, hessian_quads};
use crate::simd::{axpy, dot_axpy, dot_axpy2, rows4, simd_dispatch, Madd};
use crate::storage::{Coef, Packed};

/// The Hessian contribution of one prefix `pre` (sorted, last index t0) with coefficient
/// segment `seg` over t = t0..n, the plain way (see the module doc).
#[inline(always)]
fn hessian_prefix<M: Madd, T: Coef>(
    n: usize,
    seg: &[T],
    (t0, pre): (usize, &[usize]),
    x: &[f64],
    acc: &mut [f64],
    pp: &mut PrefixProducts,
) {
    let l = pre.len();
    gather(x, pre, &mut pp.xp);
    leave_one_out(&pp.xp[..l], &mut pp.q);
    let q = &pp.q;
    // Distinct prefix indices (equal ones are adjacent) and their summed row weights.
    let (mut rows, mut weights, mut d) = ([0usize; MAX_PREFIX], [0f64; MAX_PREFIX], 0);
    for j in 0..l {
        if d > 0 && rows[d - 1] == pre[j] {
            weights[d - 1] += q[j];
        } else {
            rows[d] = pre[j];
            weights[d] = q[j];
            d += 1;
        }
    }
    // Row updates A[row, t0..] += weight * a, fused with S = sum_t a_t x_t when needed.
    let first = 2.min(d);
    if l >= 2 {
        let s = if d >= 2 {
            let (head, tail) = acc.split_at_mut(rows[1] * n);
            dot_axpy2::<M, T>(
                seg,
                &x[t0..],
                (&mut head[rows[0] * n + t0..rows[0] * n + n], weights[0]),
                (&mut tail[t0..n], weights[1]),
            )
        } else {
            let row = &mut acc[rows[0] * n + t0..rows[0] * n + n];
            dot_axpy::<M, T>(seg, &x[t0..], row, weights[0])
        };
        leave_two_out(&pp.xp[..l], &mut pp.r);
        for j in 0..l {
            for k in j + 1..l {
                acc[pre[j] * n + pre[k]] += pp.r[j][k] * s;
            }
        }
    } else {
        axpy::<M, T>(&mut acc[rows[0] * n + t0..rows[0] * n + n], weights[0], seg);
    }
    for e in first..d {
        axpy::<M, T>(&mut acc[rows[e] * n + t0..rows[e] * n + n], weights[e], seg);
    }
}

#[inline(always)]
fn hessian_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    acc: &mut [f64],
) {
    if it.degree == 1 {
        return; // a linear term has no curvature
    }
    if it.degree == 3 {
        return hessian3_item_body::<M, T>(n, a, it, x, acc);
    }
    let coeffs = &a[it.start..it.start + it.len];
    if it.degree == 4 {
        return hessian4_quads::<M, T>(n, (it.lo, it.hi, it.start), coeffs, x, acc);
    }
    if it.degree >= 5 {
        return hessian_quads::<M, T>(n, it.degree, (it.lo, it.hi, it.start), coeffs, x, acc);
    }
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    let mut pp = PrefixProducts::new();
    while let Some((t0, pos)) = walk.next_prefix() {
        let seg = &coeffs[pos..pos + n - t0];
        hessian_prefix::<M, T>(n, seg, (t0, walk.prefix()), x, acc, &mut pp);
    }
}

/// The degree-3 Hessian pass of one item, four first indices at a time: for first indices
/// g..g+4 and every second index j >= g + 4, the four segments share row j of the
/// accumulator, which [`rows4`] reads and writes once for all four (the plain loop touches it
/// once per segment, and at n in the hundreds those rows live in L2, not L1). Prefixes with
/// j < g + 4 and first indices left over at the end of the item go the plain way.
///
/// The item walks the rows j of its slab `it.second` (see [`row_slabs`]; all rows in a plain
/// item) for each group of four in turn; a group's prefixes with j < g + 4 come just before
/// its first row, and the last slab (`it.second.1 == n`) ends with the groups that have no
/// row j >= g + 4 and the first indices left over.
#[inline(always)]
fn hessian3_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    acc: &mut [f64],
) {
    let coeffs = (&a[it.start..it.start + it.len], it.start);
    let mut pp = PrefixProducts::new();
    let rest = it.hi - (it.hi - it.lo) % 4; // first indices rest..hi are left over
    if it.second == (0, n) {
        // each group whole (a loop of its own: the slab walk's bounds cost 2-4 % here)
        for g in (it.lo..rest).step_by(4) {
            hessian3_near::<M, T>(n, coeffs, g, x, acc, &mut pp);
            hessian3_rows::<M, T>(n, coeffs, g, (g + 4, n), x, acc);
        }
    } else {
        let (j0, j1) = (it.second.0.max(it.lo + 4), it.second.1);
        for g in (it.lo..rest).step_by(4) {
            if g + 4 >= j1 {
                break; // this group's rows start in a later slab
            }
            let from = j0.max(g + 4);
            if from == g + 4 {
                hessian3_near::<M, T>(n, coeffs, g, x, acc, &mut pp);
            }
            hessian3_rows::<M, T>(n, coeffs, g, (from, j1), x, acc);
        }
        if j1 < n {
            return;
        }
        if rest == n && rest >= it.lo + 4 {
            // the group g = n - 4 has no row j >= g + 4
            hessian3_near::<M, T>(n, coeffs, n - 4, x, acc, &mut pp);
        }
    }
    for i in rest..it.hi {
        let mut p = segment3(n, it.start, i, i);
        for j in i..n {
            let seg = &coeffs.0[p..p + n - j];
            hessian_prefix::<M, T>(n, seg, (j, &[i, j]), x, acc, &mut pp);
            p += n - j;
        }
    }
}

/// The rows j in `from..to` (from >= g + 4) of a group of four first indices g..g+4: the
/// four segments of (g + k, j) through [`rows4`], sharing row j of the accumulator.
/// `coeffs`: the item's coefficients and the first one's place in the block.
#[inline(always)]
fn hessian3_rows<M: Madd, T: Coef>(
    n: usize,
    (coeffs, base): (&[T], usize),
    g: usize,
    (from, to): (usize, usize),
    x: &[f64],
    acc: &mut [f64],
) {
    let xi = [x[g], x[g + 1], x[g + 2], x[g + 3]];
    let mut pos = [0usize; 4];
    for (k, p) in pos.iter_mut().enumerate() {
        *p = segment3(n, base, g + k, from);
    }
    for j in from..to {
        let len = n - j;
        let (head, tail) = acc.split_at_mut(j * n);
        let (r0, rest) = head[g * n..(g + 4) * n].split_at_mut(n);
        let (r1, rest) = rest.split_at_mut(n);
        let (r2, r3) = rest.split_at_mut(n);
        let s = rows4::<M, T>(
            four_segments(coeffs, &pos, len),
            &x[j..],
            [&mut r0[j..], &mut r1[j..], &mut r2[j..], &mut r3[j..]],
            x[j],
            &mut tail[j..n],
            xi,
            n + 1, // row j + 1 from column j + 1, the shared row of the next j
        );
        for k in 0..4 {
            acc[(g + k) * n + j] += s[k];
            pos[k] += len;
        }
    }
}

/// The prefixes (i, j) with g <= i <= j < g + 4 of a group of four first indices, the plain
/// way (`coeffs` as in [`hessian3_rows`]). A function, not a closure in the caller: a closure
/// does not take the instruction set of the `simd_dispatch!` wrapper, so the vector loops in
/// it did not inline (the Hessian at n = 400 took 1.7 times as long).
#[inline(always)]
fn hessian3_near<M: Madd, T: Coef>(
    n: usize,
    (coeffs, base): (&[T], usize),
    g: usize,
    x: &[f64],
    acc: &mut [f64],
    pp: &mut PrefixProducts,
) {
    for i in g..g + 4 {
        for j in i..g + 4 {
            let p = segment3(n, base, i, j);
            hessian_prefix::<M, T>(n, &coeffs[p..p + n - j], (j, &[i, j]), x, acc, pp);
        }
    }
}

/// Bytes of per-core L2 assumed where the operating system lists none (Zen 4's 1 MiB, the
/// smallest of the processors with AVX-512 measured).
const L2_DEFAULT: usize = 1 << 20;

/// Re-cuts the degree-3 groups of `plan` whose shared rows spill out of an L2 of `l2` bytes
/// into row slabs, so that those rows come from L3 once per slab rather than once per group of
/// four first indices.
///
/// A group of four first indices g..g+4 adds into rows j >= g + 4 of the accumulator from
/// column j on, a triangle of about 4 (n - g)^2 bytes, and the next group of four walks it
/// again. Where the triangle of an accumulator's first index lo exceeds l2 / 2 (8 (n - lo)^2 >
/// l2: n - lo > 512 at 2 MiB), the accumulator's chunks are replaced by items that each cover
/// all its first indices and one slab of h consecutive second indices, h (n - lo) 8 bytes
/// about l2 / 4: each walks its slab for every group of four in turn, while the slab stays in
/// L2 (the groups' own rows, 32 (n - lo) bytes each, move between L2 and L1 instead). Every
/// accumulator entry still receives its terms in the same order (a group's own rows and dots
/// by increasing j, a shared row by increasing group), so the Hessian is bitwise the plain
/// walk's, whatever `l2`.
///
/// Slabs only pay where there are several groups of four to share them: accumulators of
/// fewer than eight first indices keep their chunks. A slab's work, h rows for every group,
/// is up to ten of the plain chunks' (p = 3, n = 800, 2 MiB of L2: three of the four
/// accumulators cut, 19-34 groups of four and 81-104 rows, up to 4-6 million coefficients or
/// about 2 ms), which is how often a pass polls for a stop request.
fn row_slabs(plan: Plan, n: usize, l2: usize) -> Plan {
    let mut out = Plan {
        items: Vec::with_capacity(plan.items.len()),
        groups: Vec::with_capacity(plan.groups.len()),
    };
    for g in 0..plan.groups.len() {
        let chunks = plan.group(g);
        let (first, last) = (chunks[0], chunks[chunks.len() - 1]);
        let span = n - first.lo;
        let start = out.items.len();
        if first.degree != 3 || last.hi - first.lo < 8 || span.saturating_mul(span * 8) <= l2 {
            out.items.extend_from_slice(chunks);
        } else {
            let h = (l2 / 4 / (span * 8)).max(1);
            let whole = WorkItem {
                hi: last.hi,
                len: chunks.iter().map(|c| c.len).sum(),
                ..first
            };
            let mut j = first.lo + 4;
            while j < n {
                let second = (j, (j + h).min(n));
                out.items.push(WorkItem { second, ..whole });
                j = second.1;
            }
        }
        out.groups.push(start..out.items.len());
    }
    out
}

simd_dispatch!(fn hessian_item => hessian_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], acc: &mut [f64]) -> ());

/// The full n x n Hessian of H at x, row-major.
pub fn hessian<T: Coef>(exec: &Exec, poly: &Packed<T>, x: &[f64]) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    check_len("x", n, x.len())?;
    let nn = n.checked_mul(n).ok_or_else(|| CoreError::SizeOverflow {
        what: format!("Hessian of n = {n}"),
    })?;
    // width 1: a chunk spans several first indices, so the degree-3 pass can take them by four
    let items = items_for(poly, pieces(poly.num_coefficients(), nn), 1, QUANTUM);
    let l2 = crate::cache::level2_bytes().unwrap_or(L2_DEFAULT);
    hessian_planned(exec, poly, x, &row_slabs(items, n, l2))
}

/// [`hessian`] over `plan` (a plain one, or cut by [`row_slabs`]).
fn hessian_planned<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
    plan: &Plan,
) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    let blocks = poly.blocks();
    // n * n does not overflow: `hessian` checked it
    let (_, mut upper) = reduce_sums(exec, plan, 0, n * n, |it, _, acc| {
        hessian_item::<T>(n, &blocks[it.block].coeffs, it, x, acc);
    })?;
    exec.install(|| symmetrize(&mut upper, n));
    Ok(upper)
}

/// Entries below which [`symmetrize`] runs on one thread even on a pool (n < 256): waking the
/// pool's other threads for a few tens of microseconds of work costs more than it saves
/// (p = 3 Hessian, two threads, paired medians of 400 alternating calls: n = 200 -2.5 to
/// -3.3 %, n = 250 -2.3 to -5.7 %, n = 150 unchanged, as it runs inline).
const SYMMETRIZE_PARALLEL_MIN: usize = 1 << 16;

/// Replaces A by A + A^T in place (A is n x n row-major), in square tiles so that both the
/// rows and the columns being read stay in cache. Bands of TILE rows go to the threads of the
/// current pool (one after the other off a pool, or below [`SYMMETRIZE_PARALLEL_MIN`]
/// entries): band b reads and writes the entries (i, j) and (j, i) with i in the band and
/// j >= i, and no two bands share one, so each entry gets the same sum whatever the split.
fn symmetrize(a: &mut [f64], n: usize) {
    const TILE: usize = 32;
    assert_eq!(a.len(), n * n);
    /// The matrix shared by the bands (each writes only its own entries, see above).
    struct Shared(*mut f64);
    // SAFETY: the bands touch disjoint entries, so sharing the pointer across threads is sound.
    unsafe impl Sync for Shared {}
    let shared = Shared(a.as_mut_ptr());
    let bands = 0..n.div_ceil(TILE);
    let band = |band: usize| {
        let p = &shared;
        let bi = band * TILE;
        for bj in (bi..n).step_by(TILE) {
            for i in bi..(bi + TILE).min(n) {
                let j0 = if bi == bj { i } else { bj };
                for j in j0..(bj + TILE).min(n) {
                    // SAFETY: i, j < n, inside the n x n matrix; (i, j) and (j, i) with
                    // i in this band and j >= i belong to this band only.
                    unsafe {
                        let (ij, ji) = (p.0.add(i * n + j), p.0.add(j * n + i));
                        let s = *ij + *ji;
                        *ij = s;
                        *ji = s;
                    }
                }
            }
        }
    };
    if on_pool() && n * n >= SYMMETRIZE_PARALLEL_MIN {
        bands.into_par_iter().for_each(band);
    } else {
        bands.for_each(band);
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernels::tests::{naive, point, pool};
    use crate::sampling::Disorder;

    /// The banded symmetrize gives A + A^T exactly, for sizes on and off the tile, one thread
    /// below SYMMETRIZE_PARALLEL_MIN and threaded above it (n = 300).
    #[test]
    fn symmetrize_gives_a_plus_its_transpose_on_any_pool() {
        for n in [1usize, 31, 32, 77, 300] {
            let a: Vec<f64> = (0..n * n).map(|i| (i as f64 * 0.73).sin()).collect();
            for ex in [pool(1), pool(3), Exec::inline()] {
                let mut b = a.clone();
                ex.install(|| symmetrize(&mut b, n));
                for i in 0..n {
                    for j in 0..n {
                        assert_eq!(
                            b[i * n + j],
                            a[i * n + j] + a[j * n + i],
                            "n {n} ({i}, {j})"
                        );
                    }
                }
            }
        }
    }

    /// The plain plan of a pass over `poly` with `pieces` accumulators and chunks of `chunk`
    /// coefficients.
    fn plain_plan<T: Coef>(poly: &Packed<T>, pieces: usize, chunk: usize) -> Plan {
        let blocks: Vec<(usize, usize)> = poly
            .blocks()
            .iter()
            .map(|b| (b.degree, b.coeffs.len()))
            .collect();
        crate::partition::plan(poly.n(), &blocks, pieces, chunk, QUANTUM)
    }

    /// Row slabs tile the second indices lo + 4..n of each degree-3 accumulator that spills
    /// out of the given L2 and has eight first indices or more, and leave the others alone.
    #[test]
    fn row_slabs_tile_the_rows_of_the_accumulators_that_spill() {
        let n = 61;
        let poly =
            Packed::<f64>::sample(&pool(1), n, &[(2, 1.0), (3, 0.5)], &Disorder::new(5)).unwrap();
        let plain = plain_plan(&poly, 4, 2000);
        assert_eq!(
            row_slabs(plain.clone(), n, usize::MAX),
            plain,
            "nothing spills"
        );
        for l2 in [8usize, 4 * 8 * 40 * 3, 8 * 50 * 50] {
            let slabbed = row_slabs(plain.clone(), n, l2);
            assert_eq!(slabbed.groups.len(), plain.groups.len());
            let mut cut = 0;
            for g in 0..plain.groups.len() {
                let (old, new) = (plain.group(g), slabbed.group(g));
                let (lo, hi) = (old[0].lo, old[old.len() - 1].hi);
                if old[0].degree != 3 || hi - lo < 8 || (n - lo) * (n - lo) * 8 <= l2 {
                    assert_eq!(old, new, "group {g}, L2 {l2}");
                    continue;
                }
                cut += 1;
                let h = (l2 / 4 / ((n - lo) * 8)).max(1);
                let len: usize = old.iter().map(|c| c.len).sum();
                let mut j = lo + 4;
                for it in new {
                    assert_eq!(
                        (it.lo, it.hi, it.start, it.len),
                        (lo, hi, old[0].start, len)
                    );
                    assert_eq!(it.second, (j, (j + h).min(n)), "group {g}, L2 {l2}");
                    j = it.second.1;
                }
                assert_eq!(j, n);
            }
            assert!(
                cut >= 1,
                "L2 {l2}: no accumulator cut, so the test shows nothing"
            );
        }
    }

    /// The row slabs give the plain walk's Hessian bit for bit (slabs of 1, 2 and 7 rows;
    /// one accumulator and several, chunks of whole and partial groups of four, n on and off
    /// a multiple of four, both storage types, one thread and three), and both agree with the
    /// dense reference.
    #[test]
    fn row_slabs_give_the_bits_of_the_plain_walk() {
        // returns the number of slab plans of several accumulators checked
        fn check<T: Coef>(n: usize, degrees: &[(usize, f64)]) -> usize {
            let mut several = 0;
            let poly = Packed::<T>::sample(&pool(2), n, degrees, &Disorder::new(11)).unwrap();
            let x = point(n, 0.3);
            for (pieces, chunk) in [(1usize, 1usize << 20), (3, 3000), (4, 1)] {
                let plain = plain_plan(&poly, pieces, chunk);
                let want = hessian_planned(&pool(1), &poly, &x, &plain).unwrap();
                // a slab of h rows at lo = 0 needs 8 n^2 > l2 = 32 n h, so h < n / 4
                for h in [1usize, 2, 7].into_iter().filter(|h| 4 * h < n) {
                    let slabbed = row_slabs(plain.clone(), n, 4 * 8 * n * h);
                    let cut = slabbed.items.iter().any(|it| it.second != (0, n));
                    // one accumulator holds all first indices, so it is cut
                    assert!(cut || pieces > 1, "n {n}, h {h}: no slab");
                    several += usize::from(cut && pieces > 1);
                    for k in [1, 3] {
                        let got = hessian_planned(&pool(k), &poly, &x, &slabbed).unwrap();
                        assert_eq!(got, want, "n {n}, {pieces} pieces, h {h}, {k} threads");
                    }
                }
            }
            several
        }
        let mixed = [(1, 0.2), (2, 1.0), (3, 0.7), (4, 0.4)];
        let mut several = 0;
        for n in [12usize, 37, 64] {
            several += check::<f64>(n, &[(3, 1.0)]);
            several += check::<f32>(n, &[(3, 1.0)]);
        }
        several += check::<f64>(30, &mixed);
        assert!(several > 0, "no plan of several accumulators was cut");
        // the plain walk these are compared with, against the dense reference
        for (n, degrees) in [(37, &[(3, 1.0)][..]), (30, &mixed[..])] {
            let poly = Packed::<f64>::sample(&pool(2), n, degrees, &Disorder::new(11)).unwrap();
            let x = point(n, 0.3);
            let (_, _, dense) = naive(&poly, &x);
            let got = hessian(&pool(2), &poly, &x).unwrap();
            for (a, b) in got.iter().zip(&dense) {
                assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()), "n {n}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn hessian_with_several_accumulators_is_bitwise_identical_across_thread_counts() {
        let n = 60; // 595,665 coefficients of degree 4: 4 accumulators
        let poly =
            Packed::<f64>::sample(&pool(2), n, &[(2, 1.0), (4, 0.5)], &Disorder::new(2)).unwrap();
        assert!(pieces(poly.num_coefficients(), n * n) >= 4);
        let x = point(n, 0.4);
        let one = hessian(&pool(1), &poly, &x).unwrap();
        for k in [2, 3] {
            assert_eq!(hessian(&pool(k), &poly, &x).unwrap(), one);
        }
        assert_eq!(hessian(&Exec::inline(), &poly, &x).unwrap(), one, "inline");
        let (_, _, h0) = naive(&poly, &x);
        for (a, b) in one.iter().zip(&h0) {
            assert!((a - b).abs() < 1e-9 * (1.0 + b.abs()));
        }
    }
}
