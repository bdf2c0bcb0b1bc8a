//! Batched kernels: b points (or k directions) in one pass over the coefficients.
//!
//! The points are transposed to an n x b layout so the inner loop over the batch runs over
//! contiguous lanes: for each coefficient a_t of a prefix segment,
//!
//! ```text
//! S[beta] += a_t X[t, beta],   G[t, beta] += a_t P[beta]
//! ```
//!
//! with the same prefix formulas as [`crate::kernels`]. A batch of b points therefore costs
//! one read of the coefficients plus O(b) arithmetic per coefficient, instead of b reads.
//! For several Hessian-vector products at one point x (directions V, n x k):
//!
//! ```text
//! W[t, kappa] += a_t D[kappa],   Sv[kappa] += a_t V[t, kappa],   Sx += a_t x_t.
//! ```

use rayon::ThreadPool;

use crate::error::CoreError;
use crate::kernels::{check_len, items_for};
use crate::partition::{reduce_sums, WorkItem};
use crate::simd::{leave_one_out, leave_two_out, simd_dispatch, Madd, Prefixes, MAX_PREFIX};
use crate::storage::{Coef, Packed};

/// Items per batched pass (each holds an n x b accumulator).
pub const BATCH_PIECES: usize = 32;

fn transpose(src: &[f64], rows: usize, cols: usize) -> Vec<f64> {
    let mut out = vec![0.0; src.len()];
    for r in 0..rows {
        for c in 0..cols {
            out[c * rows + r] = src[r * cols + c];
        }
    }
    out
}

/// Energies of an item added to `e`, and, unless `g` is empty, gradients added to `g` (n x b).
#[inline(always)]
fn batch_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    xt: &[f64],
    b: usize,
    e: &mut [f64],
    g: &mut [f64],
) {
    let want_grad = !g.is_empty();
    let coeffs = &a[it.start..it.start + it.len];
    let mut s = vec![0f64; b];
    if it.degree == 1 {
        for (k, &c) in coeffs.iter().enumerate() {
            let t = it.lo + k;
            let c = c.to_f64();
            let row = &xt[t * b..t * b + b];
            for beta in 0..b {
                s[beta] = M::madd(c, row[beta], s[beta]);
            }
            if want_grad {
                for gv in &mut g[t * b..t * b + b] {
                    *gv += c;
                }
            }
        }
        for beta in 0..b {
            e[beta] += s[beta];
        }
        return;
    }
    let l = it.degree - 1;
    // per-lane prefix products: prod[beta], q[j * b + beta]
    let mut prod = vec![0f64; b];
    let mut q = vec![0f64; MAX_PREFIX * b];
    let (mut xp, mut qq) = ([0f64; MAX_PREFIX], [0f64; MAX_PREFIX]);
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    while let Some((t0, pos)) = walk.next_prefix() {
        let pre = walk.prefix();
        for beta in 0..b {
            for j in 0..l {
                xp[j] = xt[pre[j] * b + beta];
            }
            prod[beta] = leave_one_out(&xp[..l], &mut qq);
            for j in 0..l {
                q[j * b + beta] = qq[j];
            }
        }
        s.iter_mut().for_each(|v| *v = 0.0);
        let seg = &coeffs[pos..pos + n - t0];
        for (k, &c) in seg.iter().enumerate() {
            let t = t0 + k;
            let c = c.to_f64();
            let row = &xt[t * b..t * b + b];
            for beta in 0..b {
                s[beta] = M::madd(c, row[beta], s[beta]);
            }
            if want_grad {
                let grow = &mut g[t * b..t * b + b];
                for beta in 0..b {
                    grow[beta] = M::madd(c, prod[beta], grow[beta]);
                }
            }
        }
        for beta in 0..b {
            e[beta] += prod[beta] * s[beta];
        }
        if want_grad {
            for j in 0..l {
                let grow = &mut g[pre[j] * b..pre[j] * b + b];
                for beta in 0..b {
                    grow[beta] += q[j * b + beta] * s[beta];
                }
            }
        }
    }
}

simd_dispatch!(fn batch_item => batch_item_body(
    n: usize, a: &[T], it: &WorkItem, xt: &[f64], b: usize, e: &mut [f64], g: &mut [f64]) -> ());

fn run_batch<T: Coef>(
    pool: &ThreadPool,
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
    let xt = transpose(xs, b, n);
    let items = items_for(poly, BATCH_PIECES);
    let blocks = poly.blocks();
    let glen = if want_grad { len } else { 0 };
    let (e, g) = reduce_sums(pool, &items, b, glen, |it, e, g| {
        let coeffs = &blocks[it.block].coeffs;
        batch_item::<T>(n, coeffs, it, &xt, b, e, g);
    })?;
    let g = if want_grad {
        transpose(&g, n, b)
    } else {
        Vec::new()
    };
    Ok((e, g))
}

