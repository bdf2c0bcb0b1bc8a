//! The batch tile of [`crate::tile`] on 512-bit vectors, for processors with AVX-512F.
//!
//! Same sums as the AVX2 tile, for 16 or 32 lanes at once (G = 2 or 4 registers of eight
//! lanes per row):
//!
//! ```text
//! S[r][k] = sum_{u = r}^{len-1} a_r[u - r] X[u, k]        (k < 8 G)
//! ```
//!
//! Per position u: G loads of X, four broadcasts and 4 G multiply-adds, so a coefficient is
//! broadcast once for up to 32 points instead of once per 8. Each lane runs the same fused
//! multiply-adds in the same order as in the AVX2 tile and the portable one (positions in
//! order, zero coefficients before a row starts), so the three agree bit for bit and a batch
//! gives the same energies on every x86-64 processor with FMA, whichever tile it takes.
//!
//! With a gradient it also spreads the rows into G, as the AVX2 tile does, per lane:
//!
//! ```text
//! G[u, k] += (a_0 W[0][k] + a_1 W[1][k]) + (a_2 W[2][k] + a_3 W[3][k])
//! ```
//!
//! with the coefficients a_r of the four rows at position u (zero before a row starts).

use core::arch::x86_64::*;

use crate::storage::Coef;
use crate::tile::{check_tile, next_block, tile_coef, TileSums};

/// True when the processor has AVX-512F besides AVX2 and FMA (checked once, then cached by
/// std).
#[inline]
pub fn wide_tile_available() -> bool {
    std::is_x86_feature_detected!("avx512f") && crate::simd::has_avx2_fma()
}

/// Rows of X (and of G) the 32-lane tile prefetches ahead of the one it reads. At 32 lanes a
/// row of X is 256 bytes, so a block's rows of X (100 KiB at n = 400) do not stay in L1
/// between blocks and come back from L2 at every position; the hardware prefetch alone left
/// the tile waiting on them (one thread, 32 points, p = 3, n = 400, medians of 12 alternating
/// runs: 15.5 ms without, 13.4-13.6 ms with it; two threads 7.8 against 7.7-8.0 ms, where
/// the multiply-adds bound it; with the energy and gradient 31.3 against 29.3 ms on one
/// thread). 4, 8 and 12 rows ahead measured alike. At 16 lanes (50 KiB of X) there was no
/// gain, so only the 32-lane tile does it.
const X_AHEAD: usize = 8;

/// Prefetch (to L1) the 8 G lanes of one row of X or G; never faults, wherever it points.
#[inline(always)]
unsafe fn prefetch_row<const G: usize>(row: *const f64) {
    for k in 0..G {
        _mm_prefetch::<_MM_HINT_T0>(row.wrapping_add(8 * k) as *const i8);
    }
}

/// `acc[r][k] += c[r] X[u, lanes 8k..8k+8]` for the four rows.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
unsafe fn sums<const G: usize>(acc: &mut [[__m512d; G]; 4], c: [__m512d; 4], row: *const f64) {
    let mut xv = [_mm512_setzero_pd(); G];
    for k in 0..G {
        xv[k] = _mm512_loadu_pd(row.add(8 * k));
    }
    for r in 0..4 {
        for k in 0..G {
            acc[r][k] = _mm512_fmadd_pd(c[r], xv[k], acc[r][k]);
        }
    }
}

/// `s[r][..8 G] = acc[r]` for the four rows.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
unsafe fn store_sums<const G: usize>(acc: &[[__m512d; G]; 4], s: &mut TileSums) {
    for r in 0..4 {
        for k in 0..G {
            _mm512_storeu_pd(s[r].as_mut_ptr().add(8 * k), acc[r][k]);
        }
    }
}

