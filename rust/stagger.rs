//! Blocks of adjacent prefixes for the single-point kernels, and their inner loop.
//!
//! Prefixes that differ only in their last index k, k + 1, ... (a run) have segments that
//! follow each other in memory; the segment of k + r starts r positions later in t and all
//! end at the same t. A block is up to four of them. Walking blocks instead of prefixes shares
//! the prefix set-up, the reads of x_t (v_t, g_t) and the loop overhead among four short
//! segments, which is what costs most at high degree, where segments are about n / p long.
//!
//! The loop ([`stagger4`]) computes, for rows r = 0..4 with row r covering u = r..len:
//!
//! ```text
//! Sx[r] = sum_u a_r[u - r] x[u],   Sv[r] = sum_u a_r[u - r] v[u],
//! z[u] += sum_r w[r] a_r[u - r]
//! ```
//!
//! The loop runs four positions at a time (`Steps`): the first step starts every row at its
//! own lane, and a last, overlapping step covers len mod 4; in both, lanes outside a row get
//! coefficient zero, so rows of length 4 and more never fall back to scalar steps.

use crate::prefix::Prefixes;
use crate::simd::Madd;
use crate::storage::Coef;

/// The runs of an item (first indices lo..hi of one degree p >= 2): for p >= 3, each
/// sequence of leading indices L = (i1 <= ... <= i_{p-2}) in lexicographic order, whose rows
/// (prefixes (L, k)) are k = k0..n with k0 = i_{p-2}; for p = 2, one run of rows k = lo..hi.
/// Row k has n - k coefficients and the rows of a run follow each other in memory.
pub struct Runs {
    walk: Option<Prefixes>,
    n: usize,
    pos: usize,
    next_pos: usize,
    span: (usize, usize),
    stop: usize,
}

impl Runs {
    pub fn new(n: usize, degree: usize, lo: usize, hi: usize) -> Self {
        Runs {
            walk: (degree >= 3).then(|| Prefixes::new(n, degree - 1, lo, hi)),
            n,
            pos: 0,
            next_pos: 0,
            span: (lo, hi),
            stop: usize::MAX,
        }
    }

    /// The runs of first index i (degree >= 4) whose second index is below `stop`: the first
    /// runs of i, since runs come in lexicographic order.
    pub fn below(n: usize, degree: usize, i: usize, stop: usize) -> Self {
        debug_assert!(degree >= 4);
        Runs {
            stop,
            ..Runs::new(n, degree, i, i + 1)
        }
    }

    /// The next run as (k0, k_end, offset of its first row in the item), or None.
    #[inline(always)]
    pub fn next_run(&mut self) -> Option<(usize, usize, usize)> {
        let n = self.n;
        match &mut self.walk {
            None => {
                let (lo, hi) = std::mem::take(&mut self.span);
                (lo < hi).then_some((lo, hi, 0))
            }
            Some(walk) => {
                let (k0, _) = walk.next_prefix()?;
                if walk.prefix().get(1).is_some_and(|&j| j >= self.stop) {
                    return None;
                }
                self.pos = self.next_pos;
                let m = n - k0;
                self.next_pos = self.pos + m * (m + 1) / 2;
                Some((k0, n, self.pos))
            }
        }
    }

    /// The leading indices of the current run (empty for degree 2).
    #[inline(always)]
    pub fn lead(&self) -> &[usize] {
        match &self.walk {
            Some(walk) => walk.prefix(),
            None => &[],
        }
    }
}

/// Four adjacent rows of a run over positions u = 0..len: the `count` real rows stored back
/// to back in `data` (row r starts at u = r and has len - r coefficients); rows r >= count
/// are zero. Row r - 1 ends where row r starts, which the vector steps rely on.
#[derive(Clone, Copy, Debug)]
pub struct Rows4<'a, T> {
    pub(crate) data: &'a [T],
    pub(crate) len: usize,
    pub(crate) count: usize,
}

impl<'a, T: Coef> Rows4<'a, T> {
    /// Checks that `data` holds exactly the `count` rows (1 <= count <= 4, each non-empty).
    #[inline(always)]
    pub fn new(data: &'a [T], len: usize, count: usize) -> Self {
        let rows = Rows4 { data, len, count };
        rows.check_shape();
        rows
    }

