//! Portable segment loops: what [`crate::simd::Plain`] runs for each loop of [`Madd`] on a
//! processor without AVX2 and FMA, in plain Rust that the compiler vectorizes.
//!
//! The four-segment loops perform, per lane, the operations of their AVX2 twins in the same
//! order, so with fused multiply-add they give the same bits (`crate::simd`'s tests compare
//! them); the one-segment loops agree with theirs to rounding.

use crate::simd::Madd;
use crate::storage::Coef;
/// Independent accumulators of the main loop (four AVX2 registers of f64), enough to hide
/// the latency of fused multiply-add. Leftovers go through a 4-wide loop, then a scalar one.
/// The loops run over fixed-size arrays (`as_chunks`) so the compiler sees no bounds checks
/// and vectorizes them.
const LANES: usize = 16;
const SHORT: usize = 4;

#[inline(always)]
fn combine(acc: &[f64; LANES]) -> f64 {
    let mut quad = [0f64; SHORT];
    for (l, q) in quad.iter_mut().enumerate() {
        *q = (acc[l] + acc[l + 4]) + (acc[l + 8] + acc[l + 12]);
    }
    (quad[0] + quad[2]) + (quad[1] + quad[3])
}

/// sum_t a_t x_t.
#[inline(always)]
pub(crate) fn portable_dot<M: Madd, T: Coef>(a: &[T], x: &[f64]) -> f64 {
    let x = &x[..a.len()];
    let mut acc = [0f64; LANES];
    let ((ca, ra), (cx, rx)) = (a.as_chunks::<LANES>(), x.as_chunks::<LANES>());
    for (ac, xc) in ca.iter().zip(cx) {
        for l in 0..LANES {
            acc[l] = M::madd(ac[l].to_f64(), xc[l], acc[l]);
        }
    }
    let ((qa, ta), (qx, tx)) = (ra.as_chunks::<SHORT>(), rx.as_chunks::<SHORT>());
    for (ac, xc) in qa.iter().zip(qx) {
        for l in 0..SHORT {
            acc[l] = M::madd(ac[l].to_f64(), xc[l], acc[l]);
        }
    }
    for (ai, xi) in ta.iter().zip(tx) {
        acc[0] = M::madd(ai.to_f64(), *xi, acc[0]);
    }
    combine(&acc)
}

