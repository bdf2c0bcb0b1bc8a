//! PyO3 binding layer: the only file that knows about Python.
//!
//! Each method validates what the core cannot (array layout), takes read-only NumPy views,
//! releases the GIL with `py.detach` around the kernel, runs rayon only inside it, and maps
//! core errors to Python exceptions in [`to_py_err`]. A panic inside the core (a bug) is
//! caught and reported as `orthoclimb.errors.CoreError`, never as a PanicException.
//! While a kernel runs, the calling thread checks for Ctrl-C every [`SIGNAL_POLL`] and stops
//! the kernel at its next chunk; the call then raises what the signal handler raised
//! (KeyboardInterrupt), and the instance is untouched (kernels only read it). Small calls run
//! on the calling thread instead ([`threads::exec_for`], from the work each method reports).

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::time::Duration;

use numpy::{
    IntoPyArray, PyArray1, PyArray2, PyArrayMethods, PyReadonlyArray1, PyReadonlyArray2,
    PyUntypedArrayMethods,
};
use pyo3::exceptions::{PyKeyboardInterrupt, PyMemoryError, PyRuntimeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyType;

use crate::batch;
use crate::combinatorics::{advance, num_multisets};
use crate::error::{finite, finite_rows, CoreError, KernelResult};
use crate::exec::Exec;
use crate::kernels;
use crate::partition::QUANTUM;
use crate::sampling::Disorder;
use crate::simd::simd_path;
use crate::storage::{storage_bytes, Packed};
use crate::threads;

/// An exception of class `orthoclimb.errors.<class_name>`, or `fallback` when that module
/// cannot be imported (the core used without its Python package).
fn package_error(
    py: Python<'_>,
    class_name: &str,
    msg: String,
    fallback: fn(String) -> PyErr,
) -> PyErr {
    let class = py
        .import("orthoclimb.errors")
        .and_then(|m| m.getattr(class_name))
        .and_then(|c| c.cast_into::<PyType>().map_err(PyErr::from));
    match class {
        Ok(ty) => PyErr::from_type(ty, msg),
        Err(_) => fallback(msg),
    }
}

/// The one place where core errors become Python exceptions. Classes come from
/// `orthoclimb.errors` (all subclasses of ValueError).
fn to_py_err(py: Python<'_>, err: CoreError) -> PyErr {
    let class = match &err {
        CoreError::InvalidDegree { .. }
        | CoreError::DuplicateDegree { .. }
        | CoreError::NoDegrees
        | CoreError::InvalidGamma { .. } => "MixtureError",
        CoreError::LengthMismatch { .. } | CoreError::CoefficientCount { .. } => "ShapeError",
        CoreError::Overflow { .. } | CoreError::NonFiniteInput { .. } => "NonFiniteError",
        CoreError::AllocationFailed { .. } | CoreError::SizeOverflow { .. } => {
            return package_error(
                py,
                "InsufficientMemoryError",
                err.to_string(),
                PyMemoryError::new_err,
            )
        }
        CoreError::InvalidSize { .. }
        | CoreError::StorageRange { .. }
        | CoreError::StoragePrecision { .. }
        | CoreError::InvalidCorrelation { .. }
        | CoreError::MissingDegree { .. }
        | CoreError::InvalidDtype { .. }
        | CoreError::InvalidThreads { .. } => return PyValueError::new_err(err.to_string()),
        CoreError::Interrupted => return PyKeyboardInterrupt::new_err(err.to_string()),
    };
    package_error(py, class, err.to_string(), PyValueError::new_err)
}

fn internal_error(py: Python<'_>, what: &str) -> PyErr {
    let msg = format!("internal error in the orthoclimb core during {what}; please report it");
    package_error(py, "CoreError", msg, PyRuntimeError::new_err)
}

/// How often the calling thread checks for Ctrl-C while a kernel runs.
const SIGNAL_POLL: Duration = Duration::from_millis(50);

/// A call's work in coefficient passes and the most work items it splits into (see
/// [`threads::exec_for`]).
type Work = (u64, usize);

/// Runs `f` with the GIL released on the shared pool, or inline when its work is small
/// ([`threads::exec_for`]), mapping errors and panics. The waiting thread re-takes the GIL every
/// [`SIGNAL_POLL`] to run Python's signal handlers; when one raises, the kernel is stopped
/// and that exception is the call's result (it is never swallowed, even when the kernel
/// finished in the meantime).
fn run<T: Send>(
    py: Python<'_>,
    what: &str,
    work: Work,
    f: impl FnOnce(&Exec) -> Result<T, CoreError> + Send,
) -> PyResult<T> {
    run_reporting(py, what, work, None, f)
}

/// [`run`], and while the call runs, `progress(done)` (a Python callable, with the GIL) at
/// each poll where the call's count of finished work ([`Exec::done`]) has grown. An
/// exception from `progress` stops the call and is its result, like one from a signal
/// handler.
fn run_reporting<T: Send>(
    py: Python<'_>,
    what: &str,
    (work, items): Work,
    progress: Option<&Py<PyAny>>,
    f: impl FnOnce(&Exec) -> Result<T, CoreError> + Send,
) -> PyResult<T> {
    let exec = threads::exec_for(work, items).map_err(|e| to_py_err(py, e))?;
    let mut raised: Option<PyErr> = None;
    let mut reported = 0u64;
    let out = py.detach(|| {
        catch_unwind(AssertUnwindSafe(|| {
            exec.run_watched(SIGNAL_POLL, f, || {
                let polled = Python::attach(|py| {
                    py.check_signals()?;
                    let done = exec.done();
                    match progress {
                        Some(cb) if done > reported => {
                            reported = done;
                            cb.call1(py, (done,)).map(drop)
                        }
                        _ => Ok(()),
                    }
                });
                match polled {
                    Ok(()) => false,
                    Err(e) => {
                        raised = Some(e);
                        true
                    }
                }
            })
        }))
    });
    if let Some(err) = raised {
        return Err(err);
    }
    match out {
        Ok(Ok(v)) => Ok(v),
        Ok(Err(e)) => Err(to_py_err(py, e)),
        Err(_) => Err(internal_error(py, what)),
    }
}

/// [`run`] for a kernel: its result must be finite (inputs are checked finite before a call,
/// so a NaN or infinity in it means float64 overflowed, [`CoreError::Overflow`]).
fn run_kernel<T: Send + KernelResult>(
    py: Python<'_>,
    what: &'static str,
    work: Work,
    f: impl FnOnce(&Exec) -> Result<T, CoreError> + Send,
) -> PyResult<T> {
    run(py, what, work, |exec| {
        f(exec).and_then(|out| finite(what, out))
    })
}

fn not_c_contiguous(name: &str) -> PyErr {
    PyValueError::new_err(format!(
        "{name} must be a C-contiguous, aligned float64 array"
    ))
}

fn slice1<'a>(a: &'a PyReadonlyArray1<'_, f64>, name: &str) -> PyResult<&'a [f64]> {
    a.as_slice().map_err(|_| not_c_contiguous(name))
}

/// The elements in row-major order. `as_slice` also accepts a Fortran-ordered array, whose
/// buffer holds them column by column: read as rows, a (b, n) batch would silently give the
/// energies of other points, so only C order is taken (the Python layer converts).
fn slice2<'a>(a: &'a PyReadonlyArray2<'_, f64>, name: &str) -> PyResult<&'a [f64]> {
    if !a.is_c_contiguous() {
        return Err(not_c_contiguous(name));
    }
    a.as_slice().map_err(|_| not_c_contiguous(name))
}

/// A kernel's input, copied when the call starts, while the GIL is held: a read-only view does
/// not stop another Python thread from writing to the array while the kernel runs detached,
/// and the kernel would then read a point that changes during its pass. The copy is O(n) per
/// point or direction, against a pass over all the coefficients. It does not make such writes
/// safe: NumPy releases the GIL while it writes arrays of 500 elements or more, so one can still
/// be under way during the copy. Writing to an input from another thread during a call is not
/// supported; the copy only keeps the pass itself on one snapshot. The copy is checked finite
/// (the Python layer checked the array before, but a write in between, or a direct call of
/// this module, would otherwise reach the kernel and read as an overflow of its result).
fn input1(a: &PyReadonlyArray1<'_, f64>, name: &str) -> PyResult<Vec<f64>> {
    let copy = slice1(a, name)?.to_vec();
    finite_input(a.py(), name, &copy, copy.len())?;
    Ok(copy)
}

/// [`CoreError::NonFiniteInput`] for the first NaN or infinity of the copied input `values`,
/// rows of `cols` values each (a batch's: named by row, and the index within it).
fn finite_input(py: Python<'_>, name: &str, values: &[f64], cols: usize) -> PyResult<()> {
    match values.iter().position(|v| !v.is_finite()) {
        None => Ok(()),
        Some(flat) => {
            let (row, index) = (flat / cols.max(1), flat % cols.max(1));
            let one_row = cols >= values.len();
            Err(to_py_err(
                py,
                non_finite_at(name, one_row, row, index, values[flat]),
            ))
        }
    }
}

/// The error for a NaN or infinity `value` at `index` of row `row` of the input `name`, named
/// by row unless the input is `one_row` (a point, or a single row).
fn non_finite_at(name: &str, one_row: bool, row: usize, index: usize, value: f64) -> CoreError {
    CoreError::NonFiniteInput {
        what: if one_row {
            name.to_string()
        } else {
            format!("{name} row {row}")
        },
        index,
        value,
        dtype: "float64",
    }
}

/// [`input1`] for an array of shape (rows, cols), checking the side that must be n.
fn input2(
    py: Python<'_>,
    a: &PyReadonlyArray2<'_, f64>,
    name: &str,
    axis: usize,
    n: usize,
) -> PyResult<Vec<f64>> {
    let got = a.shape()[axis];
    if got != n {
        let what = if axis == 0 { "rows" } else { "columns" };
        return Err(PyValueError::new_err(format!(
            "{name} must have n = {n} {what}, got {got}"
        )));
    }
    let src = slice2(a, name)?;
    // a batch may be large: a failed allocation is an InsufficientMemoryError, not an abort
    let mut copy = crate::error::try_zeroed::<f64>(src.len()).map_err(|e| to_py_err(py, e))?;
    copy.copy_from_slice(src);
    finite_input(py, name, &copy, a.shape()[1])?;
    Ok(copy)
}

/// The directions V of shape (n, k) as the multi-direction pass reads them, k x n (one row
/// per direction): the kernel's snapshot of the input, as [`input2`] takes one, but
/// transposed while it is copied, so that the call holds n x k numbers fewer. Checked finite,
/// a bad entry named by its place in V ("v row i", index j).
fn directions_by_row(
    py: Python<'_>,
    v: &PyReadonlyArray2<'_, f64>,
    n: usize,
) -> PyResult<Vec<f64>> {
    let (got, k) = (v.shape()[0], v.shape()[1]);
    if got != n {
        return Err(PyValueError::new_err(format!(
            "v must have n = {n} rows, got {got}"
        )));
    }
    let src = slice2(v, "v")?;
    let mut rows = crate::error::try_zeroed::<f64>(src.len()).map_err(|e| to_py_err(py, e))?;
    // each value read once, into the snapshot and into the check (the first bad one in V's
    // own order, as input2 names it)
    let mut bad = None;
    for (i, line) in src.chunks_exact(k.max(1)).enumerate() {
        for (j, &value) in line.iter().enumerate() {
            rows[j * n + i] = value;
            if bad.is_none() && !value.is_finite() {
                bad = Some((i, j, value));
            }
        }
    }
    if let Some((i, j, value)) = bad {
        return Err(to_py_err(py, non_finite_at("v", n <= 1, i, j, value)));
    }
    Ok(rows)
}

/// (energies (b,), gradients (b, n)) as NumPy arrays.
type EnergiesGradients<'py> = (Bound<'py, PyArray1<f64>>, Bound<'py, PyArray2<f64>>);

enum Storage {
    F64(Packed<f64>),
    F32(Packed<f32>),
}

/// Runs the same expression on either storage type.
macro_rules! on_storage {
    ($s:expr, $p:ident => $body:expr) => {
        match $s {
            Storage::F64($p) => $body,
            Storage::F32($p) => $body,
        }
    };
}

/// A packed random polynomial held by the Rust core (wrapped by `orthoclimb.Hamiltonian`).
#[pyclass(frozen, name = "PackedPolynomial", module = "orthoclimb._core")]
struct PyPacked {
    inner: Storage,
}

fn parse_dtype(py: Python<'_>, dtype: &str) -> PyResult<bool> {
    match dtype {
        "float64" => Ok(false),
        "float32" => Ok(true),
        other => Err(to_py_err(
            py,
            CoreError::InvalidDtype {
                name: other.to_string(),
            },
        )),
    }
}

impl PyPacked {
    /// A call's work in coefficient passes ([`threads::INLINE_PASSES`]), from its cost per
    /// coefficient in eighths of a pass: 8 for one point (a gradient or a Hessian-vector
    /// product costs about as much as an energy, 1.3 times on the Xeon) and 8 + b for a batch
    /// of b energies, where the multiply-adds of the 32-lane tile cost about an eighth of a
    /// pass each (a batch of 32 took 4.2 times an energy at n = 130); these calls split into
    /// many items.
    fn work(&self, eighths: usize) -> Work {
        let count = on_storage!(&self.inner, p => p.num_coefficients()) as u64;
        (count.saturating_mul(eighths as u64) / 8, usize::MAX)
    }

    /// A Hessian's work: two passes and its n x n result, in [`kernels::pieces`] items (about
    /// as many as it has accumulators; one below n = 188 at p = 3).
    fn hessian_work(&self, n: usize) -> Work {
        let count = on_storage!(&self.inner, p => p.num_coefficients());
        let passes = (count as u64).saturating_mul(2);
        let items = kernels::pieces(count, n.saturating_mul(n));
        (
            passes.saturating_add((n as u64).saturating_mul(n as u64)),
            items,
        )
    }
}

#[pymethods]
impl PyPacked {
    /// Samples the coefficients of every degree from the counter-based streams of `seed`;
    /// `progress(done)`, if given, is called about every 50 ms with the number of
    /// coefficients written so far.
    #[staticmethod]
    #[pyo3(signature = (n, degrees, gammas, seed, dtype="float64", correlated_with=None, progress=None))]
    #[allow(clippy::too_many_arguments)] // the Python signature's keyword arguments
    fn sample(
        py: Python<'_>,
        n: usize,
        degrees: Vec<usize>,
        gammas: Vec<f64>,
        seed: u64,
        dtype: &str,
        correlated_with: Option<(u64, f64)>,
        progress: Option<Py<PyAny>>,
    ) -> PyResult<Self> {
        if degrees.len() != gammas.len() {
            return Err(PyValueError::new_err(format!(
                "degrees and gammas differ in length: {} vs {}",
                degrees.len(),
                gammas.len()
            )));
        }
        let f32_storage = parse_dtype(py, dtype)?;
        let terms: Vec<(usize, f64)> = degrees.into_iter().zip(gammas).collect();
        let disorder = Disorder {
            seed,
            correlated_with,
        };
        // a coefficient's Gaussian costs about 128 passes (36 against 0.3 ns on the Xeon);
        // storage of one byte per coefficient is the count (bad degrees: sampling says so)
        let degrees: Vec<usize> = terms.iter().map(|&(p, _)| p).collect();
        let count = storage_bytes(n, &degrees, 1).map_or(u64::MAX, |c| c as u64);
        let work = (count.saturating_mul(128), usize::MAX);
        let inner = run_reporting(py, "sampling", work, progress.as_ref(), |pool| {
            Ok(if f32_storage {
                Storage::F32(Packed::sample(pool, n, &terms, &disorder)?)
            } else {
                Storage::F64(Packed::sample(pool, n, &terms, &disorder)?)
            })
        })?;
        Ok(PyPacked { inner })
    }

    /// Wraps given coefficient arrays (float64, SPEC order), one per degree. The copy runs on
    /// the calling thread with the GIL held, unlike the kernels: it reads the caller's own
    /// arrays, which another Python thread could resize (freeing their buffer) or fill with
    /// values the Python layer's check never saw if the GIL were released. Between pieces of
    /// [`crate::storage::COPY_PIECE`] values it runs Python's signal handlers, so Ctrl-C ends a
    /// copy of gigabytes early; each stored value is checked finite by the core.
    #[staticmethod]
    #[pyo3(signature = (n, degrees, arrays, dtype="float64"))]
    fn from_coefficients(
        py: Python<'_>,
        n: usize,
        degrees: Vec<usize>,
        arrays: Vec<PyReadonlyArray1<'_, f64>>,
        dtype: &str,
    ) -> PyResult<Self> {
        if degrees.len() != arrays.len() {
            return Err(PyValueError::new_err("degrees and arrays differ in length"));
        }
        let f32_storage = parse_dtype(py, dtype)?;
        let slices: Vec<&[f64]> = arrays
            .iter()
            .map(|a| slice1(a, "coefficients"))
            .collect::<PyResult<_>>()?;
        let parts: Vec<(usize, &[f64])> = degrees.into_iter().zip(slices).collect();
        let mut raised: Option<PyErr> = None;
        let mut poll = || {
            py.check_signals().map_err(|e| {
                raised = Some(e);
                CoreError::Interrupted
            })
        };
        let built = catch_unwind(AssertUnwindSafe(|| {
            if f32_storage {
                Packed::from_coefficients(n, &parts, &mut poll).map(Storage::F32)
            } else {
                Packed::from_coefficients(n, &parts, &mut poll).map(Storage::F64)
            }
        }));
        if let Some(err) = raised {
            return Err(err); // a signal handler's exception (KeyboardInterrupt) is the result
        }
        match built {
            Ok(Ok(inner)) => Ok(PyPacked { inner }),
            Ok(Err(e)) => Err(to_py_err(py, e)),
            Err(_) => Err(internal_error(py, "packing")),
        }
    }

    #[getter]
    fn n(&self) -> usize {
        on_storage!(&self.inner, p => p.n())
    }

    #[getter]
    fn degrees(&self) -> Vec<usize> {
        on_storage!(&self.inner, p => p.degrees())
    }

    #[getter]
    fn dtype(&self) -> &'static str {
        match &self.inner {
            Storage::F64(_) => "float64",
            Storage::F32(_) => "float32",
        }
    }

    #[getter]
    fn num_coefficients(&self) -> usize {
        on_storage!(&self.inner, p => p.num_coefficients())
    }

    #[getter]
    fn nbytes(&self) -> usize {
        on_storage!(&self.inner, p => p.nbytes())
    }

    /// H(x).
    fn energy(&self, py: Python<'_>, x: PyReadonlyArray1<'_, f64>) -> PyResult<f64> {
        let x = &input1(&x, "x")?;
        run_kernel(
            py,
            "energy",
            self.work(8),
            |pool| on_storage!(&self.inner, p => kernels::energy(pool, p, x)),
        )
    }

    /// (H(x), grad H(x)).
    fn energy_gradient<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray1<'_, f64>,
    ) -> PyResult<(f64, Bound<'py, PyArray1<f64>>)> {
        let x = &input1(&x, "x")?;
        let (e, g) = run_kernel(
            py,
            "gradient",
            self.work(8),
            |pool| on_storage!(&self.inner, p => kernels::energy_gradient(pool, p, x)),
        )?;
        Ok((e, g.into_pyarray(py)))
    }

    /// The full n x n Hessian at x.
    fn hessian<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray1<'_, f64>,
    ) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let n = self.n();
        let x = &input1(&x, "x")?;
        let h = run_kernel(
            py,
            "Hessian",
            self.hessian_work(n),
            |pool| on_storage!(&self.inner, p => kernels::hessian(pool, p, x)),
        )?;
        h.into_pyarray(py).reshape([n, n])
    }

    /// Hess H(x) v for one direction (shape (n,)).
    fn hvp<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray1<'_, f64>,
        v: PyReadonlyArray1<'_, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let (x, v) = (&input1(&x, "x")?, &input1(&v, "v")?);
        let w = run_kernel(
            py,
            "Hessian-vector product",
            self.work(8),
            |pool| on_storage!(&self.inner, p => kernels::hvp(pool, p, x, v)),
        )?;
        Ok(w.into_pyarray(py))
    }

    /// Hess H(x) V for k directions (V of shape (n, k)), in one pass per chunk of directions.
    fn hvp_many<'py>(
        &self,
        py: Python<'py>,
        x: PyReadonlyArray1<'_, f64>,
        v: PyReadonlyArray2<'_, f64>,
    ) -> PyResult<Bound<'py, PyArray2<f64>>> {
        let shape = [v.shape()[0], v.shape()[1]];
        let (x, rows) = (&input1(&x, "x")?, &directions_by_row(py, &v, self.n())?);
        let w = run_kernel(
            py,
            "Hessian-vector product",
            self.work(8 + 2 * shape[1]),
            |pool| on_storage!(&self.inner, p => batch::hvp_many_rows(pool, p, x, rows, shape[1])),
        )?;
        w.into_pyarray(py).reshape(shape)
    }

    /// H at each row of xs (shape (b, n)), in one pass per chunk of points (`batch`).
    fn energy_batch<'py>(
        &self,
        py: Python<'py>,
        xs: PyReadonlyArray2<'_, f64>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let b = xs.shape()[0];
        let xs = &input2(py, &xs, "x", 1, self.n())?;
        let e = run(py, "energy", self.work(8 + b), |pool| {
            let e = on_storage!(&self.inner, p => batch::energy_batch(pool, p, xs, b))?;
            finite_rows("energy", &[(&e, 1)]).map(|()| e)
        })?;
        Ok(e.into_pyarray(py))
    }

    /// (H, grad H) at each row of xs (shape (b, n)), in one pass per chunk of points.
    fn energy_gradient_batch<'py>(
        &self,
        py: Python<'py>,
        xs: PyReadonlyArray2<'_, f64>,
    ) -> PyResult<EnergiesGradients<'py>> {
        let shape = [xs.shape()[0], xs.shape()[1]];
        let xs = &input2(py, &xs, "x", 1, self.n())?;
        let (e, g) = run(py, "gradient", self.work(8 + 2 * shape[0]), |pool| {
            let (e, g) = on_storage!(&self.inner, p =>
                batch::energy_gradient_batch(pool, p, xs, shape[0]))?;
            finite_rows("gradient", &[(&e, 1), (&g, shape[1])]).map(|()| (e, g))
        })?;
        Ok((e.into_pyarray(py), g.into_pyarray(py).reshape(shape)?))
    }

    /// The degree-p coefficients a_m of ranks `start..stop` (default: all) as a new float64
    /// array (SPEC order).
    #[pyo3(signature = (p, start=0, stop=None))]
    fn coefficients<'py>(
        &self,
        py: Python<'py>,
        p: usize,
        start: usize,
        stop: Option<usize>,
    ) -> PyResult<Bound<'py, PyArray1<f64>>> {
        let data: Vec<f64> = on_storage!(&self.inner, poly => {
            let block = poly.block(p).map_err(|e| to_py_err(py, e))?;
            let len = block.coeffs.len();
            let stop = stop.unwrap_or(len);
            if start > len || stop > len {
                return Err(PyValueError::new_err(format!(
                    "coefficient range {start}..{stop} is outside 0..{len} for degree {p}"
                )));
            }
            if start > stop {
                return Err(PyValueError::new_err(format!(
                    "coefficient range {start}..{stop} for degree {p} starts after it stops"
                )));
            }
            // a failed allocation is an InsufficientMemoryError, not an abort (collect aborts)
            let mut out = Vec::new();
            out.try_reserve_exact(stop - start).map_err(|_| {
                to_py_err(py, CoreError::AllocationFailed { bytes: (stop - start) * 8 })
            })?;
            out.extend(block.coeffs[start..stop].iter().map(|&c| crate::storage::Coef::to_f64(c)));
            out
        });
        Ok(data.into_pyarray(py))
    }
}

