//! Single-point passes of degree p >= 4 that take first indices four at a time.
//!
//! Take first indices g..g+4 (a quad). The coefficients of first index g + r whose second
//! index is >= g + 4 close that index's sub-block, and they follow the same order for the four
//! values of r (lexicographic in the other p - 1 indices). One walk over the prefixes
//! P = (i2 <= .. <= i_{p-1}) of those tails, with t0 = i_{p-1}, therefore reads four segments
//! of length n - t0 side by side, like the degree-3 passes of [`crate::kernels`], and each
//! x_t (v_t, g_t) once for the four. With W = prod_m x_{P_m}, Q_m = W / x_{P_m} (a
//! leave-one-out product), s_r = sum_t a_{r,t} x_t, sv_r = sum_t a_{r,t} v_t and
//! T = sum_r x_{g+r} s_r (the walk goes run by run: the outer prefix P' = (i2, .., i_{p-2})
//! and its products once per run, then a plain loop over t0 from i_{p-2} to n - 1):
//!
//! ```text
//! energy    H += W T
//! gradient  g_t += sum_r W x_{g+r} a_{r,t},  g_{g+r} += W s_r,  g_{P_m} += Q_m T
//! Hess . v  w_t += sum_r D_r a_{r,t},  D_r = dW x_{g+r} + W v_{g+r},  dW = sum_m v_{P_m} Q_m
//!           w_{g+r} += W sv_r + dW s_r
//!           w_{P_m} += Q_m sum_r (x_{g+r} sv_r + v_{g+r} s_r) + dQ_m T
//! ```
//!
//! These are the formulas of [`crate::adjacent`] with the quad in the place of a block's rows
//! and P in the place of the leading indices ([`Leading`] forms W, Q, dW, dQ). The Hessians
//! ([`hessian4_quads`] for degree 4, [`hessian_quads`] from degree 5) walk the same way; their
//! formulas are on those functions. The runs of
//! first index g + r with second index < g + 4, and the first indices left over at the end of
//! an item (items start at multiples of [`crate::partition::QUANTUM`]), go through the blocks
//! of [`crate::adjacent`]. Compared with those blocks, a segment here costs no masked steps
//! and no per-block set-up: at p = 4, n = 120 (segments about 30 long) the passes take 15-28 %
//! less time on one thread.

use crate::adjacent::{energy_blocks, gradient_blocks, hessian_blocks, hvp_blocks, Leading};
use crate::combinatorics::{first_index_offset, num_multisets};
use crate::prefix::{Prefixes, MAX_PREFIX};
use crate::simd::{dots4, dots4_axpy, dots8_axpy, rows4, rows4_shared2, Madd};
use crate::stagger::Runs;
use crate::storage::Coef;

/// Where the quad g..g+4 of a degree-p item lies in the item's coefficients (which start at
/// offset `start` of the block): `head[r]` is where first index g + r starts, `tail[r]` where
/// its coefficients with second index >= g + 4 start.
struct Quad {
    g: usize,
    head: [usize; 4],
    tail: [usize; 4],
}

impl Quad {
    fn new(n: usize, p: usize, g: usize, start: usize) -> Self {
        let tail_len = num_multisets(n - g - 4, p - 1).expect("inside the block");
        Quad {
            g,
            head: std::array::from_fn(|r| first_index_offset(n, p, g + r) - start),
            tail: std::array::from_fn(|r| first_index_offset(n, p, g + r + 1) - start - tail_len),
        }
    }

    /// The runs of first index g + r that precede its tail.
    fn head_runs(&self, n: usize, p: usize, r: usize) -> Runs {
        Runs::below(n, p, self.g + r, self.g + 4)
    }

    /// The outer prefixes P' of the tails' prefixes P = (P', t0) (P' has p - 3 >= 1
    /// indices, P'_0 >= g + 4), in order. Each opens a run t0 = P'_last..n whose segments,
    /// of length n - t0, follow each other in every tail.
    fn tail_runs(&self, n: usize, p: usize) -> Prefixes {
        Prefixes::new(n, p - 2, self.g + 4, n)
    }

