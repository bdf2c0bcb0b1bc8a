//! Inner loops shared by the kernels, and the run-time choice of instruction set.
//!
//! Every loop is written once, generic over [`Madd`] (how a*b + c is evaluated) and the
//! coefficient type. `simd_dispatch!` instantiates a kernel three times: with fused
//! multiply-add inside an `avx2,fma` target-feature function and inside an
//! `avx2,fma,avx512f,avx512vl` one (the same AVX2 loops with 32 vector registers instead of
//! 16; the same bits), chosen at run time by what the processor has, and with plain
//! arithmetic for any other x86-64 or other architecture. One machine always takes the same
//! path, so results stay bitwise reproducible there. The AVX-512 instantiation
//! (`FusedWith<true>`) also runs the Hessian's four-segment loop in 512-bit steps where
//! [`wide_hessian_rows`] says so, again with the same bits.
//!
//! Reductions use `LANES` independent accumulators combined in a fixed order; that is what
//! lets the compiler vectorize them without reassociating floating-point sums.

use crate::portable::{
    portable_axpy, portable_dot, portable_dot2_axpy, portable_dot_axpy, portable_dot_axpy2,
    portable_dots8_axpy, portable_rows4, portable_rows4_shared2,
};
use crate::storage::Coef;
use crate::tile::TileSums;

/// How the arithmetic of a kernel is carried out: `madd` is a * b + c, and the segment
/// loops below are either portable Rust or AVX2 + FMA intrinsics.
pub trait Madd {
    fn madd(a: f64, b: f64, c: f64) -> f64;
    fn dot<T: Coef>(a: &[T], x: &[f64]) -> f64;
    fn axpy<T: Coef>(y: &mut [f64], alpha: f64, a: &[T]);
    fn dot_axpy<T: Coef>(a: &[T], x: &[f64], y: &mut [f64], alpha: f64) -> f64;
    fn dot_axpy2<T: Coef>(a: &[T], x: &[f64], y: (&mut [f64], f64), z: (&mut [f64], f64)) -> f64;
    fn dot2_axpy<T: Coef>(a: &[T], x: &[f64], v: &[f64], w: &mut [f64], alpha: f64) -> (f64, f64);
    /// Four segments at once (see [`dots4`]).
    fn dots4<T: Coef>(a: [&[T]; 4], x: &[f64]) -> [f64; 4];
    /// Four segments at once (see [`dots4_axpy`]).
    fn dots4_axpy<T: Coef>(a: [&[T]; 4], x: &[f64], z: &mut [f64], w: [f64; 4]) -> [f64; 4];
    /// Four segments at once (see [`dots8_axpy`]).
    fn dots8_axpy<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        v: &[f64],
        z: &mut [f64],
        w: [f64; 4],
    ) -> ([f64; 4], [f64; 4]);
    /// Hessian rows of four adjacent rows (see [`crate::stagger::HessRows`]).
    fn stagger4_hess<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        acc: &mut [f64],
        h: &crate::stagger::HessRows<'_>,
    ) -> [f64; 4];
    /// Four segments at once (see [`rows4_shared2`]).
    fn rows4_shared2<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        shared: [(&mut [f64], f64); 2],
        xi: [f64; 4],
    ) -> [f64; 4];
    /// Four segments at once (see [`rows4`]).
    fn rows4<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        z: &mut [f64],
        xi: [f64; 4],
        next_row: usize,
    ) -> [f64; 4];
    /// The batch tile (see [`crate::tile`]).
    fn tile<T: Coef, const G: usize>(
        rows: [&[T]; 4],
        x: &[f64],
        stride: usize,
        grad: Option<(&mut [f64], &TileSums)>,
        s: &mut TileSums,
    );
    /// Four adjacent rows (see [`crate::stagger`]).
    fn stagger4<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        v: Option<&[f64]>,
        z: Option<(&mut [f64], [f64; 4])>,
    ) -> ([f64; 4], [f64; 4]);
}

/// AVX2 + fused multiply-add (one rounding); only reached where the processor has both.
/// `WIDE_ROWS`: the Hessian's four-segment loop may take 512-bit steps (see
/// [`wide_hessian_rows`]); only the instantiation compiled with AVX-512F sets it.
pub struct FusedWith<const WIDE_ROWS: bool>;
/// [`FusedWith`] on 256-bit vectors throughout.
pub type Fused = FusedWith<false>;
/// Portable Rust, multiply then add (two roundings).
pub struct Plain;

#[cfg(target_arch = "x86_64")]
impl<const W: bool> Madd for FusedWith<W> {
    #[inline(always)]
    fn madd(a: f64, b: f64, c: f64) -> f64 {
        a.mul_add(b, c)
    }
    #[inline(always)]
    fn dot<T: Coef>(a: &[T], x: &[f64]) -> f64 {
        crate::avx2::dot(a, x)
    }
    #[inline(always)]
    fn axpy<T: Coef>(y: &mut [f64], alpha: f64, a: &[T]) {
        crate::avx2::axpy(y, alpha, a)
    }
    #[inline(always)]
    fn dot_axpy<T: Coef>(a: &[T], x: &[f64], y: &mut [f64], alpha: f64) -> f64 {
        crate::avx2::dot_axpy(a, x, y, alpha)
    }
    #[inline(always)]
    fn dot_axpy2<T: Coef>(a: &[T], x: &[f64], y: (&mut [f64], f64), z: (&mut [f64], f64)) -> f64 {
        crate::avx2::dot_axpy2(a, x, y, z)
    }
    #[inline(always)]
    fn dot2_axpy<T: Coef>(a: &[T], x: &[f64], v: &[f64], w: &mut [f64], alpha: f64) -> (f64, f64) {
        crate::avx2::dot2_axpy(a, x, v, w, alpha)
    }
    #[inline(always)]
    fn dots4<T: Coef>(a: [&[T]; 4], x: &[f64]) -> [f64; 4] {
        crate::avx2::dots4(a, x)
    }
    #[inline(always)]
    fn dots4_axpy<T: Coef>(a: [&[T]; 4], x: &[f64], z: &mut [f64], w: [f64; 4]) -> [f64; 4] {
        crate::avx2::dots4_axpy(a, x, z, w)
    }
    #[inline(always)]
    fn dots8_axpy<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        v: &[f64],
        z: &mut [f64],
        w: [f64; 4],
    ) -> ([f64; 4], [f64; 4]) {
        crate::avx2::dots8_axpy(a, x, v, z, w)
    }
    #[inline(always)]
    fn rows4_shared2<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        shared: [(&mut [f64], f64); 2],
        xi: [f64; 4],
    ) -> [f64; 4] {
        crate::avx2::rows4_shared2::<T, W>(a, x, rows, w, shared, xi)
    }
    #[inline(always)]
    fn rows4<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        z: &mut [f64],
        xi: [f64; 4],
        next_row: usize,
    ) -> [f64; 4] {
        crate::avx2::rows4::<T, W>(a, x, rows, w, z, xi, next_row)
    }
    #[inline(always)]
    fn tile<T: Coef, const G: usize>(
        rows: [&[T]; 4],
        x: &[f64],
        stride: usize,
        grad: Option<(&mut [f64], &TileSums)>,
        s: &mut TileSums,
    ) {
        crate::avx2::tile::<T, G>(rows, x, stride, grad, s)
    }
    #[inline(always)]
    fn stagger4<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        v: Option<&[f64]>,
        z: Option<(&mut [f64], [f64; 4])>,
    ) -> ([f64; 4], [f64; 4]) {
        crate::avx2::stagger4(rows, x, v, z)
    }
    #[inline(always)]
    fn stagger4_hess<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        acc: &mut [f64],
        h: &crate::stagger::HessRows<'_>,
    ) -> [f64; 4] {
        crate::avx2::stagger4_hess(rows, x, acc, h)
    }
}

