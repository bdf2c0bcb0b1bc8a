"""Bad input to the model layer: each gets a clear exception naming the bad value."""

from __future__ import annotations

import math
import os

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb.errors import InsufficientMemoryError, MixtureError, NonFiniteError, ShapeError

N = 6


@pytest.fixture(scope="module")
def ham():
    return oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), N, seed=1)


@pytest.mark.parametrize(
    "x, exc, fragment",
    [
        (np.ones(N - 1), ShapeError, r"\(5,\)"),
        (np.ones((2, N + 1)), ShapeError, r"\(2, 7\)"),
        (np.ones((0, N)), ShapeError, r"\(0, 6\)"),
        (np.ones((1, 2, N)), ShapeError, r"\(1, 2, 6\)"),
        (np.array([np.nan] + [0.0] * (N - 1)), NonFiniteError, "nan"),
        (np.array([0.0] * (N - 1) + [np.inf]), NonFiniteError, r"index \(5,\)"),
        (np.ones(N, dtype=complex), TypeError, "complex"),
        (np.ones(N, dtype=bool), TypeError, "boolean"),
        (np.array(["a"] * N), TypeError, "dtype"),
        (3.0, ShapeError, r"\(\)"),
        (np.ma.masked_array(np.ones(N), mask=[1] + [0] * (N - 1)), TypeError, "masked array"),
    ],
)
def test_bad_points(ham, x, exc, fragment):
    for call in (ham.energy, ham.gradient, ham.energy_and_gradient):
        with pytest.raises(exc, match=fragment):
            call(x)


def test_integer_and_strided_points_are_converted(ham):
    x_int = np.arange(N)
    assert ham.energy(x_int) == ham.energy(x_int.astype(float))
    wide = np.zeros(2 * N)
    wide[::2] = np.linspace(-1, 1, N)
    np.testing.assert_array_equal(ham.gradient(wide[::2]), ham.gradient(np.linspace(-1, 1, N)))
    fortran = np.asfortranarray(np.arange(2 * N, dtype=float).reshape(2, N))
    np.testing.assert_array_equal(ham.energy(fortran), ham.energy(np.ascontiguousarray(fortran)))


def _unaligned(a: np.ndarray) -> np.ndarray:
    """A C-contiguous float64 view of a copy of ``a`` at an odd byte offset (unaligned)."""
    out = np.frombuffer(
        b"\0" + np.ascontiguousarray(a, dtype=np.float64).tobytes(), np.float64, offset=1
    ).reshape(a.shape)
    assert out.flags.c_contiguous and not out.flags.aligned
    return out


def test_unaligned_contiguous_arrays_are_copied_not_refused(ham):
    # a user trial: np.frombuffer at an odd offset is C-contiguous but unaligned, and every
    # kernel refused it as "must be a C-contiguous float64 array"
    x = np.linspace(-1, 1, N)
    xs = np.stack([x, -x])
    ux, uxs = _unaligned(x), _unaligned(xs)
    assert ham.energy(ux) == ham.energy(x)
    np.testing.assert_array_equal(ham.energy(uxs), ham.energy(xs))
    np.testing.assert_array_equal(ham.gradient(ux), ham.gradient(x))
    np.testing.assert_array_equal(ham.hessian(ux), ham.hessian(x))
    np.testing.assert_array_equal(ham.hvp(ux, ux), ham.hvp(x, x))
    np.testing.assert_array_equal(ham.hvp(x, _unaligned(xs.T)), ham.hvp(x, xs.T))
    given = {p: _unaligned(ham.coefficients(p)) for p in ham.mixture.degrees}
    assert oc.Hamiltonian.from_coefficients(N, given).energy(x) == ham.energy(x)


def test_bad_directions(ham):
    x = np.ones(N)
    with pytest.raises(ShapeError, match=r"\(6, k\)"):
        ham.hvp(x, np.ones((N + 1, 2)))
    with pytest.raises(ShapeError):
        ham.hvp(x, np.ones((N, 0)))
    with pytest.raises(NonFiniteError):
        ham.hvp(x, np.full(N, np.nan))
    with pytest.raises(ShapeError):
        ham.hessian(np.ones((2, N)))


