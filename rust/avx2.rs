//! The segment loops of [`crate::simd`] written with AVX2 + FMA intrinsics.
//!
//! These functions are `#[inline(always)]` and must only be reached from inside a function
//! compiled with `#[target_feature(enable = "avx2,fma")]` (or with AVX-512VL added, for its
//! 32 registers) on a processor that has them (the `simd_dispatch!` macro guarantees it);
//! there the intrinsics inline into plain vector instructions. Reductions use four 4-wide accumulators (16 lanes) over blocks of 16, then
//! one accumulator over blocks of 4, then a scalar tail, combined in a fixed order.

use core::arch::x86_64::*;

use crate::simd::Fused;
use crate::stagger::{check_rows, lane_from, short_stagger4, split_update, HessRows, Rows4, Steps};
use crate::storage::Coef;
use crate::tile::{check_tile, next_block, tile_coef, TileSums};

#[inline(always)]
unsafe fn hsum(v: __m256d) -> f64 {
    let pair = _mm_add_pd(_mm256_castpd256_pd128(v), _mm256_extractf128_pd::<1>(v));
    _mm_cvtsd_f64(_mm_add_sd(pair, _mm_unpackhi_pd(pair, pair)))
}

/// Four values, each broadcast to all lanes.
#[inline(always)]
unsafe fn splat4(v: [f64; 4]) -> [__m256d; 4] {
    [
        _mm256_set1_pd(v[0]),
        _mm256_set1_pd(v[1]),
        _mm256_set1_pd(v[2]),
        _mm256_set1_pd(v[3]),
    ]
}

#[inline(always)]
unsafe fn combine(acc: &[__m256d; 4]) -> f64 {
    hsum(_mm256_add_pd(
        _mm256_add_pd(acc[0], acc[2]),
        _mm256_add_pd(acc[1], acc[3]),
    ))
}

/// sum_t a_t x_t.
#[inline(always)]
pub fn dot<T: Coef>(a: &[T], x: &[f64]) -> f64 {
    let len = a.len();
    let x = &x[..len];
    // SAFETY: every pointer offset below stays under `len`, the length of `a` and `x`.
    unsafe {
        let (pa, px) = (a.as_ptr(), x.as_ptr());
        let mut acc = [_mm256_setzero_pd(); 4];
        let mut i = 0;
        while i + 16 <= len {
            for (k, slot) in acc.iter_mut().enumerate() {
                let j = i + 4 * k;
                *slot = _mm256_fmadd_pd(T::load4(pa.add(j)), _mm256_loadu_pd(px.add(j)), *slot);
            }
            i += 16;
        }
        while i + 4 <= len {
            acc[0] = _mm256_fmadd_pd(T::load4(pa.add(i)), _mm256_loadu_pd(px.add(i)), acc[0]);
            i += 4;
        }
        let mut tail = 0.0f64;
        while i < len {
            tail = a[i].to_f64().mul_add(x[i], tail);
            i += 1;
        }
        combine(&acc) + tail
    }
}