/// Bytes of coefficient storage for n spins, these degrees and `itemsize` bytes per number.
#[pyfunction]
fn storage_nbytes(
    py: Python<'_>,
    n: usize,
    degrees: Vec<usize>,
    itemsize: usize,
) -> PyResult<usize> {
    storage_bytes(n, &degrees, itemsize).map_err(|e| to_py_err(py, e))
}

/// All sorted index tuples (i1 <= ... <= ip) of 0..n in SPEC order, shape (C(n+p-1, p), p).
#[pyfunction]
fn multiset_table<'py>(py: Python<'py>, n: usize, p: usize) -> PyResult<Bound<'py, PyArray2<i64>>> {
    if n == 0 {
        return Err(to_py_err(py, CoreError::InvalidSize { n }));
    }
    if !(1..=crate::combinatorics::MAX_DEGREE).contains(&p) {
        return Err(to_py_err(py, CoreError::InvalidDegree { p }));
    }
    let count = num_multisets(n, p).map_err(|e| to_py_err(py, e))?;
    let table = run(py, "enumeration", (u64::MAX, usize::MAX), |exec| {
        let len = count.checked_mul(p).ok_or(CoreError::SizeOverflow {
            what: format!("index table of {count} x {p}"),
        })?;
        let mut out = crate::error::try_zeroed::<i64>(len)?;
        let mut idx = vec![0usize; p];
        for (r, row) in out.chunks_exact_mut(p).enumerate() {
            if r % (1 << 16) == 0 {
                exec.check()?; // a table of many millions of rows takes seconds: Ctrl-C
            }
            for (o, &i) in row.iter_mut().zip(&idx) {
                *o = i as i64;
            }
            advance(&mut idx, n);
        }
        Ok(out)
    })?;
    table.into_pyarray(py).reshape([count, p])
}

