//! Batched kernels: b points (or k directions) in one pass over the coefficients.
//!
//! The coefficients are the expensive stream (they come from main memory); the points are
//! small and stay in cache. So each prefix segment a_t, t = i_{p-1}..n, is read from memory
//! once and then reused from L1 for every point beta, with the same vectorized loops as the
//! single-point kernels:
//!
//! ```text
//! S[beta] = sum_t a_t X[beta, t],   G[beta, t] += P[beta] a_t,   G[beta, ij] += Q_j[beta] S[beta]
//! ```
//!
//! (P, Q_j the prefix products of [`crate::kernels`] at point beta). A batch of b points costs
//! one read of the coefficients plus O(b) cached arithmetic per coefficient, instead of b
//! reads. For several Hessian-vector products at one point x (directions V, n x k, taken as
//! k rows):
//!
//! ```text
//! Sx = sum_t a_t x_t,  W[kappa, t] += D[kappa] a_t,  Sv[kappa] = sum_t a_t V[kappa, t],
//! W[kappa, ij] += Q_j Sv[kappa] + dQ_j[kappa] Sx.
//! ```

use crate::error::CoreError;
use crate::exec::Exec;
use crate::kernels::{check_len, items_for, pieces};
use crate::partition::{reduce_sums, WorkItem};
use crate::simd::{
    dot, dot_axpy, lanes, leave_one_out, leave_two_out, simd_dispatch, Madd, Prefixes, MAX_PREFIX,
};
use crate::storage::{Coef, Packed};

/// The transpose of the rows x cols matrix `src` (rows `src_stride` apart), as cols rows of
/// length `dst_stride` >= rows (the extra entries, if any, are zero padding).
fn transpose(
    src: &[f64],
    rows: usize,
    cols: usize,
    src_stride: usize,
    dst_stride: usize,
) -> Vec<f64> {
    let mut out = vec![0.0; cols * dst_stride];
    for r in 0..rows {
        for c in 0..cols {
            out[c * dst_stride + r] = src[r * src_stride + c];
        }
    }
    out
}

/// Lanes handled per pass over a segment (four AVX2 registers).
const GROUP: usize = 16;

/// The points in lane layout and their products over the current prefix.
struct Lanes<'a> {
    xt: &'a [f64],
    stride: usize,
    prod: &'a [f64],
    /// q[j * stride + beta]: product over the prefix except position j, at point beta.
    q: &'a [f64],
}

/// One segment (last index t0.., prefix `pre`) for every lane, in groups of `GROUP` lanes.
#[inline(always)]
fn batch_pass<M: Madd, T: Coef>(
    lane: &Lanes<'_>,
    t0: usize,
    seg: &[T],
    pre: &[usize],
    e: &mut [f64],
    g: &mut [f64],
    s: &mut [f64; GROUP],
) {
    let stride = lane.stride;
    let want_grad = !g.is_empty();
    for g0 in (0..stride).step_by(GROUP) {
        let width = GROUP.min(stride - g0);
        let x0 = &lane.xt[t0 * stride + g0..];
        let grad = if want_grad {
            Some((&mut g[t0 * stride + g0..], &lane.prod[g0..g0 + width]))
        } else {
            None
        };
        lanes::<M, T>(seg, x0, stride, width, grad, s);
        for (k, &sk) in s.iter().enumerate().take(width) {
            let beta = g0 + k;
            e[beta] += lane.prod[beta] * sk;
            if want_grad {
                for (j, &i) in pre.iter().enumerate() {
                    g[i * stride + beta] += lane.q[j * stride + beta] * sk;
                }
            }
        }
    }
}

