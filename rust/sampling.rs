//! Counter-based sampling of the packed coefficients.
//!
//! The standard Gaussian g_r of rank r in the degree-p block of seed s is a pure function of
//! (s, p, r): ranks 2k and 2k+1 come from the four 32-bit words 4k..4k+3 of the ChaCha12
//! stream number p under a key made from s, turned into two uniforms
//! u1 = (w_hi1 >> 11 + 1) 2^-53 in (0, 1] and u2 = (w_hi2 >> 11) 2^-53 in [0, 1) and then
//! into a pair by the Box–Muller transform
//!
//! ```text
//! g_{2k} = sqrt(-2 ln u1) cos(2 pi u2),   g_{2k+1} = sqrt(-2 ln u1) sin(2 pi u2).
//! ```
//!
//! Any contiguous range of ranks can therefore be regenerated on its own, and a block is
//! bitwise identical however it is chunked or threaded. ln, sin and cos come from the `libm`
//! crate (pure Rust, compiled into this library), not from the platform's math library:
//! glibc picks its variants by processor, and its FMA and plain ones differ in the last bit
//! (796 of 1353400 coefficients of a p = 3, n = 200 instance, when this used them), so the
//! same seed gave other last bits on a machine without FMA. Instances sampled by version
//! 0.1.0, which used them, differ from today's in the last bit of about 6 % of their
//! coefficients. The transform runs on vectors ([`crate::boxmuller`]), by exactly the
//! operations of those `libm` functions, so it gives their bits. The stored coefficient is
//!
//! ```text
//! a_m = sqrt(n) * gamma_p * sqrt(c(m)) * g_m,   c(m) = p! / prod_i mult_i(m)!,
//! ```
//!
//! which gives H_p exactly the law of sqrt(n) gamma_p sum_{i1..ip} J_{i1..ip} x_i1...x_ip with
//! i.i.d. standard Gaussian J, so E[H(x) H(y)] = n xi(<x, y>).
//! With a correlation (s0, rho) the Gaussian is rho g(s0) + sqrt(1 - rho^2) g(s), rank by rank.

use rand_chacha::ChaCha12Rng;
use rand_core::{Rng, SeedableRng};
use rayon::prelude::*;

use crate::boxmuller::{transform_pairs, SCALE};
use crate::combinatorics::{advance, factorial, orderings_denominator, unrank, MAX_DEGREE};
use crate::error::CoreError;
use crate::exec::{on_pool, Exec};
use crate::storage::Coef;

/// Ranks generated per parallel task; even, so that Box–Muller pairs never straddle tasks
/// (correctness does not depend on it, only the amount of wasted work).
const CHUNK: usize = 1 << 15;
/// Gaussians generated per inner batch (stack buffer).
const BATCH: usize = 512;

/// Which Gaussians to draw: those of `seed`, optionally correlated with those of another seed.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Disorder {
    pub seed: u64,
    /// `(seed0, rho)`: use rho g(seed0) + sqrt(1 - rho^2) g(seed).
    pub correlated_with: Option<(u64, f64)>,
}

impl Disorder {
    pub fn new(seed: u64) -> Self {
        Disorder {
            seed,
            correlated_with: None,
        }
    }

    pub fn validate(&self) -> Result<(), CoreError> {
        if let Some((_, rho)) = self.correlated_with {
            if !(-1.0..=1.0).contains(&rho) {
                return Err(CoreError::InvalidCorrelation { rho });
            }
        }
        Ok(())
    }
}

fn key(seed: u64) -> [u8; 32] {
    let mut k = [0u8; 32];
    k[..8].copy_from_slice(&seed.to_le_bytes());
    k[8..24].copy_from_slice(b"orthoclimb/gauss");
    k
}

/// Box–Muller pairs per refill of the word buffer in [`gaussians`].
const PAIRS: usize = 128;

