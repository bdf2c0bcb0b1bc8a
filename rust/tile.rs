//! The register tile of the batched kernels: four consecutive coefficient segments against a
//! group of 4 G points (lanes) at once.
//!
//! Rows r = 0..4 are the segments of four consecutive prefixes that differ only in their last
//! index (j0 + r), so row r starts one position later than row r - 1 and all end at the same
//! last index:
//!
//! ```text
//! S[r][k]  = sum_{u = r}^{len-1} a_r[u - r] X[u, k]                 (k < 4 G)
//! G[u, k] += sum_{r <= u}         a_r[u - r] W[r][k]                 (with a gradient)
//! ```
//!
//! where X[u, k] = x[u * stride + k] is the point of lane k at last index t0 + u. Every
//! coefficient is broadcast once for the 4 G lanes and every row of X loaded once for the four
//! segments: per position, G vector loads and four broadcasts feed 4 G vector multiply-adds.
//! That arithmetic, not the memory stream, bounds a batch of many points. Missing rows are
//! passed as zeros.

use crate::simd::Madd;
use crate::storage::Coef;

/// Widest lane group the AVX2 and portable tiles handle (G = 2: eight lanes in two AVX2
/// registers per row).
pub const TILE_LANES: usize = 8;

/// Widest lane group of any tile (the AVX-512 tile of `crate::avx512`: 32 lanes).
pub const SUM_LANES: usize = 32;

/// Start of the prefetch sweep of the AVX2 and AVX-512 tiles: the bytes right after the
/// block, where the next block of the run begins (the blocks of a run follow each other in
/// memory). The tiles issue one L2 prefetch per position and advance it by four
/// coefficients, the bytes they consume themselves, so the next block is in L2 when its
/// turn comes. A tile reads its four rows one coefficient each per position, four slow
/// interleaved streams that the hardware prefetcher followed poorly on a Xeon with a large,
/// slow L3 (without a software prefetch, 4 points at p = 3, n = 400 took 9.0 ms on two
/// threads, with a sweep 4 KiB ahead into L1 5.8 ms). A sweep 4 KiB ahead still lagged
/// behind the block's third and fourth rows, which start 2 and 3 row lengths in; sweeping
/// the next block into L2 instead took a further 3-13 % off energies of 2 to 32 points at n =
/// 400 and 15-17 % off 2 to 8 points at n = 800 (bench/NOTES.md).
#[inline(always)]
pub(crate) fn next_block<T>(rows: &[&[T]; 4], len: usize) -> *const u8 {
    // 4 len - 6 coefficients make the block; a prefetch is a hint, six past is as good
    (rows[0].as_ptr() as *const u8).wrapping_add(4 * std::mem::size_of::<T>() * len)
}

/// Four sums per lane, one per row (lanes past the tile's width are left alone).
pub type TileSums = [[f64; SUM_LANES]; 4];

/// The checks every implementation relies on: row r has len - r entries (none if r >= len),
/// X (and G) reach row len - 1 at 4 G lanes.
#[inline(always)]
pub(crate) fn check_tile<T>(rows: &[&[T]; 4], x: &[f64], stride: usize, lanes: usize) -> usize {
    let len = rows[0].len();
    for (r, row) in rows.iter().enumerate() {
        assert_eq!(row.len(), len.saturating_sub(r), "tile row {r}");
    }
    assert!(lanes <= SUM_LANES && lanes <= stride);
    // checked: a wrapped product would let the unchecked loads run past X
    let reach = (len.max(1) - 1)
        .checked_mul(stride)
        .and_then(|e| e.checked_add(lanes));
    assert!(
        len == 0 || reach.is_some_and(|reach| x.len() >= reach),
        "tile: X too short"
    );
    len
}

/// Coefficient of row r at position u (zero before the row starts).
#[inline(always)]
pub(crate) fn tile_coef<T: Coef>(rows: &[&[T]; 4], r: usize, u: usize) -> f64 {
    if u >= r {
        rows[r][u - r].to_f64()
    } else {
        0.0
    }
}

/// Portable tile: per lane, the operations of the AVX2 tile in its order, so that with fused
/// multiply-add the two agree bit for bit.
#[inline(always)]
#[allow(clippy::needless_range_loop)] // r and k index rows and lanes of several arrays at once
pub(crate) fn portable_tile<M: Madd, T: Coef, const G: usize>(
    rows: [&[T]; 4],
    x: &[f64],
    stride: usize,
    grad: Option<(&mut [f64], &TileSums)>,
    s: &mut TileSums,
) {
    let lanes = 4 * G;
    let len = check_tile(&rows, x, stride, lanes);
    let mut acc = [[0f64; TILE_LANES]; 4];
    let mut grad = grad;
    if let Some((g, _)) = &grad {
        assert!(len == 0 || g.len() >= (len - 1) * stride + lanes);
    }
    for u in 0..len {
        let c = [0, 1, 2, 3].map(|r| tile_coef(&rows, r, u));
        let xr = &x[u * stride..u * stride + lanes];
        for r in 0..4 {
            for k in 0..lanes {
                acc[r][k] = M::madd(c[r], xr[k], acc[r][k]);
            }
        }
        if let Some((g, w)) = &mut grad {
            let gr = &mut g[u * stride..u * stride + lanes];
            for k in 0..lanes {
                let t01 = M::madd(c[1], w[1][k], c[0] * w[0][k]);
                let t23 = M::madd(c[3], w[3][k], c[2] * w[2][k]);
                gr[k] += t01 + t23;
            }
        }
    }
    for r in 0..4 {
        s[r][..lanes].copy_from_slice(&acc[r][..lanes]);
    }
}