/// Energies of an item added to `e` (length `stride`, one lane per point, padded lanes have
/// x = 0) and, unless `g` is empty, gradients added to `g` (n x stride, lane layout). `xt` is
/// the points in lane layout: X[t, beta] = xt[t * stride + beta].
#[inline(always)]
fn batch_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    xt: &[f64],
    e: &mut [f64],
    g: &mut [f64],
    exec: &Exec,
) {
    let stride = e.len();
    let coeffs = &a[it.start..it.start + it.len];
    let mut s = [0f64; GROUP];
    let l = it.degree - 1;
    // per-lane products over the prefix, as vectors over the lanes (rows of xt are contiguous)
    let mut prod = vec![1.0f64; stride];
    let mut q = vec![0f64; MAX_PREFIX * stride];
    let mut run = vec![1.0f64; stride];
    if it.degree == 1 {
        let lane = Lanes {
            xt,
            stride,
            prod: &prod,
            q: &q,
        };
        batch_pass::<M, T>(&lane, it.lo, coeffs, &[], e, g, &mut s);
        return;
    }
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    while let Some((t0, pos)) = walk.next_prefix() {
        if exec.stop_requested() {
            return; // a wide batch checks per prefix: one chunk may be seconds of work
        }
        let pre = walk.prefix();
        // q_j = (prod_{k<j} x_k) (prod_{k>j} x_k) lane by lane; prod = prod_k x_k
        run.fill(1.0);
        for (j, &i) in pre.iter().enumerate() {
            let row = &xt[i * stride..i * stride + stride];
            let qj = &mut q[j * stride..j * stride + stride];
            for ((qv, rv), xv) in qj.iter_mut().zip(run.iter_mut()).zip(row) {
                *qv = *rv;
                *rv *= xv;
            }
        }
        prod.copy_from_slice(&run);
        run.fill(1.0);
        for (j, &i) in pre.iter().enumerate().rev() {
            let row = &xt[i * stride..i * stride + stride];
            let qj = &mut q[j * stride..j * stride + stride];
            for ((qv, rv), xv) in qj.iter_mut().zip(run.iter_mut()).zip(row) {
                *qv *= *rv;
                *rv *= xv;
            }
        }
        let lane = Lanes {
            xt,
            stride,
            prod: &prod,
            q: &q[..l * stride],
        };
        batch_pass::<M, T>(&lane, t0, &coeffs[pos..pos + n - t0], pre, e, g, &mut s);
    }
}

simd_dispatch!(fn batch_item => batch_item_body(
    n: usize, a: &[T], it: &WorkItem, xt: &[f64], e: &mut [f64], g: &mut [f64], exec: &Exec)
    -> ());

fn run_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
    want_grad: bool,
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    let n = poly.n();
    let len = b.checked_mul(n).ok_or_else(|| CoreError::SizeOverflow {
        what: format!("batch of {b} points"),
    })?;
    check_len("points (b x n)", len, xs.len())?;
    // lane layout, padded to a multiple of 4 lanes with zero points
    let stride = b.div_ceil(4) * 4;
    let xt = transpose(xs, b, n, n, stride);
    let glen = if want_grad { n * stride } else { 0 };
    let width = if want_grad { 2 * stride } else { stride };
    let items = items_for(
        poly,
        pieces(poly.num_coefficients(), glen.max(stride)),
        width,
        1,
    );
    let blocks = poly.blocks();
    let (mut e, g) = reduce_sums(exec, &items, stride, glen, |it, e, g| {
        batch_item::<T>(n, &blocks[it.block].coeffs, it, &xt, e, g, exec);
    })?;
    e.truncate(b);
    let grads = if want_grad {
        transpose(&g, n, b, stride, n)
    } else {
        Vec::new()
    };
    Ok((e, grads))
}

/// H at each of b points (`xs` is b x n row-major).
pub fn energy_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<Vec<f64>, CoreError> {
    Ok(run_batch(exec, poly, xs, b, false)?.0)
}

/// H and grad H at each of b points; the gradients are returned b x n row-major.
pub fn energy_gradient_batch<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    run_batch(exec, poly, xs, b, true)
}

/// Hessian-vector products of an item for k directions `vs` (k x n) added to `w` (k x n).
#[inline(always)]
fn hvp_many_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    vs: &[f64],
    w: &mut [f64],
    exec: &Exec,
) {
    if it.degree == 1 {
        return;
    }
    let k = vs.len() / n;
    let coeffs = &a[it.start..it.start + it.len];
    let l = it.degree - 1;
    let (mut xp, mut q) = ([0f64; MAX_PREFIX], [0f64; MAX_PREFIX]);
    let mut r = [[0f64; MAX_PREFIX]; MAX_PREFIX];
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    while let Some((t0, pos)) = walk.next_prefix() {
        if exec.stop_requested() {
            return; // many directions: check per prefix, as the batch does
        }
        let pre = walk.prefix();
        let seg = &coeffs[pos..pos + n - t0];
        for j in 0..l {
            xp[j] = x[pre[j]];
        }
        leave_one_out(&xp[..l], &mut q);
        if l >= 2 {
            leave_two_out(&xp[..l], &mut r);
        }
        let sx = dot::<M, T>(seg, &x[t0..]);
        for kap in 0..k {
            let v = &vs[kap * n..kap * n + n];
            let wrow = &mut w[kap * n..kap * n + n];
            let d: f64 = (0..l).map(|j| v[pre[j]] * q[j]).sum();
            let sv = dot_axpy::<M, T>(seg, &v[t0..], &mut wrow[t0..], d);
            for j in 0..l {
                let mut dq = 0.0;
                for m in 0..l {
                    if m != j {
                        dq += v[pre[m]] * if j < m { r[j][m] } else { r[m][j] };
                    }
                }
                wrow[pre[j]] += q[j] * sv + dq * sx;
            }
        }
    }
}

