//! One Hessian-vector product Hess H(x) v in one pass, without forming the Hessian (the
//! module formulas of [`crate::kernels`]: w_t += D a_t, w_ij += Q_j Sv + dQ_j S). Several
//! directions at one point go through [`crate::batch`] instead.

use super::{check_len, four_segments, gather, items_for, pieces, segment3, PrefixProducts};
use crate::error::CoreError;
use crate::exec::Exec;
use crate::partition::{reduce_sums, WorkItem, QUANTUM};
use crate::prefix::{leave_one_out, leave_two_out, Prefixes};
use crate::quads::hvp_quads;
use crate::simd::{dot2_axpy, dots8_axpy, simd_dispatch, Madd};
use crate::storage::{Coef, Packed};

#[inline(always)]
fn hvp_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    v: &[f64],
    w: &mut [f64],
) {
    if it.degree == 1 {
        return;
    }
    let coeffs = &a[it.start..it.start + it.len];
    if it.degree == 3 {
        return hvp3_item_body::<M, T>(n, coeffs, it, x, v, w);
    }
    if it.degree >= 4 {
        return hvp_quads::<M, T>(n, it.degree, (it.lo, it.hi, it.start), coeffs, (x, v), w);
    }
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    let mut pp = PrefixProducts::new();
    while let Some((t0, pos)) = walk.next_prefix() {
        let seg = &coeffs[pos..pos + n - t0];
        hvp_prefix::<M, T>(seg, (t0, walk.prefix()), (x, v), w, &mut pp);
    }
}

/// The Hessian-vector contribution of one prefix `pre` (sorted, last index t0) with segment
/// `seg`, the plain way (module doc): w_t += D a_t, w_{i_j} += Q_j Sv + dQ_j Sx.
#[inline(always)]
fn hvp_prefix<M: Madd, T: Coef>(
    seg: &[T],
    (t0, pre): (usize, &[usize]),
    (x, v): (&[f64], &[f64]),
    w: &mut [f64],
    pp: &mut PrefixProducts,
) {
    let l = pre.len();
    gather(x, pre, &mut pp.xp);
    gather(v, pre, &mut pp.vp);
    leave_one_out(&pp.xp[..l], &mut pp.q);
    let (vp, q) = (&pp.vp, &pp.q);
    let d: f64 = (0..l).map(|j| vp[j] * q[j]).sum();
    let (sx, sv) = dot2_axpy::<M, T>(seg, &x[t0..], &v[t0..], &mut w[t0..], d);
    if l >= 2 {
        leave_two_out(&pp.xp[..l], &mut pp.r);
    }
    let r = &pp.r;
    for j in 0..l {
        let mut dq = 0.0;
        for k in 0..l {
            if k != j {
                dq += vp[k] * if j < k { r[j][k] } else { r[k][j] };
            }
        }
        w[pre[j]] += q[j] * sv + dq * sx;
    }
}

/// The degree-3 HVP pass of one item (`coeffs` are the item's), four first indices at a time
/// as in `hessian::hessian3_item_body`: the four segments of (g + k, j) share w_t, t >= j, and the
/// reads of x_t and v_t, which [`dots8_axpy`] does once for all four.
#[inline(always)]
fn hvp3_item_body<M: Madd, T: Coef>(
    n: usize,
    coeffs: &[T],
    it: &WorkItem,
    x: &[f64],
    v: &[f64],
    w: &mut [f64],
) {
    let mut pp = PrefixProducts::new();
    let mut g0 = it.lo;
    while g0 + 4 <= it.hi {
        for i in g0..g0 + 4 {
            for j in i..g0 + 4 {
                let p = segment3(n, it.start, i, j);
                hvp_prefix::<M, T>(&coeffs[p..p + n - j], (j, &[i, j]), (x, v), w, &mut pp);
            }
        }
        let (xi, vi) = (&x[g0..g0 + 4], &v[g0..g0 + 4]);
        let mut pos = [0usize; 4];
        for (k, p) in pos.iter_mut().enumerate() {
            *p = segment3(n, it.start, g0 + k, g0 + 4);
        }
        for j in g0 + 4..n {
            let len = n - j;
            let (xj, vj) = (x[j], v[j]);
            let mut d = [0f64; 4];
            for k in 0..4 {
                d[k] = vi[k] * xj + vj * xi[k];
            }
            let (sx, sv) = dots8_axpy::<M, T>(
                four_segments(coeffs, &pos, len),
                &x[j..],
                &v[j..],
                &mut w[j..],
                d,
            );
            let mut wj = [0f64; 4];
            for k in 0..4 {
                w[g0 + k] += xj * sv[k] + vj * sx[k];
                wj[k] = xi[k] * sv[k] + vi[k] * sx[k];
                pos[k] += len;
            }
            w[j] += (wj[0] + wj[1]) + (wj[2] + wj[3]);
        }
        g0 += 4;
    }
    for i in g0..it.hi {
        let mut p = segment3(n, it.start, i, i);
        for j in i..n {
            hvp_prefix::<M, T>(&coeffs[p..p + n - j], (j, &[i, j]), (x, v), w, &mut pp);
            p += n - j;
        }
    }
}

simd_dispatch!(fn hvp_item => hvp_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], v: &[f64], w: &mut [f64]) -> ());

/// Hess H(x) v for one direction v.
pub fn hvp<T: Coef>(
    exec: &Exec,
    poly: &Packed<T>,
    x: &[f64],
    v: &[f64],
) -> Result<Vec<f64>, CoreError> {
    let n = poly.n();
    check_len("x", n, x.len())?;
    check_len("v", n, v.len())?;
    let items = items_for(poly, pieces(poly.num_coefficients(), n), 3, QUANTUM);
    let blocks = poly.blocks();
    let (_, w) = reduce_sums(exec, &items, 0, n, |it, _, w| {
        hvp_item::<T>(n, &blocks[it.block].coeffs, it, x, v, w);
    })?;
    Ok(w)
}
