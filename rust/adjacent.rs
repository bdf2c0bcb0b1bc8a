//! Single-point passes that walk blocks of adjacent prefixes ([`crate::stagger`]).
//!
//! A block is the prefixes (L, k0 + r), r < count <= 4, sharing the leading indices L;
//! the sums over r below run over every block of the run. With
//! B = prod_m x_{L_m}, Q_m = B / x_{L_m} (as a leave-one-out product), the row sums
//! Sx_r = sum_t a_{r,t} x_t and Sv_r = sum_t a_{r,t} v_t, and T = sum_r x_{k0+r} Sx_r, the
//! formulas of [`crate::kernels`] become, per block:
//!
//! ```text
//! energy    H += B T
//! gradient  g_t += sum_r (B x_{k0+r}) a_{r,t},  g_{k0+r} += B Sx_r,  g_{L_m} += Q_m T
//! Hess . v  w_t += sum_r D_r a_{r,t},  D_r = dB x_{k0+r} + B v_{k0+r},  dB = sum_m v_{L_m} Q_m
//!           w_{k0+r} += B Sv_r + dB Sx_r
//!           w_{L_m} += Q_m sum_r (x_{k0+r} Sv_r + v_{k0+r} Sx_r) + dQ_m T,
//!           dQ_m = sum_{m' != m} v_{L_m'} R_{m m'}   (R: leave-two-out products over L)
//! ```
//!
//! The products over L and the sums over r only change with the run (all rows k0.. of one L),
//! so they are formed once per run and the updates of g_{L_m}, w_{L_m} and H are made there.

use crate::prefix::{leave_one_out, leave_two_out, MAX_PREFIX};
use crate::simd::Madd;
use crate::stagger::{rows_at, stagger4, stagger4_hess, HessRows, Runs};
use crate::storage::Coef;

/// Products over the leading indices of the current run (see the module doc): B, Q_m, and
/// on request the leave-two-out products R_{m m'} (m < m') and the directional dB, dQ_m.
pub(crate) struct Leading {
    pub base: f64,
    pub q: [f64; MAX_PREFIX],
    pub r: [[f64; MAX_PREFIX]; MAX_PREFIX],
    pub dbase: f64,
    pub dq: [f64; MAX_PREFIX],
}

impl Leading {
    pub fn new() -> Self {
        Leading {
            base: 1.0,
            q: [0.0; MAX_PREFIX],
            r: [[0.0; MAX_PREFIX]; MAX_PREFIX],
            dbase: 0.0,
            dq: [0.0; MAX_PREFIX],
        }
    }

    /// The products for a new run with leading indices `lead` at x; R when `two_out` or
    /// when `v` is given, and with `v` the directional ones.
    #[inline(always)]
    #[allow(clippy::needless_range_loop)] // m and k index the prefix in several arrays
    pub fn set(&mut self, lead: &[usize], x: &[f64], v: Option<&[f64]>, two_out: bool) {
        let l = lead.len();
        if let &[i, j] = lead {
            // the general formulas below for two leading indices, spelled out (the degree-4
            // quads set them once per segment)
            let (xi, xj) = (x[i], x[j]);
            self.base = xi * xj;
            self.q[0] = xj;
            self.q[1] = xi;
            self.r[0][1] = 1.0;
            if let Some(v) = v {
                self.dbase = v[i] * xj + v[j] * xi;
                self.dq[0] = v[j];
                self.dq[1] = v[i];
            }
            return;
        }
        let mut xl = [0f64; MAX_PREFIX];
        for (o, &i) in xl.iter_mut().zip(lead) {
            *o = x[i];
        }
        self.base = leave_one_out(&xl[..l], &mut self.q);
        if (two_out || v.is_some()) && l >= 2 {
            leave_two_out(&xl[..l], &mut self.r);
        }
        if let Some(v) = v {
            let r = &self.r;
            self.dbase = (0..l).map(|m| v[lead[m]] * self.q[m]).sum();
            for m in 0..l {
                let mut d = 0.0;
                for k in 0..l {
                    if k != m {
                        d += v[lead[k]] * if m < k { r[m][k] } else { r[k][m] };
                    }
                }
                self.dq[m] = d;
            }
        }
    }
}