simd_dispatch!(fn hvp_many_item => hvp_many_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], vs: &[f64], w: &mut [f64], exec: &Exec) -> ());

/// Hess H(x) V for k directions; `vs` and the result are n x k row-major.
pub fn hvp_many<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
    vs: &[f64],
    k: usize,
) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    check_len("x", n, x.len())?;
    let len = n.checked_mul(k).ok_or_else(|| CoreError::SizeOverflow {
        what: format!("{k} directions"),
    })?;
    check_len("directions (n x k)", len, vs.len())?;
    let rows = transpose(vs, n, k, k, n); // k x n: one contiguous row per direction
    let items = items_for(poly, pieces(poly.num_coefficients(), len), 2 * k + 1, 1);
    let blocks = poly.blocks();
    let (_, w) = reduce_sums(exec, &items, 0, len, |it, _, w| {
        hvp_many_item::<T>(n, &blocks[it.block].coeffs, it, x, &rows, w, exec);
    })?;
    Ok(transpose(&w, k, n, n, k))
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernels::tests::{naive, pool};
    use crate::kernels::{energy_gradient, hvp, pieces};
    use crate::sampling::Disorder;

    #[test]
    fn batch_matches_single_points() {
        for n in [1usize, 4, 11] {
            let terms = [(1usize, 0.5), (2, 1.0), (3, 0.6), (5, 0.3)];
            let poly = Packed::<f64>::sample(&pool(2), n, &terms, &Disorder::new(2)).unwrap();
            let b = 5;
            let xs: Vec<f64> = (0..b * n).map(|i| ((i as f64) * 0.61).cos()).collect();
            let p = pool(2);
            let e_only = energy_batch(&p, &poly, &xs, b).unwrap();
            let (e, g) = energy_gradient_batch(&p, &poly, &xs, b).unwrap();
            for beta in 0..b {
                let x = &xs[beta * n..beta * n + n];
                let (e0, g0, _) = naive(&poly, x);
                let tol = 1e-11 * (1.0 + e0.abs());
                assert!((e[beta] - e0).abs() < tol && (e_only[beta] - e0).abs() < tol);
                let (_, g1) = energy_gradient(&p, &poly, x).unwrap();
                for i in 0..n {
                    assert!((g[beta * n + i] - g0[i]).abs() < 1e-10 * (1.0 + g0[i].abs()));
                    assert!((g1[i] - g0[i]).abs() < 1e-10 * (1.0 + g0[i].abs()));
                }
            }
        }
    }

    #[test]
    fn many_directions_match_single_direction() {
        let n = 13;
        let terms = [(2usize, 1.0), (3, 0.6), (4, 0.3)];
        let poly = Packed::<f32>::sample(&pool(2), n, &terms, &Disorder::new(4)).unwrap();
        let x: Vec<f64> = (0..n).map(|i| (i as f64 * 0.3).sin()).collect();
        let k = 3;
        let vs: Vec<f64> = (0..n * k).map(|i| (i as f64 * 0.17).cos()).collect();
        let p = pool(2);
        let w = hvp_many(&p, &poly, &x, &vs, k).unwrap();
        for kap in 0..k {
            let v: Vec<f64> = (0..n).map(|t| vs[t * k + kap]).collect();
            let w1 = hvp(&p, &poly, &x, &v).unwrap();
            for t in 0..n {
                assert!((w[t * k + kap] - w1[t]).abs() < 1e-10 * (1.0 + w1[t].abs()));
            }
        }
    }

    #[test]
    fn batch_is_bitwise_identical_across_thread_counts() {
        let n = 60; // 37,820 coefficients: 2 work items
        let poly = Packed::<f64>::sample(&pool(2), n, &[(3, 1.0)], &Disorder::new(6)).unwrap();
        assert!(pieces(poly.num_coefficients(), 4 * n) >= 2);
        let xs: Vec<f64> = (0..4 * n).map(|i| ((i as f64) * 0.05).sin()).collect();
        let one = energy_gradient_batch(&pool(1), &poly, &xs, 4).unwrap();
        for k in [2, 4] {
            assert_eq!(energy_gradient_batch(&pool(k), &poly, &xs, 4).unwrap(), one);
        }
    }
}