@pytest.mark.parametrize(
    "kwargs, exc, fragment",
    [
        ({"n": 0}, ValueError, "n must be >= 1, got 0"),
        ({"n": 2.5}, TypeError, "2.5"),
        ({"n": 2**70}, ValueError, f"below 2\\^63, got {2**70}"),  # not an OverflowError
        ({"seed": -1}, ValueError, "-1"),
        ({"seed": 2**64}, ValueError, str(2**64)),
        ({"seed": "a"}, TypeError, "'a'"),
        ({"dtype": "int8"}, ValueError, "int8"),
        ({"correlated_with": (1, 1.5)}, ValueError, "1.5"),
        ({"correlated_with": (1, float("nan"))}, ValueError, "nan"),
        ({"correlated_with": 3}, TypeError, "3"),
        (
            {"correlated_with": (0, 0.5)},
            ValueError,
            r"seed0 in correlated_with must differ from seed \(0\)",
        ),
        ({"mixture": {2: 1.0}}, TypeError, "dict"),
    ],
)
def test_bad_sampling_arguments(kwargs, exc, fragment):
    args = {"mixture": oc.Mixture({2: 1.0}), "n": 4, "seed": 0} | kwargs
    with pytest.raises(exc, match=fragment):
        oc.Hamiltonian.sample(**args)


def test_memory_guard_refuses_before_allocating(monkeypatch):
    import orthoclimb.model.memory as memory

    monkeypatch.setattr(memory, "available_memory", lambda: 10_000)
    mix = oc.Mixture({3: 1.0})
    need = oc.estimate_memory(mix, 100, "float64")
    with pytest.raises(InsufficientMemoryError, match=f"needs {need} bytes.*only 10000 bytes"):
        oc.Hamiltonian.sample(mix, 100, seed=0)
    # the explicit override skips the check (the allocation itself is small here)
    assert oc.Hamiltonian.sample(mix, 100, seed=0, check_memory=False).nbytes == need


def _mem_available_from_proc() -> int | None:
    """MemAvailable from /proc/meminfo in bytes, parsed here independently: the kernel prints
    it in kibibytes despite the "kB" label (Linux fs/proc/meminfo.c, show_val_kb: pages <<
    (PAGE_SHIFT - 10); proc(5))."""
    try:
        with open("/proc/meminfo", encoding="ascii") as fh:
            fields = dict(line.split(":", 1) for line in fh if ":" in line)
    except OSError:
        return None
    if "MemAvailable" not in fields:
        return None
    value, unit = fields["MemAvailable"].split()
    assert unit == "kB"
    return int(value) * 1024


def test_available_memory_reads_meminfo_in_kibibytes():
    # the reading is bracketed by two independent reads; free memory may drift between them
    # (other processes), so retry until the two agree to 0.2 %, then allow 0.5 % beyond the
    # bracket. Reading kB as 1000 bytes would be 2.3 % low.
    import orthoclimb.model.memory as memory

    if _mem_available_from_proc() is None:
        pytest.skip("no MemAvailable in /proc/meminfo on this system")
    for _attempt in range(10):
        before = _mem_available_from_proc()
        got = memory.machine_available_memory()
        after = _mem_available_from_proc()
        if abs(after - before) <= 0.002 * before:
            break
    assert min(before, after) * 0.995 <= got <= max(before, after) * 1.005, (before, got, after)


def test_available_memory_parses_a_given_meminfo(monkeypatch):
    # exact: a meminfo text with MemAvailable of 12345678 kB means 12345678 x 1024 bytes
    # (Linux fs/proc/meminfo.c, show_val_kb); the line is found by its name, not its position
    import io

    import orthoclimb.model.memory as memory

    text = (
        "MemTotal:       32000000 kB\n"
        "MemFree:          999999 kB\n"
        "MemAvailable:   12345678 kB\n"
        "Buffers:          111111 kB\n"
    )

    def fake_open(path, *args, **kwargs):
        assert str(path) == "/proc/meminfo"
        return io.StringIO(text)

    monkeypatch.setattr(memory, "open", fake_open, raising=False)
    assert memory.machine_available_memory() == 12345678 * 1024


