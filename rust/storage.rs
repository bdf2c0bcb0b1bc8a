//! Packed storage of a random polynomial: one coefficient per sorted monomial and degree.
//!
//! A [`Packed`] holds, for each degree p of the mixture, the coefficients a_m of
//! H_p(x) = sum_m a_m x_i1 ... x_ip over multisets m = (i1 <= ... <= ip) of 0..n in
//! lexicographic order: C(n+p-1, p) numbers instead of the n^p of a dense tensor.
//! Coefficients are stored as f64 or f32 ([`Coef`]); kernels always accumulate in f64.

use crate::combinatorics::{num_multisets, MAX_DEGREE};
use crate::error::{try_zeroed, CoreError, ZeroBits};
use crate::exec::Exec;
use crate::sampling::{coefficient_bound, fill_block, largest_deviation, Disorder};

/// Values copied between two calls of the `between` hook of [`Packed::from_coefficients`]
/// (8 MiB of float64, about a millisecond).
pub const COPY_PIECE: usize = 1 << 20;

/// Keeps [`Coef`] to the two storage types of this crate: the SIMD loops trust `load4` and
/// the widths of f64 and f32, so a type from outside must not be able to join.
mod sealed {
    pub trait Sealed {}
    impl Sealed for f64 {}
    impl Sealed for f32 {}
}

/// A storage type for coefficients (f64 or f32; sealed). Arithmetic is always done in f64.
pub trait Coef:
    sealed::Sealed + Copy + Send + Sync + Default + PartialEq + std::fmt::Debug + ZeroBits + 'static
{
    const NAME: &'static str;
    /// True when the stored type is narrower than f64, so that every load widens it (f32).
    ///
    /// On the AVX2 path of the processor this project is measured on (AMD Zen 1), widening
    /// competes with the multiply-adds for execution units (a loop of eight 256-bit fused
    /// multiply-adds took 2.4 cycles longer with four `vcvtps2pd` added, while eight adds took
    /// no longer with eight of them). Loops that add four weighted segments into one vector,
    /// z_t += w_0 a_0,t + ... + w_3 a_3,t, then take the sum as one chain (a product and three
    /// fused multiply-adds, then one add into z) rather than as two pairs (two products, two
    /// fused multiply-adds and two adds): fewer instructions for a longer dependency chain.
    /// For f32 that made the degree-3 gradient at n = 800 2-3 % faster on one and two threads
    /// (the HVP did not change); for f64 the chain was 1-4 % slower, so f64 keeps the pairs.
    const WIDENS: bool;
    /// The largest finite value of the type, as f64.
    const LARGEST: f64;
    /// The smallest positive normal value of the type, as f64.
    const SMALLEST_NORMAL: f64;
    fn to_f64(self) -> f64;
    fn from_f64(v: f64) -> Self;
    /// Four consecutive coefficients widened to f64 lanes.
    ///
    /// # Safety
    /// The processor must have AVX and `p` must be valid for reading four values; only call
    /// it from code compiled with the `avx2` target feature (see `crate::avx2`).
    #[cfg(target_arch = "x86_64")]
    unsafe fn load4(p: *const Self) -> core::arch::x86_64::__m256d;
}

impl Coef for f64 {
    const NAME: &'static str = "float64";
    const WIDENS: bool = false;
    const LARGEST: f64 = f64::MAX;
    const SMALLEST_NORMAL: f64 = f64::MIN_POSITIVE;
    #[inline(always)]
    fn to_f64(self) -> f64 {
        self
    }
    #[inline(always)]
    fn from_f64(v: f64) -> Self {
        v
    }
    #[cfg(target_arch = "x86_64")]
    #[inline(always)]
    unsafe fn load4(p: *const Self) -> core::arch::x86_64::__m256d {
        core::arch::x86_64::_mm256_loadu_pd(p)
    }
}

impl Coef for f32 {
    const NAME: &'static str = "float32";
    const WIDENS: bool = true;
    const LARGEST: f64 = f32::MAX as f64;
    const SMALLEST_NORMAL: f64 = f32::MIN_POSITIVE as f64;
    #[inline(always)]
    fn to_f64(self) -> f64 {
        self as f64
    }
    #[inline(always)]
    fn from_f64(v: f64) -> Self {
        v as f32
    }
    #[cfg(target_arch = "x86_64")]
    #[inline(always)]
    unsafe fn load4(p: *const Self) -> core::arch::x86_64::__m256d {
        use core::arch::x86_64::{_mm256_cvtps_pd, _mm_loadu_ps};
        _mm256_cvtps_pd(_mm_loadu_ps(p))
    }
}