/// Number of accumulators of `acc_len` numbers that a pass over a polynomial of these degrees
/// at n allocates (fixed by the instance: n * n for a Hessian, whose first indices go in runs
/// of four, `single_point`; n * k for k Hessian-vector products in one pass).
#[pyfunction]
fn pass_accumulators(
    py: Python<'_>,
    n: usize,
    degrees: Vec<usize>,
    acc_len: usize,
    single_point: bool,
) -> PyResult<usize> {
    let quantum = if single_point { QUANTUM } else { 1 };
    kernels::accumulator_count(n, &degrees, acc_len, quantum).map_err(|e| to_py_err(py, e))
}

/// The directions of one pass of the multi-direction HVP for k of them at n (up to 32-256:
/// their rows and the pass's stay near L2).
#[pyfunction]
fn direction_chunk(n: usize, k: usize) -> usize {
    batch::direction_chunk(n, k)
}

/// Sets the number of threads of the shared pool.
#[pyfunction]
fn set_num_threads(py: Python<'_>, k: usize) -> PyResult<()> {
    threads::set_num_threads(k).map_err(|e| to_py_err(py, e))
}

/// The number of threads of the shared pool.
#[pyfunction]
fn get_num_threads(py: Python<'_>) -> PyResult<usize> {
    threads::num_threads().map_err(|e| to_py_err(py, e))
}