def test_storage_beyond_address_space_is_an_error_not_an_abort():
    # the estimate is a number, exact (math.comb), even beyond 64 bits; it raised the core's
    # "size overflow" before (a review). Sampling such an instance is refused, with the check
    # of memory or without it (then by the core's checked count), never an abort
    mixture = oc.Mixture({8: 1.0})
    assert oc.estimate_memory(mixture, 10**9) == 8 * math.comb(10**9 + 7, 8)
    for check in (True, False):
        with pytest.raises(InsufficientMemoryError):
            oc.Hamiltonian.sample(mixture, 10**9, seed=0, check_memory=check)
    with pytest.raises(ValueError, match=f"below 2\\^63, got {2**64}"):
        oc.estimate_memory(oc.Mixture({1: 1.0}), 2**64)


def test_bad_coefficient_inputs():
    with pytest.raises(MixtureError, match="p = 9"):
        oc.Hamiltonian.from_coefficients(3, {9: np.ones(3)})
    with pytest.raises(ShapeError, match="1-D"):
        oc.Hamiltonian.from_coefficients(3, {1: np.ones((3, 1))})
    with pytest.raises(NonFiniteError):
        oc.Hamiltonian.from_coefficients(3, {1: [1.0, np.nan, 2.0]})
    with pytest.raises(ValueError, match="non-empty"):
        oc.Hamiltonian.from_coefficients(3, {})
    # float32 storage would make 1e300 infinite: refused, naming the entry (float64 keeps it)
    big = {2: np.array([1.0, 2.0, 1e300])}
    with pytest.raises(ValueError, match=r"coefficients\[2\]\[2\] = 1e\+300 is beyond float32"):
        oc.Hamiltonian.from_coefficients(2, big, dtype="float32")
    assert oc.Hamiltonian.from_coefficients(2, big).coefficients(2)[2] == 1e300
    ham = oc.Hamiltonian.from_coefficients(3, {1: [1.0, 2.0, 3.0]})
    with pytest.raises(ValueError, match="no degree-2 term"):
        ham.coefficients(2)


def test_float32_sampling_refuses_a_gamma_whose_coefficients_pass_its_range():
    # they used to be stored as infinities (11 of 35 at gamma = 1e38, n = 5), and the energy
    # then blamed the point's scale. The bound is |a_m| <= sqrt(n) gamma sqrt(p!) G with
    # G = sqrt(-2 ln 2^-53), the largest Box-Muller radius of 53-bit uniforms
    # (Box & Muller 1958; c(m) <= p!); a gamma just under it stores finite values only.
    n, p = 5, 3
    edge = np.finfo(np.float32).max / (np.sqrt(n) * np.sqrt(6) * np.sqrt(-2 * np.log(2.0**-53)))
    with pytest.raises(ValueError, match=r"gamma = 1e38 for p = 3 at n = 5.*float32's range"):
        oc.Hamiltonian.sample(oc.Mixture({3: 1e38}), n, seed=0, dtype="float32")
    with pytest.raises(ValueError, match="float32's range"):
        oc.Hamiltonian.sample(oc.Mixture({p: edge * 1.000001}), n, seed=0, dtype="float32")
    ham32 = oc.Hamiltonian.sample(oc.Mixture({p: edge * 0.999999}), n, seed=0, dtype="float32")
    assert np.all(np.isfinite(ham32.coefficients(p)))
    ham64 = oc.Hamiltonian.sample(oc.Mixture({3: 1e38}), n, seed=0)  # float64 takes it
    assert np.all(np.isfinite(ham64.coefficients(3)))