/// Energy of the prefixes of `runs` (`coeffs` start at the first run's first row).
#[inline(always)]
pub(crate) fn energy_blocks<M: Madd, T: Coef>(
    n: usize,
    mut runs: Runs,
    coeffs: &[T],
    x: &[f64],
) -> f64 {
    let mut lead = Leading::new();
    let mut e = 0.0;
    while let Some((mut k, k_end, mut pos)) = runs.next_run() {
        lead.set(runs.lead(), x, None, false);
        let mut run_total = 0.0;
        while k < k_end {
            let count = (k_end - k).min(4);
            let (rows, next) = rows_at(n, k, pos, count, coeffs);
            let (s, _) = stagger4::<M, T>(rows, &x[k..], None, None);
            for r in 0..count {
                run_total = M::madd(x[k + r], s[r], run_total);
            }
            (k, pos) = (k + count, next);
        }
        e = M::madd(lead.base, run_total, e);
    }
    e
}

/// Gradient (added to `g`) and energy (returned) of the prefixes of `runs`.
#[inline(always)]
pub(crate) fn gradient_blocks<M: Madd, T: Coef>(
    n: usize,
    mut runs: Runs,
    coeffs: &[T],
    x: &[f64],
    g: &mut [f64],
) -> f64 {
    let mut lead = Leading::new();
    let mut e = 0.0;
    while let Some((mut k, k_end, mut pos)) = runs.next_run() {
        lead.set(runs.lead(), x, None, false);
        let base = lead.base;
        let mut run_total = 0.0;
        while k < k_end {
            let count = (k_end - k).min(4);
            let mut w = [0f64; 4];
            for r in 0..count {
                w[r] = base * x[k + r];
            }
            let (rows, next) = rows_at(n, k, pos, count, coeffs);
            let (s, _) = stagger4::<M, T>(rows, &x[k..], None, Some((&mut g[k..], w)));
            for r in 0..count {
                run_total = M::madd(x[k + r], s[r], run_total);
                g[k + r] = M::madd(base, s[r], g[k + r]);
            }
            (k, pos) = (k + count, next);
        }
        e = M::madd(base, run_total, e);
        for (m, &i) in runs.lead().iter().enumerate() {
            g[i] = M::madd(lead.q[m], run_total, g[i]);
        }
    }
    e
}

/// Hessian-vector product of the prefixes of `runs` at x along v, added to `w`.
#[inline(always)]
pub(crate) fn hvp_blocks<M: Madd, T: Coef>(
    n: usize,
    mut runs: Runs,
    coeffs: &[T],
    (x, v): (&[f64], &[f64]),
    w: &mut [f64],
) {
    let mut lead = Leading::new();
    while let Some((mut k, k_end, mut pos)) = runs.next_run() {
        lead.set(runs.lead(), x, Some(v), false);
        let (base, dbase) = (lead.base, lead.dbase);
        let (mut mixed, mut total) = (0.0, 0.0);
        while k < k_end {
            let count = (k_end - k).min(4);
            let mut d = [0f64; 4];
            for r in 0..count {
                d[r] = M::madd(dbase, x[k + r], base * v[k + r]);
            }
            let (rows, next) = rows_at(n, k, pos, count, coeffs);
            let (sx, sv) = stagger4::<M, T>(rows, &x[k..], Some(&v[k..]), Some((&mut w[k..], d)));
            for r in 0..count {
                w[k + r] += M::madd(dbase, sx[r], base * sv[r]);
                mixed = M::madd(v[k + r], sx[r], M::madd(x[k + r], sv[r], mixed));
                total = M::madd(x[k + r], sx[r], total);
            }
            (k, pos) = (k + count, next);
        }
        for (m, &i) in runs.lead().iter().enumerate() {
            w[i] += M::madd(lead.dq[m], total, lead.q[m] * mixed);
        }
    }
}

