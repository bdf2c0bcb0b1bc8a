"""Progress reports while sampling: the core's callback and Hamiltonian.sample(progress=True)."""

from __future__ import annotations

import math

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb import _core


@pytest.fixture
def one_thread():
    old = oc.get_num_threads()
    oc.set_num_threads(1)
    yield
    oc.set_num_threads(old)


def test_callback_counts_coefficients_and_changes_nothing(one_thread):
    # n = 500 at p = 3 (21 million coefficients), drawn correlated with another seed (two
    # Gaussians per coefficient), takes about 0.4-0.6 s on one thread here, so the 50 ms poll
    # reports many times
    n, total, corr = 500, math.comb(502, 3), (8, 0.5)
    seen: list[int] = []
    with_cb = _core.PackedPolynomial.sample(n, [3], [1.0], 7, "float64", corr, seen.append)
    plain = _core.PackedPolynomial.sample(n, [3], [1.0], 7, "float64", corr)
    assert len(seen) >= 2, seen
    # reported only when the count grew
    assert all(a < b for a, b in zip(seen[:-1], seen[1:], strict=True))
    assert 0 < seen[0] and seen[-1] <= total
    x = np.random.default_rng(0).standard_normal(n)
    assert with_cb.energy(x) == plain.energy(x)  # same coefficients bit for bit


def test_exception_in_callback_stops_sampling(one_thread):
    def fail(done: int) -> None:
        raise RuntimeError(f"stop at {done}")

    with pytest.raises(RuntimeError, match="stop at"):
        # about 0.3 s on one thread (correlated: two Gaussians per coefficient), past the
        # first 50 ms poll
        _core.PackedPolynomial.sample(400, [3], [1.0], 7, "float64", (8, 0.5), fail)


def test_bar_on_stderr(monkeypatch, capsys):
    # shown at once with no delay (the default waits half a second of sampling)
    monkeypatch.setattr("orthoclimb.model.hamiltonian._PROGRESS_DELAY", 0.0)
    oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=3, progress=True)
    err = capsys.readouterr().err
    assert "sampling n=40" in err and "100%" in err and "11.5k/11.5k" in err  # C(42, 3) = 11480


def test_no_bar_for_a_fast_sample(capsys):
    oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 30, seed=3, progress=True)
    assert "sampling" not in capsys.readouterr().err


def test_progress_must_be_a_bool():
    with pytest.raises(TypeError, match="progress must be True or False, got 'yes'"):
        oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 10, seed=3, progress="yes")
