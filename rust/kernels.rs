//! Single-point kernels: value, gradient, Hessian and Hessian-vector products.
//!
//! For one degree block, H_p(x) = sum_m a_m x_i1 ... x_ip. Group the monomials by their
//! prefix (i1, ..., i_{p-1}); for a prefix with products P = prod_j x_ij,
//! Q_j = prod_{k != j} x_ik and R_jk = prod_{l not in {j,k}} x_il, and the segment of
//! coefficients a_t, t = i_{p-1}..n, the product rule over positions gives
//!
//! ```text
//! energy     H += P S,                    S  = sum_t a_t x_t
//! gradient   g_t += P a_t,   g_ij += Q_j S
//! Hessian    A[ij, t] += Q_j a_t,  A[ij, ik] += R_jk S  (j < k),  Hess = A + A^T
//! Hess . v   w_t += D a_t,   w_ij += Q_j Sv + dQ_j S,
//!            D = sum_j v_ij Q_j,  dQ_j = sum_{k != j} v_ik R_jk,  Sv = sum_t a_t v_t
//! ```
//!
//! so each pass reads every coefficient once. Repeated indices need no special case: the
//! positional product rule counts them (d/dx x^2 = 2x). These satisfy the Euler identities
//! x . grad H_p = p H_p and Hess H_p x = (p - 1) grad H_p, which the tests check.

use crate::adjacent::energy_blocks;
use crate::combinatorics::first_index_offset;
use crate::error::CoreError;
use crate::exec::Exec;
use crate::partition::{plan, reduce, reduce_sums, Plan, WorkItem, CHUNK, QUANTUM};
use crate::prefix::{leave_one_out, Prefixes, MAX_PREFIX};
use crate::quads::{energy_quads, gradient_quads};
use crate::simd::{dot, dot_axpy, dots4, dots4_axpy, simd_dispatch, Madd};
use crate::stagger::Runs;
use crate::storage::{Coef, Packed};

mod hessian;
mod hvp;

pub use hessian::hessian;
pub use hvp::hvp;

/// Most work items of one pass (enough to keep 64 threads busy).
pub const MAX_PIECES: usize = 64;
/// Fewest coefficients worth a work item of their own: below this, handing an item to
/// another thread costs more than it saves.
pub const MIN_ITEM: usize = 1 << 14;

/// Number of work items for a pass over `num_coefficients` whose per-item accumulator has
/// `acc_len` numbers: a power of two, at most [`MAX_PIECES`], with at least [`MIN_ITEM`]
/// coefficients and at least 32 * acc_len coefficients per item, so that zeroing and merging
/// accumulators stays a few percent of the pass, except that a pass with 16 * acc_len per
/// half still splits in two. It depends on the instance only, never on the thread count,
/// which keeps results bitwise reproducible. Without that exception a p = 3 Hessian below
/// n = 384 was one item, which one thread ran while the other waited (n = 300, two threads:
/// 2.1-2.4 ms, more than one thread's 2.2 ms; in two items 1.35-1.6 ms). Items of 16 * acc_len
/// throughout cost more than they gave where there were already two (n = 400: four items,
/// 4.8 against 3.2-4.4 ms).
pub fn pieces(num_coefficients: usize, acc_len: usize) -> usize {
    let per_item = |factor: usize| num_coefficients / factor.saturating_mul(acc_len).max(1);
    let by_acc = per_item(32).max(per_item(16).min(2));
    let by_work = num_coefficients / MIN_ITEM;
    let most = by_acc.min(by_work).min(MAX_PIECES);
    if most <= 1 {
        1
    } else {
        1 << most.ilog2()
    }
}