def test_sampling_refuses_a_mixture_whose_coefficients_fall_below_the_normal_range():
    # float32 stored every coefficient of gamma = 1e-50 as 0 (energy 0.0, the optimizers
    # then ran on a zero polynomial). A coefficient's standard deviation is sqrt(n c(m))
    # gamma, c(m) <= p! (SPEC section 2); where even the largest, sqrt(n p!) gamma, lies below
    # the type's smallest normal number (IEEE 754: float32 1.18e-38), nearly all would be
    # subnormal or zero, and the sample is refused. Just above, the coefficients of at least
    # an eighth of that number keep about 20 significant bits against the float64 sample.
    n = 16
    tiny = float(np.finfo(np.float32).tiny)
    edge = tiny / np.sqrt(n * 2)
    with pytest.raises(ValueError, match=r"gamma = 1e-50 for p = 2 at n = 16.*float32's normal"):
        oc.Hamiltonian.sample(oc.Mixture({2: 1e-50}), n, seed=0, dtype="float32")
    with pytest.raises(ValueError, match=r"dtype=\"float64\""):
        oc.Hamiltonian.sample(oc.Mixture({2: edge * 0.99}), n, seed=0, dtype="float32")
    a32 = oc.Hamiltonian.sample(oc.Mixture({2: edge * 1.01}), n, seed=0, dtype="float32")
    a64 = oc.Hamiltonian.sample(oc.Mixture({2: edge * 1.01}), n, seed=0)
    c32, c64 = a32.coefficients(2), a64.coefficients(2)
    kept = np.abs(c64) >= tiny / 8
    assert np.count_nonzero(kept) > 50
    assert np.max(np.abs(c32[kept] - c64[kept]) / np.abs(c64[kept])) < 1e-6
    # a negligible degree beside a larger one is no loss, and was taken before: still taken
    mixed = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 4: 1e-40}), n, seed=0, dtype="float32")
    assert mixed.degrees == (2, 4) and 0 < np.max(np.abs(mixed.coefficients(4))) < tiny
    # (float64 storage has the same check in the core, but Mixture already refuses a gamma
    # whose square underflows float64, long before sqrt(n p!) gamma does)


def test_overflowed_results_raise_instead_of_returning_nan(ham):
    # finite inputs whose products pass the largest float64 (about 1.8e308)
    x = np.full(N, 1e300)
    for call in (ham.energy, ham.gradient, ham.energy_and_gradient):
        with pytest.raises(NonFiniteError, match="overflowed float64"):
            call(x)
        # one bad point spoils the batch call, and the error names it (a user trial could not
        # tell which of its points had overflowed)
        with pytest.raises(NonFiniteError, match=r"overflowed float64 at point 1 of the batch"):
            call(np.stack([np.ones(N), x, np.ones(N)]))
    with pytest.raises(NonFiniteError, match="Hessian overflowed"):
        ham.hessian(np.full(N, 1e308))
    with pytest.raises(NonFiniteError, match="Hessian-vector product overflowed"):
        ham.hvp(np.ones(N), np.full(N, 1e308))
    with pytest.raises(NonFiniteError, match="Hessian-vector product overflowed"):
        ham.hvp(np.ones(N), np.full((N, 3), 1e308))
    huge = oc.Hamiltonian.from_coefficients(2, {2: [1e308, 1e308, 1e308]})
    with pytest.raises(NonFiniteError, match="energy overflowed"):
        huge.energy(np.ones(2))


def test_large_finite_results_are_returned(ham):
    # exact identity: H(c x) = c^2 H_2(x) + c^3 H_3(x) for this mixture of degrees 2 and 3,
    # so a large but representable result comes back, not an error
    x = np.linspace(-1.0, 1.0, N)
    c = 1e100
    h2 = oc.Hamiltonian.from_coefficients(N, {2: ham.coefficients(2)}).energy(x)
    h3 = oc.Hamiltonian.from_coefficients(N, {3: ham.coefficients(3)}).energy(x)
    assert np.isclose(ham.energy(c * x), c**2 * h2 + c**3 * h3, rtol=1e-12)
    assert np.isfinite(ham.hessian(c * x)).all()


