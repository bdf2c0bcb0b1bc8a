//! The sampler's Box–Muller transform, many pairs at a time, bit for bit as the scalar calls
//! to the `libm` crate that define it.
//!
//! A pair of uniforms u1 in (0, 1], u2 in [0, 1) becomes the pair of standard Gaussians
//!
//! ```text
//! (g0, g1) = (R cos t, R sin t),   R = sqrt(-2 ln u1),   t = 2 pi u2.
//! ```
//!
//! The sampler defines ln, sin and cos as `libm::log` and `libm::sincos` (FreeBSD's e_log.c,
//! k_sin.c, k_cos.c and the small-argument part of e_rem_pio2.c, ported to Rust). Those are
//! sequences of IEEE-754 operations with branches on the high word of the argument. On the
//! arguments the sampler gives them almost every lane takes the same few branches, so
//! [`transform_pairs`] evaluates, lane by lane without branching, exactly the operations of
//! those branches, in the same order (Rust never fuses a product and a sum, so a vector build
//! rounds as the scalar one does):
//!
//! * ln x for a normal x > 0: x = 2^k (1 + f) with 1 + f in [sqrt(2)/2, sqrt(2)), s = f / (2 + f),
//!   hfsq = f^2 / 2 and ln x = (((s (hfsq + R) + k ln2_lo) - hfsq) + f) + k ln2_hi, summed
//!   left to right, with R = R(s^2) the minimax polynomial of e_log.c;
//! * sin and cos of t in [0, 2 pi): t = n pi/2 + (y0 + y1) with n in 0..=4 read off the high
//!   word of t (one subtraction of n pio2_1 and one of n pio2_1t), the polynomials of k_sin and
//!   k_cos at (y0, y1), and the quadrant's swap and signs.
//!
//! A lane whose argument would take any other branch (t below 2^-27 sqrt 2, t within the
//! cancellation windows near pi/2, pi, 3 pi/2 and 2 pi where e_rem_pio2 falls back to its
//! medium reduction, t past 9 pi/4, which 2 pi u2 never reaches, u1 = 1) is flagged and
//! computed by the scalar `libm` functions themselves: about one lane in a million (the four
//! windows' share of [0, 2 pi) is 1.26e-6). For t below 2^-27 sqrt 2 and u1 = 1 the lane
//! formulas happen to give libm's values too (checked over every such t); they are flagged
//! anyway, so that the lanes never rely on that.

/// 2^-53: the spacing of the uniforms, and the smallest u1.
pub const SCALE: f64 = 1.0 / (1u64 << 53) as f64;
const TAU: f64 = std::f64::consts::TAU;

// e_log.c's constants (as in libm's log.rs)
const LN2_HI: f64 = f64::from_bits(0x3fe6_2e42_fee0_0000); // 6.93147180369123816490e-01
const LN2_LO: f64 = f64::from_bits(0x3dea_39ef_3579_3c76); // 1.90821492927058770002e-10
const LG1: f64 = f64::from_bits(0x3fe5_5555_5555_5593); // 6.666666666666735130e-01
const LG2: f64 = f64::from_bits(0x3fd9_9999_9997_fa04); // 3.999999999940941908e-01
const LG3: f64 = f64::from_bits(0x3fd2_4924_9422_9359); // 2.857142874366239149e-01
const LG4: f64 = f64::from_bits(0x3fcc_71c5_1d8e_78af); // 2.222219843214978396e-01
const LG5: f64 = f64::from_bits(0x3fc7_4664_96cb_03de); // 1.818357216161805012e-01
const LG6: f64 = f64::from_bits(0x3fc3_9a09_d078_c69f); // 1.531383769920937332e-01
const LG7: f64 = f64::from_bits(0x3fc2_f112_df3e_5244); // 1.479819860511658591e-01