/// The accumulators (groups of [`plan`]) of a pass with `acc_len` numbers per accumulator over
/// a polynomial of these degrees at n, taking first indices in runs of `quantum` ([`QUANTUM`]
/// for the single-point kernels, 1 for the batch and multi-direction ones): about [`pieces`]
/// groups in all, fewer where runs of `quantum` first indices overshoot the target (39 for 64
/// pieces at p = 4, n = 360), up to one more per degree where several degrees are each cut on
/// their own. It lets a caller size a pass's memory without the polynomial.
pub fn accumulator_count(
    n: usize,
    degrees: &[usize],
    acc_len: usize,
    quantum: usize,
) -> Result<usize, CoreError> {
    if n == 0 {
        return Err(CoreError::InvalidSize { n });
    }
    let mut blocks = Vec::with_capacity(degrees.len());
    for &p in degrees {
        if !(1..=crate::combinatorics::MAX_DEGREE).contains(&p) {
            return Err(CoreError::InvalidDegree { p });
        }
        blocks.push((p, crate::combinatorics::num_multisets(n, p)?));
    }
    let total = blocks
        .iter()
        .try_fold(0usize, |acc, b| acc.checked_add(b.1));
    let total = total.ok_or_else(|| CoreError::SizeOverflow {
        what: format!("the coefficients of degrees {degrees:?} at n = {n}"),
    })?;
    let pieces = pieces(total, acc_len);
    Ok(crate::partition::group_count(n, &blocks, pieces, quantum))
}

/// The plan of a pass in `pieces` groups, for a kernel doing about `width` multiply-adds per
/// coefficient (which sets the chunk length, see [`CHUNK`]) and taking first indices in runs
/// of `quantum` ([`QUANTUM`] for the single-point kernels, whose degree-3 groups and degree
/// >= 4 quads take first indices four at a time; 1 for the batch kernels).
pub(crate) fn items_for<T: Coef>(
    poly: &Packed<T>,
    pieces: usize,
    width: usize,
    quantum: usize,
) -> Plan {
    let blocks: Vec<(usize, usize)> = poly
        .blocks()
        .iter()
        .map(|b| (b.degree, b.coeffs.len()))
        .collect();
    plan(
        poly.n(),
        &blocks,
        pieces,
        (CHUNK / width.max(1)).max(1),
        quantum,
    )
}

pub(crate) fn check_len(what: &'static str, expected: usize, got: usize) -> Result<(), CoreError> {
    if expected == got {
        Ok(())
    } else {
        Err(CoreError::LengthMismatch {
            what,
            expected,
            got,
        })
    }
}

#[inline(always)]
fn gather(x: &[f64], idx: &[usize], out: &mut [f64; MAX_PREFIX]) {
    for (o, &i) in out.iter_mut().zip(idx) {
        *o = x[i];
    }
}

/// Scratch of the plain per-prefix steps (x and v over the prefix, leave-one-out and
/// leave-two-out products), kept across prefixes so the 8 x 8 table is not zeroed for each.
struct PrefixProducts {
    xp: [f64; MAX_PREFIX],
    vp: [f64; MAX_PREFIX],
    q: [f64; MAX_PREFIX],
    r: [[f64; MAX_PREFIX]; MAX_PREFIX],
}

impl PrefixProducts {
    fn new() -> Self {
        PrefixProducts {
            xp: [0.0; MAX_PREFIX],
            vp: [0.0; MAX_PREFIX],
            q: [0.0; MAX_PREFIX],
            r: [[0.0; MAX_PREFIX]; MAX_PREFIX],
        }
    }
}

/// The four segments of length `len` starting at `pos` (a group of the grouped passes).
#[inline(always)]
fn four_segments<'a, T>(coeffs: &'a [T], pos: &[usize; 4], len: usize) -> [&'a [T]; 4] {
    [
        &coeffs[pos[0]..pos[0] + len],
        &coeffs[pos[1]..pos[1] + len],
        &coeffs[pos[2]..pos[2] + len],
        &coeffs[pos[3]..pos[3] + len],
    ]
}

/// Start, within the item's coefficients, of the degree-3 segment of prefix (i, j), i <= j:
/// offset(i) + sum_{k=i}^{j-1} (n - k), relative to the item start `base`.
#[inline(always)]
fn segment3(n: usize, base: usize, i: usize, j: usize) -> usize {
    let skipped = if j == i {
        0
    } else {
        (j - i) * n - (j - i) * (i + j - 1) / 2
    };
    first_index_offset(n, 3, i) - base + skipped
}