/// The degree-p part of a polynomial.
#[derive(Debug, Clone)]
pub struct Block<T> {
    pub degree: usize,
    /// gamma_p when the block was sampled; `None` for user-given coefficients.
    pub gamma: Option<f64>,
    pub coeffs: Vec<T>,
}

/// A polynomial on R^n stored as packed blocks, sorted by degree.
#[derive(Debug, Clone)]
pub struct Packed<T> {
    n: usize,
    blocks: Vec<Block<T>>,
}

/// Checks n and the degrees; returns the coefficient count of each degree, in the given order.
pub fn block_lengths(n: usize, degrees: &[usize]) -> Result<Vec<usize>, CoreError> {
    if n == 0 {
        return Err(CoreError::InvalidSize { n });
    }
    if degrees.is_empty() {
        return Err(CoreError::NoDegrees);
    }
    let mut seen = [false; MAX_DEGREE + 1];
    degrees
        .iter()
        .map(|&p| {
            if !(1..=MAX_DEGREE).contains(&p) {
                return Err(CoreError::InvalidDegree { p });
            }
            if std::mem::replace(&mut seen[p], true) {
                return Err(CoreError::DuplicateDegree { p });
            }
            num_multisets(n, p)
        })
        .collect()
}

/// Bytes of coefficient storage for n spins and these degrees with `elem` bytes per number.
pub fn storage_bytes(n: usize, degrees: &[usize], elem: usize) -> Result<usize, CoreError> {
    let lens = block_lengths(n, degrees)?;
    lens.iter()
        .try_fold(0usize, |acc, &l| acc.checked_add(l.checked_mul(elem)?))
        .ok_or_else(|| CoreError::SizeOverflow {
            what: format!("storage for n = {n}, degrees {degrees:?}"),
        })
}

impl<T: Coef> Packed<T> {
    /// Samples every block from its counter-based Gaussian stream (see [`crate::sampling`]).
    /// `terms` are (p, gamma_p) pairs.
    pub fn sample(
        exec: &Exec,
        n: usize,
        terms: &[(usize, f64)],
        disorder: &Disorder,
    ) -> Result<Self, CoreError> {
        disorder.validate()?;
        for &(p, gamma) in terms {
            if !gamma.is_finite() || gamma < 0.0 {
                return Err(CoreError::InvalidGamma { p, gamma });
            }
        }
        let degrees: Vec<usize> = terms.iter().map(|t| t.0).collect();
        let lens = block_lengths(n, &degrees)?;
        storage_bytes(n, &degrees, std::mem::size_of::<T>())?;
        for &(p, gamma) in terms {
            // a value past T's range would be stored as an infinity
            let bound = coefficient_bound(n, p, gamma, disorder);
            if bound > T::LARGEST {
                return Err(CoreError::StorageRange {
                    p,
                    gamma,
                    n,
                    bound,
                    dtype: T::NAME,
                    largest: T::LARGEST,
                });
            }
        }
        // Where even the largest standard deviation of any coefficient of any degree lies
        // below T's normal range, nearly all of them would be stored as subnormals (a few
        // significant bits) or zero. One small degree beside a larger one is no loss (its
        // part of H is as small), so the mixture's largest deviation decides.
        let largest = terms
            .iter()
            .map(|&(p, gamma)| (largest_deviation(n, p, gamma), p, gamma))
            .max_by(|a, b| a.0.total_cmp(&b.0));
        if let Some((scale, p, gamma)) = largest {
            if gamma > 0.0 && scale < T::SMALLEST_NORMAL {
                return Err(CoreError::StoragePrecision {
                    p,
                    gamma,
                    n,
                    scale,
                    dtype: T::NAME,
                    smallest: T::SMALLEST_NORMAL,
                });
            }
        }
        let mut blocks = Vec::with_capacity(terms.len());
        for (&(p, gamma), &len) in terms.iter().zip(&lens) {
            let mut coeffs = try_zeroed::<T>(len)?;
            fill_block(exec, n, p, gamma, disorder, &mut coeffs)?;
            blocks.push(Block {
                degree: p,
                gamma: Some(gamma),
                coeffs,
            });
        }
        Ok(Self::sorted(n, blocks))
    }