    /// The shape [`Rows4::new`] promises (the vector steps read `data` unchecked, so it must
    /// hold exactly the rows); checked again by [`check_rows`] for rows built in this crate
    /// without `new`.
    #[inline(always)]
    fn check_shape(&self) {
        let (len, count) = (self.len, self.count);
        assert!(
            (1..=4).contains(&count) && count <= len,
            "rows: count {count}, len {len}"
        );
        assert_eq!(
            self.data.len(),
            Self::offset_for(len, count),
            "rows: coefficients"
        );
    }

    #[inline(always)]
    fn offset_for(len: usize, r: usize) -> usize {
        r * len - r * r.saturating_sub(1) / 2
    }

    /// Start of row r in `data`.
    #[inline(always)]
    pub fn offset(&self, r: usize) -> usize {
        Self::offset_for(self.len, r)
    }

    /// The four rows as slices (row r: len - r entries), the zero rows taken from `zeros`
    /// (at least len long).
    #[inline(always)]
    pub fn slices(&self, zeros: &'a [T]) -> [&'a [T]; 4] {
        let mut out = [
            &zeros[..self.len],
            &zeros[..self.len.saturating_sub(1)],
            &zeros[..self.len.saturating_sub(2)],
            &zeros[..self.len.saturating_sub(3)],
        ];
        for (r, slot) in out.iter_mut().enumerate().take(self.count) {
            let at = self.offset(r);
            *slot = &self.data[at..at + self.len - r];
        }
        out
    }

    /// Coefficient of row r at position u (zero before the row starts and for zero rows).
    #[inline(always)]
    pub fn coef(&self, r: usize, u: usize) -> f64 {
        if r < self.count && u >= r {
            self.data[self.offset(r) + u - r].to_f64()
        } else {
            0.0
        }
    }
}

/// The rows k..k + count of a run whose row k starts at offset `pos` of `coeffs` (row k + r
/// has n - k - r coefficients); returns them and the offset after them.
#[inline(always)]
pub fn rows_at<T: Coef>(
    n: usize,
    k: usize,
    pos: usize,
    count: usize,
    coeffs: &[T],
) -> (Rows4<'_, T>, usize) {
    let len = n - k;
    let end = pos + Rows4::<T>::offset_for(len, count);
    (Rows4::new(&coeffs[pos..end], len, count), end)
}

/// The four coefficients at position u, zeros for rows that have not started.
#[inline(always)]
pub(crate) fn coefs_at<T: Coef>(rows: &Rows4<'_, T>, u: usize) -> [f64; 4] {
    [
        rows.coef(0, u),
        rows.coef(1, u),
        rows.coef(2, u),
        rows.coef(3, u),
    ]
}

/// The checks every implementation relies on; returns len.
#[inline(always)]
pub(crate) fn check_rows<T: Coef>(
    rows: &Rows4<'_, T>,
    x: &[f64],
    v: Option<&[f64]>,
    z: Option<usize>,
) -> usize {
    let len = rows.len;
    rows.check_shape();
    assert!(x.len() >= len && v.is_none_or(|v| v.len() >= len));
    // a z given is written at every position, so it must cover the rows (an empty one too)
    assert!(z.is_none_or(|z| z >= len));
    len
}

/// The vector steps over rows of length len >= 4, as (u, from): positions u..u+4 with lanes
/// below `from` left out. The first step is at u = 0 (row r then starts at lane r), the full
/// steps follow at u = 4, 8, ..., and when len is not a multiple of 4 a last step at
/// u = len - 4 leaves out the lanes already done. Left-out lanes get coefficient zero, so
/// every step is a whole vector operation and no step reads or writes outside the rows.
pub(crate) struct Steps {
    len: usize,
    u: usize,
    end: usize,
}

impl Steps {
    #[inline(always)]
    pub(crate) fn new(len: usize) -> Self {
        debug_assert!(len >= 4);
        Steps { len, u: 0, end: 0 }
    }
}

impl Iterator for Steps {
    type Item = (usize, usize);