/// H at each of b points (`xs` is b x n row-major).
pub fn energy_batch<T: Coef>(
    pool: &ThreadPool,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<Vec<f64>, CoreError> {
    Ok(run_batch(pool, poly, xs, b, false)?.0)
}

/// H and grad H at each of b points; the gradients are returned b x n row-major.
pub fn energy_gradient_batch<T: Coef>(
    pool: &ThreadPool,
    poly: &Packed<T>,
    xs: &[f64],
    b: usize,
) -> Result<(Vec<f64>, Vec<f64>), CoreError> {
    run_batch(pool, poly, xs, b, true)
}

#[inline(always)]
fn hvp_many_item_body<M: Madd, T: Coef>(
    n: usize,
    a: &[T],
    it: &WorkItem,
    x: &[f64],
    vs: &[f64],
    k: usize,
    w: &mut [f64],
) {
    if it.degree == 1 {
        return;
    }
    let coeffs = &a[it.start..it.start + it.len];
    let l = it.degree - 1;
    let (mut xp, mut q) = ([0f64; MAX_PREFIX], [0f64; MAX_PREFIX]);
    let mut r = [[0f64; MAX_PREFIX]; MAX_PREFIX];
    let mut d = vec![0f64; k];
    let mut sv = vec![0f64; k];
    let mut dq = vec![0f64; MAX_PREFIX * k];
    let mut walk = Prefixes::new(n, it.degree, it.lo, it.hi);
    while let Some((t0, pos)) = walk.next_prefix() {
        let pre = walk.prefix();
        for j in 0..l {
            xp[j] = x[pre[j]];
        }
        leave_one_out(&xp[..l], &mut q);
        if l >= 2 {
            leave_two_out(&xp[..l], &mut r);
        }
        d.iter_mut().for_each(|v| *v = 0.0);
        dq.iter_mut().for_each(|v| *v = 0.0);
        for j in 0..l {
            let vrow = &vs[pre[j] * k..pre[j] * k + k];
            for kap in 0..k {
                d[kap] += vrow[kap] * q[j];
            }
            for m in 0..l {
                if m != j {
                    let rr = if j < m { r[j][m] } else { r[m][j] };
                    for kap in 0..k {
                        dq[m * k + kap] += vrow[kap] * rr;
                    }
                }
            }
        }
        sv.iter_mut().for_each(|v| *v = 0.0);
        let mut sx = 0.0;
        let seg = &coeffs[pos..pos + n - t0];
        for (o, &c) in seg.iter().enumerate() {
            let t = t0 + o;
            let c = c.to_f64();
            sx = M::madd(c, x[t], sx);
            let vrow = &vs[t * k..t * k + k];
            let wrow = &mut w[t * k..t * k + k];
            for kap in 0..k {
                sv[kap] = M::madd(c, vrow[kap], sv[kap]);
                wrow[kap] = M::madd(c, d[kap], wrow[kap]);
            }
        }
        for j in 0..l {
            let wrow = &mut w[pre[j] * k..pre[j] * k + k];
            for kap in 0..k {
                wrow[kap] += q[j] * sv[kap] + dq[j * k + kap] * sx;
            }
        }
    }
}

simd_dispatch!(fn hvp_many_item => hvp_many_item_body(
    n: usize, a: &[T], it: &WorkItem, x: &[f64], vs: &[f64], k: usize, w: &mut [f64]) -> ());

/// Hess H(x) V for k directions; `vs` and the result are n x k row-major.
pub fn hvp_many<T: Coef>(
    pool: &ThreadPool,
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
    let items = items_for(poly, BATCH_PIECES);
    let blocks = poly.blocks();
    let (_, w) = reduce_sums(pool, &items, 0, len, |it, _, w| {
        hvp_many_item::<T>(n, &blocks[it.block].coeffs, it, x, vs, k, w);
    })?;
    Ok(w)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernels::tests::{naive, pool};
    use crate::kernels::{energy_gradient, hvp};
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
        let n = 30;
        let poly = Packed::<f64>::sample(&pool(2), n, &[(3, 1.0)], &Disorder::new(6)).unwrap();
        let xs: Vec<f64> = (0..4 * n).map(|i| ((i as f64) * 0.05).sin()).collect();
        let one = energy_gradient_batch(&pool(1), &poly, &xs, 4).unwrap();
        for k in [2, 4] {
            assert_eq!(energy_gradient_batch(&pool(k), &poly, &xs, 4).unwrap(), one);
        }
    }
}