/// Hessian accumulator A (n x n, upper part; Hess = A + A^T) of the prefixes of `runs` at x.
///
/// Per block, with Sx_r as above: rows k + r get B a_r, the shared rows L_m get Q_m U with
/// U = sum_r x_{k+r} a_r (equal leading indices share one row, weights summed), and
/// A[L_m, k + r] += Q_m Sx_r; per run, A[L_m, L_m'] += R_{m m'} T (m < m').
#[inline(always)]
pub(crate) fn hessian_blocks<M: Madd, T: Coef>(
    n: usize,
    mut runs: Runs,
    coeffs: &[T],
    x: &[f64],
    acc: &mut [f64],
) {
    let mut products = Leading::new();
    while let Some((mut k, k_end, mut pos)) = runs.next_run() {
        let lead = runs.lead();
        let l = lead.len();
        products.set(lead, x, None, true);
        let (base, q) = (products.base, &products.q);
        // distinct leading indices (equal ones are adjacent) with summed weights
        let mut shared = [(0usize, 0f64); MAX_PREFIX];
        let mut d = 0;
        for m in 0..l {
            if d > 0 && shared[d - 1].0 == lead[m] {
                shared[d - 1].1 += q[m];
            } else {
                shared[d] = (lead[m], q[m]);
                d += 1;
            }
        }
        let mut total = 0.0;
        while k < k_end {
            let count = (k_end - k).min(4);
            let mut xk = [0f64; 4];
            xk[..count].copy_from_slice(&x[k..k + count]);
            let (rows, next) = rows_at(n, k, pos, count, coeffs);
            let h = HessRows {
                n,
                k,
                shared: &shared[..d],
                b: base,
                xk,
            };
            let s = stagger4_hess::<M, T>(rows, &x[k..], acc, &h);
            for r in 0..count {
                total = M::madd(xk[r], s[r], total);
                for &(i, w) in &shared[..d] {
                    let at = i * n + k + r;
                    acc[at] = M::madd(w, s[r], acc[at]);
                }
            }
            (k, pos) = (k + count, next);
        }
        for m in 0..l {
            for m2 in m + 1..l {
                let at = lead[m] * n + lead[m2];
                acc[at] = M::madd(products.r[m][m2], total, acc[at]);
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::kernels::tests::{naive, pool};
    use crate::sampling::Disorder;
    use crate::simd::{has_avx2_fma, Fused, Plain};
    use crate::storage::Packed;

    /// Both instruction-set paths of the four passes against the naive sums, per degree,
    /// over two items that split the first indices.
    #[test]
    fn both_paths_match_naive_sums() {
        let n = 10;
        for degree in 2..=6usize {
            let poly =
                Packed::<f64>::sample(&pool(1), n, &[(degree, 1.0)], &Disorder::new(5)).unwrap();
            let coeffs = &poly.blocks()[0].coeffs;
            let x: Vec<f64> = (0..n).map(|i| 0.3 + (i as f64 * 0.7).sin()).collect();
            let v: Vec<f64> = (0..n).map(|i| (i as f64 * 0.4).cos()).collect();
            let (e0, g0, h0) = naive(&poly, &x);
            let hv0: Vec<f64> = (0..n)
                .map(|r| (0..n).map(|c| h0[r * n + c] * v[c]).sum())
                .collect();
            // items: first indices 0..3 and 3..n (the second starts at the offset of index 3)
            let split = crate::combinatorics::first_index_offset(n, degree, 3);
            let parts = [((0, 3), &coeffs[..split]), ((3, n), &coeffs[split..])];
            let run = |fused: bool| {
                let (mut e, mut e2, mut g, mut w) = (0.0, 0.0, vec![0.0; n], vec![0.0; n]);
                let mut a = vec![0.0; n * n];
                for (span, c) in parts {
                    let runs = || Runs::new(n, degree, span.0, span.1);
                    if fused {
                        e += energy_blocks::<Fused, f64>(n, runs(), c, &x);
                        e2 += gradient_blocks::<Fused, f64>(n, runs(), c, &x, &mut g);
                        hvp_blocks::<Fused, f64>(n, runs(), c, (&x, &v), &mut w);
                        hessian_blocks::<Fused, f64>(n, runs(), c, &x, &mut a);
                    } else {
                        e += energy_blocks::<Plain, f64>(n, runs(), c, &x);
                        e2 += gradient_blocks::<Plain, f64>(n, runs(), c, &x, &mut g);
                        hvp_blocks::<Plain, f64>(n, runs(), c, (&x, &v), &mut w);
                        hessian_blocks::<Plain, f64>(n, runs(), c, &x, &mut a);
                    }
                }
                // Hess = A + A^T
                let hess: Vec<f64> = (0..n * n).map(|i| a[i] + a[(i % n) * n + i / n]).collect();
                (e, e2, g, w, hess)
            };
            let mut paths = vec![run(false)];
            if has_avx2_fma() {
                paths.push(run(true));
            }
            let scale = 1.0 + e0.abs() + h0.iter().map(|t| t.abs()).sum::<f64>();
            let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * scale;
            for (e, e2, g, w, hess) in paths {
                assert!(
                    close(e, e0) && close(e2, e0),
                    "degree {degree}: {e} vs {e0}"
                );
                for (i, (a, b)) in hess.iter().zip(&h0).enumerate() {
                    assert!(
                        close(*a, *b),
                        "degree {degree} Hessian entry {i}: {a} vs {b}"
                    );
                }
                for i in 0..n {
                    assert!(close(g[i], g0[i]), "degree {degree} gradient {i}");
                    assert!(close(w[i], hv0[i]), "degree {degree} hvp {i}");
                }
            }
        }
    }
}