/// y_t += alpha a_t.
#[inline(always)]
pub fn axpy<T: Coef>(y: &mut [f64], alpha: f64, a: &[T]) {
    let len = a.len();
    let y = &mut y[..len];
    // SAFETY: offsets stay under `len`, the length of `a` and `y`.
    unsafe {
        let (pa, py) = (a.as_ptr(), y.as_mut_ptr());
        let al = _mm256_set1_pd(alpha);
        let mut i = 0;
        while i + 4 <= len {
            let yv = _mm256_fmadd_pd(al, T::load4(pa.add(i)), _mm256_loadu_pd(py.add(i)));
            _mm256_storeu_pd(py.add(i), yv);
            i += 4;
        }
        while i < len {
            y[i] = alpha.mul_add(a[i].to_f64(), y[i]);
            i += 1;
        }
    }
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t.
#[inline(always)]
pub fn dot_axpy<T: Coef>(a: &[T], x: &[f64], y: &mut [f64], alpha: f64) -> f64 {
    let len = a.len();
    let (x, y) = (&x[..len], &mut y[..len]);
    // SAFETY: offsets stay under `len`, the length of `a`, `x` and `y`.
    unsafe {
        let (pa, px, py) = (a.as_ptr(), x.as_ptr(), y.as_mut_ptr());
        let al = _mm256_set1_pd(alpha);
        let mut acc = [_mm256_setzero_pd(); 4];
        let mut i = 0;
        while i + 16 <= len {
            for (k, slot) in acc.iter_mut().enumerate() {
                let j = i + 4 * k;
                let c = T::load4(pa.add(j));
                *slot = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(j)), *slot);
                _mm256_storeu_pd(
                    py.add(j),
                    _mm256_fmadd_pd(al, c, _mm256_loadu_pd(py.add(j))),
                );
            }
            i += 16;
        }
        while i + 4 <= len {
            let c = T::load4(pa.add(i));
            acc[0] = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(i)), acc[0]);
            _mm256_storeu_pd(
                py.add(i),
                _mm256_fmadd_pd(al, c, _mm256_loadu_pd(py.add(i))),
            );
            i += 4;
        }
        let mut tail = 0.0f64;
        while i < len {
            let c = a[i].to_f64();
            tail = c.mul_add(x[i], tail);
            y[i] = alpha.mul_add(c, y[i]);
            i += 1;
        }
        combine(&acc) + tail
    }
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t, z_t += beta a_t.
#[inline(always)]
pub fn dot_axpy2<T: Coef>(
    a: &[T],
    x: &[f64],
    (y, alpha): (&mut [f64], f64),
    (z, beta): (&mut [f64], f64),
) -> f64 {
    let len = a.len();
    let (x, y, z) = (&x[..len], &mut y[..len], &mut z[..len]);
    // SAFETY: offsets stay under `len`, the length of every slice.
    unsafe {
        let (pa, px, py, pz) = (a.as_ptr(), x.as_ptr(), y.as_mut_ptr(), z.as_mut_ptr());
        let (al, be) = (_mm256_set1_pd(alpha), _mm256_set1_pd(beta));
        let mut acc = [_mm256_setzero_pd(); 4];
        let mut i = 0;
        while i + 16 <= len {
            for (k, slot) in acc.iter_mut().enumerate() {
                let j = i + 4 * k;
                let c = T::load4(pa.add(j));
                *slot = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(j)), *slot);
                _mm256_storeu_pd(
                    py.add(j),
                    _mm256_fmadd_pd(al, c, _mm256_loadu_pd(py.add(j))),
                );
                _mm256_storeu_pd(
                    pz.add(j),
                    _mm256_fmadd_pd(be, c, _mm256_loadu_pd(pz.add(j))),
                );
            }
            i += 16;
        }
        while i + 4 <= len {
            let c = T::load4(pa.add(i));
            acc[0] = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(i)), acc[0]);
            _mm256_storeu_pd(
                py.add(i),
                _mm256_fmadd_pd(al, c, _mm256_loadu_pd(py.add(i))),
            );
            _mm256_storeu_pd(
                pz.add(i),
                _mm256_fmadd_pd(be, c, _mm256_loadu_pd(pz.add(i))),
            );
            i += 4;
        }
        let mut tail = 0.0f64;
        while i < len {
            let c = a[i].to_f64();
            tail = c.mul_add(x[i], tail);
            y[i] = alpha.mul_add(c, y[i]);
            z[i] = beta.mul_add(c, z[i]);
            i += 1;
        }
        combine(&acc) + tail
    }
}

/// Returns (sum_t a_t x_t, sum_t a_t v_t) and does w_t += alpha a_t.
#[inline(always)]
pub fn dot2_axpy<T: Coef>(a: &[T], x: &[f64], v: &[f64], w: &mut [f64], alpha: f64) -> (f64, f64) {
    let len = a.len();
    let (x, v, w) = (&x[..len], &v[..len], &mut w[..len]);
    // SAFETY: offsets stay under `len`, the length of every slice.
    unsafe {
        let (pa, px, pv, pw) = (a.as_ptr(), x.as_ptr(), v.as_ptr(), w.as_mut_ptr());
        let al = _mm256_set1_pd(alpha);
        let mut ax = [_mm256_setzero_pd(); 4];
        let mut av = [_mm256_setzero_pd(); 4];
        let mut i = 0;
        while i + 16 <= len {
            for k in 0..4 {
                let j = i + 4 * k;
                let c = T::load4(pa.add(j));
                ax[k] = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(j)), ax[k]);
                av[k] = _mm256_fmadd_pd(c, _mm256_loadu_pd(pv.add(j)), av[k]);
                _mm256_storeu_pd(
                    pw.add(j),
                    _mm256_fmadd_pd(al, c, _mm256_loadu_pd(pw.add(j))),
                );
            }
            i += 16;
        }
        while i + 4 <= len {
            let c = T::load4(pa.add(i));
            ax[0] = _mm256_fmadd_pd(c, _mm256_loadu_pd(px.add(i)), ax[0]);
            av[0] = _mm256_fmadd_pd(c, _mm256_loadu_pd(pv.add(i)), av[0]);
            _mm256_storeu_pd(
                pw.add(i),
                _mm256_fmadd_pd(al, c, _mm256_loadu_pd(pw.add(i))),
            );
            i += 4;
        }
        let (mut tx, mut tv) = (0.0f64, 0.0f64);
        while i < len {
            let c = a[i].to_f64();
            tx = c.mul_add(x[i], tx);
            tv = c.mul_add(v[i], tv);
            w[i] = alpha.mul_add(c, w[i]);
            i += 1;
        }
        (combine(&ax) + tx, combine(&av) + tv)
    }
}