/// y_t += alpha a_t.
#[inline(always)]
pub(crate) fn portable_axpy<M: Madd, T: Coef>(y: &mut [f64], alpha: f64, a: &[T]) {
    let y = &mut y[..a.len()];
    for (yi, ai) in y.iter_mut().zip(a) {
        *yi = M::madd(alpha, ai.to_f64(), *yi);
    }
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t, reading `a` once.
#[inline(always)]
pub(crate) fn portable_dot_axpy<M: Madd, T: Coef>(
    a: &[T],
    x: &[f64],
    y: &mut [f64],
    alpha: f64,
) -> f64 {
    let len = a.len();
    let (x, y) = (&x[..len], &mut y[..len]);
    let mut acc = [0f64; LANES];
    let ((ca, ra), (cx, rx)) = (a.as_chunks::<LANES>(), x.as_chunks::<LANES>());
    let (cy, ry) = y.as_chunks_mut::<LANES>();
    for ((ac, xc), yc) in ca.iter().zip(cx).zip(cy) {
        for l in 0..LANES {
            let c = ac[l].to_f64();
            acc[l] = M::madd(c, xc[l], acc[l]);
            yc[l] = M::madd(alpha, c, yc[l]);
        }
    }
    let ((qa, ta), (qx, tx)) = (ra.as_chunks::<SHORT>(), rx.as_chunks::<SHORT>());
    let (qy, ty) = ry.as_chunks_mut::<SHORT>();
    for ((ac, xc), yc) in qa.iter().zip(qx).zip(qy) {
        for l in 0..SHORT {
            let c = ac[l].to_f64();
            acc[l] = M::madd(c, xc[l], acc[l]);
            yc[l] = M::madd(alpha, c, yc[l]);
        }
    }
    for ((ai, xi), yi) in ta.iter().zip(tx).zip(ty) {
        let c = ai.to_f64();
        acc[0] = M::madd(c, *xi, acc[0]);
        *yi = M::madd(alpha, c, *yi);
    }
    combine(&acc)
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t, z_t += beta a_t, reading `a` once.
#[inline(always)]
pub(crate) fn portable_dot_axpy2<M: Madd, T: Coef>(
    a: &[T],
    x: &[f64],
    (y, alpha): (&mut [f64], f64),
    (z, beta): (&mut [f64], f64),
) -> f64 {
    let len = a.len();
    let (x, y, z) = (&x[..len], &mut y[..len], &mut z[..len]);
    let mut acc = [0f64; LANES];
    let ((ca, ra), (cx, rx)) = (a.as_chunks::<LANES>(), x.as_chunks::<LANES>());
    let ((cy, ry), (cz, rz)) = (y.as_chunks_mut::<LANES>(), z.as_chunks_mut::<LANES>());
    for (((ac, xc), yc), zc) in ca.iter().zip(cx).zip(cy).zip(cz) {
        for l in 0..LANES {
            let c = ac[l].to_f64();
            acc[l] = M::madd(c, xc[l], acc[l]);
            yc[l] = M::madd(alpha, c, yc[l]);
            zc[l] = M::madd(beta, c, zc[l]);
        }
    }
    for (((ai, xi), yi), zi) in ra.iter().zip(rx).zip(ry).zip(rz) {
        let c = ai.to_f64();
        acc[0] = M::madd(c, *xi, acc[0]);
        *yi = M::madd(alpha, c, *yi);
        *zi = M::madd(beta, c, *zi);
    }
    combine(&acc)
}

/// Returns (sum_t a_t x_t, sum_t a_t v_t) and does w_t += alpha a_t, reading `a` once.
#[inline(always)]
pub(crate) fn portable_dot2_axpy<M: Madd, T: Coef>(
    a: &[T],
    x: &[f64],
    v: &[f64],
    w: &mut [f64],
    alpha: f64,
) -> (f64, f64) {
    let len = a.len();
    let (x, v, w) = (&x[..len], &v[..len], &mut w[..len]);
    let (mut ax, mut av) = ([0f64; LANES], [0f64; LANES]);
    let ((ca, ra), (cx, rx)) = (a.as_chunks::<LANES>(), x.as_chunks::<LANES>());
    let ((cv, rv), (cw, rw)) = (v.as_chunks::<LANES>(), w.as_chunks_mut::<LANES>());
    for (((ac, xc), vc), wc) in ca.iter().zip(cx).zip(cv).zip(cw) {
        for l in 0..LANES {
            let c = ac[l].to_f64();
            ax[l] = M::madd(c, xc[l], ax[l]);
            av[l] = M::madd(c, vc[l], av[l]);
            wc[l] = M::madd(alpha, c, wc[l]);
        }
    }
    for (((ai, xi), vi), wi) in ra.iter().zip(rx).zip(rv).zip(rw) {
        let c = ai.to_f64();
        ax[0] = M::madd(c, *xi, ax[0]);
        av[0] = M::madd(c, *vi, av[0]);
        *wi = M::madd(alpha, c, *wi);
    }
    (combine(&ax), combine(&av))
}

/// Entry i of four coefficient segments, widened to f64.
#[inline(always)]
pub(crate) fn coef4<T: Coef>(a: &[&[T]; 4], i: usize) -> [f64; 4] {
    [
        a[0][i].to_f64(),
        a[1][i].to_f64(),
        a[2][i].to_f64(),
        a[3][i].to_f64(),
    ]
}

/// w_0 c_0 + w_1 c_1 + w_2 c_2 + w_3 c_3 in the order of the four-segment loops: one chain
/// for coefficients that widen ([`Coef::WIDENS`]), two pairs otherwise.
#[inline(always)]
pub fn weighted4<M: Madd, T: Coef>(w: [f64; 4], c: [f64; 4]) -> f64 {
    let p01 = M::madd(w[1], c[1], w[0] * c[0]);
    if T::WIDENS {
        M::madd(w[3], c[3], M::madd(w[2], c[2], p01))
    } else {
        p01 + M::madd(w[3], c[3], w[2] * c[2])
    }
}

/// Portable [`dots4_axpy`](crate::simd::dots4_axpy) (v = None) and
/// [`dots8_axpy`](crate::simd::dots8_axpy): per lane, the operations of the
/// AVX2 loops in their order (4-lane sums combined as (l0 + l2) + (l1 + l3), scalar tail last).
#[inline(always)]
#[allow(clippy::needless_range_loop)] // l and j index lanes and segments of several arrays at once
pub(crate) fn portable_dots8_axpy<M: Madd, T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    v: Option<&[f64]>,
    mut z: Option<&mut [f64]>,
    w: [f64; 4],
) -> ([f64; 4], [f64; 4]) {
    let len = z.as_ref().map_or(a[0].len(), |z| z.len());
    let (mut ax, mut av) = ([[0f64; SHORT]; 4], [[0f64; SHORT]; 4]);
    let body = len / SHORT * SHORT;
    let mut t = 0;
    while t < body {
        for l in 0..SHORT {
            let i = t + l;
            let c = coef4(&a, i);
            for j in 0..4 {
                ax[j][l] = M::madd(c[j], x[i], ax[j][l]);
                if let Some(v) = v {
                    av[j][l] = M::madd(c[j], v[i], av[j][l]);
                }
            }
            if let Some(z) = z.as_deref_mut() {
                z[i] += weighted4::<M, T>(w, c);
            }
        }
        t += SHORT;
    }
    let (mut sx, mut sv) = ([0f64; 4], [0f64; 4]);
    for j in 0..4 {
        sx[j] = (ax[j][0] + ax[j][2]) + (ax[j][1] + ax[j][3]);
        sv[j] = (av[j][0] + av[j][2]) + (av[j][1] + av[j][3]);
    }
    let (mut tx, mut tv) = ([0f64; 4], [0f64; 4]);
    for i in body..len {
        let c = coef4(&a, i);
        for j in 0..4 {
            tx[j] = M::madd(c[j], x[i], tx[j]);
            if let Some(v) = v {
                tv[j] = M::madd(c[j], v[i], tv[j]);
            }
        }
        if let Some(z) = z.as_deref_mut() {
            z[i] += weighted4::<M, T>(w, c);
        }
    }
    for j in 0..4 {
        sx[j] += tx[j];
        sv[j] += tv[j];
    }
    (sx, sv)
}

/// Portable [`rows4_shared2`](crate::simd::rows4_shared2): per lane, the operations of the
/// AVX2 loop in its order, its dots in four lanes, or with `EIGHT` in the eight lanes of its
/// AVX-512 instantiation (`crate::avx2::rows4_shared2::<T, true>`).
#[inline(always)]
pub(crate) fn portable_rows4_shared2<M: Madd, T: Coef, const EIGHT: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    shared: [(&mut [f64], f64); 2],
    xi: [f64; 4],
) -> [f64; 4] {
    portable_rows4_shared::<M, T, true, EIGHT>(a, x, rows, w, shared, xi)
}

