//! Typed errors of the core. The binding layer maps each variant to one Python exception
//! type in a single place; nothing in the core panics on bad input.

use std::fmt;

/// Everything the core can refuse.
#[derive(Debug, Clone, PartialEq)]
pub enum CoreError {
    /// The number of spins n must be at least 1.
    InvalidSize { n: usize },
    /// A degree outside 1..=MAX_DEGREE.
    InvalidDegree { p: usize },
    /// The same degree twice in one polynomial.
    DuplicateDegree { p: usize },
    /// A polynomial needs at least one degree.
    NoDegrees,
    /// A gamma that is negative, NaN or infinite.
    InvalidGamma { p: usize, gamma: f64 },
    /// A correlation rho outside [-1, 1].
    InvalidCorrelation { rho: f64 },
    /// An array whose length does not match what the operation needs.
    LengthMismatch {
        what: &'static str,
        expected: usize,
        got: usize,
    },
    /// A coefficient array of degree p whose length is not C(n+p-1, p).
    CoefficientCount {
        p: usize,
        n: usize,
        expected: usize,
        got: usize,
    },
    /// No degree-p block in this polynomial.
    MissingDegree { p: usize },
    /// A count (coefficients, bytes) does not fit in the machine's address space.
    SizeOverflow { what: String },
    /// The allocator refused a buffer.
    AllocationFailed { bytes: usize },
    /// An unknown storage type name.
    InvalidDtype { name: String },
    /// A thread count of zero or a pool that could not be built.
    InvalidThreads { detail: String },
    /// The caller asked the call to stop (see [`crate::exec::Exec::request_stop`]).
    Interrupted,
    /// A kernel's result is not finite although its inputs were: float64 overflowed (at
    /// `point`, the first row of a batch whose results are not all finite).
    Overflow {
        what: &'static str,
        point: Option<usize>,
    },
    /// An input (a point, a direction, a given coefficient) holds a NaN or an infinity, or a
    /// finite value beyond the range of the storage type `dtype` it is rounded to.
    NonFiniteInput {
        what: String,
        index: usize,
        value: f64,
        dtype: &'static str,
    },
    /// Sampled coefficients of degree p could exceed the storage type's largest value.
    StorageRange {
        p: usize,
        gamma: f64,
        n: usize,
        bound: f64,
        dtype: &'static str,
        largest: f64,
    },
    /// Sampled coefficients would nearly all fall below the storage type's normal range: the
    /// largest standard deviation of any of them (`scale`, of degree p) is below it, where
    /// they lose their precision or round to zero.
    StoragePrecision {
        p: usize,
        gamma: f64,
        n: usize,
        scale: f64,
        dtype: &'static str,
        smallest: f64,
    },
}