/// How far ahead (in coefficients: 1 KiB of float32, 2 KiB of float64) the four-segment
/// loops below prefetch each segment, one software prefetch per segment and 64-byte line.
/// The four segments are streams some hundred kilobytes apart, which the hardware prefetcher
/// alone does not run far enough ahead of. float32 first (p = 3, n = 800, two threads,
/// medians of 8-12 alternating runs): energy 4-6 % and gradient 2-3 % faster, HVP unchanged;
/// 128 and 512 floats ahead did no better. float64 later (on a Xeon, medians of 5
/// alternating runs, with huge pages, see [`crate::pages`]): p = 3, n = 400 energy 3.04 ->
/// 2.66 ms, gradient 2.88 -> 2.47, Hessian 4.43 -> 4.10, HVP 3.40 -> 2.63; n = 800 (read
/// from memory) 2-8 % faster. Those runs prefetched into L1; on AMD Zen 3 and newer the lines
/// go to L2 instead (see [`crate::simd::segment_prefetch_level`] for the Zen 4 measurements).
const AHEAD: usize = 256;
/// Shortest segments that the energy, gradient and HVP loops prefetch (the Hessian's loop
/// prefetches shorter ones into L1, see [`hessian_prefetch`]). Without this floor the short
/// segments of degree 4 and up (about 30 long at n = 120) ran 3-5 % slower in those passes;
/// with 64 the p = 4, n = 120 float32 energy still lost 2.6 %, with 128 it is unchanged
/// (within 1.5 %) while p = 3, n = 800 keeps its gain.
const AHEAD_MIN_LEN: usize = 128;

/// Where a four-segment loop over segments of `len` coefficients prefetches: nowhere below
/// [`AHEAD_MIN_LEN`], else into the cache level [`crate::simd::segment_prefetch_level`]
/// chose for this processor.
#[inline(always)]
fn segment_prefetch(len: usize) -> Option<crate::simd::PrefetchLevel> {
    (len >= AHEAD_MIN_LEN).then(crate::simd::segment_prefetch_level)
}

/// Where the Hessian's four-segment loop (`rows4_shared`, the loop of [`rows4_shared2`] and
/// [`rows4`]) prefetches: as [`segment_prefetch`] from [`AHEAD_MIN_LEN`] on, and into L1 below
/// it. The Hessian stalls on its coefficient stream where the other passes do not (it also
/// reads and writes five or six rows of its accumulator per step), and the short segments of
/// degree 4 and up, which are contiguous along each of the four tails, gain from the hint.
/// Zen 4 (family 0x19, model 0x11), medians of 30 calls, three alternating runs: two threads,
/// p = 4, n = 120 3.03 -> 2.54 ms (float32 2.16 -> 1.74 ms), one thread 5.74 -> 4.65 ms; p = 5,
/// n = 50 1.36 -> 1.14 ms. The L2 hint gained less there (two threads 2.9-3.0 ms), and the L1
/// hint on the long segments of degree 3 lost 8-12 % in float64 (n = 400 2.94 -> 3.23 ms,
/// n = 800 24.8 -> 27.8 ms), so those keep [`crate::simd::segment_prefetch_level`]. Prefetching
/// 128 coefficients ahead instead of [`AHEAD`] was level, 512 ahead slower.
#[inline(always)]
fn hessian_prefetch(len: usize) -> crate::simd::PrefetchLevel {
    segment_prefetch(len).unwrap_or(crate::simd::PrefetchLevel::L1)
}

/// Prefetches the line `AHEAD` coefficients past position i of each segment, once per line,
/// into `level` (a prefetch is a hint: the address may lie past the segment and never
/// faults).
#[inline(always)]
pub(crate) unsafe fn prefetch_segments<T: Coef>(
    pa: &[*const T; 4],
    i: usize,
    level: crate::simd::PrefetchLevel,
) {
    if i.is_multiple_of(64 / std::mem::size_of::<T>()) {
        for p in pa {
            let at = p.wrapping_add(i + AHEAD) as *const i8;
            match level {
                crate::simd::PrefetchLevel::L1 => _mm_prefetch::<_MM_HINT_T0>(at),
                crate::simd::PrefetchLevel::L2 => _mm_prefetch::<_MM_HINT_T1>(at),
            }
        }
    }
}