/// G[u, lanes] += (c0 w0 + c1 w1) + (c2 w2 + c3 w3), in the AVX2 tile's order.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
unsafe fn spread<const G: usize>(wv: &[[__m512d; G]; 4], c: [__m512d; 4], row: *mut f64) {
    for k in 0..G {
        let t01 = _mm512_fmadd_pd(c[1], wv[1][k], _mm512_mul_pd(c[0], wv[0][k]));
        let t23 = _mm512_fmadd_pd(c[3], wv[3][k], _mm512_mul_pd(c[2], wv[2][k]));
        let gv = _mm512_loadu_pd(row.add(8 * k));
        _mm512_storeu_pd(row.add(8 * k), _mm512_add_pd(gv, _mm512_add_pd(t01, t23)));
    }
}

/// The coefficients of the four rows at position u, broadcast; zeros for rows that have not
/// started (only when `EARLY`, for u < 3).
#[inline(always)]
unsafe fn coefs<T: Coef, const EARLY: bool>(rows: &[&[T]; 4], u: usize) -> [__m512d; 4] {
    // written out: a closure would not inherit the target features and would not inline
    if EARLY {
        [
            _mm512_set1_pd(tile_coef(rows, 0, u)),
            _mm512_set1_pd(tile_coef(rows, 1, u)),
            _mm512_set1_pd(tile_coef(rows, 2, u)),
            _mm512_set1_pd(tile_coef(rows, 3, u)),
        ]
    } else {
        [
            _mm512_set1_pd((*rows[0].as_ptr().add(u)).to_f64()),
            _mm512_set1_pd((*rows[1].as_ptr().add(u - 1)).to_f64()),
            _mm512_set1_pd((*rows[2].as_ptr().add(u - 2)).to_f64()),
            _mm512_set1_pd((*rows[3].as_ptr().add(u - 3)).to_f64()),
        ]
    }
}

/// The tile sums S of the module doc for 8 G lanes (G = 2 or 4), written to `s[r][..8 G]`,
/// and with `grad = Some((g, w))` the spread of the rows into G (laid out like X) with the
/// weights `w[r][..8 G]`.
///
/// # Safety
/// The processor must have AVX-512F, AVX2 and FMA ([`wide_tile_available`]).
#[target_feature(enable = "avx512f,avx2,fma")]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
pub unsafe fn wide_tile<T: Coef, const G: usize>(
    rows: [&[T]; 4],
    x: &[f64],
    stride: usize,
    grad: Option<(&mut [f64], &TileSums)>,
    s: &mut TileSums,
) {
    const { assert!(G == 2 || G == 4) };
    let len = check_tile(&rows, x, stride, 8 * G);
    let head = len.min(3);
    // SAFETY (for the caller's processor, see above): row u of X (and of G, asserted below)
    // covers [u*stride, u*stride + 8G), inside `x` by `check_tile`; row r is read at
    // u - r < len - r, its length; a prefetch never faults.
    let px = x.as_ptr();
    let mut acc = [[_mm512_setzero_pd(); G]; 4];
    let mut pf = next_block(&rows, len);
    let step = 4 * std::mem::size_of::<T>();
    match grad {
        None => {
            for u in 0..head {
                sums(&mut acc, coefs::<T, true>(&rows, u), px.add(u * stride));
            }
            for u in head..len {
                _mm_prefetch::<_MM_HINT_T1>(pf as *const i8);
                pf = pf.wrapping_add(step);
                if G == 4 {
                    prefetch_row::<G>(px.wrapping_add((u + X_AHEAD) * stride));
                }
                sums(&mut acc, coefs::<T, false>(&rows, u), px.add(u * stride));
            }
        }
        Some((g, w)) => {
            assert!(len == 0 || g.len() >= (len - 1) * stride + 8 * G);
            let pg = g.as_mut_ptr();
            let mut wv = [[_mm512_setzero_pd(); G]; 4];
            for r in 0..4 {
                for k in 0..G {
                    wv[r][k] = _mm512_loadu_pd(w[r].as_ptr().add(8 * k));
                }
            }
            for u in 0..head {
                let c = coefs::<T, true>(&rows, u);
                sums(&mut acc, c, px.add(u * stride));
                spread(&wv, c, pg.add(u * stride));
            }
            for u in head..len {
                _mm_prefetch::<_MM_HINT_T1>(pf as *const i8);
                pf = pf.wrapping_add(step);
                if G == 4 {
                    prefetch_row::<G>(px.wrapping_add((u + X_AHEAD) * stride));
                    prefetch_row::<G>(pg.wrapping_add((u + X_AHEAD) * stride));
                }
                let c = coefs::<T, false>(&rows, u);
                sums(&mut acc, c, px.add(u * stride));
                spread(&wv, c, pg.add(u * stride));
            }
        }
    }
    store_sums(&acc, s);
}

