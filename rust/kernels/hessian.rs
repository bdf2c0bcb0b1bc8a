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
use crate::partition::{reduce_sums, WorkItem, QUANTUM};
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
#[inline(always)]
fn hessian3_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    acc: &mut [f64],
) {
    let coeffs = &a[it.start..it.start + it.len];
    let mut pp = PrefixProducts::new();
    let mut g = it.lo;
    while g + 4 <= it.hi {
        for i in g..g + 4 {
            for j in i..g + 4 {
                let p = segment3(n, it.start, i, j);
                hessian_prefix::<M, T>(n, &coeffs[p..p + n - j], (j, &[i, j]), x, acc, &mut pp);
            }
        }
        let xi = [x[g], x[g + 1], x[g + 2], x[g + 3]];
        let mut pos = [0usize; 4];
        for (k, p) in pos.iter_mut().enumerate() {
            *p = segment3(n, it.start, g + k, g + 4);
        }
        for j in g + 4..n {
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
        g += 4;
    }
    for i in g..it.hi {
        let mut p = segment3(n, it.start, i, i);
        for j in i..n {
            hessian_prefix::<M, T>(n, &coeffs[p..p + n - j], (j, &[i, j]), x, acc, &mut pp);
            p += n - j;
        }
    }
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
    let blocks = poly.blocks();
    let (_, mut upper) = reduce_sums(exec, &items, 0, nn, |it, _, acc| {
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