    /// The four tail segments at offset `pos` of length `len`.
    #[inline(always)]
    fn segments<'a, T>(&self, coeffs: &'a [T], pos: usize, len: usize) -> [&'a [T]; 4] {
        self.tail.map(|at| &coeffs[at + pos..at + pos + len])
    }

    /// The quad's own rows g..g+4 of the n x n accumulator from column `from` on, and the
    /// rows after them (row g + 4 first).
    #[inline(always)]
    fn own_rows<'a>(
        &self,
        acc: &'a mut [f64],
        n: usize,
        from: usize,
    ) -> ([&'a mut [f64]; 4], &'a mut [f64]) {
        let (own, rest) = acc[self.g * n..].split_at_mut(4 * n);
        let (r0, own) = own.split_at_mut(n);
        let (r1, own) = own.split_at_mut(n);
        let (r2, r3) = own.split_at_mut(n);
        let rows = [
            &mut r0[from..],
            &mut r1[from..],
            &mut r2[from..],
            &mut r3[from..],
        ];
        (rows, rest)
    }

    /// (y_g, .., y_{g+3}).
    #[inline(always)]
    fn of(&self, y: &[f64]) -> [f64; 4] {
        [y[self.g], y[self.g + 1], y[self.g + 2], y[self.g + 3]]
    }
}

/// W (and with v: dW) of the tail prefixes P = (P', t0), formed from those of the outer
/// prefix P' ([`Leading`], set once per run of t0): W = W' x_t0, dW = dW' x_t0 + W' v_t0.
/// The leave-one-out products of P are Q_m = Q'_m x_t0 (m < l', the length of P') and
/// Q_l' = W' (with v: dQ_m = dQ'_m x_t0 + Q'_m v_t0 and dQ_l' = dW'); the passes use them
/// through `outer`, summing the terms of the outer indices over the run.
struct TailProducts {
    outer: Leading,
    base: f64,
    dbase: f64,
}

impl TailProducts {
    fn new() -> Self {
        TailProducts {
            outer: Leading::new(),
            base: 0.0,
            dbase: 0.0,
        }
    }

    /// The products of the outer prefix of a new run, with v when given.
    #[inline(always)]
    fn start(&mut self, outer: &[usize], x: &[f64], v: Option<&[f64]>) {
        self.outer.set(outer, x, v, false);
    }

    /// W and dW of (P', t0), P' the run's outer prefix.
    #[inline(always)]
    fn at<M: Madd>(&mut self, t0: usize, x: &[f64], v: Option<&[f64]>) {
        let o = &self.outer;
        let xt = x[t0];
        self.base = o.base * xt;
        if let Some(v) = v {
            self.dbase = M::madd(o.dbase, xt, o.base * v[t0]);
        }
    }
}

/// (a_0 b_0 + a_1 b_1) + (a_2 b_2 + a_3 b_3).
#[inline(always)]
fn dot4(a: [f64; 4], b: [f64; 4]) -> f64 {
    (a[0] * b[0] + a[1] * b[1]) + (a[2] * b[2] + a[3] * b[3])
}

/// The first indices lo..hi of an item past its last whole quad, through the blocks.
fn rest_runs(n: usize, p: usize, g: usize, hi: usize, start: usize) -> (Runs, usize) {
    (Runs::new(n, p, g, hi), first_index_offset(n, p, g) - start)
}

/// Energy of the degree-p (>= 4) item with first indices lo..hi whose coefficients `coeffs`
/// start at offset `start` of the block.
#[inline(always)]
pub(crate) fn energy_quads<M: Madd, T: Coef>(
    n: usize,
    p: usize,
    (lo, hi, start): (usize, usize, usize),
    coeffs: &[T],
    x: &[f64],
) -> f64 {
    let mut e = 0.0;
    let mut first = lo;
    while first + 4 <= hi {
        let quad = Quad::new(n, p, first, start);
        for r in 0..4 {
            let head = &coeffs[quad.head[r]..];
            e += energy_blocks::<M, T>(n, quad.head_runs(n, p, r), head, x);
        }
        let xg = quad.of(x);
        let (mut runs, mut pos) = (quad.tail_runs(n, p), 0);
        let mut part = 0.0;
        while let Some((last, _)) = runs.next_prefix() {
            let w_outer: f64 = runs.prefix().iter().map(|&j| x[j]).product();
            for t0 in last..n {
                let s = dots4::<M, T>(quad.segments(coeffs, pos, n - t0), &x[t0..]);
                pos += n - t0;
                part = M::madd(w_outer * x[t0], dot4(xg, s), part);
            }
        }
        e += part;
        first += 4;
    }
    if first < hi {
        let (runs, at) = rest_runs(n, p, first, hi, start);
        e += energy_blocks::<M, T>(n, runs, &coeffs[at..], x);
    }
    e
}