/// The energy sums of the module doc for a group of consecutive blocks of one run, walked
/// in spans of `span` positions: for each span, each block in turn over that span, so that
/// the span's rows of X are read from L2 once for the group and then from L1.
///
/// Block b's rows are `blocks[b]`; it starts 4 b positions after block 0, so its X rows
/// begin at `x[4 b stride..]`. Its sums go to `s[b][r][..8 G]`, continued from what is there
/// (zeros for a fresh group). Each (row, lane) still takes its positions in order, so the sums
/// are bitwise those of one [`wide_tile`] per block. Along the way it sweeps `pf` (the next
/// group) into L2 at the rate it reads its own coefficients, as [`wide_tile`] does. The whole
/// walk is one function so that no call or check sits between a block's spans.
///
/// # Safety
/// The processor must have AVX-512F, AVX2 and FMA ([`wide_tile_available`]).
#[target_feature(enable = "avx512f,avx2,fma")]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays
pub unsafe fn wide_group<T: Coef, const G: usize>(
    blocks: &[[&[T]; 4]],
    x: &[f64],
    stride: usize,
    span: usize,
    pf: *const u8,
    s: &mut [TileSums],
) {
    const { assert!(G == 2 || G == 4) };
    assert!(span > 0 && s.len() >= blocks.len());
    let total = blocks.first().map_or(0, |rows| rows[0].len());
    for (b, rows) in blocks.iter().enumerate() {
        assert_eq!(rows[0].len() + 4 * b, total, "block {b} of the group");
        check_tile(rows, &x[(4 * b * stride).min(x.len())..], stride, 8 * G);
    }
    // SAFETY (for the caller's processor, see above): block b reads X rows 4 b + u for
    // u < its length, inside `x` by `check_tile` on its slice; row r is read at u - r, below
    // its length; a prefetch never faults, wherever `pf` points.
    let px = x.as_ptr();
    let step = 4 * std::mem::size_of::<T>();
    let mut at = pf;
    let mut t = 0;
    while t < total {
        let t_end = (t + span).min(total);
        for (b, rows) in blocks.iter().enumerate() {
            let kb = 4 * b;
            if kb >= t_end {
                break;
            }
            let (from, to) = (t.max(kb) - kb, t_end - kb);
            let xb = px.add(kb * stride);
            let mut acc = [[_mm512_setzero_pd(); G]; 4];
            for r in 0..4 {
                for k in 0..G {
                    acc[r][k] = _mm512_loadu_pd(s[b][r].as_ptr().add(8 * k));
                }
            }
            let head = to.min(3);
            for u in from..head {
                sums(&mut acc, coefs::<T, true>(rows, u), xb.add(u * stride));
            }
            for u in from.max(head)..to {
                _mm_prefetch::<_MM_HINT_T1>(at as *const i8);
                at = at.wrapping_add(step);
                sums(&mut acc, coefs::<T, false>(rows, u), xb.add(u * stride));
            }
            store_sums(&acc, &mut s[b]);
        }
        t = t_end;
    }
}