impl fmt::Display for CoreError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            CoreError::InvalidSize { n } => write!(f, "number of spins n must be >= 1, got {n}"),
            CoreError::InvalidDegree { p } => write!(
                f,
                "degree p must be in 1..{}, got p = {p}",
                crate::combinatorics::MAX_DEGREE
            ),
            CoreError::DuplicateDegree { p } => write!(f, "degree p = {p} is given twice"),
            CoreError::NoDegrees => write!(f, "a polynomial needs at least one degree"),
            CoreError::InvalidGamma { p, gamma } => {
                write!(f, "gamma for p = {p} must be finite and >= 0, got {gamma}")
            }
            CoreError::InvalidCorrelation { rho } => {
                write!(f, "correlation rho must be in [-1, 1], got {rho}")
            }
            CoreError::LengthMismatch {
                what,
                expected,
                got,
            } => {
                write!(f, "{what}: expected length {expected}, got {got}")
            }
            CoreError::CoefficientCount {
                p,
                n,
                expected,
                got,
            } => write!(
                f,
                "degree-{p} coefficients for n = {n}: expected C(n+p-1, p) = {expected}, got {got}"
            ),
            CoreError::MissingDegree { p } => write!(f, "this polynomial has no degree-{p} term"),
            CoreError::SizeOverflow { what } => write!(f, "size overflow: {what}"),
            CoreError::AllocationFailed { bytes } => {
                write!(f, "could not allocate {bytes} bytes")
            }
            CoreError::InvalidDtype { name } => {
                write!(
                    f,
                    "storage dtype must be 'float64' or 'float32', got {name:?}"
                )
            }
            CoreError::InvalidThreads { detail } => write!(f, "invalid thread setting: {detail}"),
            CoreError::Interrupted => write!(f, "the call was interrupted before it finished"),
            CoreError::Overflow { what, point } => {
                write!(f, "the {what} overflowed float64")?;
                if let Some(k) = point {
                    write!(f, " at point {k} of the batch (row {k} of x)")?;
                }
                write!(
                    f,
                    ": the result is not finite although every input is (points are meant to \
                     lie on the unit sphere |x| = 1; check the inputs' scale)"
                )
            }
            CoreError::NonFiniteInput {
                what,
                index,
                value,
                dtype,
            } => {
                if value.is_finite() {
                    write!(
                        f,
                        "{what}: the value {value:e} at index {index} is beyond {dtype}'s range"
                    )
                } else {
                    write!(f, "{what}: non-finite value {value} at index {index}")
                }
            }
            CoreError::StorageRange {
                p,
                gamma,
                n,
                bound,
                dtype,
                largest,
            } => {
                write!(
                    f,
                    "gamma = {gamma:?} for p = {p} at n = {n}: sampled coefficients can reach \
                     {bound:.4e}, beyond {dtype}'s range (+-{largest:.4e})"
                )?;
                if *dtype != "float64" {
                    write!(f, "; store them with dtype=\"float64\"")?;
                }
                Ok(())
            }
            CoreError::StoragePrecision {
                p,
                gamma,
                n,
                scale,
                dtype,
                smallest,
            } => {
                write!(
                    f,
                    "gamma = {gamma:?} for p = {p} at n = {n}, the mixture's largest term: no \
                     sampled coefficient has a standard deviation above {scale:.4e}, below \
                     {dtype}'s normal range (smallest normal {smallest:.4e}), where nearly all \
                     would lose their precision or round to zero; scale the mixture up"
                )?;
                if *dtype != "float64" {
                    write!(f, " or store them with dtype=\"float64\"")?;
                }
                Ok(())
            }
        }
    }
}

impl std::error::Error for CoreError {}

/// Kernel results, which must not leave the core with an overflowed value in them (the
/// inputs are checked finite, so a NaN or infinity here means float64 overflowed, for
/// example at |x| = 1e300 or with coefficients near the largest float64).
pub trait KernelResult {
    /// Whether every value is finite.
    fn all_finite(&self) -> bool;
}

impl KernelResult for f64 {
    fn all_finite(&self) -> bool {
        self.is_finite()
    }
}

impl KernelResult for Vec<f64> {
    /// x - x is 0 for a finite x and NaN for an infinity or NaN, so eight running sums of it
    /// stay exactly 0 unless some value is not finite. Unlike a short-circuiting scan they
    /// vectorize: 28 against 56 us for the 1.3 MB of an n = 400 Hessian (about 1 % of it).
    #[allow(clippy::needless_range_loop)] // k indexes the sums and the chunk alike
    #[allow(clippy::eq_op)] // x - x on purpose, see above
    fn all_finite(&self) -> bool {
        let mut sums = [0.0f64; 8];
        let chunks = self.chunks_exact(8);
        let tail = chunks.remainder();
        for c in chunks {
            for k in 0..8 {
                sums[k] += c[k] - c[k];
            }
        }
        sums.iter().chain(tail).all(|v| v.is_finite())
    }
}

impl<A: KernelResult, B: KernelResult> KernelResult for (A, B) {
    fn all_finite(&self) -> bool {
        self.0.all_finite() && self.1.all_finite()
    }
}

/// `out` itself when every value is finite, else [`CoreError::Overflow`] naming `what`.
pub fn finite<T: KernelResult>(what: &'static str, out: T) -> Result<T, CoreError> {
    if out.all_finite() {
        Ok(out)
    } else {
        Err(CoreError::Overflow { what, point: None })
    }
}

/// [`finite`] for a batch's results, each a row-major block of `row_len` values per point
/// (1 for energies, n for gradients): the error names the first point with a value that is
/// not finite, so that a user can find the point whose scale overflowed.
pub fn finite_rows(what: &'static str, blocks: &[(&[f64], usize)]) -> Result<(), CoreError> {
    let point = blocks
        .iter()
        .filter_map(|(values, row_len)| {
            values
                .iter()
                .position(|v| !v.is_finite())
                .map(|i| i / row_len.max(&1))
        })
        .min();
    match point {
        None => Ok(()),
        Some(k) => Err(CoreError::Overflow {
            what,
            point: Some(k),
        }),
    }
}