    #[inline(always)]
    fn next(&mut self) -> Option<(usize, usize)> {
        if self.end >= self.len {
            return None;
        }
        if self.end + 4 <= self.len {
            self.u = self.end;
            self.end += 4;
            return Some((self.u, 0));
        }
        let u = self.len - 4;
        let from = self.end - u;
        self.end = self.len;
        Some((u, from))
    }
}

/// Lane l of row r is in step (u, from) when l >= from and the row has started (u + l >= r).
#[inline(always)]
pub(crate) fn lane_from(u: usize, from: usize, r: usize) -> usize {
    from.max(r.saturating_sub(u))
}

/// The coefficients of a step, per row and lane (zero where left out).
#[inline(always)]
fn step_coefs<T: Coef>(rows: &Rows4<'_, T>, u: usize, from: usize) -> [[f64; 4]; 4] {
    let mut c = [[0f64; 4]; 4];
    for (r, cr) in c.iter_mut().enumerate() {
        for (l, slot) in cr.iter_mut().enumerate().skip(lane_from(u, from, r)) {
            *slot = rows.coef(r, u + l);
        }
    }
    c
}

/// One position of the loop: the same arithmetic as a lane of a vector step.
#[inline(always)]
#[allow(clippy::too_many_arguments)]
pub(crate) fn stagger_step<M: Madd>(
    c: [f64; 4],
    xu: f64,
    vu: f64,
    want_v: bool,
    sx: &mut [f64; 4],
    sv: &mut [f64; 4],
    z: Option<(&mut f64, &[f64; 4])>,
) {
    for r in 0..4 {
        sx[r] = M::madd(c[r], xu, sx[r]);
        if want_v {
            sv[r] = M::madd(c[r], vu, sv[r]);
        }
    }
    if let Some((zu, w)) = z {
        let t01 = M::madd(c[1], w[1], c[0] * w[0]);
        let t23 = M::madd(c[3], w[3], c[2] * w[2]);
        *zu += t01 + t23;
    }
}

/// Rows shorter than 4: one position at a time (shared by both implementations).
#[inline(always)]
pub(crate) fn short_stagger4<M: Madd, T: Coef>(
    rows: &Rows4<'_, T>,
    x: &[f64],
    v: Option<&[f64]>,
    z: Option<(&mut [f64], [f64; 4])>,
) -> ([f64; 4], [f64; 4]) {
    let len = rows.len;
    let want_v = v.is_some();
    let vs = v.unwrap_or(x);
    let (mut z, w) = split_update(z);
    let (mut sx, mut sv) = ([0f64; 4], [0f64; 4]);
    for u in 0..len {
        let zu = z.as_deref_mut().map(|z| (&mut z[u], &w));
        stagger_step::<M>(coefs_at(rows, u), x[u], vs[u], want_v, &mut sx, &mut sv, zu);
    }
    (sx, sv)
}

/// The update of [`stagger4`] as its target and weights (no target: weights zero).
#[inline(always)]
pub(crate) fn split_update(z: Option<(&mut [f64], [f64; 4])>) -> (Option<&mut [f64]>, [f64; 4]) {
    match z {
        Some((z, w)) => (Some(z), w),
        None => (None, [0.0; 4]),
    }
}

/// Lane sums combined as the vector code does: (l0 + l2) + (l1 + l3).
#[inline(always)]
pub(crate) fn fold(l: &[f64; 4]) -> f64 {
    (l[0] + l[2]) + (l[1] + l[3])
}

/// Portable [`stagger4`]: per lane the operations of the AVX2 steps in their order.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and l index rows and lanes of several arrays at once
pub(crate) fn portable_stagger4<M: Madd, T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    v: Option<&[f64]>,
    z: Option<(&mut [f64], [f64; 4])>,
) -> ([f64; 4], [f64; 4]) {
    let zlen = z.as_ref().map(|(z, _)| z.len());
    let len = check_rows(&rows, x, v, zlen);
    if len < 4 {
        return short_stagger4::<M, T>(&rows, x, v, z);
    }
    let want_v = v.is_some();
    let vs = v.unwrap_or(x);
    let (mut z, w) = split_update(z);
    let (mut lx, mut lv) = ([[0f64; 4]; 4], [[0f64; 4]; 4]);
    for (u, from) in Steps::new(len) {
        let c = step_coefs(&rows, u, from);
        for l in 0..4 {
            let cl = [c[0][l], c[1][l], c[2][l], c[3][l]];
            let mut tx = [lx[0][l], lx[1][l], lx[2][l], lx[3][l]];
            let mut tv = [lv[0][l], lv[1][l], lv[2][l], lv[3][l]];
            let zu = z.as_deref_mut().map(|z| (&mut z[u + l], &w));
            stagger_step::<M>(cl, x[u + l], vs[u + l], want_v, &mut tx, &mut tv, zu);
            for r in 0..4 {
                lx[r][l] = tx[r];
                lv[r][l] = tv[r];
            }
        }
    }
    let (mut sx, mut sv) = ([0f64; 4], [0f64; 4]);
    for r in 0..4 {
        sx[r] = fold(&lx[r]);
        if want_v {
            sv[r] = fold(&lv[r]);
        }
    }
    (sx, sv)
}