/// The 512-bit steps of the Hessian's four-segment loop ([`crate::avx2::rows4_shared2`]): for
/// positions i = 0, 8, 16, ... while i + 8 <= len, with c_j the eight coefficients of segment
/// j at i..i+8,
///
/// ```text
/// rows_j[i..i+8] += w c_j,   u = (xi_0 c_0 + xi_1 c_1) + (xi_2 c_2 + xi_3 c_3),
/// z1[i..i+8] += alpha u,     z2[i..i+8] += beta u (with `TWO`),
/// acc_j[0..8] += c_j x[i..i+8]   (the dot's eight lanes: `lo` holds 0-3, `hi` 4-7)
/// ```
///
/// Every row entry and dot lane gets the multiply-adds of the 256-bit loop in its order (that
/// loop keeps the same eight lanes, a step at i = 0 mod 8 in `lo` and one at 4 mod 8 in `hi`):
/// the same bits. The gain is in the instructions: one load, multiply-add and store of each
/// row, one multiply-add of each dot (and one widening of float32 coefficients) per eight
/// positions instead of two. Returns the first position not done, a multiple of 8, for the
/// 256-bit loop to go on from. `pa` are the four segments, `rows` the pointers (four own
/// rows, z1, z2), each valid for `len` values (z2 only with `TWO`); `next_row` is the prefetch
/// hint of [`crate::simd::rows4`] for z1; the caller compiles with AVX2, FMA and AVX-512F.
#[inline]
#[target_feature(enable = "avx2,fma,avx512f")]
#[allow(clippy::too_many_arguments)] // the loop state of the caller, passed through
pub(crate) unsafe fn rows4_octets<T: Coef, const TWO: bool>(
    pa: [*const T; 4],
    px: *const f64,
    (py, p1, p2): ([*mut f64; 4], *mut f64, *mut f64),
    (w, alpha, beta): (f64, f64, f64),
    xi: [f64; 4],
    (lo, hi): (&mut [__m256d; 4], &mut [__m256d; 4]),
    len: usize,
    (level, next_row): (crate::simd::PrefetchLevel, usize),
) -> usize {
    let (wv, av, bv) = (
        _mm512_set1_pd(w),
        _mm512_set1_pd(alpha),
        _mm512_set1_pd(beta),
    );
    // written out, not `xi.map(..)`: a closure is compiled without the target features
    let xv = [
        _mm512_set1_pd(xi[0]),
        _mm512_set1_pd(xi[1]),
        _mm512_set1_pd(xi[2]),
        _mm512_set1_pd(xi[3]),
    ];
    // the dots' eight lanes: lanes 0-3 from `lo`, 4-7 from `hi`
    let mut acc = [_mm512_setzero_pd(); 4];
    for j in 0..4 {
        acc[j] = _mm512_insertf64x4::<1>(_mm512_castpd256_pd512(lo[j]), hi[j]);
    }
    let mut i = 0;
    while i + 8 <= len {
        crate::avx2::prefetch_segments(&pa, i, level);
        if next_row != 0 {
            _mm_prefetch::<_MM_HINT_T0>(p1.wrapping_add(i + next_row) as *const i8);
        }
        let xt = _mm512_loadu_pd(px.add(i));
        let mut c = [_mm512_setzero_pd(); 4];
        for j in 0..4 {
            c[j] = load8(pa[j].add(i));
            acc[j] = _mm512_fmadd_pd(c[j], xt, acc[j]);
            let y = _mm512_loadu_pd(py[j].add(i));
            _mm512_storeu_pd(py[j].add(i), _mm512_fmadd_pd(wv, c[j], y));
        }
        let u = _mm512_add_pd(
            _mm512_fmadd_pd(xv[1], c[1], _mm512_mul_pd(xv[0], c[0])),
            _mm512_fmadd_pd(xv[3], c[3], _mm512_mul_pd(xv[2], c[2])),
        );
        _mm512_storeu_pd(
            p1.add(i),
            _mm512_fmadd_pd(av, u, _mm512_loadu_pd(p1.add(i))),
        );
        if TWO {
            _mm512_storeu_pd(
                p2.add(i),
                _mm512_fmadd_pd(bv, u, _mm512_loadu_pd(p2.add(i))),
            );
        }
        i += 8;
    }
    for j in 0..4 {
        lo[j] = _mm512_castpd512_pd256(acc[j]);
        hi[j] = _mm512_extractf64x4_pd::<1>(acc[j]);
    }
    i
}