def test_a_hessian_workspace_beyond_the_available_memory_is_refused(monkeypatch):
    # n = 2100, pure p = 2: one n x n accumulator plus the result, 2 * 2100^2 * 8 bytes =
    # 70.56 MB, above the 64 MiB from which hessian() checks; with 1 MB "available" it is
    # refused before the kernel allocates anything, and check_memory=False still computes it
    from orthoclimb.model import memory

    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 2100, seed=0)
    assert ham.hessian_workspace_nbytes == 2 * 2100 * 2100 * 8
    monkeypatch.setattr(memory, "available_memory", lambda: 10**6)
    x = np.full(2100, 2100**-0.5)
    with pytest.raises(InsufficientMemoryError, match="n = 2100 needs 70560000 bytes.*hessian"):
        ham.hessian(x)
    hess = ham.hessian(x, check_memory=False)
    assert hess.shape == (2100, 2100) and np.isfinite(hess).all()
    with pytest.raises(TypeError, match="check_memory must be True or False, got 'no'"):
        ham.hessian(x, check_memory="no")
    # a 14 KB workspace is not checked at all (the check would cost more than the call)
    small = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 30, seed=0)

    def not_asked() -> int:
        raise AssertionError("a small Hessian read the available memory")

    monkeypatch.setattr(memory, "available_memory", not_asked)
    assert small.hessian(np.full(30, 30**-0.5)).shape == (30, 30)


def test_a_copy_of_a_batch_beyond_the_available_memory_is_refused(monkeypatch):
    # a broadcast view of 2.5 million points costs nothing, but its float64 copy 120 MB: it
    # is refused before the copy (a fuzzing trial saw 4.5 GB allocated without a word); a
    # C-contiguous float64 batch needs no copy and copies of at most 64 MiB are not checked
    from orthoclimb.model import memory

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 6, seed=0)
    x = np.full(6, 6**-0.5)
    monkeypatch.setattr(memory, "available_memory", lambda: 10**6)
    with pytest.raises(
        InsufficientMemoryError, match=r"copy of x \(shape \(2500000, 6\).*120000000 bytes"
    ):
        ham.energy(np.broadcast_to(x, (2_500_000, 6)))

    def not_asked() -> int:
        raise AssertionError("a small copy read the available memory")

    monkeypatch.setattr(memory, "available_memory", not_asked)
    e = ham.energy(np.broadcast_to(x, (1000, 6)))
    assert e.shape == (1000,) and np.allclose(e, ham.energy(x), rtol=1e-13, atol=0)


def test_many_directions_beyond_the_available_memory_are_refused_before_the_pass(monkeypatch):
    # pure p = 2 at n = 2100 takes the multi-direction pass (its Hessian's workspace is over
    # 64 MiB); 2000 directions need the core's transposed copy of them and the result, and
    # two accumulators for each pass over 32 of them: 2 * 2100 * 2000 * 8 + 2 * 2100 * 32 *
    # 8 = 68.2752 MB, checked from 64 MiB on. A user trial saw 10^5 directions under
    # ulimit -v fail an allocation after 8.4 s (of copying and transposing them) instead.
    from orthoclimb.model import memory

    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 2100, seed=0)
    x, v = np.full(2100, 2100**-0.5), np.ones((2100, 2000))
    monkeypatch.setattr(memory, "available_memory", lambda: 10**6)
    with pytest.raises(
        InsufficientMemoryError, match="2000 directions at n = 2100 needs 68275200 bytes"
    ):
        ham.hvp(x, v)
    with pytest.raises(TypeError, match="check_memory must be True or False, got 1"):
        ham.hvp(x, v, check_memory=1)
    # 30 directions (1.5 MB) are not checked at all
    monkeypatch.setattr(memory, "available_memory", lambda: 0)
    w = ham.hvp(x, v[:, :30])
    np.testing.assert_allclose(w[:, 7], ham.hvp(x, v[:, 7]), rtol=1e-12, atol=1e-12)