// ---------------------------------------------------------------------------------------
// energy

#[inline(always)]
fn energy_item_body<M: Madd, T: Coef>(n: usize, a: &[T], it: &WorkItem, x: &[f64]) -> f64 {
    let coeffs = &a[it.start..it.start + it.len];
    if it.degree == 1 {
        return dot::<M, T>(coeffs, &x[it.lo..it.hi]);
    }
    if it.degree >= 4 {
        return energy_quads::<M, T>(n, it.degree, (it.lo, it.hi, it.start), coeffs, x);
    }
    if it.degree != 3 {
        return energy_blocks::<M, T>(n, Runs::new(n, it.degree, it.lo, it.hi), coeffs, x);
    }
    energy3_item_body::<M, T>(n, coeffs, it, x)
}

/// The degree-3 energy of one item (`coeffs` are the item's), four first indices at a time as
/// in [`gradient3_item_body`]: the segments of (g + k, j), k < 4, share the range t >= j, so
/// [`dots4`] reads each x_t once for four coefficients (the plain walk reads it per segment,
/// which with float32 storage costs more than the coefficients' own bytes).
#[inline(always)]
fn energy3_item_body<M: Madd, T: Coef>(n: usize, coeffs: &[T], it: &WorkItem, x: &[f64]) -> f64 {
    let mut e = 0.0;
    let mut g0 = it.lo;
    while g0 + 4 <= it.hi {
        for i in g0..g0 + 4 {
            e += energy3_plain::<M, T>(n, coeffs, it.start, i, i..g0 + 4, x);
        }
        let xi = [x[g0], x[g0 + 1], x[g0 + 2], x[g0 + 3]];
        let mut pos = [0usize; 4];
        for (k, p) in pos.iter_mut().enumerate() {
            *p = segment3(n, it.start, g0 + k, g0 + 4);
        }
        for j in g0 + 4..n {
            let len = n - j;
            let s = dots4::<M, T>(four_segments(coeffs, &pos, len), &x[j..]);
            e += x[j] * ((xi[0] * s[0] + xi[1] * s[1]) + (xi[2] * s[2] + xi[3] * s[3]));
            for p in pos.iter_mut() {
                *p += len;
            }
        }
        g0 += 4;
    }
    for i in g0..it.hi {
        e += energy3_plain::<M, T>(n, coeffs, it.start, i, i..n, x);
    }
    e
}

/// The degree-3 energy of the prefixes (i, j), j in `js`, one segment at a time (a function
/// rather than a closure: closures may be compiled without the kernels' target features).
#[inline(always)]
fn energy3_plain<M: Madd, T: Coef>(
    n: usize,
    coeffs: &[T],
    base: usize,
    i: usize,
    js: std::ops::Range<usize>,
    x: &[f64],
) -> f64 {
    let mut part = 0.0;
    let mut p = segment3(n, base, i, js.start);
    for j in js {
        part += x[i] * x[j] * dot::<M, T>(&coeffs[p..p + n - j], &x[j..]);
        p += n - j;
    }
    part
}

simd_dispatch!(fn energy_item => energy_item_body(n: usize, a: &[T], it: &WorkItem, x: &[f64]) -> f64);

/// H(x) = sum_p H_p(x).
pub fn energy<T: Coef>(exec: &Exec, poly: &Packed<T>, x: &[f64]) -> Result<f64, CoreError> {
    check_len("x", poly.n(), x.len())?;
    let n = poly.n();
    let items = items_for(poly, pieces(poly.num_coefficients(), 1), 1, QUANTUM);
    let blocks = poly.blocks();
    reduce(
        exec,
        &items,
        || 0.0,
        |it, acc| *acc += energy_item::<T>(n, &blocks[it.block].coeffs, it, x),
        |a, b| *a += b,
    )
}

// ---------------------------------------------------------------------------------------
// gradient