impl Madd for Plain {
    #[inline(always)]
    fn madd(a: f64, b: f64, c: f64) -> f64 {
        a * b + c
    }
    #[inline(always)]
    fn dot<T: Coef>(a: &[T], x: &[f64]) -> f64 {
        portable_dot::<Plain, T>(a, x)
    }
    #[inline(always)]
    fn axpy<T: Coef>(y: &mut [f64], alpha: f64, a: &[T]) {
        portable_axpy::<Plain, T>(y, alpha, a)
    }
    #[inline(always)]
    fn dot_axpy<T: Coef>(a: &[T], x: &[f64], y: &mut [f64], alpha: f64) -> f64 {
        portable_dot_axpy::<Plain, T>(a, x, y, alpha)
    }
    #[inline(always)]
    fn dot_axpy2<T: Coef>(a: &[T], x: &[f64], y: (&mut [f64], f64), z: (&mut [f64], f64)) -> f64 {
        portable_dot_axpy2::<Plain, T>(a, x, y, z)
    }
    #[inline(always)]
    fn dot2_axpy<T: Coef>(a: &[T], x: &[f64], v: &[f64], w: &mut [f64], alpha: f64) -> (f64, f64) {
        portable_dot2_axpy::<Plain, T>(a, x, v, w, alpha)
    }
    #[inline(always)]
    fn dots4<T: Coef>(a: [&[T]; 4], x: &[f64]) -> [f64; 4] {
        portable_dots8_axpy::<Plain, T>(a, x, None, None, [0.0; 4]).0
    }
    #[inline(always)]
    fn dots4_axpy<T: Coef>(a: [&[T]; 4], x: &[f64], z: &mut [f64], w: [f64; 4]) -> [f64; 4] {
        portable_dots8_axpy::<Plain, T>(a, x, None, Some(z), w).0
    }
    #[inline(always)]
    fn dots8_axpy<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        v: &[f64],
        z: &mut [f64],
        w: [f64; 4],
    ) -> ([f64; 4], [f64; 4]) {
        portable_dots8_axpy::<Plain, T>(a, x, Some(v), Some(z), w)
    }
    #[inline(always)]
    fn rows4_shared2<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        shared: [(&mut [f64], f64); 2],
        xi: [f64; 4],
    ) -> [f64; 4] {
        portable_rows4_shared2::<Plain, T, false>(a, x, rows, w, shared, xi)
    }
    #[inline(always)]
    fn rows4<T: Coef>(
        a: [&[T]; 4],
        x: &[f64],
        rows: [&mut [f64]; 4],
        w: f64,
        z: &mut [f64],
        xi: [f64; 4],
        _next_row: usize,
    ) -> [f64; 4] {
        portable_rows4::<Plain, T, false>(a, x, rows, w, z, xi)
    }
    #[inline(always)]
    fn tile<T: Coef, const G: usize>(
        rows: [&[T]; 4],
        x: &[f64],
        stride: usize,
        grad: Option<(&mut [f64], &TileSums)>,
        s: &mut TileSums,
    ) {
        crate::tile::portable_tile::<Plain, T, G>(rows, x, stride, grad, s)
    }
    #[inline(always)]
    fn stagger4<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        v: Option<&[f64]>,
        z: Option<(&mut [f64], [f64; 4])>,
    ) -> ([f64; 4], [f64; 4]) {
        crate::stagger::portable_stagger4::<Plain, T>(rows, x, v, z)
    }
    #[inline(always)]
    fn stagger4_hess<T: Coef>(
        rows: crate::stagger::Rows4<'_, T>,
        x: &[f64],
        acc: &mut [f64],
        h: &crate::stagger::HessRows<'_>,
    ) -> [f64; 4] {
        crate::stagger::portable_stagger4_hess::<Plain, T>(rows, x, acc, h)
    }
}

/// sum_t a_t x_t.
#[inline(always)]
pub fn dot<M: Madd, T: Coef>(a: &[T], x: &[f64]) -> f64 {
    M::dot(a, x)
}

