"""The random polynomial H on R^n and its fast kernels.

    H(x) = sum_p H_p(x),   H_p(x) = sum_m a_m x_i1 ... x_ip

over sorted multisets m = (i1 <= ... <= ip), with a_m = sqrt(n) gamma_p sqrt(c(m)) g_m and
g_m i.i.d. standard Gaussians, so that E[H(x) H(y)] = n xi(<x, y>). On the unit sphere
|x| = 1, H(x) is of order n; the figure of merit is the energy per spin H(x)/n, and we
maximize. All kernels run in the Rust core, multithreaded, reading the packed coefficients
once per call (a batch of points is one pass, too; a batch of two gradients is two passes,
which is faster than the batch tile with half its lanes empty; a batch wider than 32-256
points, fewer at larger n, is one pass per that many points).
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
from scipy.sparse.linalg import LinearOperator

from .. import _core
from ..errors import InsufficientMemoryError, NonFiniteError, ShapeError
from . import dense as _dense
from .arrays import as_directions, as_flag, as_float_array, as_point, as_points
from .memory import (
    check_size,
    coefficient_count,
    estimate_memory,
    hessian_workspace_bytes,
    hvp_workspace_bytes,
    normalize_dtype,
    require_memory,
)
from .mixture import MAX_DEGREE, Mixture, _check_degree

_SEED_LIMIT = 2**64
_PROGRESS_DELAY = 0.5  # seconds of sampling before sample(progress=True) shows its bar
# Hessian workspaces from this size on are checked against the available memory first. Below
# it the check (a read of /proc/meminfo and the cgroup files, tens of microseconds) would cost
# more than small calls take, and such a workspace fits on any machine that holds Python.
_CHECKED_WORKSPACE = 64 << 20
# Directions from which hvp forms the Hessian of a polynomial of degree <= 2 (see hvp). p = 2,
# two threads, medians, multi-direction pass against Hessian and product: n = 1000, 16
# directions 1.79 and 1.46 ms, 32 3.55 and 1.96 ms, 64 7.71 and 2.69 ms; n = 2000, 16
# directions 8.2 and 13.5 ms, 32 17.0 and 18.2 ms, 64 35.3 and 19.0 ms.
_QUADRATIC_HESSIAN_DIRECTIONS = 32


def _check_seed(seed: Any, name: str = "seed") -> int:
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)):
        raise TypeError(f"{name} must be an integer in [0, 2^64), got {seed!r}")
    if not 0 <= int(seed) < _SEED_LIMIT:
        raise ValueError(f"{name} must be in [0, 2^64), got {seed}")
    return int(seed)


def _check_correlation(spec: Any) -> tuple[int, float] | None:
    if spec is None:
        return None
    try:
        seed0, rho = spec
    except (TypeError, ValueError):
        raise TypeError(f"correlated_with must be a pair (seed0, rho), got {spec!r}") from None
    seed0 = _check_seed(seed0, "seed0 in correlated_with")
    if isinstance(rho, bool) or not isinstance(rho, (int, float, np.integer, np.floating)):
        raise TypeError(f"correlation rho must be a real number in [-1, 1], got {rho!r}")
    try:
        rho = float(rho)
    except OverflowError:  # an integer beyond float64
        raise ValueError("correlation rho must be in [-1, 1], got a larger integer") from None
    if not -1.0 <= rho <= 1.0:  # also refuses NaN
        raise ValueError(f"correlation rho must be in [-1, 1], got {rho}")
    return seed0, rho


_FLOAT32_MAX = float(np.finfo(np.float32).max)


def _check_float32_range(a: np.ndarray, what: str) -> None:
    """float32 storage would turn a coefficient beyond float32's range into infinity: refuse it,
    naming the first one (values below float32's range round to 0 or subnormals, the usual
    loss of a narrower type, as documented for dtype="float32")."""
    if a.size == 0 or (float(a.max()) <= _FLOAT32_MAX and float(a.min()) >= -_FLOAT32_MAX):
        return  # two reductions: no temporary array of the coefficients' size
    big = np.flatnonzero(np.abs(a) > _FLOAT32_MAX)
    if big.size:
        i = int(big[0])
        raise ValueError(
            f"{what}[{i}] = {float(a[i])!r} is beyond float32's range (+-{_FLOAT32_MAX:.4g});"
            ' store these coefficients with dtype="float64"'
        )


class Hamiltonian:
    """A sampled (or given) random polynomial with packed coefficients.

    Build one with :meth:`sample`, :meth:`from_coefficients` or :meth:`from_dense`.
    Points ``x`` are float arrays of shape (n,) or, for a batch, (b, n). Energies are H(x)
    itself (of order n on the unit sphere); divide by n for the energy per spin.
    """

    def __init__(
        self,
        core: Any,
        mixture: Mixture | None,
        seed: int | None,
        correlated_with: tuple[int, float] | None = None,
    ):
        self._core = core
        self._mixture = mixture
        self._seed = seed
        self._correlated_with = correlated_with
        self._hessian_workspace: int | None = None  # fixed by the instance: counted once

    # -- construction ------------------------------------------------------------------

    @classmethod
    def sample(
        cls,
        mixture: Mixture,
        n: int,
        seed: int,
        dtype: str = "float64",
        correlated_with: tuple[int, float] | None = None,
        check_memory: bool = True,
        progress: bool = False,
    ) -> Hamiltonian:
        """Sample an instance with n spins from the counter-based streams of `seed`.

        The coefficient of rank r of degree p is a pure function of (seed, p, r): the same
        seed gives bitwise the same instance on any thread count. With
        ``correlated_with=(seed0, rho)`` every Gaussian is rho g(seed0) + sqrt(1-rho^2) g(seed),
        which is an instance correlated with ``sample(mixture, n, seed0)`` at level rho.
        ``dtype="float32"`` halves the storage; kernels still accumulate in float64.
        A mixture whose coefficients would leave the storage type's range is refused: any
        beyond its largest value, or all below its normal range (the largest standard
        deviation of any coefficient, sqrt(n p!) gamma_p, under its smallest normal number),
        where nearly all would be stored as subnormals or zero.
        Storage is checked against the available memory first (``check_memory=False`` skips
        that check; the allocation itself still fails cleanly if the system refuses).
        ``progress=True`` shows a tqdm bar on stderr counting the coefficients written, once
        sampling has taken half a second (large instances take a while: n = 2000 at p = 3,
        10.7 GB, took 41 s on two cores of a Xeon).
        """
        if not isinstance(mixture, Mixture):
            raise TypeError(f"mixture must be an orthoclimb.Mixture, got {type(mixture).__name__}")
        n = check_size(n)
        seed = _check_seed(seed)
        dtype = normalize_dtype(dtype)
        corr = _check_correlation(correlated_with)
        if corr is not None and corr[0] == seed:
            raise ValueError(
                f"seed0 in correlated_with must differ from seed ({seed}): rho g(seed0) +"
                " sqrt(1 - rho^2) g(seed) needs two independent Gaussians"
            )
        progress = as_flag(progress, "progress")
        if as_flag(check_memory, "check_memory"):
            require_memory(
                estimate_memory(mixture, n, dtype), f"an instance of {mixture!r} with n = {n}"
            )
        degrees = list(mixture.degrees)
        gammas = [mixture.gammas[p] for p in degrees]
        if progress:
            core = _sample_with_bar(n, degrees, gammas, seed, dtype, corr)
        else:
            core = _core.PackedPolynomial.sample(n, degrees, gammas, seed, dtype, corr)
        return cls(core, mixture, seed, corr)

    @classmethod
    def from_coefficients(
        cls, n: int, coefficients: Mapping[int, Any], dtype: str = "float64"
    ) -> Hamiltonian:
        """Wrap given packed coefficients {p: 1-D array of length C(n+p-1, p)} (the packed
        order of the README's Conventions: sorted index tuples in lexicographic order).
        ``mixture`` and ``seed`` are None. The values are copied into the instance's own storage
        with the GIL held (one copy, no second buffer of arrays that may be gigabytes); Ctrl-C
        stops a large copy between pieces of 2^20 values."""
        n = check_size(n)
        dtype = normalize_dtype(dtype)
        if not isinstance(coefficients, Mapping) or not coefficients:
            raise ValueError(
                f"coefficients must be a non-empty mapping p -> array, got {coefficients!r}"
            )
        degrees, arrays = [], []
        # degrees checked before sorting: a text key made the sort fail with a bare TypeError
        checked = [(_check_degree(p), arr) for p, arr in coefficients.items()]
        for p, arr in sorted(checked, key=lambda item: item[0]):
            a = as_float_array(arr, f"coefficients[{p}]")
            if a.ndim != 1:
                raise ShapeError(f"coefficients[{p}] must be 1-D, got shape {a.shape}")
            expected = coefficient_count((p,), n)
            if a.shape[0] != expected:
                raise ShapeError(
                    f"coefficients[{p}] for n = {n} must hold C(n+p-1, p) = C({n + p - 1}, {p})"
                    f" values: expected length {expected}, got {a.shape[0]}"
                )
            if dtype == "float32":
                _check_float32_range(a, f"coefficients[{p}]")
            degrees.append(p)
            arrays.append(a)
        core = _core.PackedPolynomial.from_coefficients(n, degrees, arrays, dtype)
        return cls(core, None, None)

    @classmethod
    def from_dense(
        cls, tensors: Mapping[int, Any], symmetrize: bool = False, dtype: str = "float64"
    ) -> Hamiltonian:
        """Pack dense tensors {p: array of shape (n,)*p} with H_p(x) = T(x, ..., x).

        Each tensor must be symmetric under axis permutations; a non-symmetric one is refused
        unless ``symmetrize=True`` (it is then averaged over permutations, which leaves the
        polynomial unchanged)."""
        if not isinstance(tensors, Mapping) or not tensors:
            raise ValueError(f"tensors must be a non-empty mapping p -> array, got {tensors!r}")
        packed, sizes = {}, set()
        for p, t in tensors.items():
            p = _check_degree(p)
            arr = as_float_array(t, f"tensors[{p}]")
            packed[p] = _dense.pack(arr, p, as_flag(symmetrize, "symmetrize"))
            sizes.add(arr.shape[0])
        if len(sizes) != 1:
            raise ShapeError(f"all tensors must share one n, got sizes {sorted(sizes)}")
        return cls.from_coefficients(sizes.pop(), packed, dtype)

    # -- description -------------------------------------------------------------------

    @property
    def n(self) -> int:
        """Number of spins."""
        return int(self._core.n)

    @property
    def mixture(self) -> Mixture | None:
        """The mixture it was sampled from (None for given coefficients)."""
        return self._mixture

    @property
    def seed(self) -> int | None:
        """The disorder seed (None for given coefficients)."""
        return self._seed

    @property
    def correlated_with(self) -> tuple[int, float] | None:
        """(seed0, rho) when sampled correlated with another instance."""
        return self._correlated_with

    @property
    def degrees(self) -> tuple[int, ...]:
        return tuple(self._core.degrees)

    @property
    def dtype(self) -> str:
        """Storage type of the coefficients: 'float64' or 'float32'."""
        return str(self._core.dtype)

    @property
    def num_coefficients(self) -> int:
        """sum_p C(n+p-1, p)."""
        return int(self._core.num_coefficients)

    @property
    def nbytes(self) -> int:
        """Bytes of coefficient storage."""
        return int(self._core.nbytes)

    @property
    def hessian_workspace_nbytes(self) -> int:
        """Peak bytes a :meth:`hessian` call allocates: its n x n accumulators (a number fixed
        by the instance, 1 to 64 plus up to one per degree) and the result, 8 bytes each.
        Counted once per instance (the count took 2 us of a 11 us Hessian at n = 30)."""
        if self._hessian_workspace is None:
            self._hessian_workspace = hessian_workspace_bytes(self.degrees, self.n)
        return self._hessian_workspace

    def __repr__(self) -> str:
        origin = f"{self._mixture!r}, seed={self._seed}" if self._mixture else "given"
        if self._correlated_with is not None:
            origin += f", correlated_with={self._correlated_with}"
        return f"Hamiltonian({origin}, n={self.n}, dtype={self.dtype!r}, nbytes={self.nbytes})"

    # -- kernels -----------------------------------------------------------------------

    def energy(self, x: Any) -> Any:
        """H(x) for x of shape (n,) (a float) or (b, n) (an array of b values).

        A batch is one pass over the coefficients per chunk of up to 256 points (the largest
        power of two from 32 whose n x chunk numbers fit 2 MiB; 512 KiB with gradients), with
        the multiply-adds per coefficient and point from cache: 32 points take about a tenth
        of the time of 32 single calls, and wider batches gain no more per point than that."""
        pts = as_points(x, self.n)
        if pts.ndim == 1:
            return float(self._core.energy(pts))
        return self._core.energy_batch(pts)

    def energy_per_spin(self, x: Any) -> Any:
        """H(x)/n, the figure reported throughout orthoclimb."""
        return self.energy(x) / self.n

    def energy_and_gradient(self, x: Any) -> tuple[Any, np.ndarray]:
        """(H(x), grad H(x)) in one pass (two points: one pass each, which is faster);
        shapes as for :meth:`energy` and :meth:`gradient`."""
        pts = as_points(x, self.n)
        if pts.ndim == 1:
            e, g = self._core.energy_gradient(pts)
            return float(e), g
        return self._core.energy_gradient_batch(pts)

    def gradient(self, x: Any) -> np.ndarray:
        """grad H(x) (the full gradient in R^n, not projected): (n,) -> (n,); (b, n) -> (b, n)."""
        return self.energy_and_gradient(x)[1]

    def hessian(self, x: Any, *, check_memory: bool = True) -> np.ndarray:
        """The full (not projected) n x n Hessian of H at x. Costs one pass over the
        coefficients plus :attr:`hessian_workspace_nbytes` of memory: n x n accumulators, a
        number (1 to 64, plus up to one per degree) fixed by the instance whatever the thread
        count, and the result.

        A workspace of 64 MiB or more is checked against the available memory first and
        refused with :class:`~orthoclimb.errors.InsufficientMemoryError` naming both sizes,
        rather than left to the operating system's out-of-memory killer;
        ``check_memory=False`` skips the check. The workspace reaches 64 MiB from n of about
        2050 at degree 2, 1300 at degree 3 and 440 at degree 4 (which takes 43 accumulators
        there)."""
        pt = as_point(x, self.n)
        check_memory = as_flag(check_memory, "check_memory")
        need = self.hessian_workspace_nbytes
        if check_memory and need >= _CHECKED_WORKSPACE:
            require_memory(
                need,
                f"the Hessian of an instance with n = {self.n}",
                "Hamiltonian.hessian(x, check_memory=False) skips this check",
            )
        return self._core.hessian(pt)

    def hvp(self, x: Any, v: Any, *, check_memory: bool = True) -> np.ndarray:
        """Hess H(x) v for v of shape (n,) or (n, k) (k directions in one pass per chunk of
        32-256 of them, see below).

        Several directions take the route that was fastest in measurement:

        * one Hessian pass and a matrix product, at degree 3 or more when the Hessian's
          workspace (:attr:`hessian_workspace_nbytes`) is under 64 MiB or at most an eighth
          of the coefficients' storage, and at degree <= 2 from 32 directions on when it is
          under 64 MiB;
        * otherwise the multi-direction HVP pass, which holds only n x k numbers per
          accumulator (at degree <= 2 a pass is cheap next to forming n x n numbers, and a
          large Hessian is what a caller of this method avoids).

        The choice depends on the instance and k alone, so results repeat bit for bit; only
        a Hessian that does not fit in the available memory sends the call to the other
        route, whose last bits differ. One direction in a 2-D array goes through the 1-D
        kernel. Four directions, two threads, medians, multi-direction pass against Hessian:
        p = 3, n = 200, 1.89 and 0.38 ms; p = 4, n = 120, 22.7 and 4.6 ms; p = 4, n = 360,
        807 and 216 ms (one direction alone: 192 ms); but p = 2, n = 1800, 7.6 and 28.7 ms.

        The multi-direction pass takes the directions in chunks of c = min(k, 32-256), fewer
        at larger n (as :meth:`energy` takes a batch's points with gradients), one pass over
        the coefficients each, and holds 2 n k + a n c numbers: its copy of the directions,
        transposed, and the result, and a pass's accumulators, a of 1 to 64 plus up to one
        per degree, fixed by the instance and c. From 64 MiB on that is checked against the
        available memory first and refused with
        :class:`~orthoclimb.errors.InsufficientMemoryError` (``check_memory=False`` skips the
        check, here and for the Hessian)."""
        pt = as_point(x, self.n)
        dirs = as_directions(v, self.n)
        check_memory = as_flag(check_memory, "check_memory")
        if dirs.ndim == 1:
            return self._core.hvp(pt, dirs)
        if dirs.shape[1] == 1:
            return self._core.hvp(pt, np.ascontiguousarray(dirs[:, 0]))[:, None]
        if self._hessian_route(dirs.shape[1]):
            try:
                hess = self.hessian(pt, check_memory=check_memory)
            except InsufficientMemoryError:
                return self._hvp_many(pt, dirs, check_memory)
            with np.errstate(over="ignore", invalid="ignore"):  # refused just below instead
                out = hess @ dirs
            if not np.isfinite(out).all():  # as the kernels do: never a silent infinity
                raise NonFiniteError(
                    "the Hessian-vector product overflowed float64: the result is not finite"
                    " although every input is (points are meant to lie on the unit sphere"
                    " |x| = 1; check the inputs' scale)"
                )
            return out
        return self._hvp_many(pt, dirs, check_memory)

    def _hvp_many(self, pt: np.ndarray, dirs: np.ndarray, check_memory: bool) -> np.ndarray:
        """The multi-direction HVP pass, its memory checked first (see :meth:`hvp`); a call
        whose bound (at most 64 + degrees accumulators) stays under the checked size skips the
        count (2 us, against calls from 20 us)."""
        nk8 = self.n * dirs.shape[1] * 8
        bounded = (64 + len(self.degrees) + 2) * nk8 < _CHECKED_WORKSPACE
        need = 0 if bounded else hvp_workspace_bytes(self.degrees, self.n, dirs.shape[1])
        if check_memory and need >= _CHECKED_WORKSPACE:
            require_memory(
                need,
                f"Hessian-vector products in {dirs.shape[1]} directions at n = {self.n}",
                "Hamiltonian.hvp(x, v, check_memory=False) skips this check",
            )
        return self._core.hvp_many(pt, dirs)

    def _hessian_route(self, k: int) -> bool:
        """Whether :meth:`hvp` forms the Hessian for ``k`` directions (see there): decided
        from the instance and k alone."""
        need = self.hessian_workspace_nbytes
        if max(self.degrees) <= 2:
            return k >= _QUADRATIC_HESSIAN_DIRECTIONS and need < _CHECKED_WORKSPACE
        return need < _CHECKED_WORKSPACE or need <= self.nbytes // 8

    def hessian_operator(self, x: Any) -> LinearOperator:
        """Hess H(x) as a SciPy LinearOperator (symmetric), each product one pass.

        For an iterative eigensolver (scipy.sparse.linalg.eigsh) where the dense Hessian is too
        large to hold. Where it fits, :meth:`hessian` (one pass, about 1.3 passes' time) and
        scipy.linalg.eigh are usually far faster, since eigsh needs tens to hundreds of
        products: a user trial measured 10-50 times at n up to about 3000 (p = 4, n = 300:
        8.3 s against 0.15 s; p = 3, n = 2000: 30 s and 101 products against about 2 s)."""
        pt = as_point(x, self.n).copy()
        n = self.n

        def matvec(v: np.ndarray) -> np.ndarray:
            return self.hvp(pt, np.ravel(v))

        def matmat(v: np.ndarray) -> np.ndarray:
            return self.hvp(pt, np.asarray(v).reshape(n, -1))

        return LinearOperator(
            (n, n), matvec=matvec, rmatvec=matvec, matmat=matmat, dtype=np.float64
        )

    # -- pickling and copying ------------------------------------------------------------

    def __reduce__(self) -> tuple[Any, tuple[Any, ...]]:
        """Pickle a sampled instance as its recipe (mixture, n, seed, dtype, correlation:
        about 200 bytes), regenerated bit for bit when unpickled, after the same memory
        check as :meth:`sample`; given coefficients travel as their float64 arrays. So an
        instance can be sent to ``multiprocessing`` or ``concurrent.futures`` workers."""
        if self._mixture is not None:
            recipe = (self._mixture, self.n, self._seed, self.dtype, self._correlated_with)
            return (_unpickle_sampled, recipe)
        coefficients = {p: self.coefficients(p) for p in self.degrees}
        return (_unpickle_given, (self.n, coefficients, self.dtype))

    def __copy__(self) -> Hamiltonian:
        return self  # immutable: kernels only read the coefficients

    def __deepcopy__(self, memo: dict[int, Any]) -> Hamiltonian:
        return self

    # -- files -------------------------------------------------------------------------

    def save(self, path: str | os.PathLike, check_memory: bool = True) -> tuple[Path, ...]:
        """Write this instance to ``<stem>.json`` (a sampled instance: its recipe and a
        fingerprint, about a kilobyte) or ``<stem>.npz`` + ``<stem>.json`` (given coefficients,
        with their SHA-256), atomically; returns the paths written, JSON first. Saving given
        coefficients copies one degree at a time as float64, checked against the available
        memory unless ``check_memory=False``. A folder as ``path`` (an existing one, or text
        ending in a separator) raises :class:`~orthoclimb.errors.OutputPathError`: give a stem
        inside it. Read it back with :func:`orthoclimb.load_instance`; format: see
        :mod:`orthoclimb.model.instance_file`."""
        from .instance_file import save_instance

        return save_instance(self, path, check_memory=check_memory)

    # -- coefficients ------------------------------------------------------------------

    def coefficients(self, p: int, start: int = 0, stop: int | None = None) -> np.ndarray:
        """The degree-p coefficients a_m of ranks ``start <= r < stop`` (default: all
        C(n+p-1, p) of them) as a new float64 array in the packed order. A range reads a slice of a
        large instance without copying the whole block."""
        p = _check_degree(p)
        if p not in self.degrees:
            raise ValueError(f"this instance has no degree-{p} term (degrees {self.degrees})")
        count = coefficient_count((p,), self.n)
        bounds = []
        for name, value in (("start", 0 if start is None else start), ("stop", stop)):
            if value is not None and (
                isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer))
            ):
                raise TypeError(f"{name} must be an integer, got {value!r}")
            if value is not None and value < 0:
                raise ValueError(f"{name} must be >= 0, got {value}")
            bounds.append(None if value is None else int(value))
        first, end = bounds[0], count if bounds[1] is None else bounds[1]
        if max(first, end) > count:  # before the core, whose counts are 64-bit (2^64 overflowed)
            raise ValueError(f"degree-{p} coefficient range {first}..{end} is outside 0..{count}")
        return self._core.coefficients(p, bounds[0], bounds[1])

    def to_dense(self, p: int, max_bytes: int = _dense.DEFAULT_DENSE_LIMIT) -> np.ndarray:
        """The symmetric dense tensor T of degree p with H_p(x) = T(x, ..., x); refuses when
        it would exceed ``max_bytes`` (n^p * 8 bytes)."""
        if isinstance(max_bytes, (bool, np.bool_)) or not isinstance(max_bytes, (int, np.integer)):
            raise TypeError(f"max_bytes must be an integer number of bytes, got {max_bytes!r}")
        if max_bytes < 0:
            raise ValueError(f"max_bytes must be a number of bytes >= 0, got {max_bytes!r}")
        p = _check_degree(p)
        if p in self.degrees:  # refused before the coefficients' copy (1.3 GB, 2.3 s before)
            _dense.check_dense_size(self.n, p, int(max_bytes))
        return _dense.to_dense(self.coefficients(p), self.n, p, int(max_bytes))


__all__ = ["Hamiltonian", "MAX_DEGREE"]


def _sample_with_bar(
    n: int,
    degrees: list[int],
    gammas: list[float],
    seed: int,
    dtype: str,
    corr: tuple[int, float] | None,
) -> _core.PackedPolynomial:
    """The core's sampling with a tqdm bar counting the coefficients written (shown once it
    has taken ``_PROGRESS_DELAY`` seconds)."""
    from tqdm import tqdm

    total = coefficient_count(degrees, n)
    bar = tqdm(
        total=total, unit="coef", unit_scale=True, desc=f"sampling n={n}", delay=_PROGRESS_DELAY
    )
    with bar:
        core = _core.PackedPolynomial.sample(
            n, degrees, gammas, seed, dtype, corr, lambda done: bar.update(done - bar.n)
        )
        bar.update(total - bar.n)
    return core


def _unpickle_sampled(
    mixture: Mixture, n: int, seed: int, dtype: str, correlated_with: tuple[int, float] | None
) -> Hamiltonian:
    return Hamiltonian.sample(mixture, n, seed, dtype, correlated_with)


def _unpickle_given(n: int, coefficients: dict[int, np.ndarray], dtype: str) -> Hamiltonian:
    return Hamiltonian.from_coefficients(n, coefficients, dtype)
