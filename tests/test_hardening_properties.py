"""Property tests of the kernels over random mixtures, sizes, storage types and points.

Exact identities of homogeneous polynomials (Euler's theorem; "exact identity" in the tests
below), checked on random instances drawn by hypothesis: mixtures of degrees 1..5 with random
gammas, n = 1..12, float64 or float32 storage, random points (some with exact zeros), random
directions and batches. Euler's theorem on homogeneous functions gives identities every kernel must
satisfy.

Tolerances. Every quantity compared is a sum of at most M = num_coefficients + n + P + 2
rounded terms, each a product of at most P + 1 factors (kernels accumulate in float64 even with
float32 storage, and a float32 coefficient is exactly a float64 one). Recursive or tree
summation of M terms has an error of at most M u sum |term| to first order, u = 2^-53
(Higham, Accuracy and Stability of Numerical Algorithms, 2nd ed. 2002, sections 3.1 and 4.2).
The sum of |term| is computed exactly the same way from the polynomial with coefficients |a_m|
evaluated at |x| (the "magnitude"), so each side of a comparison is within M u magnitude of
the exact value and the two sides within 2 M u magnitude; we allow 4 M u magnitude to absorb
the rounding of the magnitude itself. A wrong term shows up at the size of the term, i.e. at
order 1 relative to the magnitude, far above 4 M u (< 1e-11 here).
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

import orthoclimb as oc

U = np.finfo(np.float64).eps / 2  # unit roundoff of float64

SETTINGS = settings(max_examples=60, deadline=None, derandomize=True)

mixtures = st.dictionaries(
    keys=st.integers(min_value=1, max_value=5),
    values=st.floats(min_value=0.05, max_value=3.0, allow_nan=False),
    min_size=1,
    max_size=5,
)


@st.composite
def instances(draw):
    """(ham, parts, abs_ham): the instance, one single-degree instance per degree built from
    ham.coefficients(p), and the magnitude polynomial with coefficients |a_m|."""
    gammas = draw(mixtures)
    n = draw(st.integers(min_value=1, max_value=12))
    dtype = draw(st.sampled_from(["float64", "float32"]))
    seed = draw(st.integers(min_value=0, max_value=2**64 - 1))
    ham = oc.Hamiltonian.sample(oc.Mixture(gammas), n, seed=seed, dtype=dtype)
    coeffs = {p: ham.coefficients(p) for p in ham.degrees}
    parts = {p: oc.Hamiltonian.from_coefficients(n, {p: c}) for p, c in coeffs.items()}
    abs_ham = oc.Hamiltonian.from_coefficients(n, {p: np.abs(c) for p, c in coeffs.items()})
    return ham, parts, abs_ham


@st.composite
def points(draw, n, shape=()):
    """Random float64 arrays of shape shape + (n,): Gaussian entries of a random scale, and
    with probability 1/3 some entries set exactly to zero."""
    rng = np.random.default_rng(draw(st.integers(min_value=0, max_value=2**32)))
    scale = draw(st.floats(min_value=0.05, max_value=3.0))
    x = scale * rng.standard_normal(shape + (n,))
    if draw(st.booleans()) and draw(st.booleans()):
        x[rng.random(x.shape) < 0.3] = 0.0
    return x


def tolerance(ham, magnitude):
    m = ham.num_coefficients + ham.n + max(ham.degrees) + 2
    return 4.0 * m * U * np.asarray(magnitude)


def assert_close(actual, expected, tol, what):
    err = np.abs(np.asarray(actual) - np.asarray(expected))
    bad = err > tol
    assert not np.any(bad), (
        f"{what}: worst error {np.max(err - tol)} above tolerance; "
        f"actual {actual}, expected {expected}, tol {tol}"
    )


@SETTINGS
@given(data=st.data())
def test_euler_identity_for_the_gradient(data):
    # exact identity: x . grad H_p(x) = p H_p(x), summed over the degrees of the mixture
    ham, parts, abs_ham = data.draw(instances())
    x = data.draw(points(ham.n))
    energy, grad = ham.energy_and_gradient(x)
    by_degree = {p: h.energy(x) for p, h in parts.items()}
    ax = np.abs(x)
    mag_e = abs_ham.energy(ax)  # sum over terms of |a_m x^m|
    mag_euler = float(ax @ abs_ham.gradient(ax))  # = sum_p p |terms of degree p| (Euler)
    assert_close(energy, sum(by_degree.values()), tolerance(ham, mag_e), "H = sum_p H_p")
    assert_close(energy, ham.energy(x), tolerance(ham, mag_e), "energy_and_gradient vs energy")
    euler = sum(p * e for p, e in by_degree.items())
    assert_close(x @ grad, euler, tolerance(ham, mag_euler), "x.grad H = sum_p p H_p")
    # and per degree, against the single-degree instance's own gradient
    # (mag_euler bounds the magnitude of each degree's terms)
    for p, h in parts.items():
        assert_close(x @ h.gradient(x), p * by_degree[p], tolerance(ham, mag_euler), f"p={p}")


@SETTINGS
@given(data=st.data())
def test_hessian_is_symmetric_and_satisfies_euler(data):
    ham, parts, abs_ham = data.draw(instances())
    x = data.draw(points(ham.n))
    hess = ham.hessian(x)
    assert hess.shape == (ham.n, ham.n) and hess.dtype == np.float64
    ax = np.abs(x)
    mag = abs_ham.hessian(ax)  # entrywise sum of |terms|
    # exact identity: second derivatives commute
    assert_close(hess, hess.T, tolerance(ham, mag), "Hessian symmetry")
    # exact identity: Hess H_p(x) x = (p - 1) grad H_p(x), summed over p
    rhs = sum((p - 1) * h.gradient(x) for p, h in parts.items())
    mag_rows = mag @ ax  # = sum_p (p - 1) |gradient terms| (Euler on the magnitude polynomial)
    assert_close(hess @ x, rhs, tolerance(ham, mag_rows), "Hess H(x) x = sum (p-1) grad H_p")
    # the Hessian of the sum is the sum of the Hessians
    assert_close(hess, sum(h.hessian(x) for h in parts.values()), tolerance(ham, mag), "sum")


@SETTINGS
@given(data=st.data(), k=st.integers(min_value=1, max_value=4))
def test_hvp_equals_hessian_times_directions(data, k):
    ham, _, abs_ham = data.draw(instances())
    x = data.draw(points(ham.n))
    v = data.draw(points(ham.n, shape=(k,))).T.copy()  # (n, k)
    hess = ham.hessian(x)
    mag = abs_ham.hessian(np.abs(x)) @ np.abs(v)
    many = ham.hvp(x, v)
    assert many.shape == (ham.n, k)
    assert_close(many, hess @ v, tolerance(ham, mag), "hvp, k directions")
    for j in range(k):
        one = ham.hvp(x, v[:, j])
        assert one.shape == (ham.n,)
        assert_close(one, hess @ v[:, j], tolerance(ham, mag[:, j]), "hvp, one direction")
        assert_close(one, many[:, j], tolerance(ham, mag[:, j]), "hvp one vs many")


@SETTINGS
@given(data=st.data(), b=st.integers(min_value=1, max_value=6))
def test_batch_equals_per_point(data, b):
    ham, _, abs_ham = data.draw(instances())
    xs = data.draw(points(ham.n, shape=(b,)))
    energies = ham.energy(xs)
    e2, grads = ham.energy_and_gradient(xs)
    assert energies.shape == (b,) and grads.shape == (b, ham.n)
    for i in range(b):
        ax = np.abs(xs[i])
        mag_e = abs_ham.energy(ax)
        mag_g = abs_ham.gradient(ax)
        assert_close(energies[i], ham.energy(xs[i]), tolerance(ham, mag_e), "batch energy")
        assert_close(e2[i], ham.energy(xs[i]), tolerance(ham, mag_e), "batch energy (pair)")
        assert_close(grads[i], ham.gradient(xs[i]), tolerance(ham, mag_g), "batch gradient")