/// The loop of [`portable_rows4_shared2`]; with `TWO = false` the second row is not touched.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // l and j index lanes and segments of several arrays at once
fn portable_rows4_shared<M: Madd, T: Coef, const TWO: bool, const EIGHT: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    shared: [(&mut [f64], f64); 2],
    xi: [f64; 4],
) -> [f64; 4] {
    let [(z1, alpha), (z2, beta)] = shared;
    let len = z1.len();
    let [r0, r1, r2, r3] = rows;
    let rows = [
        &mut r0[..len],
        &mut r1[..len],
        &mut r2[..len],
        &mut r3[..len],
    ];
    // the AVX2 loop's dot lanes over its vector steps: position i in lane i mod 4, or with
    // EIGHT in lane i mod 8 (lanes 4-7 stay zero without)
    let lanes = if EIGHT { 2 * SHORT } else { SHORT };
    let mut acc = [[0f64; 2 * SHORT]; 4];
    let body = len / SHORT * SHORT;
    let mut tail = [0f64; 4];
    for i in 0..len {
        let l = i % lanes;
        let c = coef4(&a, i);
        for j in 0..4 {
            if i < body {
                acc[j][l] = M::madd(c[j], x[i], acc[j][l]);
            } else {
                tail[j] = M::madd(c[j], x[i], tail[j]);
            }
            rows[j][i] = M::madd(w, c[j], rows[j][i]);
        }
        let u = M::madd(xi[1], c[1], xi[0] * c[0]) + M::madd(xi[3], c[3], xi[2] * c[2]);
        z1[i] = M::madd(alpha, u, z1[i]);
        if TWO {
            z2[i] = M::madd(beta, u, z2[i]);
        }
    }
    let mut out = [0f64; 4];
    for j in 0..4 {
        let v: [f64; SHORT] = if EIGHT {
            std::array::from_fn(|l| acc[j][l] + acc[j][l + SHORT])
        } else {
            std::array::from_fn(|l| acc[j][l])
        };
        out[j] = ((v[0] + v[2]) + (v[1] + v[3])) + tail[j];
    }
    out
}

/// Portable [`rows4`](crate::simd::rows4): [`portable_rows4_shared2`] with one shared row of
/// weight 1 (exact).
#[inline(always)]
pub(crate) fn portable_rows4<M: Madd, T: Coef, const EIGHT: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    z: &mut [f64],
    xi: [f64; 4],
) -> [f64; 4] {
    portable_rows4_shared::<M, T, false, EIGHT>(a, x, rows, w, [(z, 1.0), (&mut [], 0.0)], xi)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simd::Plain;

    /// The z update sums its four products in the documented order for each storage type.
    #[test]
    fn weighted4_sums_in_its_documented_order() {
        // 1 + 2^-53 is lost when added to 1 first, kept when the two small terms meet first
        let (w, c) = (
            [1.0, 0.5f64.powi(53), 0.5f64.powi(53), 1.0],
            [1.0, 1.0, 1.0, -1.0],
        );
        let chain = ((1.0 + 0.5f64.powi(53)) + 0.5f64.powi(53)) - 1.0;
        let pairs = (1.0 + 0.5f64.powi(53)) + (0.5f64.powi(53) - 1.0);
        assert_ne!(chain, pairs);
        assert_eq!(weighted4::<Plain, f32>(w, c), chain);
        assert_eq!(weighted4::<Plain, f64>(w, c), pairs);
    }
}