// e_rem_pio2.c's first split of pi/2 (as in libm's rem_pio2.rs)
const PIO2_1: f64 = f64::from_bits(0x3ff9_21fb_5440_0000); // 1.57079632673412561417e+00
const PIO2_1T: f64 = f64::from_bits(0x3dd0_b461_1a62_6331); // 6.07710050650619224932e-11

// k_sin.c's and k_cos.c's coefficients (as in libm's k_sin.rs and k_cos.rs)
const S1: f64 = f64::from_bits(0xbfc5_5555_5555_5549); // -1.66666666666666324348e-01
const S2: f64 = f64::from_bits(0x3f81_1111_1110_f8a6); // 8.33333333332248946124e-03
const S3: f64 = f64::from_bits(0xbf2a_01a0_19c1_61d5); // -1.98412698298579493134e-04
const S4: f64 = f64::from_bits(0x3ec7_1de3_57b1_fe7d); // 2.75573137070700676789e-06
const S5: f64 = f64::from_bits(0xbe5a_e5e6_8a2b_9ceb); // -2.50507602534068634195e-08
const S6: f64 = f64::from_bits(0x3de5_d93a_5acf_d57c); // 1.58969099521155010221e-10
const C1: f64 = f64::from_bits(0x3fa5_5555_5555_554c); // 4.16666666666666019037e-02
const C2: f64 = f64::from_bits(0xbf56_c16c_16c1_5177); // -1.38888888888741095749e-03
const C3: f64 = f64::from_bits(0x3efa_01a0_19cb_1590); // 2.48015872894767294178e-05
const C4: f64 = f64::from_bits(0xbe92_7e4f_809c_52ad); // -2.75573143513906633035e-07
const C5: f64 = f64::from_bits(0x3e21_ee9e_bdb4_b1c4); // 2.08757232129817482790e-09
const C6: f64 = f64::from_bits(0xbda8_fae9_be88_38d4); // -1.13596475577881948265e-11

/// The uniforms of a pair from its two 64-bit words: u1 = ((w1 >> 11) + 1) 2^-53 in (0, 1],
/// u2 = (w2 >> 11) 2^-53 in [0, 1) (both exact).
#[inline(always)]
pub fn uniforms(w1: u64, w2: u64) -> (f64, f64) {
    // through i64, whose conversion is one instruction: the values are below 2^53 + 1, so
    // both conversions are exact and agree
    (
        ((w1 >> 11) + 1) as i64 as f64 * SCALE,
        (w2 >> 11) as i64 as f64 * SCALE,
    )
}

/// [`uniforms`] by operations that vectorize without 64-bit integer conversions: v < 2^53
/// as 2^32 hi + lo, each half placed in a float's mantissa under a fixed exponent
/// (2^84 + hi 2^32 and 2^52 + lo, exact) and the exponent's power subtracted; the sum
/// hi 2^32 + lo is exact below 2^53 + 1, so the result is `uniforms`' to the bit.
#[inline(always)]
fn uniforms_lanes(w1: u64, w2: u64) -> (f64, f64) {
    (
        below_2_53_as_f64((w1 >> 11) + 1) * SCALE,
        below_2_53_as_f64(w2 >> 11) * SCALE,
    )
}

/// v as f64 for v <= 2^53 (exact), by the two halves of [`uniforms_lanes`].
#[inline(always)]
fn below_2_53_as_f64(v: u64) -> f64 {
    const TWO52: f64 = 4_503_599_627_370_496.0; // 2^52
    const TWO84: f64 = 19_342_813_113_834_066_795_298_816.0; // 2^84
    let hi = f64::from_bits(0x4530_0000_0000_0000 | (v >> 32)) - TWO84;
    let lo = f64::from_bits(0x4330_0000_0000_0000 | (v & 0xffff_ffff)) - TWO52;
    hi + lo
}

/// The reference: one pair by the scalar `libm` calls, (R cos t, R sin t).
#[inline]
pub fn pair_by_libm(u1: f64, u2: f64) -> (f64, f64) {
    let radius = (-2.0 * libm::log(u1)).sqrt();
    let (s, c) = libm::sincos(TAU * u2);
    (radius * c, radius * s)
}

