//! orthoclimb core: packed storage of random symmetric polynomials on R^n, counter-based
//! sampling of their coefficients, and multithreaded kernels for the value, gradient,
//! Hessian and Hessian-vector products.
//!
//! The core modules never mention PyO3; the binding layer lives in `python.rs` and is only
//! compiled with the `python` feature (maturin turns it on).

mod adjacent;
#[cfg(target_arch = "x86_64")]
mod avx2;
#[cfg(target_arch = "x86_64")]
mod avx512;
pub mod batch;
pub mod boxmuller;
mod cache;
pub mod combinatorics;
pub mod error;
pub mod exec;
pub mod kernels;
mod pages;
pub mod partition;
mod portable;
mod prefix;
mod quads;
pub mod sampling;
pub mod scratch;
mod simd;
mod stagger;
pub mod storage;
pub mod threads;
mod tile;

pub use error::CoreError;
pub use exec::Exec;
pub use storage::{Coef, Packed};

#[cfg(feature = "python")]
mod python;