/// Four segments at once: s_j = sum_t a_j,t x_t (and, with `v`, sum_t a_j,t v_t),
/// z_t += w_0 a_0,t + w_1 a_1,t + w_2 a_2,t + w_3 a_3,t, summed as in
/// [`crate::portable::weighted4`].
#[inline(always)]
fn dots_axpy4<T: Coef, const WITH_V: bool, const WITH_Z: bool>(
    a: [&[T]; 4],
    x: &[f64],
    v: &[f64],
    z: &mut [f64],
    w: [f64; 4],
) -> ([f64; 4], [f64; 4]) {
    let len = if WITH_Z { z.len() } else { a[0].len() };
    let x = &x[..len];
    let v = if WITH_V { &v[..len] } else { v };
    let a = [&a[0][..len], &a[1][..len], &a[2][..len], &a[3][..len]];
    // SAFETY: offsets stay under `len`, the length of every slice read or written (v is only
    // read when WITH_V, and then it was cut to `len` above).
    unsafe {
        let pa = [a[0].as_ptr(), a[1].as_ptr(), a[2].as_ptr(), a[3].as_ptr()];
        let (px, pv, pz) = (x.as_ptr(), v.as_ptr(), z.as_mut_ptr());
        let wv = splat4(w);
        let mut ax = [_mm256_setzero_pd(); 4];
        let mut av = [_mm256_setzero_pd(); 4];
        let prefetch = segment_prefetch(len);
        let mut i = 0;
        while i + 4 <= len {
            let xt = _mm256_loadu_pd(px.add(i));
            let mut c = [_mm256_setzero_pd(); 4];
            if let Some(level) = prefetch {
                prefetch_segments(&pa, i, level);
            }
            for j in 0..4 {
                c[j] = T::load4(pa[j].add(i));
                ax[j] = _mm256_fmadd_pd(c[j], xt, ax[j]);
            }
            if WITH_V {
                let vt = _mm256_loadu_pd(pv.add(i));
                for j in 0..4 {
                    av[j] = _mm256_fmadd_pd(c[j], vt, av[j]);
                }
            }
            if WITH_Z {
                let u = if T::WIDENS {
                    let u = _mm256_fmadd_pd(wv[1], c[1], _mm256_mul_pd(wv[0], c[0]));
                    _mm256_fmadd_pd(wv[3], c[3], _mm256_fmadd_pd(wv[2], c[2], u))
                } else {
                    let p01 = _mm256_fmadd_pd(wv[1], c[1], _mm256_mul_pd(wv[0], c[0]));
                    let p23 = _mm256_fmadd_pd(wv[3], c[3], _mm256_mul_pd(wv[2], c[2]));
                    _mm256_add_pd(p01, p23)
                };
                let zt = _mm256_loadu_pd(pz.add(i));
                _mm256_storeu_pd(pz.add(i), _mm256_add_pd(zt, u));
            }
            i += 4;
        }
        let mut sx = [hsum(ax[0]), hsum(ax[1]), hsum(ax[2]), hsum(ax[3])];
        let mut sv = [hsum(av[0]), hsum(av[1]), hsum(av[2]), hsum(av[3])];
        let (mut tx, mut tv) = ([0f64; 4], [0f64; 4]);
        while i < len {
            let c = crate::portable::coef4(&a, i);
            for j in 0..4 {
                tx[j] = c[j].mul_add(x[i], tx[j]);
                if WITH_V {
                    tv[j] = c[j].mul_add(v[i], tv[j]);
                }
            }
            if WITH_Z {
                z[i] += crate::portable::weighted4::<Fused, T>(w, c);
            }
            i += 1;
        }
        for j in 0..4 {
            sx[j] += tx[j];
            sv[j] += tv[j];
        }
        (sx, sv)
    }
}

/// s_j = sum_t a_j,t x_t for four segments; z_t += sum_j w_j a_j,t.
#[inline(always)]
pub fn dots4_axpy<T: Coef>(a: [&[T]; 4], x: &[f64], z: &mut [f64], w: [f64; 4]) -> [f64; 4] {
    dots_axpy4::<T, false, true>(a, x, x, z, w).0
}

/// s_j = sum_t a_j,t x_t for four segments of equal length.
#[inline(always)]
pub fn dots4<T: Coef>(a: [&[T]; 4], x: &[f64]) -> [f64; 4] {
    dots_axpy4::<T, false, false>(a, x, x, &mut [], [0.0; 4]).0
}

/// (sum_t a_j,t x_t, sum_t a_j,t v_t) for four segments; z_t += sum_j w_j a_j,t.
#[inline(always)]
pub fn dots8_axpy<T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    v: &[f64],
    z: &mut [f64],
    w: [f64; 4],
) -> ([f64; 4], [f64; 4]) {
    dots_axpy4::<T, true, true>(a, x, v, z, w)
}

/// [`rows4`] with two shared rows: u_t = (xi_0 a_0,t + xi_1 a_1,t) + (xi_2 a_2,t + xi_3 a_3,t),
/// z1_t += alpha u_t, z2_t += beta u_t, rows_j,t += w a_j,t, s_j = sum_t a_j,t x_t.
#[inline(always)]
pub fn rows4_shared2<T: Coef, const WIDE: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    shared: [(&mut [f64], f64); 2],
    xi: [f64; 4],
) -> [f64; 4] {
    rows4_shared::<T, true, WIDE>(a, x, rows, w, shared, xi, 0)
}