/// ln x by e_log.c's branch for a normal x > 0 (x != 1), and whether x needs the scalar call.
#[inline(always)]
fn log_main_branch(x: f64) -> (f64, bool) {
    let ui = x.to_bits();
    let hx = (ui >> 32) as u32;
    let other = !(0x0010_0000..0x7ff0_0000).contains(&hx) || x == 1.0;
    // reduce x into [sqrt(2)/2, sqrt(2)]
    let hx = hx.wrapping_add(0x3ff0_0000 - 0x3fe6_a09e);
    let k = ((hx >> 20) as i32) - 0x3ff;
    let hx = (hx & 0x000f_ffff) + 0x3fe6_a09e;
    let x = f64::from_bits(((hx as u64) << 32) | (ui & 0xffff_ffff));
    let f: f64 = x - 1.0;
    let hfsq: f64 = 0.5 * f * f;
    let s: f64 = f / (2.0 + f);
    let z: f64 = s * s;
    let w: f64 = z * z;
    let t1: f64 = w * (LG2 + w * (LG4 + w * LG6));
    let t2: f64 = z * (LG1 + w * (LG3 + w * (LG5 + w * LG7)));
    let r: f64 = t2 + t1;
    let dk: f64 = k as f64;
    (s * (hfsq + r) + dk * LN2_LO - hfsq + f + dk * LN2_HI, other)
}

/// (sin t, cos t) for t in [0, 2 pi) by the branches of libm's sincos that subtract n pi/2,
/// n in 0..=4, once, and whether t needs the scalar call.
#[inline(always)]
fn sincos_small_branch(t: f64) -> (f64, f64, bool) {
    let ix = ((t.to_bits() >> 32) as u32) & 0x7fff_ffff;
    // sincos: below pi/4 no reduction, and below 2^-27 sqrt(2) (x, 1) without polynomials;
    // rem_pio2: the medium reduction where n pi/2 is near t (cancellation), and past 9 pi/4
    let other = ix < 0x3e46_a09e
        || (ix > 0x3fe9_21fb && ix <= 0x400f_6a7a && (ix & 0x000f_ffff) == 0x0009_21fb)
        || ix == 0x4012_d97c
        || ix == 0x4019_21fb
        || ix > 0x401c_463b;
    let n = (ix > 0x3fe9_21fb) as u32
        + (ix > 0x4002_d97c) as u32
        + (ix > 0x400f_6a7a) as u32
        + (ix > 0x4015_fdbc) as u32;
    let kn = n as f64;
    // rem_pio2's fixed-n case: z = t - n pio2_1, y0 = z - n pio2_1t, y1 = (z - y0) - n pio2_1t
    // (n = 0 leaves y0 = t, y1 = 0, as sincos's own call k_sin(t, 0, 0), k_cos(t, 0))
    let z = t - kn * PIO2_1;
    let y0 = z - kn * PIO2_1T;
    let y1 = (z - y0) - kn * PIO2_1T;
    // k_sin(y0, y1, iy) with iy = 0 for n = 0 and 1 otherwise
    let z = y0 * y0;
    let w = z * z;
    let r = S2 + z * (S3 + z * S4) + z * w * (S5 + z * S6);
    let v = z * y0;
    let sin_plain = y0 + v * (S1 + z * r);
    let sin_tail = y0 - ((z * (0.5 * y1 - v * r) - y1) - v * S1);
    let s = if n == 0 { sin_plain } else { sin_tail };
    // k_cos(y0, y1)
    let r = z * (C1 + z * (C2 + z * C3)) + w * w * (C4 + z * (C5 + z * C6));
    let hz = 0.5 * z;
    let w = 1.0 - hz;
    let c = w + (((1.0 - w) - hz) + (z * r - y0 * y1));
    // the quadrant n & 3: (s, c), (c, -s), (-s, -c), (-c, s)
    let (a, b) = if n & 1 == 0 { (s, c) } else { (c, s) };
    let sin = if n & 2 == 0 { a } else { -a };
    let cos = if (n + 1) & 2 == 0 { b } else { -b };
    (sin, cos, other)
}