/// The Hessian rows of a block (see the `adjacent` module): for the rows k + r of the n x n
/// accumulator A and positions u (column k + u),
///
/// ```text
/// S[r] += a_r[u - r] x[u],   A[k + r, k + u] += b a_r[u - r],
/// A[L_m, k + u] += w_m U(u),  U(u) = (xk0 a_0 + xk1 a_1) + (xk2 a_2 + xk3 a_3)
/// ```
///
/// for the shared rows (L_m, w_m). An own row may be a shared row (k = L_m); the own update
/// then comes first, in both implementations. The first vector step also adds b * 0 to the
/// entries A[k + r, k + u], u < r, left of the diagonal, which leaves them unchanged.
pub struct HessRows<'a> {
    pub(crate) n: usize,
    pub(crate) k: usize,
    pub(crate) shared: &'a [(usize, f64)],
    pub(crate) b: f64,
    pub(crate) xk: [f64; 4],
}

impl HessRows<'_> {
    /// The checks the loops rely on: every row written exists and holds columns k..n.
    #[inline(always)]
    pub(crate) fn check<T: Coef>(&self, rows: &Rows4<'_, T>, x: &[f64], acc: &[f64]) -> usize {
        let len = check_rows(rows, x, None, None);
        let (n, k) = (self.n, self.k);
        assert!(
            k.checked_add(len) == Some(n),
            "hessian rows: k + len != n = {n}"
        );
        let square = n.checked_mul(n);
        let fits = square.is_some_and(|sq| acc.len() >= sq);
        assert!(fits, "hessian rows: accumulator too short for n = {n}");
        assert!(self.shared.iter().all(|&(i, _)| i < n));
        len
    }

    /// One position u of lane arithmetic; `all_rows` writes every own row (a vector step),
    /// otherwise only the rows that have started (the short path).
    #[inline(always)]
    #[allow(clippy::too_many_arguments, clippy::needless_range_loop)]
    pub(crate) fn step<M: Madd>(
        &self,
        c: [f64; 4],
        u: usize,
        x: &[f64],
        s: &mut [f64; 4],
        acc: &mut [f64],
        all_rows: bool,
    ) {
        let (n, k) = (self.n, self.k);
        for r in 0..4 {
            s[r] = M::madd(c[r], x[u], s[r]);
        }
        let rows = if all_rows { 4 } else { 4.min(u + 1) };
        for r in 0..rows {
            let at = (k + r) * n + k + u;
            acc[at] = M::madd(self.b, c[r], acc[at]);
        }
        let t01 = M::madd(c[1], self.xk[1], c[0] * self.xk[0]);
        let t23 = M::madd(c[3], self.xk[3], c[2] * self.xk[2]);
        let mixed = t01 + t23;
        for &(i, w) in self.shared {
            let at = i * n + k + u;
            acc[at] = M::madd(w, mixed, acc[at]);
        }
    }

    /// Rows shorter than 4, one position at a time (shared by both implementations).
    #[inline(always)]
    pub(crate) fn short<M: Madd, T: Coef>(
        &self,
        rows: &Rows4<'_, T>,
        x: &[f64],
        acc: &mut [f64],
    ) -> [f64; 4] {
        let mut s = [0f64; 4];
        for u in 0..rows.len {
            self.step::<M>(coefs_at(rows, u), u, x, &mut s, acc, false);
        }
        s
    }
}