/// Gradient (added to `g`) and energy (returned) of a degree-p (>= 4) item, as in
/// [`energy_quads`].
#[inline(always)]
pub(crate) fn gradient_quads<M: Madd, T: Coef>(
    n: usize,
    p: usize,
    (lo, hi, start): (usize, usize, usize),
    coeffs: &[T],
    x: &[f64],
    g: &mut [f64],
) -> f64 {
    let mut lead = TailProducts::new();
    let mut e = 0.0;
    let mut first = lo;
    while first + 4 <= hi {
        let quad = Quad::new(n, p, first, start);
        for r in 0..4 {
            let head = &coeffs[quad.head[r]..];
            e += gradient_blocks::<M, T>(n, quad.head_runs(n, p, r), head, x, g);
        }
        let xg = quad.of(x);
        let mut own = [0f64; 4];
        let (mut runs, mut pos) = (quad.tail_runs(n, p), 0);
        while let Some((last, _)) = runs.next_prefix() {
            let outer = runs.prefix();
            lead.start(outer, x, None);
            // g[P'_m] += Q'_m x_t0 T summed over the run as Q'_m sum_t0 x_t0 T
            let mut run_total = 0.0;
            for t0 in last..n {
                lead.at::<M>(t0, x, None);
                let base = lead.base;
                let weights = xg.map(|xr| base * xr);
                let segs = quad.segments(coeffs, pos, n - t0);
                pos += n - t0;
                let s = dots4_axpy::<M, T>(segs, &x[t0..], &mut g[t0..], weights);
                let total = dot4(xg, s);
                e = M::madd(base, total, e);
                for r in 0..4 {
                    own[r] = M::madd(base, s[r], own[r]);
                }
                run_total = M::madd(x[t0], total, run_total);
                g[t0] = M::madd(lead.outer.base, total, g[t0]);
            }
            for (m, &i) in outer.iter().enumerate() {
                g[i] = M::madd(lead.outer.q[m], run_total, g[i]);
            }
        }
        for r in 0..4 {
            g[first + r] += own[r];
        }
        first += 4;
    }
    if first < hi {
        let (runs, at) = rest_runs(n, p, first, hi, start);
        e += gradient_blocks::<M, T>(n, runs, &coeffs[at..], x, g);
    }
    e
}