/// Writes the standard Gaussians g_r, r in [r0, r0 + out.len()), of stream (seed, p).
pub fn gaussians(seed: u64, p: usize, r0: usize, out: &mut [f64]) {
    if out.is_empty() {
        return;
    }
    let mut rng = ChaCha12Rng::from_seed(key(seed));
    rng.set_stream(p as u64);
    rng.set_word_pos(4 * (r0 / 2) as u128);
    let mut bytes = [0u8; 16 * PAIRS];
    let mut words = [0u64; 2 * PAIRS];
    let mut flat = [0f64; 2 * PAIRS];
    let mut other = [false; PAIRS];
    let mut skip = r0 % 2; // an odd r0 drops the first Gaussian of its pair
    let mut pos = 0usize;
    while pos < out.len() {
        let pairs = PAIRS.min((skip + out.len() - pos).div_ceil(2));
        // the stream's 32-bit words in order, two to a little-endian u64 (as next_u64 reads)
        rng.fill_bytes(&mut bytes[..16 * pairs]);
        for (w, b) in words.iter_mut().zip(bytes.chunks_exact(8)).take(2 * pairs) {
            *w = u64::from_le_bytes(b.try_into().expect("8 bytes"));
        }
        transform_pairs(&words[..2 * pairs], &mut flat[..2 * pairs], &mut other);
        let take = (2 * pairs - skip).min(out.len() - pos);
        out[pos..pos + take].copy_from_slice(&flat[skip..skip + take]);
        pos += take;
        skip = 0;
    }
}

/// Largest |g| the transform can give: u1 >= 2^-53, so |g| <= sqrt(-2 ln 2^-53) =
/// sqrt(106 ln 2), about 8.57 (computed as the transform computes it, so the bound holds to
/// the last bit).
pub fn largest_gaussian() -> f64 {
    (-2.0 * libm::log(SCALE)).sqrt()
}

/// The largest standard deviation of a coefficient of the degree-p block, sqrt(n c_max)
/// gamma, with c_max = max_m c(m) = p! / prod_i m_i! at the most even multiplicities (p!
/// when n >= p: all indices distinct, as most of the block's are).
pub fn largest_deviation(n: usize, p: usize, gamma: f64) -> f64 {
    let (q, r) = (p / n.max(1), p % n.max(1)); // r indices taken q + 1 times, the rest q
    let fact = |k: usize| factorial(k) as f64;
    let c_max = fact(p) / (fact(q + 1).powi(r as i32) * fact(q).powi((n.max(1) - r) as i32));
    (n as f64 * c_max).sqrt() * gamma
}

/// A bound on |a_m| over the whole degree-p block:
///
/// ```text
/// |a_m| <= sqrt(n) * gamma * sqrt(p!) * G * w,   G = largest_gaussian(),
/// ```
///
/// since c(m) <= p!, with w = |rho| + sqrt(1 - rho^2) <= sqrt(2) for a correlated draw and
/// w = 1 otherwise. Storage narrower than f64 is refused when it exceeds the type's range.
pub fn coefficient_bound(n: usize, p: usize, gamma: f64, disorder: &Disorder) -> f64 {
    let weight = match disorder.correlated_with {
        Some((_, rho)) => rho.abs() + (1.0 - rho * rho).max(0.0).sqrt(),
        None => 1.0,
    };
    (n as f64).sqrt() * gamma * (factorial(p) as f64).sqrt() * largest_gaussian() * weight
}

/// The Gaussians of ranks r0.. of stream p that `disorder` asks for, into `g`: those of its
/// seed, or rho g(seed0) + sqrt(1 - rho^2) g(seed) with a correlation (`g0`, as long as `g`,
/// is scratch for g(seed0)).
fn disorder_gaussians(disorder: &Disorder, p: usize, r0: usize, g: &mut [f64], g0: &mut [f64]) {
    gaussians(disorder.seed, p, r0, g);
    if let Some((seed0, rho)) = disorder.correlated_with {
        gaussians(seed0, p, r0, g0);
        let tail = (1.0 - rho * rho).max(0.0).sqrt();
        for (gi, g0i) in g.iter_mut().zip(g0.iter()) {
            *gi = rho * g0i + tail * *gi;
        }
    }
}