def test_numpy_integers_are_integers_for_coefficient_ranges(ham):
    # a range computed with NumPy (np.int64, np.int32) reads the same slice as Python ints;
    # a text byte limit is refused by name (before: a bare comparison TypeError)
    np.testing.assert_array_equal(
        ham.coefficients(3, np.int64(2), np.int32(5)), ham.coefficients(3, 2, 5)
    )
    with pytest.raises(TypeError, match="start must be an integer, got np.True_"):
        ham.coefficients(3, np.True_)
    with pytest.raises(TypeError, match="max_bytes must be an integer number of bytes"):
        ham.to_dense(3, max_bytes="1e9")


def test_repr_tells_correlated_instances_apart():
    # two instances of one mixture and seed that differ in their correlation print apart
    mix = oc.Mixture({3: 1.0})
    a = oc.Hamiltonian.sample(mix, 10, seed=2)
    b = oc.Hamiltonian.sample(mix, 10, seed=2, correlated_with=(1, 0.5))
    assert repr(a) != repr(b) and "correlated_with=(1, 0.5)" in repr(b)


@pytest.mark.parametrize("flag", ["no", 0, None])
def test_switches_of_the_model_take_only_true_or_false(tmp_path, flag):
    # the string "no" is truthy: taking it as True would do what the caller meant to skip
    mix = oc.Mixture({3: 1.0})
    with pytest.raises(TypeError, match=f"check_memory must be True or False, got {flag!r}"):
        oc.Hamiltonian.sample(mix, 5, seed=0, check_memory=flag)
    ham = oc.Hamiltonian.sample(mix, 5, seed=0)
    with pytest.raises(TypeError, match=f"symmetrize must be True or False, got {flag!r}"):
        oc.Hamiltonian.from_dense({3: ham.to_dense(3)}, symmetrize=flag)
    with pytest.raises(TypeError, match="check_memory must be True or False"):
        ham.save(tmp_path / "h", check_memory=flag)
    ham.save(tmp_path / "h")
    with pytest.raises(TypeError, match="check_memory must be True or False"):
        oc.load_instance(tmp_path / "h", check_memory=flag)
    assert oc.load_instance(tmp_path / "h", check_memory=np.True_).n == 5


def test_odd_integers_and_keys_get_package_errors():
    # each of these escaped as OverflowError or a bare sort/conversion error (a review)
    from orthoclimb.errors import MixtureTypeError

    m = oc.Mixture({3: 1.0})
    with pytest.raises(ValueError, match=r"rho must be in \[-1, 1\]"):
        oc.Hamiltonian.sample(m, 3, 1, correlated_with=(0, 10**400))
    ham = oc.Hamiltonian.sample(m, 4, 1)
    count = math.comb(4 + 2, 3)
    np.testing.assert_array_equal(ham.coefficients(3, None), ham.coefficients(3))
    for start, stop in ((2**64, None), (0, 2**64), (0, count + 1)):
        with pytest.raises(ValueError, match=rf"is outside 0\.\.{count}"):
            ham.coefficients(3, start, stop)
    # a reversed range inside 0..count was said to be outside it (a review)
    with pytest.raises(ValueError, match=r"range 5\.\.3 for degree 3 starts after it stops"):
        ham.coefficients(3, 5, 3)
    assert ham.coefficients(3, 3, 3).shape == (0,)
    c2 = np.zeros(math.comb(5, 2))
    with pytest.raises(MixtureTypeError, match="'3'"):
        oc.Hamiltonian.from_coefficients(4, {2: c2, "3": np.zeros(count)})
    # np.dtype(None) is float64: None was taken for the default
    with pytest.raises(ValueError, match="storage dtype must be 'float64' or 'float32', got None"):
        oc.Hamiltonian.sample(m, 4, 1, dtype=None)