/// Hessian-vector product at x along v (added to `w`) of a degree-p (>= 4) item, as in
/// [`energy_quads`].
#[inline(always)]
pub(crate) fn hvp_quads<M: Madd, T: Coef>(
    n: usize,
    p: usize,
    (lo, hi, start): (usize, usize, usize),
    coeffs: &[T],
    (x, v): (&[f64], &[f64]),
    w: &mut [f64],
) {
    let mut lead = TailProducts::new();
    let mut first = lo;
    while first + 4 <= hi {
        let quad = Quad::new(n, p, first, start);
        for r in 0..4 {
            let head = &coeffs[quad.head[r]..];
            hvp_blocks::<M, T>(n, quad.head_runs(n, p, r), head, (x, v), w);
        }
        let (xg, vg) = (quad.of(x), quad.of(v));
        let mut own = [0f64; 4];
        let (mut runs, mut pos) = (quad.tail_runs(n, p), 0);
        while let Some((last, _)) = runs.next_prefix() {
            let outer = runs.prefix();
            lead.start(outer, x, Some(v));
            // w[P'_m] += dQ_m T + Q_m M with Q_m = Q'_m x_t0, dQ_m = dQ'_m x_t0 + Q'_m v_t0,
            // summed over the run as dQ'_m sum x_t0 T + Q'_m sum (v_t0 T + x_t0 M)
            let (mut run_t, mut run_m) = (0.0, 0.0);
            for t0 in last..n {
                lead.at::<M>(t0, x, Some(v));
                let (base, dbase) = (lead.base, lead.dbase);
                let d: [f64; 4] = std::array::from_fn(|r| M::madd(dbase, xg[r], base * vg[r]));
                let segs = quad.segments(coeffs, pos, n - t0);
                pos += n - t0;
                let (sx, sv) = dots8_axpy::<M, T>(segs, &x[t0..], &v[t0..], &mut w[t0..], d);
                for r in 0..4 {
                    own[r] += M::madd(dbase, sx[r], base * sv[r]);
                }
                let mixed = dot4(xg, sv) + dot4(vg, sx);
                let total = dot4(xg, sx);
                run_t = M::madd(x[t0], total, run_t);
                run_m += M::madd(v[t0], total, x[t0] * mixed);
                let o = &lead.outer;
                w[t0] += M::madd(o.dbase, total, o.base * mixed);
            }
            let o = &lead.outer;
            for (m, &i) in outer.iter().enumerate() {
                w[i] += M::madd(o.dq[m], run_t, o.q[m] * run_m);
            }
        }
        for r in 0..4 {
            w[first + r] += own[r];
        }
        first += 4;
    }
    if first < hi {
        let (runs, at) = rest_runs(n, p, first, hi, start);
        hvp_blocks::<M, T>(n, runs, &coeffs[at..], (x, v), w);
    }
}

/// Hessian accumulator (n x n, upper part; Hess = A + A^T, as in [`crate::kernels`]) of a
/// degree-4 item at x. For a tail prefix (j, k) of the quad, k = t0 >= j >= g + 4, the own
/// rows g + r get W a_{r,t} (W = x_j x_k), the shared rows j and k get Q_j u_t and Q_k u_t with
/// u_t = sum_r x_{g+r} a_{r,t} (one row with the weights summed when j = k), and
/// A[g+r, j] += Q_j s_r, A[g+r, k] += Q_k s_r, A[j, k] += T. The own rows stay the same for the
/// whole quad, so they stay in L1.
#[inline(always)]
pub(crate) fn hessian4_quads<M: Madd, T: Coef>(
    n: usize,
    (lo, hi, start): (usize, usize, usize),
    coeffs: &[T],
    x: &[f64],
    acc: &mut [f64],
) {
    let p = 4;
    let mut first = lo;
    while first + 4 <= hi {
        let quad = Quad::new(n, p, first, start);
        for r in 0..4 {
            let head = &coeffs[quad.head[r]..];
            hessian_blocks::<M, T>(n, quad.head_runs(n, p, r), head, x, acc);
        }
        let xg = quad.of(x);
        // the tail prefixes (j, k), g + 4 <= j <= k < n, in order; (j, k) has n - k
        // coefficients per tail
        let mut pos = 0;
        for j in first + 4..n {
            // A[g+r, j] += x_k s_r, summed over the run of k and added once after it
            let mut at_j = [0f64; 4];
            for k in j..n {
                let (xj, xk) = (x[j], x[k]);
                let segs = quad.segments(coeffs, pos, n - k);
                pos += n - k;
                let (rows, rest) = quad.own_rows(acc, n, k);
                let row_j = (j - first - 4) * n;
                let s = if j == k {
                    let weight = xj + xk;
                    let shared = &mut rest[row_j + k..row_j + n];
                    let xw = xg.map(|v| weight * v);
                    rows4::<M, T>(segs, &x[k..], rows, xj * xk, shared, xw, 0)
                } else {
                    let (before_k, row_k) = rest.split_at_mut(row_j + (k - j) * n);
                    let shared = [
                        (&mut before_k[row_j + k..row_j + n], xk),
                        (&mut row_k[k..n], xj),
                    ];
                    rows4_shared2::<M, T>(segs, &x[k..], rows, xj * xk, shared, xg)
                };
                for (r, &sr) in s.iter().enumerate() {
                    at_j[r] = M::madd(xk, sr, at_j[r]);
                    let at = (first + r) * n + k;
                    acc[at] = M::madd(xj, sr, acc[at]);
                }
                acc[j * n + k] += dot4(xg, s);
            }
            for (r, sum) in at_j.iter().enumerate() {
                acc[(first + r) * n + j] += sum;
            }
        }
        first += 4;
    }
    if first < hi {
        let (runs, at) = rest_runs(n, p, first, hi, start);
        hessian_blocks::<M, T>(n, runs, &coeffs[at..], x, acc);
    }
}