/// The tile for 4 G lanes (G = 1 or 2), on the instruction set `M` chooses.
#[inline(always)]
pub fn tile<M: Madd, T: Coef, const G: usize>(
    rows: [&[T]; 4],
    x: &[f64],
    stride: usize,
    grad: Option<(&mut [f64], &TileSums)>,
    s: &mut TileSums,
) {
    M::tile::<T, G>(rows, x, stride, grad, s)
}

/// Permission to run the AVX-512 tile (`crate::avx512`): exists only on a processor that
/// has AVX-512F, AVX2 and FMA, where it gives every lane the same bits as the AVX2 tile.
#[derive(Clone, Copy, Debug)]
pub struct WideTile(());

impl WideTile {
    /// Lanes the wide tile takes at once: 32, or 16 for a group of 16 to 31 lanes.
    pub const LANES: [usize; 2] = [32, 16];

    /// The permission, on a processor that has the features.
    pub fn detect() -> Option<Self> {
        #[cfg(target_arch = "x86_64")]
        if crate::avx512::wide_tile_available() {
            return Some(WideTile(()));
        }
        None
    }

    /// The tile of the module doc for `lanes` (32 or 16) lanes: sums into `s[r][..lanes]`
    /// and, with `grad`, the spread into G.
    #[inline]
    pub fn run<T: Coef>(
        self,
        lanes: usize,
        rows: [&[T]; 4],
        x: &[f64],
        stride: usize,
        grad: Option<(&mut [f64], &TileSums)>,
        s: &mut TileSums,
    ) {
        assert!(Self::LANES.contains(&lanes), "wide tile of {lanes} lanes");
        #[cfg(target_arch = "x86_64")]
        // SAFETY: a `WideTile` only exists where `wide_tile_available()` held.
        unsafe {
            if lanes == 32 {
                crate::avx512::wide_tile::<T, 4>(rows, x, stride, grad, s);
            } else {
                crate::avx512::wide_tile::<T, 2>(rows, x, stride, grad, s);
            }
        }
        #[cfg(not(target_arch = "x86_64"))]
        unreachable!(
            "no WideTile exists off x86-64: {lanes} {rows:?} {x:?} {stride} {s:?} {:?}",
            grad.is_some()
        );
    }