#[inline(always)]
fn gradient_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    g: &mut [f64],
) -> f64 {
    let coeffs = &a[it.start..it.start + it.len];
    if it.degree == 1 {
        return dot_axpy::<M, T>(coeffs, &x[it.lo..it.hi], &mut g[it.lo..it.hi], 1.0);
    }
    if it.degree >= 4 {
        return gradient_quads::<M, T>(n, it.degree, (it.lo, it.hi, it.start), coeffs, x, g);
    }
    if it.degree == 3 {
        return gradient3_item_body::<M, T>(n, coeffs, it, x, g);
    }
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    let mut pp = PrefixProducts::new();
    let mut e = 0.0;
    while let Some((t0, pos)) = walk.next_prefix() {
        let seg = &coeffs[pos..pos + n - t0];
        e += gradient_prefix::<M, T>(seg, (t0, walk.prefix()), x, g, &mut pp);
    }
    e
}

/// The gradient contribution of one prefix `pre` (sorted, last index t0) with coefficient
/// segment `seg` over t = t0..n, the plain way: g_t += P a_t, g_{i_j} += Q_j S; returns P S.
#[inline(always)]
fn gradient_prefix<M: Madd, T: Coef>(
    seg: &[T],
    (t0, pre): (usize, &[usize]),
    x: &[f64],
    g: &mut [f64],
    pp: &mut PrefixProducts,
) -> f64 {
    let l = pre.len();
    gather(x, pre, &mut pp.xp);
    let prod = leave_one_out(&pp.xp[..l], &mut pp.q);
    let s = dot_axpy::<M, T>(seg, &x[t0..], &mut g[t0..], prod);
    for j in 0..l {
        g[pre[j]] += pp.q[j] * s;
    }
    prod * s
}

/// The degree-3 gradient pass of one item (`coeffs` are the item's), four first indices at a
/// time as in `hessian::hessian3_item_body`: the four segments of (g + k, j) share g_t,
/// t >= j, which [`dots4_axpy`] reads and writes once for all four. Returns the item's energy.
#[inline(always)]
fn gradient3_item_body<M: Madd, T: Coef>(
    n: usize,
    coeffs: &[T],
    it: &WorkItem,
    x: &[f64],
    g: &mut [f64],
) -> f64 {
    let mut pp = PrefixProducts::new();
    let mut e = 0.0;
    let mut g0 = it.lo;
    while g0 + 4 <= it.hi {
        for i in g0..g0 + 4 {
            for j in i..g0 + 4 {
                let p = segment3(n, it.start, i, j);
                e += gradient_prefix::<M, T>(&coeffs[p..p + n - j], (j, &[i, j]), x, g, &mut pp);
            }
        }
        let xi = [x[g0], x[g0 + 1], x[g0 + 2], x[g0 + 3]];
        let mut pos = [0usize; 4];
        for (k, p) in pos.iter_mut().enumerate() {
            *p = segment3(n, it.start, g0 + k, g0 + 4);
        }
        for j in g0 + 4..n {
            let len = n - j;
            let xj = x[j];
            let w = [xi[0] * xj, xi[1] * xj, xi[2] * xj, xi[3] * xj];
            let s = dots4_axpy::<M, T>(four_segments(coeffs, &pos, len), &x[j..], &mut g[j..], w);
            for k in 0..4 {
                e += w[k] * s[k];
                g[g0 + k] += xj * s[k];
                pos[k] += len;
            }
            g[j] += (xi[0] * s[0] + xi[1] * s[1]) + (xi[2] * s[2] + xi[3] * s[3]);
        }
        g0 += 4;
    }
    for i in g0..it.hi {
        let mut p = segment3(n, it.start, i, i);
        for j in i..n {
            e += gradient_prefix::<M, T>(&coeffs[p..p + n - j], (j, &[i, j]), x, g, &mut pp);
            p += n - j;
        }
    }
    e
}

simd_dispatch!(fn gradient_item => gradient_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], g: &mut [f64]) -> f64);