/// Hessian accumulator of a degree-p (>= 5) item at x. A tail prefix P = (P', t0) has l =
/// p - 2 >= 3 indices; with W' = prod x_{P'}, Q'_m and R'_{m m'} its leave-one-out and
/// leave-two-out products over P', u_t = sum_r x_{g+r} a_{r,t} and s_r, T as in the module doc:
///
/// ```text
/// own rows g + r        += W' x_t0 a_{r,t}        A[g+r, t0]     += W' s_r
/// row t0                += W' u_t                 A[P'_m, t0]    += Q'_m T
/// rows P'_m             += Q'_m x_t0 u_t          A[g+r, P'_m]   += Q'_m x_t0 s_r
///                                                 A[P'_m, P'_m'] += R'_{m m'} x_t0 T
/// ```
///
/// The terms of the last column depend on t0 only through x_t0, so they are summed over the
/// run of t0 that shares P' (U_t = sum x_t0 u_t in a scratch row, S'_r, T') and added to the
/// rows and entries of P' once per run. Per segment [`rows4_shared2`] then updates the four
/// own rows, row t0 and U in one pass.
#[inline(always)]
pub(crate) fn hessian_quads<M: Madd, T: Coef>(
    n: usize,
    p: usize,
    (lo, hi, start): (usize, usize, usize),
    coeffs: &[T],
    x: &[f64],
    acc: &mut [f64],
) {
    debug_assert!(p >= 5);
    let mut run = OuterRun::new(n);
    let mut first = lo;
    while first + 4 <= hi {
        let quad = Quad::new(n, p, first, start);
        for r in 0..4 {
            let head = &coeffs[quad.head[r]..];
            hessian_blocks::<M, T>(n, quad.head_runs(n, p, r), head, x, acc);
        }
        let xg = quad.of(x);
        let (mut runs, mut pos) = (quad.tail_runs(n, p), 0);
        while let Some((last, _)) = runs.next_prefix() {
            let outer = runs.prefix();
            run.start(outer, last, x);
            let w_outer = run.products.base;
            for t0 in last..n {
                let xt = x[t0];
                let segs = quad.segments(coeffs, pos, n - t0);
                pos += n - t0;
                let (rows, rest) = quad.own_rows(acc, n, t0);
                let row_t0 = (t0 - first - 4) * n;
                let shared = [
                    (&mut rest[row_t0 + t0..row_t0 + n], w_outer),
                    (&mut run.deferred[t0..], xt),
                ];
                let s = rows4_shared2::<M, T>(segs, &x[t0..], rows, w_outer * xt, shared, xg);
                for (r, &sr) in s.iter().enumerate() {
                    let at = (first + r) * n + t0;
                    acc[at] = M::madd(w_outer, sr, acc[at]);
                    run.own[r] = M::madd(xt, sr, run.own[r]);
                }
                let total = dot4(xg, s);
                for (m, &i) in outer.iter().enumerate() {
                    let at = i * n + t0;
                    acc[at] = M::madd(run.products.q[m], total, acc[at]);
                }
                run.total = M::madd(xt, total, run.total);
            }
            run.flush::<M>(first, acc);
        }
        first += 4;
    }
    if first < hi {
        let (runs, at) = rest_runs(n, p, first, hi, start);
        hessian_blocks::<M, T>(n, runs, &coeffs[at..], x, acc);
    }
}