/// y_t += alpha a_t.
#[inline(always)]
pub fn axpy<M: Madd, T: Coef>(y: &mut [f64], alpha: f64, a: &[T]) {
    M::axpy(y, alpha, a)
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t, reading `a` once.
#[inline(always)]
pub fn dot_axpy<M: Madd, T: Coef>(a: &[T], x: &[f64], y: &mut [f64], alpha: f64) -> f64 {
    M::dot_axpy(a, x, y, alpha)
}

/// Returns sum_t a_t x_t and does y_t += alpha a_t, z_t += beta a_t, reading `a` once.
#[inline(always)]
pub fn dot_axpy2<M: Madd, T: Coef>(
    a: &[T],
    x: &[f64],
    y: (&mut [f64], f64),
    z: (&mut [f64], f64),
) -> f64 {
    M::dot_axpy2(a, x, y, z)
}

/// Returns (sum_t a_t x_t, sum_t a_t v_t) and does w_t += alpha a_t, reading `a` once.
#[inline(always)]
pub fn dot2_axpy<M: Madd, T: Coef>(
    a: &[T],
    x: &[f64],
    v: &[f64],
    w: &mut [f64],
    alpha: f64,
) -> (f64, f64) {
    M::dot2_axpy(a, x, v, w, alpha)
}

/// Four coefficient segments a_j (j < 4) of one length at once: returns s_j = sum_t a_j,t x_t
/// and does rows_j,t += w a_j,t and z_t += sum_j xi_j a_j,t (the sum formed in the order
/// (xi_0 a_0 + xi_1 a_1) + (xi_2 a_2 + xi_3 a_3) before it is added to z). Each z entry is
/// read and written once for four coefficients.
///
/// `next_row` is a hint, not part of the result: the distance in entries from `z` to the
/// shared row of the caller's next call (n + 1 in the degree-3 Hessian, whose shared rows are
/// the rows j, j + 1, ... of an n x n accumulator from column j on), which the vector loops
/// prefetch into L1 along this call, one line per line of `z`; 0 for none. A prefetch never
/// faults, so the row may lie past the accumulator's end.
#[inline(always)]
pub fn rows4<M: Madd, T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    z: &mut [f64],
    xi: [f64; 4],
    next_row: usize,
) -> [f64; 4] {
    M::rows4(a, x, rows, w, z, xi, next_row)
}

/// s_j = sum_t a_j,t x_t for four segments of equal length, reading each x entry once for
/// four coefficients.
#[inline(always)]
pub fn dots4<M: Madd, T: Coef>(a: [&[T]; 4], x: &[f64]) -> [f64; 4] {
    M::dots4(a, x)
}

/// Four coefficient segments a_j (j < 4) of one length at once: returns s_j = sum_t a_j,t x_t
/// and does z_t += w_0 a_0,t + w_1 a_1,t + w_2 a_2,t + w_3 a_3,t (summed as in
/// [`crate::portable::weighted4`]), reading each x and z entry once for four coefficients.
#[inline(always)]
pub fn dots4_axpy<M: Madd, T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    z: &mut [f64],
    w: [f64; 4],
) -> [f64; 4] {
    M::dots4_axpy(a, x, z, w)
}

/// [`dots4_axpy`] that also returns the four sums with a second vector v:
/// (sum_t a_j,t x_t, sum_t a_j,t v_t) for j < 4.
#[inline(always)]
pub fn dots8_axpy<M: Madd, T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    v: &[f64],
    z: &mut [f64],
    w: [f64; 4],
) -> ([f64; 4], [f64; 4]) {
    M::dots8_axpy(a, x, v, z, w)
}

/// [`rows4`] with two shared rows: with u_t = (xi_0 a_0,t + xi_1 a_1,t) + (xi_2 a_2,t +
/// xi_3 a_3,t), does z1_t += alpha u_t and z2_t += beta u_t for `shared` = [(z1, alpha),
/// (z2, beta)], besides rows_j,t += w a_j,t and the four dots with x.
#[inline(always)]
pub fn rows4_shared2<M: Madd, T: Coef>(
    a: [&[T]; 4],
    x: &[f64],
    rows: [&mut [f64]; 4],
    w: f64,
    shared: [(&mut [f64], f64); 2],
    xi: [f64; 4],
) -> [f64; 4] {
    M::rows4_shared2(a, x, rows, w, shared, xi)
}

/// True when the processor has AVX2 and FMA (checked once, then cached by std).
#[inline]
pub fn has_avx2_fma() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// True when the processor has AVX-512F and AVX-512VL besides AVX2 and FMA (checked once,
/// then cached by std), so that `simd_dispatch!` can compile the same AVX2 loops with 32
/// vector registers instead of 16 (see the macro).
#[inline]
pub fn has_avx512vl() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::is_x86_feature_detected!("avx512f")
            && std::is_x86_feature_detected!("avx512vl")
            && has_avx2_fma()
            && !narrow_registers_forced()
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// Tests compare the 32-register instantiation of a kernel with the 16-register one by
/// switching the former off (`FORCE_NARROW`); outside tests it is always on where the
/// processor has it. Other tests running meanwhile on other threads may then take either
/// instantiation: harmless while the two give the same bits, which is what that test checks
/// (should they ever differ, it fails, and so may others, intermittently).
#[cfg(test)]
pub static FORCE_NARROW: std::sync::atomic::AtomicBool = std::sync::atomic::AtomicBool::new(false);

#[inline(always)]
fn narrow_registers_forced() -> bool {
    #[cfg(test)]
    {
        FORCE_NARROW.load(std::sync::atomic::Ordering::Relaxed)
    }
    #[cfg(not(test))]
    {
        false
    }
}

/// Whether the Hessian's four-segment loop takes 512-bit steps where it is compiled with
/// AVX-512F (`FusedWith<true>`, see `crate::avx512::rows4_octets`): on processors with
/// AVX-512F that are not AMD's. The steps give the same bits as the 256-bit ones. On an Intel
/// Xeon (5th generation, two threads, paired medians) they took the float32 Hessian at p = 3
/// from 21.95 to 20.56 ms at n = 800 and from 1.82 to 1.59 ms at n = 400, float64 1-4 % less
/// time; p = 5 and p = 4 moved within the noise (four p = 4 sets; a first one had measured
/// 0.87-0.92 of the 256-bit loop's speed, which they did not reproduce; bench/NOTES.md).
/// Measured on that processor only: older Intel parts that lower their clock for 512-bit work
/// may gain less. On AMD's Zen 4, which splits each 512-bit operation in two, a loop on 512-bit
/// vectors had been slower at n <= 400, and this one was not measured there. Checked once,
/// then cached (tests can force it on with `FORCE_WIDE_ROWS` wherever AVX-512F is present, and
/// off with `FORCE_NARROW_ROWS`).
pub fn wide_hessian_rows() -> bool {
    #[cfg(all(test, target_arch = "x86_64"))]
    if FORCE_NARROW_ROWS.load(std::sync::atomic::Ordering::Relaxed) {
        return false;
    }
    #[cfg(all(test, target_arch = "x86_64"))]
    if FORCE_WIDE_ROWS.load(std::sync::atomic::Ordering::Relaxed) {
        return std::is_x86_feature_detected!("avx512f");
    }
    static WIDE: std::sync::OnceLock<bool> = std::sync::OnceLock::new();
    *WIDE.get_or_init(|| {
        #[cfg(target_arch = "x86_64")]
        {
            std::is_x86_feature_detected!("avx512f") && amd_family().is_none()
        }
        #[cfg(not(target_arch = "x86_64"))]
        {
            false
        }
    })
}