    /// Wraps user-given coefficients (f64, rounded to T), one array per degree, copied on the
    /// calling thread in pieces of [`COPY_PIECE`] values; `between` runs before each piece,
    /// and an error from it ends the call (the binding polls for Ctrl-C there, a test may
    /// return [`CoreError::Interrupted`]). Every stored value is checked finite after its
    /// rounding to T ([`CoreError::NonFiniteInput`]: a NaN or infinity, or a value beyond
    /// f32's range), so a check the caller made before the copy is not the only one.
    pub fn from_coefficients(
        n: usize,
        parts: &[(usize, &[f64])],
        mut between: impl FnMut() -> Result<(), CoreError>,
    ) -> Result<Self, CoreError> {
        let degrees: Vec<usize> = parts.iter().map(|t| t.0).collect();
        let lens = block_lengths(n, &degrees)?;
        let mut blocks = Vec::with_capacity(parts.len());
        for (&(p, data), &len) in parts.iter().zip(&lens) {
            if data.len() != len {
                return Err(CoreError::CoefficientCount {
                    p,
                    n,
                    expected: len,
                    got: data.len(),
                });
            }
            let mut coeffs = Vec::new();
            coeffs
                .try_reserve_exact(len)
                .map_err(|_| CoreError::AllocationFailed {
                    bytes: len * std::mem::size_of::<T>(),
                })?;
            crate::pages::advise_huge(&mut coeffs);
            // in pieces, so that a stop request (Ctrl-C) ends a copy of gigabytes early
            for piece in data.chunks(COPY_PIECE) {
                between()?;
                let start = coeffs.len();
                coeffs.extend(piece.iter().map(|&v| T::from_f64(v)));
                if let Some(k) = coeffs[start..].iter().position(|c| !c.to_f64().is_finite()) {
                    return Err(CoreError::NonFiniteInput {
                        what: format!("the degree-{p} coefficients"),
                        index: start + k,
                        value: piece[k],
                        dtype: T::NAME,
                    });
                }
            }
            blocks.push(Block {
                degree: p,
                gamma: None,
                coeffs,
            });
        }
        Ok(Self::sorted(n, blocks))
    }

    fn sorted(n: usize, mut blocks: Vec<Block<T>>) -> Self {
        blocks.sort_by_key(|b| b.degree);
        Packed { n, blocks }
    }

    pub fn n(&self) -> usize {
        self.n
    }

    pub fn blocks(&self) -> &[Block<T>] {
        &self.blocks
    }

    pub fn degrees(&self) -> Vec<usize> {
        self.blocks.iter().map(|b| b.degree).collect()
    }

    pub fn block(&self, p: usize) -> Result<&Block<T>, CoreError> {
        self.blocks
            .iter()
            .find(|b| b.degree == p)
            .ok_or(CoreError::MissingDegree { p })
    }

    pub fn max_degree(&self) -> usize {
        self.blocks.iter().map(|b| b.degree).max().unwrap_or(0)
    }

    pub fn num_coefficients(&self) -> usize {
        self.blocks.iter().map(|b| b.coeffs.len()).sum()
    }