/// Writes the Gaussian pair of the words (`words[2i]`, `words[2i + 1]`) into `out[2i]` and
/// `out[2i + 1]` (R cos t first, then R sin t, with the [`uniforms`] of the two words) for
/// every pair i, and returns how many pairs the scalar `libm` calls computed. `out` is as long
/// as `words`; `other` is scratch with a flag per pair.
#[inline(always)]
pub fn transform_pairs_body(words: &[u64], out: &mut [f64], other: &mut [bool]) -> usize {
    let pairs = words.len() / 2;
    let (words, out, other) = (
        &words[..2 * pairs],
        &mut out[..2 * pairs],
        &mut other[..pairs],
    );
    // one branch-free loop the compiler vectorizes
    for i in 0..pairs {
        let (u1, u2) = uniforms_lanes(words[2 * i], words[2 * i + 1]);
        let (ln, log_other) = log_main_branch(u1);
        let (sin, cos, trig_other) = sincos_small_branch(TAU * u2);
        let radius = (-2.0 * ln).sqrt();
        out[2 * i] = radius * cos;
        out[2 * i + 1] = radius * sin;
        other[i] = log_other | trig_other;
    }
    let mut by_libm = 0;
    for i in 0..pairs {
        if other[i] {
            let (u1, u2) = uniforms(words[2 * i], words[2 * i + 1]);
            (out[2 * i], out[2 * i + 1]) = pair_by_libm(u1, u2);
            by_libm += 1;
        }
    }
    by_libm
}

/// [`transform_pairs_body`] compiled with AVX-512 (the caller checks the processor has it).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma,avx512f,avx512vl")]
unsafe fn transform_pairs_wide(words: &[u64], out: &mut [f64], other: &mut [bool]) -> usize {
    transform_pairs_body(words, out, other)
}

/// [`transform_pairs_body`] compiled with AVX2 (the caller checks the processor has it).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn transform_pairs_fast(words: &[u64], out: &mut [f64], other: &mut [bool]) -> usize {
    transform_pairs_body(words, out, other)
}