/// Test switch: [`wide_hessian_rows`] says yes on any processor with AVX-512F (AMD's too), so
/// that the 512-bit steps are tested wherever they can run. Other tests running meanwhile may
/// then take them: harmless while they give the 256-bit loop's bits, which that test checks.
#[cfg(test)]
pub static FORCE_WIDE_ROWS: std::sync::atomic::AtomicBool =
    std::sync::atomic::AtomicBool::new(false);

/// Test switch: [`wide_hessian_rows`] says no, so that the AVX-512 instantiation's 256-bit
/// steps are tested on processors that would take 512-bit ones (the same bits, so other tests
/// running meanwhile are not affected).
#[cfg(test)]
pub static FORCE_NARROW_ROWS: std::sync::atomic::AtomicBool =
    std::sync::atomic::AtomicBool::new(false);

/// The cache level the single-point four-segment loops prefetch their coefficients into
/// (see `crate::avx2::AHEAD`).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum PrefetchLevel {
    /// `_MM_HINT_T0`: the line goes to L1 (and the levels below it).
    L1,
    /// `_MM_HINT_T1`: the line goes to L2, not to L1.
    L2,
}

/// [`PrefetchLevel::L2`] on AMD processors of family 0x19 or later (Zen 3 and newer),
/// [`PrefetchLevel::L1`] elsewhere; decided once per process from CPUID.
///
/// On a Zen 4 (family 0x19, model 0x11; p = 3, two threads, medians of 8 alternating runs of
/// 40 calls each) the L2 hint took 12-18 % off passes over coefficients read from memory
/// (n = 800: energy 26.4 -> 21.9 ms, gradient 26.3 -> 22.6, Hessian 36.6 -> 30.2, HVP 27.0
/// -> 23.6) and 7-12 % off those at n = 400 (82 MiB, more than that processor's 32 MiB L3;
/// 12 runs: gradient 3.46 -> 3.08, Hessian 4.68 -> 4.21, HVP 3.71 -> 3.27); float32 storage
/// at n = 800: gradient 14.1 -> 12.0 ms, energy unchanged (11.6 and 11.3 ms). The Xeon's
/// measurements of `AHEAD` were made with the L1 hint, which it keeps; AMD's family 0x17
/// (Zen 1 and Zen 2), where the L2 hint was not tried, keeps the L1 hint too.
pub fn segment_prefetch_level() -> PrefetchLevel {
    static LEVEL: std::sync::OnceLock<PrefetchLevel> = std::sync::OnceLock::new();
    *LEVEL.get_or_init(|| match amd_family() {
        Some(family) if family >= 0x19 => PrefetchLevel::L2,
        _ => PrefetchLevel::L1,
    })
}

/// The processor family (base family plus extended family, as AMD defines it) when the
/// vendor is AMD, from CPUID leaves 0 and 1; None for other vendors and architectures.
pub fn amd_family() -> Option<u32> {
    #[cfg(target_arch = "x86_64")]
    {
        use std::arch::x86_64::__cpuid;
        // SAFETY: CPUID exists on every x86-64 processor. `__cpuid` is a safe function only
        // in recent Rust; the block keeps the crate building with its rust-version, 1.89.
        #[allow(unused_unsafe)]
        let id = unsafe { __cpuid(0) };
        let mut vendor = [0u8; 12];
        vendor[..4].copy_from_slice(&id.ebx.to_le_bytes());
        vendor[4..8].copy_from_slice(&id.edx.to_le_bytes());
        vendor[8..].copy_from_slice(&id.ecx.to_le_bytes());
        if &vendor != b"AuthenticAMD" || id.eax < 1 {
            return None;
        }
        // SAFETY: as above; leaf 1 exists, since leaf 0 reported a maximum leaf >= 1.
        #[allow(unused_unsafe)]
        let eax = unsafe { __cpuid(1) }.eax;
        let base = (eax >> 8) & 0xf;
        Some(if base == 0xf {
            base + ((eax >> 20) & 0xff)
        } else {
            base
        })
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        None
    }
}

/// Name of the instruction-set path the kernels take on this machine: "avx2+fma+avx512f"
/// (AVX2 kernels, with 32 vector registers where AVX-512VL is present too, and the 512-bit
/// tile of `crate::avx512` for batches of 9 or more points),
/// "avx2+fma" or "baseline" (portable code).
#[cfg_attr(not(feature = "python"), allow(dead_code))] // reported through the binding only
pub fn simd_path() -> &'static str {
    if crate::tile::WideTile::detect().is_some() {
        "avx2+fma+avx512f"
    } else if has_avx2_fma() {
        "avx2+fma"
    } else {
        "baseline"
    }
}