/// Portable Hessian rows: per lane the operations of the AVX2 steps in their order.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and l index rows and lanes of several arrays at once
pub(crate) fn portable_stagger4_hess<M: Madd, T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    acc: &mut [f64],
    h: &HessRows<'_>,
) -> [f64; 4] {
    let len = h.check(&rows, x, acc);
    if len < 4 {
        return h.short::<M, T>(&rows, x, acc);
    }
    let mut lanes = [[0f64; 4]; 4];
    for (u, from) in Steps::new(len) {
        let c = step_coefs(&rows, u, from);
        for l in 0..4 {
            let mut t = [lanes[0][l], lanes[1][l], lanes[2][l], lanes[3][l]];
            let cl = [c[0][l], c[1][l], c[2][l], c[3][l]];
            h.step::<M>(cl, u + l, x, &mut t, acc, true);
            for r in 0..4 {
                lanes[r][l] = t[r];
            }
        }
    }
    [
        fold(&lanes[0]),
        fold(&lanes[1]),
        fold(&lanes[2]),
        fold(&lanes[3]),
    ]
}

/// [`HessRows`] on the instruction set `M` chooses; returns S.
#[inline(always)]
pub fn stagger4_hess<M: Madd, T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    acc: &mut [f64],
    h: &HessRows<'_>,
) -> [f64; 4] {
    M::stagger4_hess(rows, x, acc, h)
}