/// [`transform_pairs_body`] compiled for the widest vector instructions this processor has
/// (the same bits from each: no instruction set changes an IEEE-754 operation's result).
pub fn transform_pairs(words: &[u64], out: &mut [f64], other: &mut [bool]) -> usize {
    #[cfg(target_arch = "x86_64")]
    {
        if crate::simd::has_avx512vl() {
            // SAFETY: the processor has the features the function was compiled for.
            return unsafe { transform_pairs_wide(words, out, other) };
        }
        if crate::simd::has_avx2_fma() {
            // SAFETY: the processor has the features the function was compiled for.
            return unsafe { transform_pairs_fast(words, out, other) };
        }
    }
    transform_pairs_body(words, out, other)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Checks every pair against the scalar calls and returns how many took them.
    fn assert_pairs_match(words: &[u64]) -> usize {
        let pairs = words.len() / 2;
        let mut other = vec![false; pairs];
        let mut plain = vec![0.0; 2 * pairs];
        let by_libm = transform_pairs_body(words, &mut plain, &mut other);
        let mut outputs = vec![plain];
        #[cfg(target_arch = "x86_64")]
        {
            // every build this processor can run, whichever `transform_pairs` picks
            type Variant = unsafe fn(&[u64], &mut [f64], &mut [bool]) -> usize;
            let mut variants: Vec<Variant> = Vec::new();
            if crate::simd::has_avx2_fma() {
                variants.push(transform_pairs_fast);
            }
            if crate::simd::has_avx2_fma()
                && std::is_x86_feature_detected!("avx512f")
                && std::is_x86_feature_detected!("avx512vl")
            {
                variants.push(transform_pairs_wide);
            }
            for variant in variants {
                let mut out = vec![0.0; 2 * pairs];
                // SAFETY: the processor has the features the variant was compiled for.
                let count = unsafe { variant(words, &mut out, &mut other) };
                assert_eq!(count, by_libm);
                outputs.push(out);
            }
        }
        for out in &outputs {
            for i in 0..pairs {
                let (u1, u2) = uniforms(words[2 * i], words[2 * i + 1]);
                assert_eq!(uniforms_lanes(words[2 * i], words[2 * i + 1]), (u1, u2));
                let (want0, want1) = pair_by_libm(u1, u2);
                for (got, want) in [(out[2 * i], want0), (out[2 * i + 1], want1)] {
                    assert_eq!(got.to_bits(), want.to_bits(), "u1 {u1:e} u2 {u2:e}");
                }
            }
        }
        by_libm
    }

    /// The word whose uniform is u (u in [0, 1), a multiple of 2^-53).
    fn word_of(u: f64) -> u64 {
        ((u / SCALE) as u64) << 11
    }

    #[test]
    fn lane_uniforms_are_the_conversions() {
        // the extremes of both words (u1 = 2^-53 and 1, u2 = 0 and 1 - 2^-53) and values whose
        // halves carry: the lane conversion must equal the plain one bit for bit
        let words = [
            0u64,
            1 << 11,
            (1 << 43) - 1,
            1 << 43,
            u64::MAX - (1 << 11),
            u64::MAX,
        ];
        for &w1 in &words {
            for &w2 in &words {
                let (a, b) = uniforms(w1, w2);
                let (c, d) = uniforms_lanes(w1, w2);
                assert_eq!(
                    (a.to_bits(), b.to_bits()),
                    (c.to_bits(), d.to_bits()),
                    "{w1} {w2}"
                );
            }
        }
        assert_eq!(uniforms_lanes(u64::MAX, 0), (1.0, 0.0));
        assert_eq!(uniforms_lanes(0, u64::MAX), (SCALE, 1.0 - SCALE));
    }

    #[test]
    fn random_words_give_the_libm_pairs() {
        // a xorshift stream of words: 2^22 pairs, every branch of the lane code many times
        let mut state = 0x9e37_79b9_7f4a_7c15u64;
        let words: Vec<u64> = (0..1 << 23)
            .map(|_| {
                state ^= state << 13;
                state ^= state >> 7;
                state ^= state << 17;
                state
            })
            .collect();
        // about one pair in a million leaves the lane code (the windows near n pi/2)
        assert!(assert_pairs_match(&words) <= 40);
    }

    /// The high words of t at which libm's sincos changes branch (the lane code's thresholds):
    /// 2^-27 sqrt 2, pi/4, the pi/2 window, 3 pi/4, the pi window, 5 pi/4, the 3 pi/2
    /// window, 7 pi/4 and the 2 pi window.
    const HIGH_WORD_EDGES: [u64; 9] = [
        0x3e46_a09e,
        0x3fe9_21fb,
        0x3ff9_21fb,
        0x4002_d97c,
        0x4009_21fb,
        0x400f_6a7a,
        0x4012_d97c,
        0x4015_fdbc,
        0x4019_21fb,
    ];

    /// sin and cos of every lane that is not flagged, against `libm::sincos` itself, over
    /// 2^20 consecutive u2 on each side of every high-word threshold of its branches: there
    /// |y0| is small and every rounding of the reduction shows (a fused y1 = (z - y0) - n
    /// pio2_1t changed 1535 of 74 million such outputs at n = 3 and passed the other tests).
    #[test]
    fn every_angle_near_a_branch_edge_gives_libm_sincos() {
        let mut checked = 0usize;
        for hi in HIGH_WORD_EDGES {
            for edge in [hi, hi + 1] {
                let k = (f64::from_bits(edge << 32) / TAU / SCALE).round() as i64;
                for j in k - (1 << 20)..k + (1 << 20) {
                    if !(0..1i64 << 53).contains(&j) {
                        continue;
                    }
                    let t = TAU * (j as f64 * SCALE);
                    let (sin, cos, other) = sincos_small_branch(t);
                    if !other {
                        let (s, c) = libm::sincos(t);
                        assert_eq!((sin.to_bits(), cos.to_bits()), (s.to_bits(), c.to_bits()));
                        checked += 1;
                    }
                }
            }
        }
        // the case that a fused y1 broke (n = 3, just outside the 3 pi/2 window)
        let t = TAU * 7.500003054973858e-1;
        let (sin, cos, other) = sincos_small_branch(t);
        let (s, c) = libm::sincos(t);
        assert!(!other && sin.to_bits() == s.to_bits() && cos.to_bits() == c.to_bits());
        // 36 sides of 2^20, less those inside a flagged window or past 2 pi: 25 of them
        assert!(checked > 24 << 20, "{checked} lanes checked");
    }

    #[test]
    fn branch_edges_give_the_libm_pairs() {
        // t near every threshold of the high word that selects a branch, u2 for t = 0 and
        // the smallest t, u1 near 1 (where ln x is computed below and above sqrt(2)/2 reduction
        // bounds), the smallest u1 and u1 = 1, each with its neighbours 2^-53 apart
        let mut u2s = vec![0.0, SCALE, 2.0 * SCALE, 1.0 - SCALE];
        for hi in HIGH_WORD_EDGES {
            for lo in [0u64, 1, 0x5444_2d18, 0xffff_ffff] {
                for edge in [hi, hi + 1] {
                    let t = f64::from_bits((edge << 32) | lo);
                    let u = t / TAU;
                    let k = (u / SCALE).round();
                    for d in -3..=3 {
                        let v = (k + d as f64) * SCALE;
                        if (0.0..1.0).contains(&v) {
                            u2s.push(v);
                        }
                    }
                }
            }
        }
        // t = 2 pi u2 at k pi/2 exactly for u2 = k/4: within 2^-53 .. 2^-13 of those (and
        // of u2 = 1), where e_rem_pio2's medium reduction takes further rounds
        for k in 1..=4 {
            let quarter = k as f64 / 4.0;
            for m in 0..=40 {
                for d in [1.0, 3.0] {
                    for v in [
                        quarter - d * SCALE * 2f64.powi(m),
                        quarter + d * SCALE * 2f64.powi(m),
                    ] {
                        if (0.0..1.0).contains(&v) {
                            u2s.push(v);
                        }
                    }
                }
            }
            if k < 4 {
                u2s.push(quarter);
            }
        }
        let u1s = [
            SCALE,
            2.0 * SCALE,
            0.5,
            0.5 - SCALE,
            0.5 + SCALE,
            std::f64::consts::FRAC_1_SQRT_2,
            1.0 - SCALE,
            1.0 - 2.0 * SCALE,
            1.0,
        ];
        let mut words = Vec::new();
        for &u2 in &u2s {
            for &u1 in &u1s {
                let w1 = ((((u1 / SCALE) as u64) - 1) << 11) | 0x7ff;
                words.extend([w1, word_of(u2) | 0x3ff]);
            }
        }
        for &u1 in &u1s {
            assert_eq!(uniforms(((((u1 / SCALE) as u64) - 1) << 11) | 5, 0).0, u1);
        }
        // every window of the scalar branches is hit (u1 = 1 and t = 0 at least)
        assert!(assert_pairs_match(&words) >= 2 * u1s.len());
        // lengths that leave a remainder of the vector loop
        for len in 1..20 {
            assert_pairs_match(&words[..2 * len]);
        }
    }
}