/// The loop of [`rows4_shared2`]; with `TWO = false` the second shared row is not touched.
/// With `WIDE` (compiled with AVX-512F only) and [`crate::simd::wide_hessian_rows`], the
/// steps of eight positions go first ([`crate::avx512::rows4_octets`], the same bits).
/// `next_row` as in [`crate::simd::rows4`] (for z1).
///
/// With `WIDE` each dot s_j keeps eight lanes, lane l summing the positions t = l mod 8 of
/// the vector steps in order (lanes 0-3 in `lo`, 4-7 in `hi`): the 512-bit steps then need
/// one multiply-add per segment and step where four lanes needed two (a float32 Hessian at
/// n = 400 1.16x faster, n = 800 1.02-1.07x), and the 256-bit steps of that instantiation
/// take the same sums (it has 32 vector registers for the four more accumulators). At the
/// end lane l + 4 is added to lane l. Without `WIDE` (16 registers, where four more
/// accumulators spill: 10-16 % slower) each dot keeps four lanes, lane l summing the
/// positions t = l mod 4. Then the four lanes are summed as [`hsum`] does, and the positions
/// past the last vector step follow. So the two instantiations agree to rounding, not bit for
/// bit.
#[inline(always)]
fn rows4_shared<T: Coef, const TWO: bool, const WIDE: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    shared: [(&mut [f64], f64); 2],
    xi: [f64; 4],
    next_row: usize,
) -> [f64; 4] {
    let [(z1, alpha), (z2, beta)] = shared;
    let len = z1.len();
    let x = &x[..len];
    let z2 = if TWO { &mut z2[..len] } else { z2 };
    let a = [&a[0][..len], &a[1][..len], &a[2][..len], &a[3][..len]];
    let [r0, r1, r2, r3] = rows;
    let rows = [
        &mut r0[..len],
        &mut r1[..len],
        &mut r2[..len],
        &mut r3[..len],
    ];
    // SAFETY: offsets stay under `len`, the length of every slice written or read (z2 only
    // when TWO, after it was cut to `len`); the written slices are distinct `&mut` borrows.
    unsafe {
        let pa = [a[0].as_ptr(), a[1].as_ptr(), a[2].as_ptr(), a[3].as_ptr()];
        let py = [
            rows[0].as_mut_ptr(),
            rows[1].as_mut_ptr(),
            rows[2].as_mut_ptr(),
            rows[3].as_mut_ptr(),
        ];
        let (px, p1, p2) = (x.as_ptr(), z1.as_mut_ptr(), z2.as_mut_ptr());
        let loop_ = RowsLoop {
            pa,
            px,
            py,
            p1,
            p2,
            wv: _mm256_set1_pd(w),
            av: _mm256_set1_pd(alpha),
            bv: _mm256_set1_pd(beta),
            xv: splat4(xi),
            level: hessian_prefetch(len),
            next_row,
        };
        let (mut lo, mut hi) = ([_mm256_setzero_pd(); 4], [_mm256_setzero_pd(); 4]);
        let mut i = 0;
        if WIDE && crate::simd::wide_hessian_rows() {
            let rows = (py, p1, p2);
            i = crate::avx512::rows4_octets::<T, TWO>(
                pa,
                px,
                rows,
                (w, alpha, beta),
                xi,
                (&mut lo, &mut hi),
                len,
                (loop_.level, next_row),
            );
        }
        if WIDE {
            // i is a multiple of 8 here, so the lanes of each step are those of its positions
            while i + 8 <= len {
                loop_.step::<TWO>(i, &mut lo);
                loop_.step::<TWO>(i + 4, &mut hi);
                i += 8;
            }
        }
        while i + 4 <= len {
            loop_.step::<TWO>(i, &mut lo);
            i += 4;
        }
        let mut out = [0f64; 4];
        for j in 0..4 {
            out[j] = hsum(if WIDE {
                _mm256_add_pd(lo[j], hi[j])
            } else {
                lo[j]
            });
        }
        let mut tail = [0f64; 4];
        while i < len {
            let c = crate::portable::coef4(&a, i);
            for j in 0..4 {
                tail[j] = c[j].mul_add(x[i], tail[j]);
                *py[j].add(i) = w.mul_add(c[j], *py[j].add(i));
            }
            let u = xi[1].mul_add(c[1], xi[0] * c[0]) + xi[3].mul_add(c[3], xi[2] * c[2]);
            *p1.add(i) = alpha.mul_add(u, *p1.add(i));
            if TWO {
                *p2.add(i) = beta.mul_add(u, *p2.add(i));
            }
            i += 1;
        }
        for j in 0..4 {
            out[j] += tail[j];
        }
        out
    }
}

/// The state of [`rows4_shared`]'s 256-bit steps: the segments, x, the four own rows and
/// the shared rows (z2 only with `TWO`), each valid for the loop's length, and the weights
/// as vectors.
struct RowsLoop<T> {
    pa: [*const T; 4],
    px: *const f64,
    py: [*mut f64; 4],
    p1: *mut f64,
    p2: *mut f64,
    wv: __m256d,
    av: __m256d,
    bv: __m256d,
    xv: [__m256d; 4],
    level: crate::simd::PrefetchLevel,
    next_row: usize,
}