/// Fills `out` with the coefficients of ranks r0.. of the degree-p block (see module docs).
///
/// Segment by segment: along a segment (the prefix i1..i_{p-1} fixed, the last index t rising)
/// c(m) is the prefix's for every t > i_{p-1}, so its scale base sqrt(c(m)) is computed once
/// per segment (and once more for t = i_{p-1}) and the loop over t is a plain product.
pub fn fill_range<T: Coef>(
    n: usize,
    p: usize,
    gamma: f64,
    disorder: &Disorder,
    r0: usize,
    out: &mut [T],
) {
    let mut idx = [0usize; MAX_DEGREE];
    if out.is_empty() {
        return;
    }
    debug_assert!(
        (1..=MAX_DEGREE).contains(&p),
        "degree {p}: checked by the callers"
    );
    unrank(n, p, r0, &mut idx[..p]);
    let base = (n as f64).sqrt() * gamma;
    let fact = factorial(p);
    let scale = |denom: u64| base * ((fact / denom) as f64).sqrt();
    let mut g = [0f64; BATCH];
    let mut g0 = [0f64; BATCH];
    let mut done = 0usize;
    while done < out.len() {
        let len = BATCH.min(out.len() - done);
        disorder_gaussians(disorder, p, r0 + done, &mut g[..len], &mut g0[..len]);
        let dst = &mut out[done..done + len];
        let mut k = 0;
        while k < len {
            // this segment's ranks in the batch: last index t = idx[p - 1] .. n
            let t = idx[p - 1];
            let run = (n - t).min(len - k);
            dst[k] = T::from_f64(scale(orderings_denominator(&idx[..p])) * g[k]);
            if run > 1 {
                // past t = i_{p-1} the last index repeats no other: the prefix's c(m)
                let s = scale(orderings_denominator(&idx[..p - 1]));
                for (slot, gi) in dst[k + 1..k + run].iter_mut().zip(&g[k + 1..k + run]) {
                    *slot = T::from_f64(s * gi);
                }
            }
            k += run;
            if t + run == n {
                idx[p - 1] = n - 1;
                advance(&mut idx[..p], n); // the next prefix's first multiset (or the end)
            } else {
                idx[p - 1] = t + run;
            }
        }
        done += len;
    }
}