/// Eight coefficients from `p` as float64 (float32 ones widened exactly).
#[inline(always)]
unsafe fn load8<T: Coef>(p: *const T) -> __m512d {
    if T::WIDENS {
        _mm512_cvtps_pd(_mm256_loadu_ps(p as *const f32))
    } else {
        _mm512_loadu_pd(p as *const f64)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simd::Fused;
    use crate::tile::{tile, SUM_LANES};

    /// Every lane of the wide tile equals the AVX2 tile's bit for bit, sums (eight lanes at
    /// a time) and, with a gradient, the spread into G (four lanes at a time, as the batch
    /// runs it), for row lengths around the three-position head and both storage types.
    fn check<T: Coef, const G: usize>(len: usize) {
        let lanes = 8 * G;
        let stride = lanes + 5;
        let rows: [Vec<T>; 4] = [0, 1, 2, 3].map(|r| {
            (0..len.saturating_sub(r))
                .map(|i| T::from_f64(((i * 5 + r * 11) as f64 * 0.37).sin()))
                .collect()
        });
        let refs = [&rows[0][..], &rows[1][..], &rows[2][..], &rows[3][..]];
        let x: Vec<f64> = (0..len.max(1) * stride)
            .map(|i| (i as f64 * 0.29).cos() - 0.1)
            .collect();
        let mut wide = [[f64::NAN; SUM_LANES]; 4];
        unsafe { wide_tile::<T, G>(refs, &x, stride, None, &mut wide) };
        let w: TileSums = [0, 1, 2, 3].map(|r| {
            let mut lane = [0f64; SUM_LANES];
            for (k, v) in lane.iter_mut().enumerate() {
                *v = ((r * 40 + k) as f64 * 0.61).sin();
            }
            lane
        });
        let g_start: Vec<f64> = (0..x.len()).map(|i| (i as f64 * 0.17).sin()).collect();
        let (mut g_wide, mut g_narrow) = (g_start.clone(), g_start.clone());
        let mut with_grad = [[f64::NAN; SUM_LANES]; 4];
        unsafe { wide_tile::<T, G>(refs, &x, stride, Some((&mut g_wide, &w)), &mut with_grad) };
        let bits = |t: &TileSums| t.map(|row| row.map(f64::to_bits));
        assert_eq!(
            bits(&with_grad),
            bits(&wide),
            "a gradient does not change the sums"
        );
        for g0 in (0..lanes).step_by(4) {
            let mut w4 = [[0f64; SUM_LANES]; 4];
            for r in 0..4 {
                w4[r][..4].copy_from_slice(&w[r][g0..g0 + 4]);
            }
            let mut sink = [[0f64; SUM_LANES]; 4];
            let grad = Some((&mut g_narrow[g0..], &w4));
            tile::<Fused, T, 1>(refs, &x[g0..], stride, grad, &mut sink);
        }
        for (i, (a, b)) in g_wide.iter().zip(&g_narrow).enumerate() {
            assert_eq!(a.to_bits(), b.to_bits(), "len {len} G entry {i}");
        }
        for g0 in (0..lanes).step_by(8) {
            let mut narrow = [[f64::NAN; SUM_LANES]; 4];
            tile::<Fused, T, 2>(refs, &x[g0..], stride, None, &mut narrow);
            for r in 0..4 {
                for k in 0..8 {
                    assert_eq!(
                        wide[r][g0 + k].to_bits(),
                        narrow[r][k].to_bits(),
                        "len {len} row {r} lane {}",
                        g0 + k
                    );
                }
            }
        }
    }

    #[test]
    fn wide_tile_matches_the_avx2_tile_bit_for_bit() {
        if !wide_tile_available() {
            eprintln!("no AVX-512F on this processor: wide tile not tested");
            return;
        }
        for len in [0, 1, 2, 3, 4, 5, 9, 40] {
            check::<f64, 2>(len);
            check::<f64, 4>(len);
            check::<f32, 4>(len);
        }
    }
}