def test_float32_storage_from_given_coefficients_makes_no_copy_of_their_size():
    # the range check for float32 storage built |a| in float64 and a mask: 1.1 times the
    # array's size at the peak, against a docstring that promises no second copy (a review).
    # tracemalloc sees NumPy's buffers (NumPy reports them to it), not the core's storage
    import tracemalloc

    a = np.ones(math.comb(100 + 2, 3))  # 1.4 MB
    tracemalloc.start()
    try:
        oc.Hamiltonian.from_coefficients(100, {3: a}, dtype="float32")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 0.25 * a.nbytes, peak  # the finiteness check's mask: one byte per value


def test_integers_beyond_float64_at_the_other_entry_points():
    # the same OverflowError as for gammas, at q, tol, B and rho of the theory and stability
    # functions; and messages that print no huge integer (str() refuses over 4300 digits)
    from orthoclimb.errors import MixtureError
    from orthoclimb.theory import ground_state, hessian_edge, parisi_functional, path_energy

    m = oc.Mixture({3: 1.0})
    for call in (
        lambda: path_energy(m, 10**400),
        lambda: hessian_edge(m, 10**400),
        lambda: ground_state(m, tol=10**400),
        lambda: parisi_functional(m, 10**400, [0.0, 1.0], [0.0]),
        lambda: oc.stability("gradient", m, 10, 0, [10**400]),
        lambda: m.xi(10**5000),
    ):
        with pytest.raises(ValueError, match="beyond float64's range|larger integer"):
            call()
    with pytest.raises(MixtureError, match="an integer of about 5000 digits"):
        oc.Mixture({3: 10**4999})


def test_hessian_moves_checks_its_steps():
    # hessian_moves(m, 0) returned -1 and (m, 2.5) 1.5 (a review)
    m = oc.Mixture({3: 1.0})
    for bad, kind in ((0, ValueError), (2.5, TypeError), (True, TypeError), (None, TypeError)):
        with pytest.raises(kind, match="steps must be"):
            oc.algorithms.hessian_moves(m, bad)


def test_values_beyond_float64_are_named_as_such():
    # a finite long double beyond float64 was reported as "a non-finite value inf", and an
    # integer above int64 as "dtype object" (a review)
    h = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 4, seed=1)
    if np.finfo(np.longdouble).max > np.finfo(np.float64).max:  # x86-64's 80-bit long double
        with pytest.raises(ValueError, match="x holds .*1e\\+400.* at index \\(0,\\), beyond"):
            h.energy(np.array([np.longdouble("1e400"), 0, 0, 0]))
    with pytest.raises(ValueError, match="x holds an integer beyond float64's range"):
        h.gradient([10**400, 0, 0, 0])
    x = [2**64, 0, 0, 0]  # fits float64: converted like any integer
    assert h.energy(x) == h.energy(np.array(x, dtype=np.float64))


def test_the_core_checks_its_own_copies_of_the_inputs(ham):
    # the Python layer checks every input before the call; the core checks the copies it
    # works on too, since a write from another thread can come in between (a review made NaN
    # coefficients pass the Python check 1 time in 20 that way, and the kernels then blamed a
    # float64 overflow "although every input is" finite). Called here directly, unchecked.
    from orthoclimb import _core

    core = ham._core
    bad = np.linspace(0.1, 0.6, N)
    bad[2] = np.nan
    with pytest.raises(NonFiniteError, match="x: non-finite value NaN at index 2"):
        core.energy(bad)
    with pytest.raises(NonFiniteError, match="v: non-finite value inf at index 1"):
        core.hvp(np.full(N, 0.1), np.array([0.0, np.inf, 0, 0, 0, 0]))
    # several directions: copied transposed, named by their place in V (first in V's order)
    vs = np.zeros((N, 3))
    vs[4, 0], vs[2, 1] = np.nan, np.inf
    with pytest.raises(NonFiniteError, match="v row 2: non-finite value inf at index 1"):
        core.hvp_many(np.full(N, 0.1), vs)
    with pytest.raises(ValueError, match=f"v must have n = {N} rows, got {N + 1}"):
        core.hvp_many(np.full(N, 0.1), np.zeros((N + 1, 3)))
    with pytest.raises(NonFiniteError, match="x row 1: non-finite value -inf at index 1"):
        core.energy_batch(
            np.concatenate([np.full(N + 1, 0.1), [-np.inf], np.zeros(4)]).reshape(2, N)
        )
    coeffs = np.ones(math.comb(N, 1))
    coeffs[4] = np.nan
    with pytest.raises(
        NonFiniteError, match="degree-1 coefficients: non-finite value NaN at index 4"
    ):
        _core.PackedPolynomial.from_coefficients(N, [1], [coeffs], "float64")
    coeffs[4] = 1e300  # finite, but not in float32
    with pytest.raises(NonFiniteError, match="1e300 at index 4 is beyond float32's range"):
        _core.PackedPolynomial.from_coefficients(N, [1], [coeffs], "float32")
    assert _core.PackedPolynomial.from_coefficients(N, [1], [coeffs], "float64").nbytes == 8 * N