    pub fn nbytes(&self) -> usize {
        self.num_coefficients() * std::mem::size_of::<T>()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::sampling::largest_gaussian;

    fn pool() -> Exec {
        Exec::with_threads(2).unwrap()
    }

    /// float32 storage refuses a gamma whose coefficients could pass f32::MAX (they would be
    /// stored as infinities) and takes one just below the bound, whose coefficients are all
    /// finite; float64 storage takes both.
    #[test]
    fn float32_storage_refuses_coefficients_beyond_its_range() {
        let exec = pool();
        let (n, p) = (9, 3);
        let edge = f32::MAX as f64 / ((n as f64).sqrt() * 6f64.sqrt() * largest_gaussian());
        let over = Packed::<f32>::sample(&exec, n, &[(p, edge * (1.0 + 1e-9))], &Disorder::new(4));
        assert!(matches!(over, Err(CoreError::StorageRange { p: 3, .. })));
        let under = Packed::<f32>::sample(&exec, n, &[(p, edge * (1.0 - 1e-9))], &Disorder::new(4));
        assert!(under.unwrap().blocks[0]
            .coeffs
            .iter()
            .all(|a| a.is_finite()));
        let wide = Packed::<f64>::sample(&exec, n, &[(p, edge * 2.0)], &Disorder::new(4));
        assert!(wide.is_ok());
        // a correlated draw can reach sqrt(2) times further (rho = 1/sqrt(2))
        let mut corr = Disorder::new(4);
        corr.correlated_with = Some((5, std::f64::consts::FRAC_1_SQRT_2));
        let over = Packed::<f32>::sample(&exec, n, &[(p, edge * 0.8)], &corr);
        assert!(matches!(over, Err(CoreError::StorageRange { .. })));
    }

    /// Storage refuses a mixture whose coefficients' largest standard deviation, sqrt(n p!)
    /// gamma, lies below the type's normal range (float32 stored every coefficient of gamma =
    /// 1e-50 as 0), and takes one just above it, whose larger coefficients keep about 20
    /// significant bits; float64 takes the float32 edge. A small degree beside a larger one
    /// is taken (its part of H is as small), and so is a zero gamma.
    #[test]
    fn storage_refuses_coefficients_below_its_normal_range() {
        let exec = pool();
        let (n, p) = (16, 2);
        let edge = f32::MIN_POSITIVE as f64 / (16.0f64 * 2.0).sqrt();
        let below = Packed::<f32>::sample(&exec, n, &[(p, edge * 0.99)], &Disorder::new(4));
        assert!(matches!(
            below,
            Err(CoreError::StoragePrecision { p: 2, n: 16, .. })
        ));
        // just above the edge, coefficients of at least an eighth of it keep about 20
        // significant bits (subnormal spacing 1.4e-45 against 1.5e-39)
        let gamma = edge * 1.01;
        let above = Packed::<f32>::sample(&exec, n, &[(p, gamma)], &Disorder::new(4)).unwrap();
        let wide = Packed::<f64>::sample(&exec, n, &[(p, gamma)], &Disorder::new(4)).unwrap();
        let pairs = above.blocks[0].coeffs.iter().zip(&wide.blocks[0].coeffs);
        let kept: Vec<f64> = pairs
            .filter(|(_, b)| b.abs() >= f32::MIN_POSITIVE as f64 / 8.0)
            .map(|(a, b)| (*a as f64 - b).abs() / b.abs())
            .collect();
        assert!(kept.len() > 50, "{} coefficients", kept.len());
        assert!(kept.iter().all(|&e| e < 1e-6), "{kept:?}");
        assert!(Packed::<f64>::sample(&exec, n, &[(p, edge * 0.99)], &Disorder::new(4)).is_ok());
        let tiny = f64::MIN_POSITIVE / (16.0f64 * 2.0).sqrt() * 0.99;
        let below = Packed::<f64>::sample(&exec, n, &[(p, tiny)], &Disorder::new(4));
        assert!(matches!(below, Err(CoreError::StoragePrecision { .. })));
        // the mixture's largest deviation decides: degree 4 alone is refused, beside degree 2
        // it is taken; the refusal names the largest term
        let small = f32::MIN_POSITIVE as f64 / (16.0f64 * 24.0).sqrt() * 0.5;
        let alone = Packed::<f32>::sample(&exec, n, &[(3, small), (4, small)], &Disorder::new(4));
        assert!(matches!(
            alone,
            Err(CoreError::StoragePrecision { p: 4, .. })
        ));
        let beside = [(2, 1.0), (4, small)];
        assert!(Packed::<f32>::sample(&exec, n, &beside, &Disorder::new(4)).is_ok());
        let zero = Packed::<f32>::sample(&exec, n, &[(p, 0.0), (3, 1.0)], &Disorder::new(4));
        assert!(zero.unwrap().blocks[0].coeffs.iter().all(|a| *a == 0.0));
    }

    #[test]
    fn a_stopped_sampling_is_an_error_not_a_partial_instance() {
        let exec = pool();
        exec.request_stop();
        let out = Packed::<f64>::sample(&exec, 300, &[(3, 1.0)], &Disorder::new(1));
        assert!(matches!(out, Err(CoreError::Interrupted)));
    }

    #[test]
    fn lengths_and_bytes() {
        assert_eq!(block_lengths(10, &[1, 3]).unwrap(), vec![10, 220]);
        assert_eq!(storage_bytes(10, &[1, 3], 8).unwrap(), 230 * 8);
        assert_eq!(block_lengths(0, &[2]), Err(CoreError::InvalidSize { n: 0 }));
        assert_eq!(
            block_lengths(3, &[9]),
            Err(CoreError::InvalidDegree { p: 9 })
        );
        assert_eq!(
            block_lengths(3, &[0]),
            Err(CoreError::InvalidDegree { p: 0 })
        );
        assert_eq!(
            block_lengths(3, &[2, 2]),
            Err(CoreError::DuplicateDegree { p: 2 })
        );
        assert_eq!(block_lengths(3, &[]), Err(CoreError::NoDegrees));
        assert!(matches!(
            storage_bytes(1 << 40, &[8], 8),
            Err(CoreError::SizeOverflow { .. })
        ));
    }

    #[test]
    fn sample_validates_and_sorts() {
        let d = Disorder::new(1);
        let bad = Packed::<f64>::sample(&pool(), 4, &[(2, -1.0)], &d);
        assert!(matches!(bad, Err(CoreError::InvalidGamma { p: 2, .. })));
        let nan = Packed::<f64>::sample(&pool(), 4, &[(2, f64::NAN)], &d);
        assert!(matches!(nan, Err(CoreError::InvalidGamma { .. })));
        let ok = Packed::<f32>::sample(&pool(), 5, &[(3, 1.0), (1, 0.5)], &d).unwrap();
        assert_eq!(ok.degrees(), vec![1, 3]);
        assert_eq!(ok.num_coefficients(), 5 + 35);
        assert_eq!(ok.nbytes(), 40 * 4);
    }

    #[test]
    fn float32_storage_rounds_the_float64_sample() {
        let d = Disorder::new(8);
        let a = Packed::<f64>::sample(&pool(), 9, &[(2, 1.0), (4, 0.2)], &d).unwrap();
        let b = Packed::<f32>::sample(&pool(), 9, &[(2, 1.0), (4, 0.2)], &d).unwrap();
        for (ba, bb) in a.blocks().iter().zip(b.blocks()) {
            for (x, y) in ba.coeffs.iter().zip(&bb.coeffs) {
                assert_eq!(*x as f32, *y);
            }
        }
    }

    /// The hook runs before each piece, and its error ends the copy: a stop at the second
    /// piece of a two-piece array, and at the first of a short one.
    #[test]
    fn from_coefficients_stops_when_asked() {
        let big = vec![0.5; 3 * COPY_PIECE];
        let n = 2 * COPY_PIECE; // degree 1: n coefficients, two pieces
        let mut calls = 0;
        let out = Packed::<f32>::from_coefficients(n, &[(1, &big[..n])], || {
            calls += 1;
            if calls == 2 {
                Err(CoreError::Interrupted)
            } else {
                Ok(())
            }
        });
        assert!(matches!(out, Err(CoreError::Interrupted)) && calls == 2);
        let out =
            Packed::<f64>::from_coefficients(3, &[(2, &big[..6])], || Err(CoreError::Interrupted));
        assert!(matches!(out, Err(CoreError::Interrupted)));
        let fine = Packed::<f64>::from_coefficients(n, &[(1, &big[..n])], || Ok(()));
        assert_eq!(fine.unwrap().block(1).unwrap().coeffs.len(), n);
    }

    /// A NaN, an infinity, or a value beyond f32's range in float32 storage is refused by
    /// index, in any piece; f64 storage takes 1e300.
    #[test]
    fn from_coefficients_refuses_values_that_are_not_finite_once_stored() {
        let n = COPY_PIECE + 10; // degree 1: two pieces
        for (value, index) in [(f64::NAN, 3), (f64::INFINITY, COPY_PIECE + 4), (-1e300, 7)] {
            let mut data = vec![0.25; n];
            data[index] = value;
            let out = Packed::<f32>::from_coefficients(n, &[(1, &data)], || Ok(()));
            match out {
                Err(CoreError::NonFiniteInput {
                    index: i, dtype, ..
                }) => {
                    assert_eq!((i, dtype), (index, "float32"));
                }
                _ => panic!("{value} at {index} was not refused"),
            }
            let wide = Packed::<f64>::from_coefficients(n, &[(1, &data)], || Ok(()));
            assert_eq!(wide.is_ok(), value.is_finite());
        }
    }

    #[test]
    fn from_coefficients_checks_lengths() {
        let data = vec![1.0; 6];
        let ok = Packed::<f64>::from_coefficients(3, &[(2, &data)], || Ok(())).unwrap();
        assert_eq!(ok.block(2).unwrap().coeffs, data);
        assert!(ok.block(3).is_err());
        let bad = Packed::<f64>::from_coefficients(3, &[(2, &data[..5])], || Ok(()));
        assert!(matches!(
            bad,
            Err(CoreError::CoefficientCount {
                p: 2,
                n: 3,
                expected: 6,
                got: 5,
            })
        ));
        let msg = bad.err().unwrap().to_string();
        assert!(
            msg.contains("degree-2") && msg.contains("= 6, got 5"),
            "{msg}"
        );
    }
}