/// Element types whose all-zero bit pattern is the value zero, so a buffer of them can come
/// zeroed from the allocator.
///
/// # Safety
/// Implement only for types for which every byte being 0 is a valid value.
pub unsafe trait ZeroBits: Copy {}
// SAFETY: 0.0, 0.0 and 0 are all-zero bit patterns.
unsafe impl ZeroBits for f64 {}
unsafe impl ZeroBits for f32 {}
unsafe impl ZeroBits for i64 {}

/// Allocate a zeroed buffer of `len` elements without aborting on failure.
///
/// The memory comes zeroed from the allocator (for large buffers, fresh pages that the
/// kernel zeroes when they are first touched), so nothing is written here: the first writes,
/// often by the worker threads of a pass that checks for Ctrl-C between chunks, fault the
/// pages in. Large buffers ask for huge pages before that (see [`crate::pages`]).
pub(crate) fn try_zeroed<T: ZeroBits>(len: usize) -> Result<Vec<T>, CoreError> {
    let overflow = || CoreError::SizeOverflow {
        what: format!("{len} elements"),
    };
    let bytes = len
        .checked_mul(std::mem::size_of::<T>())
        .ok_or_else(overflow)?;
    if bytes == 0 {
        return Ok(vec![]);
    }
    let layout = std::alloc::Layout::array::<T>(len).map_err(|_| overflow())?;
    // SAFETY: the layout has a nonzero size.
    let ptr = unsafe { std::alloc::alloc_zeroed(layout) } as *mut T;
    if ptr.is_null() {
        return Err(CoreError::AllocationFailed { bytes });
    }
    // SAFETY: `ptr` comes from the global allocator with the layout of `len` elements of T
    // (the layout a Vec of that capacity uses), and its zeroed bytes are valid T (ZeroBits).
    let mut v = unsafe { Vec::from_raw_parts(ptr, len, len) };
    crate::pages::advise_huge(&mut v);
    Ok(v)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finite_passes_finite_results_through() {
        assert_eq!(finite("energy", 1.5), Ok(1.5));
        let pair = (2.0, vec![f64::MAX, -0.0, f64::MIN_POSITIVE]);
        assert_eq!(finite("gradient", pair.clone()), Ok(pair));
    }

    #[test]
    fn finite_refuses_any_overflowed_value() {
        let overflow = CoreError::Overflow {
            what: "Hessian",
            point: None,
        };
        assert_eq!(finite("Hessian", f64::INFINITY), Err(overflow.clone()));
        assert_eq!(
            finite("Hessian", vec![0.0, f64::NAN]),
            Err(overflow.clone())
        );
        let pair = (1.0, vec![f64::NEG_INFINITY]);
        assert_eq!(finite("Hessian", pair), Err(overflow.clone()));
        assert_eq!(finite("Hessian", (f64::NAN, vec![1.0])), Err(overflow));
        for bad in [f64::INFINITY, f64::NEG_INFINITY, f64::NAN] {
            for at in [0, 7, 8, 61, 63, 64, 66] {
                let mut v = vec![f64::MAX; 67]; // 8 chunks of 8 and a tail of 3
                v[at] = bad;
                assert!(!v.all_finite(), "{bad} at {at}");
            }
        }
        assert!(vec![f64::MAX; 67].all_finite());
        let msg = CoreError::Overflow {
            what: "energy",
            point: None,
        }
        .to_string();
        assert!(msg.starts_with("the energy overflowed float64:"), "{msg}");
    }

    #[test]
    fn finite_rows_names_the_first_point_with_an_overflow() {
        let e = [1.0, 2.0, f64::INFINITY];
        let g = [0.0, 0.0, 0.0, f64::NAN, 1.0, 1.0];
        assert_eq!(
            finite_rows("gradient", &[(&e[..2], 1), (&g[..3], 3)]),
            Ok(())
        );
        let err = finite_rows("gradient", &[(&e, 1), (&g, 3)]).unwrap_err();
        assert_eq!(
            err,
            CoreError::Overflow {
                what: "gradient",
                point: Some(1)
            }
        );
        assert!(err
            .to_string()
            .contains("at point 1 of the batch (row 1 of x)"));
    }
}