/// Sets the work bound below which calls run on the calling thread (coefficient passes;
/// 0: every call on the pool) and returns the previous one. For tests, which compare both
/// ways of running bit for bit.
#[pyfunction]
fn _set_inline_passes(bound: u64) -> u64 {
    threads::set_inline_passes(bound)
}

/// The instruction-set path of the kernels on this machine ("avx2+fma+avx512f", "avx2+fma"
/// or "baseline").
#[pyfunction]
fn kernel_path() -> &'static str {
    simd_path()
}

/// Sets up now, on the importing thread, everything a first call would set up lazily: NumPy's C
/// API table, rust-numpy's borrow-checking state and its record of NumPy's version (each
/// fetched on first use), PyO3's one-time check of the interpreter, the processor's prefetch
/// level and the cache size. A process forked while another thread was inside such a set-up
/// inherited it half done, marked as in progress by a thread the child does not have, and its
/// own first call waited on it forever (9 of 80 children forked during another thread's first
/// call hung in one of rust-numpy's).
fn settle_lazy_state(py: Python<'_>) {
    // the C API table, then the borrow checker's shared state (set up by the first borrow),
    // and the NumPy version (read by the borrow key of 1-d arrays, but asked here by name)
    drop(PyArray1::<f64>::zeros(py, 0, false).readonly());
    let _ = numpy::npyffi::is_numpy_2(py);
    // pyo3's one-time check of the interpreter, made at the first attach from a detached
    // thread (a call's first signal poll)
    py.detach(|| Python::attach(|_| ()));
    let _ = crate::simd::segment_prefetch_level();
    let _ = crate::cache::last_level_bytes(); // reads every listed cache size, once
}