def test_a_coefficient_copy_beyond_the_address_space_limit_is_an_error_not_an_abort(tmp_path):
    # coefficients() builds a float64 copy; when the allocator refused it, Rust's collect
    # aborted the process (a review: SIGABRT, exit 134, under ulimit -v). A child process
    # with an address-space limit 150 MB above its own size asks for a 400 MB copy.
    import subprocess
    import sys

    code = (
        "import resource, orthoclimb as oc\n"
        "from orthoclimb.errors import InsufficientMemoryError\n"
        "h = oc.Hamiltonian.sample(oc.Mixture({1: 1.0}), 50_000_000, seed=0, dtype='float32')\n"
        "size = int(open('/proc/self/statm').read().split()[0]) * resource.getpagesize()\n"
        "resource.setrlimit(resource.RLIMIT_AS, (size + 150 * 2**20, resource.RLIM_INFINITY))\n"
        "try:\n"
        "    h.coefficients(1)\n"
        "except InsufficientMemoryError as exc:\n"
        "    print('refused:', exc)\n"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert "refused: could not allocate 400000000 bytes" in proc.stdout, proc.stdout


def test_a_signal_handler_ends_a_long_coefficient_copy():
    # the copy holds the GIL (it reads the caller's arrays) and runs Python's signal handlers
    # between pieces of 2^20 values: a handler's exception ends it and is the call's result
    import signal

    from orthoclimb import _core

    class Stop(Exception):
        pass

    def resident() -> int:  # bytes of the process in memory (Linux)
        return int(open("/proc/self/statm").read().split()[1]) * os.sysconf("SC_PAGE_SIZE")

    grown = []

    def stop(signum, frame):
        grown.append(resident() - before)
        raise Stop

    big = np.full(50_000_000, 0.5)  # 400 MB read, far more than 5 ms of copying
    before = resident()
    old = signal.signal(signal.SIGALRM, stop)
    try:
        signal.setitimer(signal.ITIMER_REAL, 0.005)
        with pytest.raises(Stop):
            _core.PackedPolynomial.from_coefficients(big.size, [1], [big], "float32")
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, old)
    # the handler ran during the copy, not after it: the 200 MB of float32 storage were far
    # from written (a handler run only once the call returned would see all of them; a
    # review found the test passing that way too)
    assert grown and grown[0] < 100 * 2**20, grown


@pytest.mark.parametrize(
    ("nbytes", "text"),
    [
        (0, "0 B"),
        (1023, "1023 B"),
        (1023.6, "1.0 KiB"),
        (float("nan"), "unknown"),
        (float("inf"), "unknown"),
        (1536, "1.5 KiB"),
        (1024**3 * 1023.96, "1.0 TiB"),
        (3 * 1024**5, "3.0 PiB"),
        (2.5 * 1024**6, "2.5 EiB"),
        (51508863259604981802000, "5.2e+22 bytes"),
    ],
)
def test_sizes_read_as_people_write_them(nbytes, text):
    # a plan for degree 8 at n = 2000 said "46847038229.0 TiB" (a user trial): past the
    # binary units the size is given in powers of ten
    from orthoclimb.model.memory import format_bytes

    assert format_bytes(nbytes) == text