impl<T: Coef> RowsLoop<T> {
    /// Positions i..i+4 (i + 4 <= the loop's length): the own and shared rows' updates, and
    /// the four dots' lanes added into `acc`.
    #[inline(always)]
    unsafe fn step<const TWO: bool>(&self, i: usize, acc: &mut [__m256d; 4]) {
        let (pa, py) = (&self.pa, &self.py);
        prefetch_segments(pa, i, self.level);
        if self.next_row != 0 && i.is_multiple_of(8) {
            _mm_prefetch::<_MM_HINT_T0>(self.p1.wrapping_add(i + self.next_row) as *const i8);
        }
        let xt = _mm256_loadu_pd(self.px.add(i));
        let mut c = [_mm256_setzero_pd(); 4];
        for j in 0..4 {
            c[j] = T::load4(pa[j].add(i));
            acc[j] = _mm256_fmadd_pd(c[j], xt, acc[j]);
            let y = _mm256_loadu_pd(py[j].add(i));
            _mm256_storeu_pd(py[j].add(i), _mm256_fmadd_pd(self.wv, c[j], y));
        }
        let xv = &self.xv;
        let u = _mm256_add_pd(
            _mm256_fmadd_pd(xv[1], c[1], _mm256_mul_pd(xv[0], c[0])),
            _mm256_fmadd_pd(xv[3], c[3], _mm256_mul_pd(xv[2], c[2])),
        );
        let (p1, p2) = (self.p1, self.p2);
        _mm256_storeu_pd(
            p1.add(i),
            _mm256_fmadd_pd(self.av, u, _mm256_loadu_pd(p1.add(i))),
        );
        if TWO {
            _mm256_storeu_pd(
                p2.add(i),
                _mm256_fmadd_pd(self.bv, u, _mm256_loadu_pd(p2.add(i))),
            );
        }
    }
}

/// Four segments at once: s_j = sum_t a_j,t x_t, rows_j,t += w a_j,t,
/// z_t += (xi_0 a_0,t + xi_1 a_1,t) + (xi_2 a_2,t + xi_3 a_3,t): [`rows4_shared2`] with one
/// shared row of weight 1 (a fused multiply-add by 1 adds exactly, so the sums are the same).
/// `next_row`: the prefetch hint of [`crate::simd::rows4`].
#[inline(always)]
pub fn rows4<T: Coef, const WIDE: bool>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    z: &mut [f64],
    xi: [f64; 4],
    next_row: usize,
) -> [f64; 4] {
    let shared = [(z, 1.0), (&mut [][..], 0.0)];
    rows4_shared::<T, false, WIDE>(a, x, rows, w, shared, xi, next_row)
}

/// `acc[r][k] += c[r] X[u, lanes 4k..4k+4]` for the four rows.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
unsafe fn tile_sums<const G: usize>(acc: &mut [[__m256d; G]; 4], c: [__m256d; 4], row: *const f64) {
    let mut xv = [_mm256_setzero_pd(); G];
    for k in 0..G {
        xv[k] = _mm256_loadu_pd(row.add(4 * k));
    }
    for r in 0..4 {
        for k in 0..G {
            acc[r][k] = _mm256_fmadd_pd(c[r], xv[k], acc[r][k]);
        }
    }
}

/// G[u, lanes] += (c0 w0 + c1 w1) + (c2 w2 + c3 w3).
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
unsafe fn tile_spread<const G: usize>(wv: &[[__m256d; G]; 4], c: [__m256d; 4], row: *mut f64) {
    for k in 0..G {
        let t01 = _mm256_fmadd_pd(c[1], wv[1][k], _mm256_mul_pd(c[0], wv[0][k]));
        let t23 = _mm256_fmadd_pd(c[3], wv[3][k], _mm256_mul_pd(c[2], wv[2][k]));
        let gv = _mm256_loadu_pd(row.add(4 * k));
        _mm256_storeu_pd(row.add(4 * k), _mm256_add_pd(gv, _mm256_add_pd(t01, t23)));
    }
}

/// The coefficients of the four rows at position u >= 3, broadcast.
#[inline(always)]
unsafe fn tile_at<T: Coef>(rows: &[&[T]; 4], u: usize) -> [__m256d; 4] {
    [
        _mm256_set1_pd((*rows[0].as_ptr().add(u)).to_f64()),
        _mm256_set1_pd((*rows[1].as_ptr().add(u - 1)).to_f64()),
        _mm256_set1_pd((*rows[2].as_ptr().add(u - 2)).to_f64()),
        _mm256_set1_pd((*rows[3].as_ptr().add(u - 3)).to_f64()),
    ]
}

/// The coefficients at position u < 3, with zeros for rows that have not started.
#[inline(always)]
unsafe fn tile_early<T: Coef>(rows: &[&[T]; 4], u: usize) -> [__m256d; 4] {
    [
        _mm256_set1_pd(tile_coef(rows, 0, u)),
        _mm256_set1_pd(tile_coef(rows, 1, u)),
        _mm256_set1_pd(tile_coef(rows, 2, u)),
        _mm256_set1_pd(tile_coef(rows, 3, u)),
    ]
}