/// Fills a whole degree-p block, in parallel on the pool of `exec`, with fixed chunks of
/// `CHUNK` ranks, counting each chunk's coefficients in [`Exec::add_done`] when it is written.
/// After a stop request the remaining chunks are skipped and the result is
/// `Err(Interrupted)` (the block is then incomplete and must be dropped).
pub fn fill_block<T: Coef>(
    exec: &Exec,
    n: usize,
    p: usize,
    gamma: f64,
    disorder: &Disorder,
    out: &mut [T],
) -> Result<(), CoreError> {
    let fill = |(i, chunk): (usize, &mut [T])| {
        if !exec.stop_requested() {
            fill_range(n, p, gamma, disorder, i * CHUNK, chunk);
            exec.add_done(chunk.len() as u64);
        }
    };
    exec.install(|| {
        if on_pool() {
            out.par_chunks_mut(CHUNK).enumerate().for_each(fill);
        } else {
            out.chunks_mut(CHUNK).enumerate().for_each(fill);
        }
    });
    exec.check()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::combinatorics::{num_multisets, orderings};

    fn pool(k: usize) -> Exec {
        Exec::with_threads(k).unwrap()
    }

    /// [`fill_range`] as it was written before its segments: each rank's c(m) from its own
    /// multiset (the reference its values must equal bit for bit).
    fn fill_range_by_rank<T: Coef>(
        n: usize,
        p: usize,
        gamma: f64,
        disorder: &Disorder,
        r0: usize,
        out: &mut [T],
    ) {
        let mut idx = [0usize; MAX_DEGREE];
        if out.is_empty() {
            return;
        }
        unrank(n, p, r0, &mut idx[..p]);
        let base = (n as f64).sqrt() * gamma;
        // base sqrt(c(m)) for the last denominator of c(m) seen: consecutive ranks mostly share
        // it, so the division and the square root run only where it changes (same bits)
        let fact = factorial(p);
        let mut scale = (0u64, 0f64);
        let mut g = [0f64; BATCH];
        let mut g0 = [0f64; BATCH];
        let mut done = 0usize;
        while done < out.len() {
            let len = BATCH.min(out.len() - done);
            disorder_gaussians(disorder, p, r0 + done, &mut g[..len], &mut g0[..len]);
            for (slot, gi) in out[done..done + len].iter_mut().zip(&g[..len]) {
                let denom = orderings_denominator(&idx[..p]);
                if denom != scale.0 {
                    scale = (denom, base * ((fact / denom) as f64).sqrt());
                }
                *slot = T::from_f64(scale.1 * gi);
                advance(&mut idx[..p], n);
            }
            done += len;
        }
    }

    /// The Gaussians as [`gaussians`] first drew them: two `next_u64` words per pair and the
    /// scalar `libm` calls, one pair at a time (the definition the vector transform keeps).
    fn gaussians_by_libm(seed: u64, p: usize, r0: usize, out: &mut [f64]) {
        let mut rng = ChaCha12Rng::from_seed(key(seed));
        rng.set_stream(p as u64);
        rng.set_word_pos(4 * (r0 / 2) as u128);
        let mut all = Vec::with_capacity(out.len() + 2);
        while all.len() < out.len() + r0 % 2 {
            // the loop of version 0.2.0, written out
            let (w1, w2) = (rng.next_u64(), rng.next_u64());
            let u1 = ((w1 >> 11) + 1) as f64 * SCALE;
            let u2 = (w2 >> 11) as f64 * SCALE;
            let radius = (-2.0 * libm::log(u1)).sqrt();
            let (s, c) = libm::sincos(std::f64::consts::TAU * u2);
            all.extend([radius * c, radius * s]);
        }
        out.copy_from_slice(&all[r0 % 2..r0 % 2 + out.len()]);
    }

    #[test]
    fn gaussians_are_the_scalar_transform_of_the_stream() {
        // odd and even starts, lengths across the word buffer's refills, several streams
        for (seed, p, r0, len) in [
            (0u64, 1usize, 0usize, 1usize),
            (1, 2, 1, 1),
            (2, 3, 7, 255),
            (3, 3, 8, 256),
            (4, 4, 1001, 257),
            (u64::MAX, 8, 12345, 1 << 16),
            (5, 5, (1 << 40) + 3, 777),
        ] {
            let mut got = vec![0.0; len];
            let mut want = vec![0.0; len];
            gaussians(seed, p, r0, &mut got);
            gaussians_by_libm(seed, p, r0, &mut want);
            assert!(
                got.iter()
                    .zip(&want)
                    .all(|(a, b)| a.to_bits() == b.to_bits()),
                "seed {seed} p {p} r0 {r0} len {len}"
            );
        }
    }

    /// The largest standard deviation is sqrt(n max_m c(m)) gamma, the maximum taken over
    /// every multiset by brute force (n below, at and above p).
    #[test]
    fn largest_deviation_takes_the_largest_multinomial() {
        for (n, p) in [
            (1usize, 3usize),
            (2, 5),
            (3, 3),
            (3, 7),
            (5, 2),
            (9, 4),
            (4, 8),
        ] {
            let c_max = (0..num_multisets(n, p).unwrap())
                .map(|r| {
                    let mut m = vec![0; p];
                    unrank(n, p, r, &mut m);
                    orderings(&m) as f64
                })
                .fold(0.0, f64::max);
            let want = (n as f64 * c_max).sqrt() * 0.5;
            let got = largest_deviation(n, p, 0.5);
            assert!(
                (got - want).abs() <= 1e-15 * want,
                "n {n} p {p}: {got} vs {want}"
            );
        }
    }

    #[test]
    fn segments_give_the_coefficients_rank_by_rank() {
        // every degree, sizes where segments are shorter and longer than a batch of BATCH,
        // ranges that start and end inside segments and batches, with and without correlation
        let plain = Disorder::new(3);
        let mixed = Disorder {
            seed: 4,
            correlated_with: Some((3, 0.6)),
        };
        for (n, p) in [
            (1, 1),
            (5, 1),
            (1, 4),
            (2, 8),
            (7, 3),
            (40, 2),
            (40, 3),
            (9, 5),
            (13, 6),
            (10, 7),
            (6, 8),
            (700, 2),
        ] {
            let total = num_multisets(n, p).unwrap();
            for (r0, len) in [
                (0, total),
                (1, total - 1),
                (total / 3, total / 2),
                (total - 1, 1),
            ] {
                for d in [&plain, &mixed] {
                    let (mut got, mut want) = (vec![0f64; len], vec![0f64; len]);
                    fill_range(n, p, 0.7, d, r0, &mut got);
                    fill_range_by_rank(n, p, 0.7, d, r0, &mut want);
                    let same = got
                        .iter()
                        .zip(&want)
                        .all(|(a, b)| a.to_bits() == b.to_bits());
                    assert!(same, "n {n} p {p} ranks {r0}..+{len} {d:?}");
                    let (mut got32, mut want32) = (vec![0f32; len], vec![0f32; len]);
                    fill_range(n, p, 0.7, d, r0, &mut got32);
                    fill_range_by_rank(n, p, 0.7, d, r0, &mut want32);
                    assert_eq!(got32, want32, "float32 n {n} p {p} ranks {r0}..+{len}");
                }
            }
        }
    }

    #[test]
    fn ranges_regenerate_identically() {
        let mut all = vec![0f64; 1001];
        gaussians(7, 3, 0, &mut all);
        for (a, b) in [(0, 10), (1, 2), (3, 500), (999, 1001), (500, 501)] {
            let mut part = vec![0f64; b - a];
            gaussians(7, 3, a, &mut part);
            assert_eq!(&part[..], &all[a..b], "range {a}..{b}");
        }
    }

    #[test]
    fn streams_differ_by_seed_and_degree() {
        let mut a = vec![0f64; 8];
        let mut b = vec![0f64; 8];
        let mut c = vec![0f64; 8];
        gaussians(1, 2, 0, &mut a);
        gaussians(2, 2, 0, &mut b);
        gaussians(1, 3, 0, &mut c);
        assert_ne!(a, b);
        assert_ne!(a, c);
    }

    #[test]
    fn gaussian_moments() {
        // Mean 0, variance 1, fourth moment 3; tolerances are ~5 standard errors for 2e5 draws.
        let m = 200_000;
        let mut g = vec![0f64; m];
        gaussians(11, 4, 0, &mut g);
        let mean = g.iter().sum::<f64>() / m as f64;
        let var = g.iter().map(|v| v * v).sum::<f64>() / m as f64;
        let kurt = g.iter().map(|v| v.powi(4)).sum::<f64>() / m as f64;
        assert!(mean.abs() < 5.0 / (m as f64).sqrt(), "mean {mean}");
        assert!(
            (var - 1.0).abs() < 5.0 * (2.0 / m as f64).sqrt(),
            "var {var}"
        );
        assert!(
            (kurt - 3.0).abs() < 5.0 * (96.0 / m as f64).sqrt(),
            "fourth moment {kurt}"
        );
    }

    #[test]
    fn block_is_independent_of_threads_and_scaled_by_orderings() {
        let (n, p) = (40, 3);
        let len = num_multisets(n, p).unwrap();
        let d = Disorder::new(5);
        let mut one = vec![0f64; len];
        let mut two = vec![0f64; len];
        let mut three = vec![0f64; len];
        let (ex1, ex2, ex3) = (pool(1), pool(2), Exec::inline());
        fill_block(&ex1, n, p, 0.5, &d, &mut one).unwrap();
        fill_block(&ex2, n, p, 0.5, &d, &mut two).unwrap();
        fill_block(&ex3, n, p, 0.5, &d, &mut three).unwrap();
        assert_eq!(one, two);
        assert_eq!(one, three);
        // every coefficient is counted once as finished work, whatever the threads
        assert_eq!((ex1.done(), ex2.done()), (len as u64, len as u64));
        assert_eq!(ex3.done(), len as u64);
        let mut g = vec![0f64; len];
        gaussians(5, p, 0, &mut g);
        let mut idx = [0usize; 3];
        for r in 0..len {
            let want = (n as f64).sqrt() * 0.5 * (orderings(&idx) as f64).sqrt() * g[r];
            assert_eq!(one[r], want);
            advance(&mut idx, n);
        }
    }

    #[test]
    fn correlation_extremes() {
        let (n, p) = (12, 2);
        let len = num_multisets(n, p).unwrap();
        let mut base = vec![0f64; len];
        let mut same = vec![0f64; len];
        let mut indep = vec![0f64; len];
        fill_range(n, p, 1.0, &Disorder::new(3), 0, &mut base);
        let d1 = Disorder {
            seed: 9,
            correlated_with: Some((3, 1.0)),
        };
        fill_range(n, p, 1.0, &d1, 0, &mut same);
        assert_eq!(base, same, "rho = 1 reproduces the reference instance");
        let d0 = Disorder {
            seed: 9,
            correlated_with: Some((3, 0.0)),
        };
        fill_range(n, p, 1.0, &d0, 0, &mut indep);
        let mut plain = vec![0f64; len];
        fill_range(n, p, 1.0, &Disorder::new(9), 0, &mut plain);
        assert_eq!(indep, plain, "rho = 0 is the independent instance");
        assert!(Disorder {
            seed: 1,
            correlated_with: Some((0, 1.5))
        }
        .validate()
        .is_err());
    }

    /// The smallest u1 (from w1 = 0) gives the largest radius, and it is the bound.
    #[test]
    fn the_largest_gaussian_is_the_radius_at_the_smallest_uniform() {
        let u1 = SCALE; // ((w1 >> 11) + 1) 2^-53 at w1 = 0
        assert_eq!((-2.0 * libm::log(u1)).sqrt(), largest_gaussian());
        assert!((largest_gaussian() - (106.0 * std::f64::consts::LN_2).sqrt()).abs() < 1e-14);
        let mut g = vec![0.0; 1 << 16];
        gaussians(3, 2, 0, &mut g);
        assert!(g.iter().all(|v| v.abs() <= largest_gaussian()));
    }
}
