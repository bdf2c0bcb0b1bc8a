//! orthoclimb core: packed storage of random symmetric polynomials on R^n, counter-based
//! sampling of their coefficients, and multithreaded kernels for the value, gradient,
//! Hessian and Hessian-vector products.
//!
//! The core modules never mention PyO3; the binding layer lives in [`python`] and is only
//! compiled with the `python` feature (maturin turns it on).

#[cfg(feature = "python")]
mod python;