/// The sums of [`hessian_quads`] over one run of t0 with the same outer prefix P'.
struct OuterRun {
    /// P' (its first `len` entries).
    lead: [usize; MAX_PREFIX],
    len: usize,
    /// W', Q'_m, R'_{m m'} of P'.
    products: Leading,
    /// U_t = sum_t0 x_t0 u_t, nonzero from column `from` (the run's first t0) on.
    deferred: Vec<f64>,
    from: usize,
    /// S'_r = sum_t0 x_t0 s_r and T' = sum_t0 x_t0 T.
    own: [f64; 4],
    total: f64,
}

impl OuterRun {
    fn new(n: usize) -> Self {
        OuterRun {
            lead: [0; MAX_PREFIX],
            len: 0,
            products: Leading::new(),
            deferred: vec![0.0; n],
            from: n,
            own: [0.0; 4],
            total: 0.0,
        }
    }

    #[inline(always)]
    fn start(&mut self, outer: &[usize], t0: usize, x: &[f64]) {
        self.len = outer.len();
        self.lead[..self.len].copy_from_slice(outer);
        self.products.set(outer, x, None, true);
        (self.from, self.own, self.total) = (t0, [0.0; 4], 0.0);
    }

    /// Adds the run's sums to the rows and entries of P' (quad first..first+4) and clears
    /// them.
    #[inline(always)]
    fn flush<M: Madd>(&mut self, first: usize, acc: &mut [f64]) {
        let n = self.deferred.len();
        let (lead, q, from) = (&self.lead[..self.len], &self.products.q, self.from);
        let mut m = 0;
        while m < lead.len() {
            // equal indices are adjacent in P': one pass with their weights summed
            let (row, mut weight) = (lead[m], q[m]);
            while m + 1 < lead.len() && lead[m + 1] == row {
                m += 1;
                weight += q[m];
            }
            let dst = &mut acc[row * n + from..row * n + n];
            for (a, u) in dst.iter_mut().zip(&self.deferred[from..]) {
                *a = M::madd(weight, *u, *a);
            }
            m += 1;
        }
        self.deferred[from..].fill(0.0);
        for (r, &sr) in self.own.iter().enumerate() {
            for (m, &i) in lead.iter().enumerate() {
                let at = (first + r) * n + i;
                acc[at] = M::madd(q[m], sr, acc[at]);
            }
        }
        for m in 0..lead.len() {
            for m2 in m + 1..lead.len() {
                let at = lead[m] * n + lead[m2];
                acc[at] = M::madd(self.products.r[m][m2], self.total, acc[at]);
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

    /// Both instruction-set paths of the passes against the naive sums, for degrees 4-7 and
    /// items that start on and off a multiple of four, hold zero, one or two quads, and
    /// leave 0-3 first indices for the blocks.
    #[test]
    fn both_paths_match_naive_sums() {
        for (n, degree) in [(4usize, 4usize), (9, 4), (13, 4), (11, 5), (10, 6), (9, 7)] {
            let poly =
                Packed::<f64>::sample(&pool(1), n, &[(degree, 1.0)], &Disorder::new(7)).unwrap();
            let coeffs = &poly.blocks()[0].coeffs;
            let x: Vec<f64> = (0..n).map(|i| 0.4 + (i as f64 * 0.9).sin()).collect();
            let v: Vec<f64> = (0..n).map(|i| (i as f64 * 0.3).cos()).collect();
            let (e0, g0, h0) = naive(&poly, &x);
            let hv0: Vec<f64> = (0..n)
                .map(|r| (0..n).map(|c| h0[r * n + c] * v[c]).sum())
                .collect();
            let scale = 1.0 + e0.abs() + h0.iter().map(|t| t.abs()).sum::<f64>();
            let close = |a: f64, b: f64| (a - b).abs() <= 1e-12 * scale;
            for cuts in [vec![0, n], vec![0, 1, n], vec![0, 3, n.min(11), n]] {
                let run = |fused: bool| {
                    let (mut e, mut e2, mut g, mut w) = (0.0, 0.0, vec![0.0; n], vec![0.0; n]);
                    let mut a = vec![0.0; n * n];
                    for span in cuts.windows(2).filter(|s| s[0] < s[1]) {
                        let start = first_index_offset(n, degree, span[0]);
                        let c = &coeffs[start..first_index_offset(n, degree, span[1])];
                        let item = (span[0], span[1], start);
                        if fused {
                            e += energy_quads::<Fused, f64>(n, degree, item, c, &x);
                            e2 += gradient_quads::<Fused, f64>(n, degree, item, c, &x, &mut g);
                            hvp_quads::<Fused, f64>(n, degree, item, c, (&x, &v), &mut w);
                            if degree == 4 {
                                hessian4_quads::<Fused, f64>(n, item, c, &x, &mut a);
                            } else {
                                hessian_quads::<Fused, f64>(n, degree, item, c, &x, &mut a);
                            }
                        } else {
                            e += energy_quads::<Plain, f64>(n, degree, item, c, &x);
                            e2 += gradient_quads::<Plain, f64>(n, degree, item, c, &x, &mut g);
                            hvp_quads::<Plain, f64>(n, degree, item, c, (&x, &v), &mut w);
                            if degree == 4 {
                                hessian4_quads::<Plain, f64>(n, item, c, &x, &mut a);
                            } else {
                                hessian_quads::<Plain, f64>(n, degree, item, c, &x, &mut a);
                            }
                        }
                    }
                    // Hess = A + A^T
                    let hess: Vec<f64> =
                        (0..n * n).map(|i| a[i] + a[(i % n) * n + i / n]).collect();
                    (e, e2, g, w, hess)
                };
                let mut paths = vec![run(false)];
                if has_avx2_fma() {
                    paths.push(run(true));
                }
                for (e, e2, g, w, hess) in paths {
                    let case = format!("n {n} degree {degree} cuts {cuts:?}");
                    for (i, (a, b)) in hess.iter().zip(&h0).enumerate() {
                        assert!(close(*a, *b), "{case}: Hessian entry {i}: {a} vs {b}");
                    }
                    assert!(close(e, e0) && close(e2, e0), "{case}: {e} {e2} vs {e0}");
                    for i in 0..n {
                        assert!(close(g[i], g0[i]), "{case}: gradient {i}");
                        assert!(close(w[i], hv0[i]), "{case}: hvp {i}");
                    }
                }
            }
        }
    }

    /// The tail products formed from the outer prefix, and the leave-one-out products the
    /// passes form from it (Q_m = Q'_m x_t0, Q_l' = W', dQ_m = dQ'_m x_t0 + Q'_m v_t0,
    /// dQ_l' = dW'), agree with the direct products of [`Leading`] along the runs of a walk
    /// (degree 6: prefixes of length 4).
    #[test]
    fn tail_products_match_direct_products() {
        let n = 7;
        let x: Vec<f64> = (0..n).map(|i| 0.5 + 0.25 * i as f64).collect();
        let v: Vec<f64> = (0..n).map(|i| 1.0 - 0.3 * i as f64).collect();
        let (mut tail, mut direct) = (TailProducts::new(), Leading::new());
        // outer prefixes of length 3, each with its run of last indices
        let mut runs = Prefixes::new(n, 4, 2, n);
        let mut seen = 0;
        while let Some((last, _)) = runs.next_prefix() {
            let outer = runs.prefix();
            tail.start(outer, &x, Some(&v));
            for t0 in last..n {
                tail.at::<Fused>(t0, &x, Some(&v));
                let pre = [outer, &[t0]].concat();
                direct.set(&pre, &x, Some(&v), false);
                let close = |a: f64, b: f64| (a - b).abs() <= 1e-13 * (1.0 + b.abs());
                assert!(close(tail.base, direct.base) && close(tail.dbase, direct.dbase));
                let o = &tail.outer;
                for m in 0..outer.len() {
                    assert!(close(o.q[m] * x[t0], direct.q[m]), "{pre:?} q{m}");
                    let dq = o.dq[m] * x[t0] + o.q[m] * v[t0];
                    assert!(close(dq, direct.dq[m]), "{pre:?} dq{m}");
                }
                let l = outer.len();
                assert!(close(o.base, direct.q[l]) && close(o.dbase, direct.dq[l]));
                seen += 1;
            }
        }
        assert_eq!(seen, num_multisets(n - 2, 4).unwrap());
    }
}