/// Defines `pub fn $name<T: Coef>(args) -> ret` that calls `$body::<Fused, T>` inside an
/// `avx2,fma,avx512f,avx512vl` function where the processor has AVX-512VL ([`has_avx512vl`]),
/// else inside an `avx2,fma` function when available, and `$body::<Plain, T>` otherwise.
/// `$body` must be `#[inline(always)]` so that its loops are compiled with the chosen
/// features.
///
/// The AVX-512VL instantiation runs the same 256-bit intrinsics in the same order (same
/// bits; tested) but lets the compiler use 32 vector registers. With 16, the loops that keep
/// more than 16 vectors live spill some to the stack on every step: the degree-3 HVP's
/// (eight dot accumulators, four weights, x, v and four coefficients) kept three of its
/// accumulators in memory. On the Zen 4 of bench/NOTES.md (p = 3, medians of 4-6 alternating
/// runs) the HVP took 1.5x less time where the coefficients sit in cache (n = 200, one
/// thread: 0.41 -> 0.28 ms, float32 0.40 -> 0.26 ms; p = 4, n = 60: 0.28 -> 0.23 ms, Hessian
/// 0.30 -> 0.28 ms) and in float32 from memory (n = 800: one thread 24.2 -> 16.2 ms, two
/// threads 12.6 -> 10.4 ms). The float64 HVP from memory at one thread was 10 % slower
/// (n = 800: 27.1 -> 30.2 ms, unexplained; at two threads, and at n = 400 and p = 4, n = 120,
/// no change beyond the noise). Energy, gradient and the degree-3 Hessian did not change.
macro_rules! simd_dispatch {
    ($(#[$meta:meta])* $vis:vis fn $name:ident => $body:ident ($($arg:ident : $ty:ty),* $(,)?) -> $ret:ty) => {
        $(#[$meta])*
        $vis fn $name<T: $crate::storage::Coef>($($arg: $ty),*) -> $ret {
            #[cfg(target_arch = "x86_64")]
            {
                #[target_feature(enable = "avx2,fma")]
                unsafe fn fast<T: $crate::storage::Coef>($($arg: $ty),*) -> $ret {
                    $body::<$crate::simd::Fused, T>($($arg),*)
                }
                #[target_feature(enable = "avx2,fma,avx512f,avx512vl")]
                unsafe fn wide<T: $crate::storage::Coef>($($arg: $ty),*) -> $ret {
                    $body::<$crate::simd::FusedWith<true>, T>($($arg),*)
                }
                if $crate::simd::has_avx512vl() {
                    // SAFETY: the processor has the features `wide` was compiled for.
                    return unsafe { wide::<T>($($arg),*) };
                }
                if $crate::simd::has_avx2_fma() {
                    // SAFETY: the processor has the features `fast` was compiled for.
                    return unsafe { fast::<T>($($arg),*) };
                }
            }
            $body::<$crate::simd::Plain, T>($($arg),*)
        }
    };
}
pub(crate) use simd_dispatch;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::portable::portable_dots8_axpy;

    /// CPUID's vendor and family, decoded here, agree with what the Linux kernel reports in
    /// /proc/cpuinfo ("vendor_id", and "cpu family" in decimal, already extended), and the
    /// prefetch level follows from them (family 0x19 = 25 and up on AMD: L2).
    #[test]
    #[cfg(all(target_os = "linux", target_arch = "x86_64"))]
    fn amd_family_agrees_with_proc_cpuinfo() {
        let info = std::fs::read_to_string("/proc/cpuinfo").unwrap();
        let field = |name: &str| {
            info.lines()
                .find(|l| l.split(':').next().map(str::trim) == Some(name))
                .and_then(|l| l.split(':').nth(1))
                .map(|v| v.trim().to_string())
                .unwrap()
        };
        let family: u32 = field("cpu family").parse().unwrap();
        let want = (field("vendor_id") == "AuthenticAMD").then_some(family);
        assert_eq!(amd_family(), want);
        let l2 = matches!(want, Some(f) if f >= 25);
        assert_eq!(segment_prefetch_level() == PrefetchLevel::L2, l2);
    }

    #[test]
    fn loops_match_plain_sums() {
        let a: Vec<f64> = (0..37).map(|i| (i as f64 * 0.37).sin()).collect();
        let x: Vec<f64> = (0..37).map(|i| (i as f64 * 0.11).cos()).collect();
        let v: Vec<f64> = (0..37).map(|i| 1.0 / (1.0 + i as f64)).collect();
        let want: f64 = a.iter().zip(&x).map(|(p, q)| p * q).sum();
        let wantv: f64 = a.iter().zip(&v).map(|(p, q)| p * q).sum();
        assert!((dot::<Plain, f64>(&a, &x) - want).abs() < 1e-13);
        if has_avx2_fma() {
            assert!((dot::<Fused, f64>(&a, &x) - want).abs() < 1e-13);
        }
        let mut y = vec![1.0; 37];
        let s = dot_axpy::<Plain, f64>(&a, &x, &mut y, 2.0);
        assert!((s - want).abs() < 1e-13);
        for (yi, ai) in y.iter().zip(&a) {
            assert!((yi - (1.0 + 2.0 * ai)).abs() < 1e-15);
        }
        let mut w = vec![0.0; 37];
        let (sx, sv) = dot2_axpy::<Plain, f64>(&a, &x, &v, &mut w, -1.0);
        assert!((sx - want).abs() < 1e-13 && (sv - wantv).abs() < 1e-13);
        assert!(w.iter().zip(&a).all(|(wi, ai)| *wi == -ai));
        let (mut y1, mut y2) = (vec![0.5; 37], vec![0.0; 37]);
        let s2 = dot_axpy2::<Plain, f64>(&a, &x, (&mut y1, 2.0), (&mut y2, -3.0));
        assert!((s2 - want).abs() < 1e-13);
        for ((p, q), ai) in y1.iter().zip(&y2).zip(&a) {
            assert!((p - (0.5 + 2.0 * ai)).abs() < 1e-15 && (q + 3.0 * ai).abs() < 1e-15);
        }
        let mut z = vec![0.0; 37];
        axpy::<Plain, f32>(
            &mut z,
            3.0,
            &a.iter().map(|&t| t as f32).collect::<Vec<_>>(),
        );
        assert!((z[5] - 3.0 * (a[5] as f32) as f64).abs() < 1e-15);
    }

    /// dots4_axpy and dots8_axpy on both paths against their definition, every length class.
    #[test]
    fn dots_axpy4_match_their_definition() {
        fn check<T: Coef, M: Madd>(conv: fn(f64) -> T) {
            for len in 0..23usize {
                let a: Vec<Vec<T>> = (0..4)
                    .map(|k| {
                        (0..len)
                            .map(|i| conv(((i + 5 * k) as f64 * 0.43).cos()))
                            .collect()
                    })
                    .collect();
                let a4 = [&a[0][..], &a[1][..], &a[2][..], &a[3][..]];
                let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.3).sin()).collect();
                let v: Vec<f64> = (0..len).map(|i| 1.0 / (1.0 + i as f64)).collect();
                let w = [1.5, -0.25, 0.5, 2.0];
                let (mut z4, mut z8) = (vec![0.5; len], vec![0.5; len]);
                let s4 = dots4_axpy::<M, T>(a4, &x, &mut z4, w);
                let (sx, sv) = dots8_axpy::<M, T>(a4, &x, &v, &mut z8, w);
                let d4 = dots4::<M, T>(a4, &x);
                let close = |p: f64, q: f64| (p - q).abs() <= 1e-13 * (1.0 + q.abs());
                for k in 0..4 {
                    let dx: f64 = a[k].iter().zip(&x).map(|(c, y)| c.to_f64() * y).sum();
                    let dv: f64 = a[k].iter().zip(&v).map(|(c, y)| c.to_f64() * y).sum();
                    assert!(
                        close(s4[k], dx) && close(sx[k], dx) && close(sv[k], dv),
                        "{len}"
                    );
                    assert_eq!(d4[k], s4[k], "dots4 is dots4_axpy's sums, len {len}");
                }
                for t in 0..len {
                    let want = 0.5 + (0..4).map(|k| w[k] * a[k][t].to_f64()).sum::<f64>();
                    assert!(close(z4[t], want) && close(z8[t], want), "z[{t}] len {len}");
                }
            }
        }
        check::<f64, Plain>(|v| v);
        check::<f32, Plain>(|v| v as f32);
        if has_avx2_fma() {
            check::<f64, Fused>(|v| v);
            check::<f32, Fused>(|v| v as f32);
        }
    }

    /// The AVX2 four-segment loops do, lane by lane, what the portable ones do with fused
    /// multiply-adds (the portable loops are written to follow them), for both storage types,
    /// whose z updates sum in different orders ([`crate::portable::weighted4`]).
    #[test]
    fn dots_axpy4_vector_loop_matches_portable_loop_bit_for_bit() {
        fn check<T: Coef>(conv: fn(f64) -> T) {
            for len in [0, 3, 4, 7, 16, 29] {
                let a: Vec<Vec<T>> = (0..4)
                    .map(|k| (0..len).map(|i| conv(((i * 7 + k) as f64).sin())).collect())
                    .collect();
                let a4 = [&a[0][..], &a[1][..], &a[2][..], &a[3][..]];
                let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.7).cos()).collect();
                let v: Vec<f64> = (0..len).map(|i| (i as f64 * 0.3).sin()).collect();
                let w = [0.3, -0.7, 1.1, 0.9];
                let (mut z1, mut z2) = (vec![0.25; len], vec![0.25; len]);
                let vector = dots8_axpy::<Fused, T>(a4, &x, &v, &mut z1, w);
                let portable = portable_dots8_axpy::<Fused, T>(a4, &x, Some(&v), Some(&mut z2), w);
                assert_eq!(vector, portable, "{} len {len}", T::NAME);
                assert_eq!(z1, z2, "{} len {len}", T::NAME);
            }
        }
        if has_avx2_fma() {
            check::<f64>(|v| v);
            check::<f32>(|v| v as f32);
        }
    }

    /// The portable Hessian four-segment loop run with fused multiply-adds gives the bits of
    /// the AVX2 instantiation with four dot lanes and those of the AVX-512 one with eight, the
    /// latter in 256-bit steps and in 512-bit ones (on every processor with AVX-512F, AMD's
    /// too, through `FORCE_WIDE_ROWS`: the vendor decides the speed, not the bits): dots, own
    /// rows and one or two shared rows, at lengths around the steps of four and eight.
    #[test]
    fn portable_hessian_rows_give_the_avx2_bits() {
        use crate::portable::{portable_rows4, portable_rows4_shared2};
        use std::sync::atomic::Ordering;

        type Rows<T> = fn([&[T]; 4], &[f64], [&mut [f64]; 4], [&mut [f64]; 2]) -> [f64; 4];
        fn run<T: Coef>(len: usize, f: Rows<T>) -> Vec<Vec<u64>> {
            let a: Vec<Vec<T>> = (0..4)
                .map(|k| {
                    let v = |i: usize| ((i * 5 + 11 * k) as f64 * 0.47).sin();
                    (0..len).map(|i| T::from_f64(v(i))).collect()
                })
                .collect();
            let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.31).cos() - 0.3).collect();
            let start = |k: usize| -> Vec<f64> {
                (0..len)
                    .map(|i| ((i + 17 * k) as f64 * 0.23).sin())
                    .collect()
            };
            let mut rows = [start(0), start(1), start(2), start(3)];
            let mut z = [start(4), start(5)];
            let [r0, r1, r2, r3] = &mut rows;
            let [z1, z2] = &mut z;
            let s = f(
                [&a[0], &a[1], &a[2], &a[3]],
                &x,
                [r0, r1, r2, r3],
                [&mut z1[..], &mut z2[..]],
            );
            let bits = |v: &[f64]| v.iter().map(|e| e.to_bits()).collect::<Vec<u64>>();
            let mut all = vec![bits(&s)];
            all.extend(rows.iter().chain(&z).map(|r| bits(r)));
            all
        }
        fn check<T: Coef>(len: usize) {
            const W: f64 = 0.7;
            const XI: [f64; 4] = [0.5, -1.25, 2.0, 0.75];
            const Z: f64 = 1.5;
            const Y: f64 = -0.25;
            // [portable four lanes, AVX2 loop, portable eight lanes, AVX-512 instantiation]
            let two: [Rows<T>; 4] = [
                |a, x, r, [z1, z2]| {
                    portable_rows4_shared2::<Fused, T, false>(a, x, r, W, [(z1, Z), (z2, Y)], XI)
                },
                |a, x, r, [z1, z2]| {
                    crate::avx2::rows4_shared2::<T, false>(a, x, r, W, [(z1, Z), (z2, Y)], XI)
                },
                |a, x, r, [z1, z2]| {
                    portable_rows4_shared2::<Fused, T, true>(a, x, r, W, [(z1, Z), (z2, Y)], XI)
                },
                |a, x, r, [z1, z2]| {
                    crate::avx2::rows4_shared2::<T, true>(a, x, r, W, [(z1, Z), (z2, Y)], XI)
                },
            ];
            let one: [Rows<T>; 4] = [
                |a, x, r, [z1, _]| portable_rows4::<Fused, T, false>(a, x, r, W, z1, XI),
                |a, x, r, [z1, _]| crate::avx2::rows4::<T, false>(a, x, r, W, z1, XI, 0),
                |a, x, r, [z1, _]| portable_rows4::<Fused, T, true>(a, x, r, W, z1, XI),
                |a, x, r, [z1, _]| crate::avx2::rows4::<T, true>(a, x, r, W, z1, XI, 9),
            ];
            for fs in [two, one] {
                let narrow = run(len, fs[0]);
                assert_eq!(run(len, fs[1]), narrow, "{} len {len}: AVX2", T::NAME);
                let eight = run(len, fs[2]);
                // the AVX-512 instantiation, in 256-bit steps and (where the processor has
                // AVX-512F) in 512-bit ones
                FORCE_NARROW_ROWS.store(true, Ordering::Relaxed);
                let steps = run(len, fs[3]);
                FORCE_NARROW_ROWS.store(false, Ordering::Relaxed);
                assert_eq!(steps, eight, "{} len {len}: 256-bit steps", T::NAME);
                if crate::avx512::wide_tile_available() {
                    FORCE_WIDE_ROWS.store(true, Ordering::Relaxed);
                    let wide = run(len, fs[3]);
                    FORCE_WIDE_ROWS.store(false, Ordering::Relaxed);
                    assert_eq!(wide, eight, "{} len {len}: 512-bit steps", T::NAME);
                }
                if len >= 16 {
                    assert_ne!(
                        eight[0],
                        narrow[0],
                        "{} len {len}: the lanes differ",
                        T::NAME
                    );
                }
            }
        }
        if !has_avx2_fma() {
            eprintln!("no AVX2 and FMA here: the portable Hessian rows have nothing to match");
            return;
        }
        for len in (0..=25).chain([31, 32, 33, 100]) {
            check::<f64>(len);
            check::<f32>(len);
        }
    }

    /// rows4_shared2 on both paths against its definition, every length class.
    #[test]
    fn rows4_shared2_matches_its_definition() {
        fn check<T: Coef, M: Madd>(conv: fn(f64) -> T) {
            for len in 0..23usize {
                let a: Vec<Vec<T>> = (0..4)
                    .map(|k| {
                        (0..len)
                            .map(|i| conv(((i + 3 * k) as f64 * 0.53).sin()))
                            .collect()
                    })
                    .collect();
                let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.29).cos()).collect();
                let xi = [0.25, -1.5, 1.0, 0.5];
                let mut rows: Vec<Vec<f64>> = (0..4).map(|k| vec![k as f64; len]).collect();
                let (mut z1, mut z2) = (vec![1.0; len], vec![-1.0; len]);
                let [r0, r1, r2, r3] = &mut rows[..] else {
                    unreachable!()
                };
                let s = rows4_shared2::<M, T>(
                    [&a[0], &a[1], &a[2], &a[3]],
                    &x,
                    [r0, r1, r2, r3],
                    0.75,
                    [(&mut z1, 2.0), (&mut z2, -0.5)],
                    xi,
                );
                let close = |p: f64, q: f64| (p - q).abs() <= 1e-13 * (1.0 + q.abs());
                for k in 0..4 {
                    let want: f64 = a[k].iter().zip(&x).map(|(c, xv)| c.to_f64() * xv).sum();
                    assert!(close(s[k], want), "s[{k}] len {len}");
                    for t in 0..len {
                        assert!(close(rows[k][t], k as f64 + 0.75 * a[k][t].to_f64()));
                    }
                }
                for t in 0..len {
                    let u: f64 = (0..4).map(|k| xi[k] * a[k][t].to_f64()).sum();
                    assert!(close(z1[t], 1.0 + 2.0 * u) && close(z2[t], -1.0 - 0.5 * u));
                }
            }
        }
        check::<f64, Plain>(|v| v);
        check::<f32, Plain>(|v| v as f32);
        if has_avx2_fma() {
            check::<f64, Fused>(|v| v);
            check::<f32, Fused>(|v| v as f32);
        }
    }

    /// rows4 on both paths against its definition, for every length class and both types.
    #[test]
    fn rows4_matches_its_definition() {
        fn check<T: Coef, M: Madd>(conv: fn(f64) -> T) {
            for len in 0..23usize {
                let seg = |k: usize| -> Vec<T> {
                    (0..len)
                        .map(|i| conv(((i + 7 * k) as f64 * 0.61).sin()))
                        .collect()
                };
                let a: Vec<Vec<T>> = (0..4).map(seg).collect();
                let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.3).cos()).collect();
                let xi = [0.5, -1.25, 2.0, 0.75];
                let mut rows: Vec<Vec<f64>> = (0..4).map(|k| vec![k as f64; len]).collect();
                let mut z = vec![1.0; len];
                let [r0, r1, r2, r3] = &mut rows[..] else {
                    unreachable!()
                };
                let s = rows4::<M, T>(
                    [&a[0], &a[1], &a[2], &a[3]],
                    &x,
                    [r0, r1, r2, r3],
                    -0.5,
                    &mut z,
                    xi,
                    len + 1,
                );
                let close = |p: f64, q: f64| (p - q).abs() <= 1e-13 * (1.0 + q.abs());
                for k in 0..4 {
                    let want: f64 = a[k].iter().zip(&x).map(|(c, xv)| c.to_f64() * xv).sum();
                    assert!(close(s[k], want), "s[{k}] len {len}");
                    for t in 0..len {
                        assert!(close(rows[k][t], k as f64 - 0.5 * a[k][t].to_f64()));
                    }
                }
                for t in 0..len {
                    let want: f64 = 1.0 + (0..4).map(|k| xi[k] * a[k][t].to_f64()).sum::<f64>();
                    assert!(close(z[t], want), "z[{t}] len {len}");
                }
            }
        }
        check::<f64, Plain>(|v| v);
        check::<f32, Plain>(|v| v as f32);
        if has_avx2_fma() {
            check::<f64, Fused>(|v| v);
            check::<f32, Fused>(|v| v as f32);
        }
    }

    /// The AVX2 loops against the portable ones, for every length class (blocks of 16, of 4,
    /// scalar tail) and both coefficient types.
    #[test]
    fn vector_paths_match_portable_paths() {
        if !has_avx2_fma() {
            return;
        }
        fn check<T: Coef>(conv: fn(f64) -> T) {
            for len in 0..45usize {
                let a: Vec<T> = (0..len).map(|i| conv((i as f64 * 0.7).sin())).collect();
                let x: Vec<f64> = (0..len).map(|i| (i as f64 * 0.3).cos()).collect();
                let v: Vec<f64> = (0..len).map(|i| 1.0 / (2.0 + i as f64)).collect();
                let close = |p: f64, q: f64| (p - q).abs() <= 1e-13 * (1.0 + q.abs());
                assert!(
                    close(dot::<Fused, T>(&a, &x), dot::<Plain, T>(&a, &x)),
                    "dot {len}"
                );
                let (mut y1, mut y2) = (v.clone(), v.clone());
                axpy::<Fused, T>(&mut y1, 0.5, &a);
                axpy::<Plain, T>(&mut y2, 0.5, &a);
                assert!(y1.iter().zip(&y2).all(|(p, q)| close(*p, *q)), "axpy {len}");
                let (mut y1, mut y2) = (v.clone(), v.clone());
                let s1 = dot_axpy::<Fused, T>(&a, &x, &mut y1, -1.5);
                let s2 = dot_axpy::<Plain, T>(&a, &x, &mut y2, -1.5);
                assert!(close(s1, s2) && y1.iter().zip(&y2).all(|(p, q)| close(*p, *q)));
                let (mut y1, mut z1, mut y2, mut z2) = (v.clone(), x.clone(), v.clone(), x.clone());
                let s1 = dot_axpy2::<Fused, T>(&a, &x, (&mut y1, 2.0), (&mut z1, 3.0));
                let s2 = dot_axpy2::<Plain, T>(&a, &x, (&mut y2, 2.0), (&mut z2, 3.0));
                assert!(close(s1, s2), "dot_axpy2 {len}");
                assert!(y1
                    .iter()
                    .zip(&y2)
                    .chain(z1.iter().zip(&z2))
                    .all(|(p, q)| close(*p, *q)));
                let (mut w1, mut w2) = (x.clone(), x.clone());
                let (p1, q1) = dot2_axpy::<Fused, T>(&a, &x, &v, &mut w1, 0.25);
                let (p2, q2) = dot2_axpy::<Plain, T>(&a, &x, &v, &mut w2, 0.25);
                assert!(close(p1, p2) && close(q1, q2), "dot2_axpy {len}");
                assert!(w1.iter().zip(&w2).all(|(p, q)| close(*p, *q)));
            }
        }
        check::<f64>(|v| v);
        check::<f32>(|v| v as f32);
    }

    /// Every dispatched kernel but the Hessian gives the same bits in its 32-register
    /// instantiation as in its 16-register one: both run the same intrinsics in the same
    /// order, and the compiler does not reassociate floating-point arithmetic. The Hessian's
    /// four-segment loop sums its dots in eight lanes in the former and four in the latter
    /// (see `avx2::rows4_shared`), so its two Hessians agree to rounding (1e-13 of the largest
    /// entry). Covers the degree-3 four-segment loops (n = 150: segments long enough to
    /// prefetch), the adjacent-row and quad paths of degrees 4 and 5, and the batch tiles of
    /// 4, 5, 8 and 20 points. On a processor without AVX-512VL there is only one
    /// instantiation, and the test says so.
    #[test]
    fn wide_registers_give_the_same_bits() {
        use crate::batch::{energy_batch, energy_gradient_batch, hvp_many};
        use crate::exec::Exec;
        use crate::kernels::tests::point;
        use crate::kernels::{energy, energy_gradient, hessian, hvp};
        use crate::sampling::Disorder;
        use crate::storage::Packed;
        use std::sync::atomic::Ordering;

        fn results<T: Coef>(exec: &Exec, poly: &Packed<T>) -> Vec<Vec<u64>> {
            let n = poly.n();
            let x = point(n, 0.31);
            let v = point(n, 0.77);
            // 20 points take the 512-bit tile (outside the dispatch where AVX-512 is present),
            // 5 and 8 the AVX2 tile of 8 lanes, 4 with gradients the AVX2 tile of 4
            let xs: Vec<f64> = (0..20)
                .flat_map(|k| point(n, 0.1 + 0.05 * k as f64))
                .collect();
            let bits = |v: Vec<f64>| v.into_iter().map(f64::to_bits).collect::<Vec<u64>>();
            let (e, g) = energy_gradient(exec, poly, &x).unwrap();
            let (e4, g4) = energy_gradient_batch(exec, poly, &xs[..4 * n], 4).unwrap();
            vec![
                bits(vec![energy(exec, poly, &x).unwrap(), e]),
                bits(g),
                bits(hessian(exec, poly, &x).unwrap()),
                bits(hvp(exec, poly, &x, &v).unwrap()),
                bits(energy_batch(exec, poly, &xs, 20).unwrap()),
                bits(energy_batch(exec, poly, &xs[..5 * n], 5).unwrap()),
                bits(energy_batch(exec, poly, &xs[..8 * n], 8).unwrap()),
                bits(e4),
                bits(g4),
                bits(hvp_many(exec, poly, &x, &xs[..3 * n], 3).unwrap()),
            ]
        }
        const HESSIAN: usize = 2; // its place in `results`
        fn compare<T: Coef>(n: usize, terms: &[(usize, f64)]) {
            let exec = Exec::with_threads(2).unwrap();
            let poly = Packed::<T>::sample(&exec, n, terms, &Disorder::new(5)).unwrap();
            FORCE_NARROW.store(false, Ordering::Relaxed);
            assert!(has_avx512vl());
            let wide = results(&exec, &poly);
            FORCE_NARROW.store(true, Ordering::Relaxed);
            assert!(!has_avx512vl());
            let narrow = results(&exec, &poly);
            FORCE_NARROW.store(false, Ordering::Relaxed);
            for (k, (a, b)) in wide.iter().zip(&narrow).enumerate() {
                if k == HESSIAN {
                    let (a, b) = (a.iter().map(|&u| f64::from_bits(u)), b.iter());
                    let b: Vec<f64> = b.map(|&u| f64::from_bits(u)).collect();
                    let top = b.iter().fold(0f64, |m, v| m.max(v.abs()));
                    let near = a.zip(&b).all(|(p, q)| (p - q).abs() <= 1e-13 * top);
                    assert!(near, "{} n={n} {terms:?}: the Hessians differ", T::NAME);
                    continue;
                }
                assert_eq!(a, b, "{} n={n} {terms:?}: result {k} differs", T::NAME);
            }
        }
        if !has_avx512vl() {
            eprintln!("no AVX-512VL here: the kernels have one AVX2 instantiation only");
            return;
        }
        for terms in [&[(1, 0.3), (2, 1.0), (3, 0.7)][..], &[(3, 1.0)][..]] {
            compare::<f64>(150, terms);
            compare::<f32>(150, terms);
        }
        for (n, terms) in [
            (40, &[(4, 1.0)][..]),
            (24, &[(2, 0.5), (4, 0.4), (5, 0.2)][..]),
        ] {
            compare::<f64>(n, terms);
            compare::<f32>(n, terms);
        }
    }
}