/// The batch tile of [`crate::tile`] for 4 G lanes: the sums of four rows stay in 4 G
/// registers while the rows stream through once; per position, one load of X per lane
/// register and one broadcast per row.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
pub fn tile<T: Coef, const G: usize>(
    rows: [&[T]; 4],
    x: &[f64],
    stride: usize,
    grad: Option<(&mut [f64], &TileSums)>,
    s: &mut TileSums,
) {
    let len = check_tile(&rows, x, stride, 4 * G);
    let head = len.min(3);
    // SAFETY: row u of X (and G) covers [u*stride, u*stride + 4G), inside the slices by
    // `check_tile` and the assertion on `g`; row r is read at u - r < len - r, its length.
    unsafe {
        let px = x.as_ptr();
        let mut acc = [[_mm256_setzero_pd(); G]; 4];
        let mut pf = next_block(&rows, len);
        let step = 4 * std::mem::size_of::<T>();
        match grad {
            None => {
                for u in 0..head {
                    tile_sums(&mut acc, tile_early(&rows, u), px.add(u * stride));
                }
                for u in head..len {
                    _mm_prefetch::<_MM_HINT_T1>(pf as *const i8);
                    pf = pf.wrapping_add(step);
                    tile_sums(&mut acc, tile_at(&rows, u), px.add(u * stride));
                }
            }
            Some((g, w)) => {
                assert!(len == 0 || g.len() >= (len - 1) * stride + 4 * G);
                let pg = g.as_mut_ptr();
                let mut wv = [[_mm256_setzero_pd(); G]; 4];
                for r in 0..4 {
                    for k in 0..G {
                        wv[r][k] = _mm256_loadu_pd(w[r].as_ptr().add(4 * k));
                    }
                }
                for u in 0..len {
                    _mm_prefetch::<_MM_HINT_T1>(pf as *const i8);
                    pf = pf.wrapping_add(step);
                    let c = if u < head {
                        tile_early(&rows, u)
                    } else {
                        tile_at(&rows, u)
                    };
                    tile_sums(&mut acc, c, px.add(u * stride));
                    tile_spread(&wv, c, pg.add(u * stride));
                }
            }
        }
        for r in 0..4 {
            for k in 0..G {
                _mm256_storeu_pd(s[r].as_mut_ptr().add(4 * k), acc[r][k]);
            }
        }
    }
}

/// Prefetch distance of [`stagger4`], in bytes.
const PREFETCH: usize = 2048;

/// All-ones in lanes l >= f, for f = 0..=4.
const LANES_FROM: [[u64; 4]; 5] = [
    [!0, !0, !0, !0],
    [0, !0, !0, !0],
    [0, 0, !0, !0],
    [0, 0, 0, !0],
    [0, 0, 0, 0],
];

/// Row pointers of a [`Rows4`] (rows r >= count are never read).
#[inline(always)]
fn row_ptrs<T: Coef>(rows: &Rows4<'_, T>) -> [*const T; 4] {
    let p = rows.data.as_ptr();
    [0, 1, 2, 3].map(|r| p.wrapping_add(rows.offset(r)))
}

/// The coefficients of a vector step (u, from) of [`crate::stagger::Steps`]: row r at lanes
/// l >= lane_from(u, from, r), zero elsewhere and for the zero rows. Lanes before a row's
/// start read the end of the previous row (rows are back to back), then are cleared by a
/// mask, so every load is a plain one inside the rows' data.
#[inline(always)]
unsafe fn step_coefs<T: Coef>(
    pa: &[*const T; 4],
    count: usize,
    u: usize,
    from: usize,
) -> [__m256d; 4] {
    let mut c = [_mm256_setzero_pd(); 4];
    for r in 0..count {
        let v = T::load4(pa[r].add(u).sub(r));
        c[r] = if from == 0 && u >= r {
            v
        } else {
            let mask = LANES_FROM[lane_from(u, from, r)];
            _mm256_and_pd(v, _mm256_loadu_pd(mask.as_ptr() as *const f64))
        };
    }
    c
}

/// Software prefetch of the block's region, `step` bytes further each call.
#[inline(always)]
unsafe fn prefetch_ahead(pf: &mut *const u8, step: usize) {
    _mm_prefetch::<_MM_HINT_T0>(*pf as *const i8);
    _mm_prefetch::<_MM_HINT_T0>(pf.wrapping_add(64) as *const i8);
    *pf = pf.wrapping_add(step);
}