/// (H(x), grad H(x)).
pub fn energy_gradient<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
) -> Result<(f64, Vec<f64>), CoreError> {
    let n = poly.n();
    check_len("x", n, x.len())?;
    let items = items_for(poly, pieces(poly.num_coefficients(), n), 2, QUANTUM);
    let blocks = poly.blocks();
    let (e, g) = reduce_sums(exec, &items, 1, n, |it, e, g| {
        e[0] += gradient_item::<T>(n, &blocks[it.block].coeffs, it, x, g);
    })?;
    Ok((e[0], g))
}

#[cfg(test)]
pub(crate) mod tests {
    use super::*;
    use crate::combinatorics::{advance, num_multisets};
    use crate::sampling::Disorder;

    pub fn pool(k: usize) -> Exec {
        Exec::with_threads(k).unwrap()
    }

    /// Direct evaluation: sum over monomials of a_m prod x, and its derivatives by the
    /// positional product rule applied term by term (no shared code with the kernels).
    pub fn naive(poly: &Packed<f64>, x: &[f64]) -> (f64, Vec<f64>, Vec<f64>) {
        let n = poly.n();
        let (mut e, mut g, mut h) = (0.0, vec![0.0; n], vec![0.0; n * n]);
        for b in poly.blocks() {
            let p = b.degree;
            let mut idx = vec![0usize; p];
            for &a in &b.coeffs {
                e += a * idx.iter().map(|&i| x[i]).product::<f64>();
                for j in 0..p {
                    let others: f64 = (0..p).filter(|&l| l != j).map(|l| x[idx[l]]).product();
                    g[idx[j]] += a * others;
                    for k in 0..p {
                        if k != j {
                            let rest: f64 = (0..p)
                                .filter(|&l| l != j && l != k)
                                .map(|l| x[idx[l]])
                                .product();
                            h[idx[j] * n + idx[k]] += a * rest;
                        }
                    }
                }
                advance(&mut idx, n);
            }
        }
        (e, g, h)
    }

    pub fn point(n: usize, s: f64) -> Vec<f64> {
        (0..n).map(|i| ((i as f64 + 1.0) * s).sin()).collect()
    }

    pub fn close(a: f64, b: f64, scale: f64) -> bool {
        (a - b).abs() <= 1e-11 * scale.max(1.0)
    }