    /// `crate::avx512::wide_group` for `lanes` (32 or 16) lanes: the energy sums of a group
    /// of consecutive blocks (block b starting 4 b positions in), walked in spans of `span`
    /// positions, continued in `s[b]`, sweeping `pf` into L2 on the way.
    #[inline]
    #[allow(clippy::not_unsafe_ptr_arg_deref)] // `pf` is only ever a prefetch address
    pub fn group<T: Coef>(
        self,
        lanes: usize,
        blocks: &[[&[T]; 4]],
        x: &[f64],
        (stride, span): (usize, usize),
        pf: *const u8,
        s: &mut [TileSums],
    ) {
        assert!(Self::LANES.contains(&lanes), "wide tile of {lanes} lanes");
        #[cfg(target_arch = "x86_64")]
        // SAFETY: a `WideTile` only exists where `wide_tile_available()` held.
        unsafe {
            if lanes == 32 {
                crate::avx512::wide_group::<T, 4>(blocks, x, stride, span, pf, s);
            } else {
                crate::avx512::wide_group::<T, 2>(blocks, x, stride, span, pf, s);
            }
        }
        #[cfg(not(target_arch = "x86_64"))]
        unreachable!(
            "no WideTile off x86-64: {lanes} {blocks:?} {x:?} {stride} {span} {pf:?} {s:?}"
        );
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::simd::{has_avx2_fma, Fused, Plain};

    /// The sums of the module doc, written out term by term.
    fn definition(rows: &[Vec<f64>; 4], x: &[f64], stride: usize, lanes: usize) -> TileSums {
        let mut s = [[0f64; SUM_LANES]; 4];
        for (r, row) in rows.iter().enumerate() {
            for (i, a) in row.iter().enumerate() {
                for k in 0..lanes {
                    s[r][k] += a * x[(i + r) * stride + k];
                }
            }
        }
        s
    }

    fn run<M: Madd, T: Coef, const G: usize>(
        rows: &[Vec<T>; 4],
        x: &[f64],
        stride: usize,
        w: Option<&TileSums>,
    ) -> (TileSums, Vec<f64>) {
        let refs = [&rows[0][..], &rows[1][..], &rows[2][..], &rows[3][..]];
        let mut s = [[f64::NAN; SUM_LANES]; 4];
        let mut g = vec![0.5; x.len()];
        let grad = w.map(|w| (&mut g[..], w));
        tile::<M, T, G>(refs, x, stride, grad, &mut s);
        (s, g)
    }

    fn check<M: Madd, T: Coef, const G: usize>(len: usize) {
        let lanes = 4 * G;
        let stride = lanes + 3; // rows of X not packed tightly, as in a wider batch
        let rows: [Vec<T>; 4] = [0, 1, 2, 3].map(|r| {
            (0..len.saturating_sub(r))
                .map(|i| T::from_f64(((i * 7 + r * 3) as f64 * 0.31).sin()))
                .collect()
        });
        let wide: [Vec<f64>; 4] =
            [0, 1, 2, 3].map(|r| rows[r].iter().map(|a| a.to_f64()).collect());
        let x: Vec<f64> = (0..len.max(1) * stride)
            .map(|i| (i as f64 * 0.13).cos())
            .collect();
        let w = [0, 1, 2, 3].map(|r| [0.0; SUM_LANES].map(|_| 0.25 * r as f64 - 0.4));
        let want = definition(&wide, &x, stride, lanes);
        let (s, g) = run::<M, T, G>(&rows, &x, stride, Some(&w));
        let (s_only, untouched) = run::<M, T, G>(&rows, &x, stride, None);
        for r in 0..4 {
            for k in 0..lanes {
                assert!((s[r][k] - want[r][k]).abs() < 1e-12, "row {r} lane {k}");
                assert_eq!(s[r][k], s_only[r][k]);
            }
        }
        assert!(untouched.iter().all(|&v| v == 0.5));
        for u in 0..len {
            for k in 0..stride {
                let mut want_g = 0.5;
                if k < lanes {
                    for r in 0..=u.min(3) {
                        want_g += wide[r][u - r] * w[r][k];
                    }
                }
                assert!((g[u * stride + k] - want_g).abs() < 1e-12, "G[{u}, {k}]");
            }
        }
    }

    #[test]
    fn tile_matches_its_definition() {
        for len in [0, 1, 2, 3, 4, 5, 17] {
            check::<Plain, f64, 1>(len);
            check::<Plain, f64, 2>(len);
            check::<Plain, f32, 2>(len);
            if has_avx2_fma() {
                check::<Fused, f64, 1>(len);
                check::<Fused, f64, 2>(len);
                check::<Fused, f32, 1>(len);
            }
        }
    }

    #[test]
    fn vector_tile_matches_portable_tile_bit_for_bit() {
        if !has_avx2_fma() {
            return;
        }
        let len = 23;
        let rows: [Vec<f64>; 4] =
            [0, 1, 2, 3].map(|r| (0..len - r).map(|i| ((i + 5 * r) as f64).sin()).collect());
        let x: Vec<f64> = (0..len * 8).map(|i| (i as f64 * 0.7).cos()).collect();
        let w = [0, 1, 2, 3].map(|r| [0.0; SUM_LANES].map(|_| 1.0 / (1.0 + r as f64)));
        let refs = [&rows[0][..], &rows[1][..], &rows[2][..], &rows[3][..]];
        let (mut s1, mut s2) = ([[0f64; SUM_LANES]; 4], [[0f64; SUM_LANES]; 4]);
        let (mut g1, mut g2) = (vec![0.0; len * 8], vec![0.0; len * 8]);
        tile::<Fused, f64, 2>(refs, &x, 8, Some((&mut g1[..], &w)), &mut s1);
        portable_tile::<Fused, f64, 2>(refs, &x, 8, Some((&mut g2[..], &w)), &mut s2);
        assert_eq!(s1, s2);
        assert_eq!(g1, g2);
    }

    /// A stride whose product with the row length wraps (release builds do not check) must
    /// fail the check, not let the unchecked loads run past X.
    #[test]
    #[should_panic(expected = "tile: X too short")]
    fn a_stride_that_wraps_is_refused() {
        let r: [Vec<f64>; 4] = [vec![1.0; 4], vec![1.0; 3], vec![1.0; 2], vec![1.0; 1]];
        let x = vec![0.5f64; 8];
        let mut s: TileSums = [[0.0; SUM_LANES]; 4];
        let stride = usize::MAX / 3 + 1; // 3 * stride wraps to 2 (mod 2^64)
        tile::<Fused, f64, 1>([&r[0], &r[1], &r[2], &r[3]], &x, stride, None, &mut s);
    }
}