/// The adjacent-rows loop of [`crate::stagger`] in vector steps: one load of x (v, z) for
/// the four rows per four positions, lanes outside a row cleared by a bit mask at the first
/// and last step; rows shorter than 4 take the shared scalar path. The four rows are short streams
/// interleaved in one region, which the hardware prefetcher does not pick up, so the loop
/// prefetches PREFETCH bytes ahead (wrapping: a prefetch never faults).
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r indexes rows of several arrays at once
pub fn stagger4<T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    v: Option<&[f64]>,
    z: Option<(&mut [f64], [f64; 4])>,
) -> ([f64; 4], [f64; 4]) {
    let zlen = z.as_ref().map(|(z, _)| z.len());
    let len = check_rows(&rows, x, v, zlen);
    if len < 4 {
        return short_stagger4::<Fused, T>(&rows, x, v, z);
    }
    let want_v = v.is_some();
    let vs = v.unwrap_or(x);
    let (z, w) = split_update(z);
    let pz = z.map(|z| z.as_mut_ptr());
    // SAFETY: every step covers positions u..u+4 <= len, inside x, v and z (`check_rows`);
    // a real row r is read at u - r..u - r + 4 of its own start: at most its last entry, and
    // before its start (lanes then masked) only the previous row's last r - u entries, since
    // len >= 4 puts row r's start at offset >= r of the rows' data (see `step_coefs`).
    unsafe {
        let (px, pv) = (x.as_ptr(), vs.as_ptr());
        let pa = row_ptrs(&rows);
        let mut ax = [_mm256_setzero_pd(); 4];
        let mut av = [_mm256_setzero_pd(); 4];
        let wv = splat4(w);
        let mut pf = (pa[0] as *const u8).wrapping_add(PREFETCH);
        let step = 16 * std::mem::size_of::<T>();
        for (u, from) in Steps::new(len) {
            prefetch_ahead(&mut pf, step);
            let c = step_coefs(&pa, rows.count, u, from);
            let xv = _mm256_loadu_pd(px.add(u));
            for r in 0..4 {
                ax[r] = _mm256_fmadd_pd(c[r], xv, ax[r]);
            }
            if want_v {
                let vv = _mm256_loadu_pd(pv.add(u));
                for r in 0..4 {
                    av[r] = _mm256_fmadd_pd(c[r], vv, av[r]);
                }
            }
            if let Some(pz) = pz {
                let pz = pz.add(u);
                let t01 = _mm256_fmadd_pd(c[1], wv[1], _mm256_mul_pd(c[0], wv[0]));
                let t23 = _mm256_fmadd_pd(c[3], wv[3], _mm256_mul_pd(c[2], wv[2]));
                _mm256_storeu_pd(
                    pz,
                    _mm256_add_pd(_mm256_loadu_pd(pz), _mm256_add_pd(t01, t23)),
                );
            }
        }
        let (mut sx, mut sv) = ([0f64; 4], [0f64; 4]);
        for r in 0..4 {
            sx[r] = hsum(ax[r]);
            if want_v {
                sv[r] = hsum(av[r]);
            }
        }
        (sx, sv)
    }
}

/// [`HessRows`] in vector steps: per four positions, four coefficient loads, one load of x,
/// and the four own rows and the shared rows each loaded, updated and stored once.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r indexes rows of several arrays at once
pub fn stagger4_hess<T: Coef>(
    rows: Rows4<'_, T>,
    x: &[f64],
    acc: &mut [f64],
    h: &HessRows<'_>,
) -> [f64; 4] {
    let len = h.check(&rows, x, acc);
    if len < 4 {
        return h.short::<Fused, T>(&rows, x, acc);
    }
    let (n, k) = (h.n, h.k);
    // SAFETY: len >= 4, so rows k..k+4 < n exist; a step writes columns k + u..k + u + 4 <= n
    // of the own rows and of the shared rows (index < n, checked), inside acc (n x n), and
    // reads x and the rows as in `stagger4`. Own and shared rows may coincide: every access
    // goes through raw pointers of the one slice, in program order.
    unsafe {
        let pacc = acc.as_mut_ptr();
        let px = x.as_ptr();
        let pa = row_ptrs(&rows);
        let own = [
            pacc.add(k * n + k),
            pacc.add((k + 1) * n + k),
            pacc.add((k + 2) * n + k),
            pacc.add((k + 3) * n + k),
        ];
        let bv = _mm256_set1_pd(h.b);
        let xk = splat4(h.xk);
        let mut sv = [_mm256_setzero_pd(); 4];
        let mut pf = (pa[0] as *const u8).wrapping_add(PREFETCH);
        let step = 16 * std::mem::size_of::<T>();
        for (u, from) in Steps::new(len) {
            prefetch_ahead(&mut pf, step);
            let c = step_coefs(&pa, rows.count, u, from);
            let xv = _mm256_loadu_pd(px.add(u));
            for r in 0..4 {
                sv[r] = _mm256_fmadd_pd(c[r], xv, sv[r]);
                let row = own[r].add(u);
                _mm256_storeu_pd(row, _mm256_fmadd_pd(bv, c[r], _mm256_loadu_pd(row)));
            }
            let t01 = _mm256_fmadd_pd(c[1], xk[1], _mm256_mul_pd(c[0], xk[0]));
            let t23 = _mm256_fmadd_pd(c[3], xk[3], _mm256_mul_pd(c[2], xk[2]));
            let mixed = _mm256_add_pd(t01, t23);
            for &(i, w) in h.shared {
                let row = pacc.add(i * n + k + u);
                let wv = _mm256_set1_pd(w);
                _mm256_storeu_pd(row, _mm256_fmadd_pd(wv, mixed, _mm256_loadu_pd(row)));
            }
        }
        [hsum(sv[0]), hsum(sv[1]), hsum(sv[2]), hsum(sv[3])]
    }
}