/// The loop of the module doc on the instruction set `M` chooses. `v` None skips Sv (returned
/// as zeros); `z` None skips the update.
#[inline(always)]
pub fn stagger4<M: Madd, T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    v: Option<&[f64]>,
    z: Option<(&mut [f64], [f64; 4])>,
) -> ([f64; 4], [f64; 4]) {
    M::stagger4(rows, x, v, z)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::combinatorics::num_multisets;
    use crate::simd::{has_avx2_fma, Fused, Plain};

    /// `count` rows of length len - r with values from `f(i, r)`, packed back to back, and
    /// the same rows one by one (empty for the zero rows).
    struct Fixture<T> {
        data: Vec<T>,
        rows: [Vec<f64>; 4],
        len: usize,
        count: usize,
    }

    impl<T: Coef> Fixture<T> {
        fn new(len: usize, count: usize, f: fn(usize, usize) -> f64) -> Self {
            let rows = [0, 1, 2, 3].map(|r| {
                if r < count {
                    (0..len - r)
                        .map(|i| T::from_f64(f(i, r)).to_f64())
                        .collect()
                } else {
                    Vec::new()
                }
            });
            let data = rows.iter().flatten().map(|&v| T::from_f64(v)).collect();
            Fixture {
                data,
                rows,
                len,
                count,
            }
        }

        fn rows(&self) -> Rows4<'_, T> {
            Rows4::new(&self.data, self.len, self.count)
        }
    }

    fn wave(i: usize, r: usize) -> f64 {
        ((i * 5 + r * 11) as f64 * 0.37).sin()
    }

    #[allow(clippy::needless_range_loop)] // u and r index several arrays at once
    fn check<M: Madd, T: Coef>(len: usize, count: usize, with_v: bool, with_z: bool) {
        let fx = Fixture::<T>::new(len, count, wave);
        let x: Vec<f64> = (0..len).map(|u| (u as f64 * 0.21).cos()).collect();
        let v: Vec<f64> = (0..len).map(|u| 1.0 / (2.0 + u as f64)).collect();
        let w = [0.5, -1.25, 2.0, 0.75];
        let mut z = vec![0.125; len];
        let zarg = if with_z { Some((&mut z[..], w)) } else { None };
        let vopt = if with_v { Some(&v[..]) } else { None };
        let (sx, sv) = stagger4::<M, T>(fx.rows(), &x, vopt, zarg);
        for r in 0..4 {
            let (mut wx, mut wv) = (0.0, 0.0);
            for (i, a) in fx.rows[r].iter().enumerate() {
                wx += a * x[i + r];
                wv += a * v[i + r];
            }
            assert!((sx[r] - wx).abs() < 1e-12, "Sx row {r}, len {len}");
            let want_v = if with_v { wv } else { 0.0 };
            assert!((sv[r] - want_v).abs() < 1e-12, "Sv row {r}, len {len}");
        }
        for u in 0..len {
            let mut want = 0.125;
            if with_z {
                for r in 0..count.min(u + 1) {
                    want += w[r] * fx.rows[r][u - r];
                }
            }
            assert!((z[u] - want).abs() < 1e-12, "z[{u}], len {len}");
        }
    }

    #[test]
    fn stagger4_matches_its_definition() {
        // count < 4 with len >= 4: zero rows inside the vector steps
        for (len, count) in [
            (1, 1),
            (2, 2),
            (3, 3),
            (4, 4),
            (6, 4),
            (7, 4),
            (11, 4),
            (30, 4),
            (9, 2),
        ] {
            for (v, z) in [(false, false), (false, true), (true, true)] {
                check::<Plain, f64>(len, count, v, z);
                check::<Plain, f32>(len, count, v, z);
                if has_avx2_fma() {
                    check::<Fused, f64>(len, count, v, z);
                    check::<Fused, f32>(len, count, v, z);
                }
            }
        }
    }

    /// A z shorter than the rows, even an empty one, is refused before any write on both
    /// paths: the vector loop once took an empty z for "no z" and wrote eight values through
    /// it (found by a review; no caller passes one).
    #[test]
    fn a_z_shorter_than_the_rows_is_refused_on_both_paths() {
        fn refused<M: Madd>(zlen: usize) -> bool {
            let fx = Fixture::<f64>::new(8, 4, wave);
            let x = vec![1.0; 8];
            let mut buf = [0.0; 8];
            let outcome = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| {
                stagger4::<M, f64>(fx.rows(), &x, None, Some((&mut buf[..zlen], [1.0; 4])))
            }));
            assert!(
                buf[zlen..].iter().all(|&b| b == 0.0),
                "wrote past z (zlen {zlen})"
            );
            outcome.is_err()
        }
        for zlen in [0, 3, 7] {
            assert!(refused::<Plain>(zlen), "Plain, zlen {zlen}");
            if has_avx2_fma() {
                assert!(refused::<Fused>(zlen), "Fused, zlen {zlen}");
            }
        }
    }

    #[test]
    fn vector_loop_matches_portable_loop_bit_for_bit() {
        if !has_avx2_fma() {
            return;
        }
        for (len, count) in [(4, 4), (5, 4), (8, 4), (29, 4), (10, 3)] {
            let fx = Fixture::<f64>::new(len, count, |i, r| ((i + 3 * r) as f64).sin());
            let x: Vec<f64> = (0..len).map(|u| (u as f64 * 0.7).cos()).collect();
            let v: Vec<f64> = (0..len).map(|u| (u as f64 * 0.3).sin()).collect();
            let w = [0.3, -0.7, 1.1, 0.9];
            let (mut z1, mut z2) = (vec![0.0; len], vec![0.0; len]);
            let a = stagger4::<Fused, f64>(fx.rows(), &x, Some(&v), Some((&mut z1, w)));
            let b = portable_stagger4::<Fused, f64>(fx.rows(), &x, Some(&v), Some((&mut z2, w)));
            assert_eq!(a, b);
            assert_eq!(z1, z2);
        }
    }

    /// Row sums and the accumulator updates of [`HessRows`], against the formula term by term.
    fn check_hess<M: Madd, T: Coef>(
        (n, k, count): (usize, usize, usize),
        shared: &[(usize, f64)],
        portable: bool,
    ) -> Vec<f64> {
        let len = n - k;
        let fx = Fixture::<T>::new(len, count, |i, r| ((i * 3 + r * 7) as f64 * 0.41).cos());
        let x: Vec<f64> = (0..len).map(|u| (u as f64 * 0.23).sin() + 0.1).collect();
        let xk = [0.9, -0.4, 1.3, 0.2];
        let h = HessRows {
            n,
            k,
            shared,
            b: 0.7,
            xk,
        };
        let mut acc: Vec<f64> = (0..n * n).map(|i| i as f64 * 1e-3).collect();
        let mut want = acc.clone();
        let s = if portable {
            portable_stagger4_hess::<M, T>(fx.rows(), &x, &mut acc, &h)
        } else {
            stagger4_hess::<M, T>(fx.rows(), &x, &mut acc, &h)
        };
        for r in 0..4 {
            let mut sr = 0.0;
            for (i, a) in fx.rows[r].iter().enumerate() {
                let u = i + r;
                sr += a * x[u];
                want[(k + r) * n + k + u] += 0.7 * a;
                for &(row, w) in shared {
                    want[row * n + k + u] += w * xk[r] * a;
                }
            }
            assert!((s[r] - sr).abs() < 1e-12, "S[{r}] n={n} k={k}");
        }
        for (i, (a, b)) in acc.iter().zip(&want).enumerate() {
            assert!((a - b).abs() < 1e-12, "A entry {i} n={n} k={k}: {a} vs {b}");
        }
        acc
    }

    #[test]
    fn hessian_rows_match_their_definition() {
        // k = 2 makes own row k the shared row 2 as well (the aliasing case)
        let shared = [(0usize, 0.5), (2, -1.5)];
        for case in [
            (5usize, 2usize, 3usize),
            (6, 2, 4),
            (9, 2, 4),
            (13, 3, 4),
            (12, 2, 2),
        ] {
            check_hess::<Plain, f64>(case, &shared, false);
            check_hess::<Plain, f32>(case, &shared, false);
            if has_avx2_fma() {
                let a = check_hess::<Fused, f64>(case, &shared, false);
                check_hess::<Fused, f32>(case, &shared, false);
                // the vector steps do per lane what the portable steps do
                let b = check_hess::<Fused, f64>(case, &shared, true);
                assert_eq!(a, b, "{case:?}");
            }
        }
    }

    #[test]
    fn runs_cover_every_prefix_once_in_order() {
        for (n, degree, lo, hi) in [(9usize, 2usize, 3usize, 7usize), (9, 3, 2, 6), (7, 4, 0, 7)] {
            let mut walk = Prefixes::new(n, degree, lo, hi);
            let mut want = Vec::new();
            while let Some((t0, pos)) = walk.next_prefix() {
                want.push((walk.prefix().to_vec(), t0, pos));
            }
            let mut got = Vec::new();
            let mut runs = Runs::new(n, degree, lo, hi);
            let coeffs = vec![0f64; want.last().map_or(0, |w| w.2 + n - w.1)];
            while let Some((k0, k_end, mut pos)) = runs.next_run() {
                let mut k = k0;
                while k < k_end {
                    let count = (k_end - k).min(4);
                    let (rows, next) = rows_at(n, k, pos, count, &coeffs);
                    assert_eq!((rows.len, rows.count), (n - k, count));
                    for r in 0..count {
                        let mut pre = runs.lead().to_vec();
                        pre.push(k + r);
                        got.push((pre, k + r, pos));
                        pos += n - k - r;
                    }
                    assert_eq!(pos, next);
                    k += count;
                }
            }
            assert_eq!(got, want);
            let count = |s: usize| num_multisets(n - s, degree - 1).unwrap();
            assert_eq!(got.len(), count(lo) - count(hi));
        }
    }

    /// Rows whose slice is shorter than their len and count say must fail the check (the
    /// vector steps read the slice unchecked).
    #[test]
    #[should_panic(expected = "rows: coefficients")]
    fn rows_shorter_than_they_claim_are_refused() {
        let buf = [1.0f64; 8];
        let rows = Rows4 {
            data: &buf[..4],
            len: 8,
            count: 1,
        };
        let x = [1.0f64; 8];
        stagger4::<Fused, f64>(rows, &x, None, None);
    }

    /// An n whose square wraps must fail the check, not write past the accumulator.
    #[test]
    #[should_panic(expected = "accumulator too short")]
    fn a_hessian_side_whose_square_wraps_is_refused() {
        let data = [1.0f64; 10];
        let rows = Rows4::new(&data, 4, 4);
        let x = [1.0f64; 4];
        let mut acc = [0.0f64; 16];
        let n = 1usize << 32; // n * n wraps to 0
        let h = HessRows {
            n,
            k: n - 4,
            shared: &[],
            b: 1.0,
            xk: [0.0; 4],
        };
        stagger4_hess::<Fused, f64>(rows, &x, &mut acc, &h);
    }
}
