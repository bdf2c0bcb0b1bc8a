"""The dense reference checks its inputs as the kernels do (a review found it silently wrong
for a non-symmetric tensor and failing with unrelated errors for lists and 0-d points)."""

from __future__ import annotations

import numpy as np
import pytest

from orthoclimb import Hamiltonian, reference
from orthoclimb.errors import NonFiniteError, ShapeError

S = np.array([[1.0, 2.0], [2.0, 3.0]])


def test_a_non_symmetric_tensor_is_refused():
    # [[1, 4], [0, 3]] is the polynomial of S, whose gradient at (1, 1) is 2 S x = (6, 10);
    # the contraction formula gave (10, 6) for it
    a = np.array([[1.0, 4.0], [0.0, 3.0]])
    for f in (reference.gradient, reference.hessian, reference.energy):
        with pytest.raises(ValueError, match="degree-2 tensor is not symmetric"):
            f({2: a}, [1.0, 1.0])
    # the same polynomial, packed after averaging (x^T A x = x^T S x, an exact identity)
    ham = Hamiltonian.from_dense({2: a}, symmetrize=True)
    np.testing.assert_array_equal(reference.gradient({2: S}, [1, 1]), [6.0, 10.0])
    np.testing.assert_allclose(ham.gradient(np.ones(2)), [6.0, 10.0], rtol=1e-14)


@pytest.mark.parametrize(
    ("tensors", "x", "error", "words"),
    [
        ({3: S}, [1.0, 1.0], ShapeError, r"degree-3 tensor must have shape \(n,\)\*3"),
        ({2: S, 1: np.ones(3)}, [1.0, 1.0], ShapeError, "n = 2, as for the other degrees"),
        ({9: S}, [1.0, 1.0], ValueError, "degree p must be in 1..8, got p = 9"),
        ({True: np.ones(2)}, [1.0, 1.0], ValueError, "got True"),
        ("2:1", [1.0, 1.0], TypeError, "non-empty mapping"),
        ({}, [1.0, 1.0], TypeError, "non-empty mapping"),
        ({2: S}, [np.nan, 1.0], NonFiniteError, "non-finite value nan"),
        ({2: S}, np.float64(1.0), ShapeError, r"x must have shape \(2,\), got \(\)"),
        ({2: S}, np.ones((2, 2)), ShapeError, r"x must have shape \(2,\), got \(2, 2\)"),
        ({2: S.astype(complex)}, [1.0, 1.0], TypeError, "complex"),
    ],
)
def test_bad_input_is_named(tensors, x, error, words):
    for f in (reference.energy, reference.gradient, reference.hessian):
        with pytest.raises(error, match=words):
            f(tensors, x)


def test_lists_and_integer_points_are_converted():
    np.testing.assert_array_equal(reference.gradient({2: S}, [1, 1]), [6.0, 10.0])
    np.testing.assert_array_equal(reference.hvp({2: S}, [1, 1], np.eye(2)), 2 * S)
    with pytest.raises(ShapeError, match=r"v must have shape \(2,\) or \(2, k\)"):
        reference.hvp({2: S}, [1, 1], np.ones(3))