/// `gil_used = true`: the inputs' copies ([`input1`], [`input2`]) and `from_coefficients` rely
/// on the GIL to keep other Python threads from resizing an array while it is read; a
/// free-threaded Python re-enables the GIL on import rather than run without that guard.
#[pymodule(gil_used = true)]
fn _core(m: &Bound<'_, PyModule>) -> PyResult<()> {
    settle_lazy_state(m.py());
    m.add("__version__", env!("CARGO_PKG_VERSION"))?;
    m.add("MAX_DEGREE", crate::combinatorics::MAX_DEGREE)?;
    m.add("MAX_THREADS", threads::MAX_THREADS)?;
    m.add_class::<PyPacked>()?;
    m.add_function(wrap_pyfunction!(storage_nbytes, m)?)?;
    m.add_function(wrap_pyfunction!(multiset_table, m)?)?;
    m.add_function(wrap_pyfunction!(pass_accumulators, m)?)?;
    m.add_function(wrap_pyfunction!(direction_chunk, m)?)?;
    m.add_function(wrap_pyfunction!(set_num_threads, m)?)?;
    m.add_function(wrap_pyfunction!(get_num_threads, m)?)?;
    m.add_function(wrap_pyfunction!(_set_inline_passes, m)?)?;
    m.add_function(wrap_pyfunction!(kernel_path, m)?)?;
    Ok(())
}