    #[test]
    fn kernels_match_naive_evaluation() {
        for n in [1usize, 2, 3, 5, 9, 17] {
            let terms = [(1usize, 0.3), (2, 1.0), (3, 0.7), (4, 0.4), (5, 0.2)];
            let poly =
                Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(n as u64)).unwrap();
            let x = point(n, 0.7);
            let v = point(n, 1.3);
            let (e0, g0, h0) = naive(&poly, &x);
            let scale = e0.abs() + g0.iter().map(|t| t.abs()).sum::<f64>();
            let p = pool(2);
            assert!(close(energy(&p, &poly, &x).unwrap(), e0, scale));
            let (e1, g1) = energy_gradient(&p, &poly, &x).unwrap();
            assert!(close(e1, e0, scale));
            for (a, b) in g1.iter().zip(&g0) {
                assert!(close(*a, *b, scale), "gradient n={n}");
            }
            let h1 = hessian(&p, &poly, &x).unwrap();
            for (a, b) in h1.iter().zip(&h0) {
                assert!(close(*a, *b, scale), "hessian n={n}: {a} vs {b}");
            }
            let w = hvp(&p, &poly, &x, &v).unwrap();
            for i in 0..n {
                let want: f64 = (0..n).map(|j| h0[i * n + j] * v[j]).sum();
                assert!(close(w[i], want, scale), "hvp n={n}");
            }
        }
    }

    #[test]
    fn euler_identities_per_degree() {
        let n = 23;
        for p in 1..=8usize {
            let poly = Packed::<f64>::sample(&pool(2), n, &[(p, 1.0)], &Disorder::new(3)).unwrap();
            let x = point(n, 0.37);
            let pl = pool(2);
            let (e, g) = energy_gradient(&pl, &poly, &x).unwrap();
            let xg: f64 = x.iter().zip(&g).map(|(a, b)| a * b).sum();
            assert!((xg - p as f64 * e).abs() < 1e-9 * (1.0 + e.abs()), "p={p}");
            let hx = hvp(&pl, &poly, &x, &x).unwrap();
            for (a, b) in hx.iter().zip(&g) {
                assert!(
                    (a - (p as f64 - 1.0) * b).abs() < 1e-9 * (1.0 + b.abs()),
                    "p={p}"
                );
            }
        }
    }

    #[test]
    fn bitwise_identical_across_thread_counts() {
        let n = 70;
        let poly =
            Packed::<f32>::sample(&pool(2), n, &[(2, 1.0), (3, 0.5)], &Disorder::new(9)).unwrap();
        let x = point(n, 0.21);
        let v = point(n, 0.9);
        let execs = [pool(1), pool(2), pool(4), Exec::inline()];
        let runs: Vec<_> = execs
            .iter()
            .map(|p| {
                (
                    energy(p, &poly, &x).unwrap().to_bits(),
                    energy_gradient(p, &poly, &x).unwrap().1,
                    hessian(p, &poly, &x).unwrap(),
                    hvp(p, &poly, &x, &v).unwrap(),
                )
            })
            .collect();
        for r in &runs[1..] {
            assert_eq!(r.0, runs[0].0);
            assert_eq!(r.1, runs[0].1);
            assert_eq!(r.2, runs[0].2);
            assert_eq!(r.3, runs[0].3);
        }
        assert!(num_multisets(n, 3).unwrap() > 50_000);
    }

    #[test]
    fn pieces_grow_with_work_per_accumulator_entry() {
        let m = |n: usize, p: usize| num_multisets(n, p).unwrap();
        assert_eq!(pieces(10, 25), 1);
        assert_eq!(pieces(m(24, 3), 24), 1, "tiny instances run as one item");
        assert_eq!(
            pieces(m(300, 3), 300 * 300),
            2,
            "a p = 3 Hessian at n = 300 splits"
        );
        assert_eq!(pieces(m(200, 3), 200 * 200), 2);
        assert_eq!(pieces(m(150, 3), 150 * 150), 1);
        assert_eq!(pieces(m(400, 3), 400 * 400), 2);
        assert_eq!(pieces(m(800, 3), 800 * 800), 4);
        assert_eq!(pieces(m(120, 4), 120 * 120), 16);
        assert_eq!(pieces(m(400, 3), 400), 64);
        assert_eq!(pieces(usize::MAX / 2, 10), 64);
    }

    /// The accumulators a caller counts without the polynomial are the groups of the plan the
    /// passes build: a Hessian (by fours) and k Hessian-vector products (by ones), one degree
    /// and several (each degree is cut on its own: {1, 2} at n = 2100 has two groups where
    /// the piece count is one); bad degrees and n are errors, not panics.
    #[test]
    fn accumulator_counts_are_the_plans_groups() {
        for (n, degrees) in [
            (2100usize, vec![1usize, 2]),
            (2100, vec![2]),
            (40, vec![2, 4]),
            (300, vec![2, 4]),
            (150, vec![1, 2, 3]),
            (1, vec![3]),
        ] {
            let terms: Vec<(usize, f64)> = degrees.iter().map(|&p| (p, 1.0)).collect();
            let poly = Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(1)).unwrap();
            for (acc_len, width, quantum) in [(n * n, 1, QUANTUM), (n * 1000, 2001, 1), (n, 3, 1)] {
                let got = accumulator_count(n, &degrees, acc_len, quantum).unwrap();
                let want = items_for(
                    &poly,
                    pieces(poly.num_coefficients(), acc_len),
                    width,
                    quantum,
                );
                assert_eq!(
                    got,
                    want.groups.len(),
                    "n = {n}, degrees {degrees:?}, {acc_len}"
                );
            }
        }
        assert_eq!(accumulator_count(2100, &[1, 2], 2100 * 1000, 1).unwrap(), 2);
        assert!(accumulator_count(5, &[0], 25, 1).is_err());
        assert!(accumulator_count(5, &[9], 25, 1).is_err());
        assert!(accumulator_count(0, &[2], 25, 1).is_err());
        assert!(accumulator_count(usize::MAX / 2, &[8], 25, 1).is_err());
    }

    /// The degree-3 passes and every degree >= 4 pass take first indices by four, and degree-2
    /// energies blocks of adjacent prefixes;
    /// sizes around multiples of 4, items that hold several chunks (n = 150) and mixtures with
    /// other degrees exercise the grouped part, the head prefixes and the leftovers against
    /// the naive sum.
    #[test]
    fn grouped_passes_match_naive_evaluation() {
        for (n, terms) in [
            (4usize, vec![(3usize, 1.0)]),
            (7, vec![(3, 1.0)]),
            (8, vec![(1, 0.5), (3, 1.0)]),
            (13, vec![(2, 0.7), (3, 1.0), (4, 0.3)]),
            (150, vec![(3, 1.0)]),
            // degree 4: quads, with head runs and leftover first indices in adjacent blocks
            (6, vec![(4, 1.0)]),
            (9, vec![(2, 0.5), (4, 1.0)]),
            (40, vec![(4, 1.0)]),
            (11, vec![(5, 1.0), (6, 0.3)]),
        ] {
            let poly =
                Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(n as u64)).unwrap();
            let x = point(n, 0.9);
            let (e_want, g_want, want) = naive(&poly, &x);
            let scale = want.iter().fold(0f64, |m, v| m.max(v.abs())).max(1.0);
            let v = point(n, 0.37);
            let hv_want: Vec<f64> = (0..n)
                .map(|r| (0..n).map(|c| want[r * n + c] * v[c]).sum())
                .collect();
            for k in [1usize, 3] {
                let e = energy(&pool(k), &poly, &x).unwrap();
                assert!(close(e, e_want, scale), "energy n={n}: {e} vs {e_want}");
                let (e, g) = energy_gradient(&pool(k), &poly, &x).unwrap();
                assert!(close(e, e_want, scale), "energy n={n}: {e} vs {e_want}");
                for (a, b) in g.iter().zip(&g_want) {
                    assert!(close(*a, *b, scale), "gradient n={n}: {a} vs {b}");
                }
                let hv = hvp(&pool(k), &poly, &x, &v).unwrap();
                for (a, b) in hv.iter().zip(&hv_want) {
                    assert!(close(*a, *b, scale * n as f64), "hvp n={n}: {a} vs {b}");
                }
            }
            for k in [1usize, 3] {
                let got = hessian(&pool(k), &poly, &x).unwrap();
                for (i, (a, b)) in got.iter().zip(&want).enumerate() {
                    assert!(close(*a, *b, scale), "n={n} entry {i}: {a} vs {b}");
                }
            }
            // float32 storage: the same pass against the naive sum over the widened values
            let f32poly = Packed::<f32>::sample(&pool(2), n, &terms, &Disorder::new(1)).unwrap();
            let wide: Vec<(usize, Vec<f64>)> = f32poly
                .blocks()
                .iter()
                .map(|b| (b.degree, b.coeffs.iter().map(|&c| c as f64).collect()))
                .collect();
            let parts: Vec<(usize, &[f64])> = wide.iter().map(|(p, c)| (*p, &c[..])).collect();
            let (_, _, want32) = naive(
                &Packed::<f64>::from_coefficients(n, &parts, || Ok(())).unwrap(),
                &x,
            );
            let got32 = hessian(&pool(2), &f32poly, &x).unwrap();
            for (a, b) in got32.iter().zip(&want32) {
                assert!(close(*a, *b, scale), "float32 n={n}: {a} vs {b}");
            }
        }
    }

    #[test]
    fn wrong_lengths_are_errors() {
        let poly = Packed::<f64>::sample(&pool(1), 4, &[(2, 1.0)], &Disorder::new(1)).unwrap();
        let p = pool(1);
        assert!(matches!(
            energy(&p, &poly, &[0.0; 3]),
            Err(CoreError::LengthMismatch {
                expected: 4,
                got: 3,
                ..
            })
        ));
        assert!(hvp(&p, &poly, &[0.0; 4], &[0.0; 5]).is_err());
    }
}
