"""Shared fixtures for the test suite."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from contextlib import contextmanager

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb import _core


@pytest.fixture
def rng() -> np.random.Generator:
    """A fixed-seed generator: tests are reproducible, never flaky."""
    return np.random.default_rng(20261201)


def unit(v: np.ndarray) -> np.ndarray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


@contextmanager
def every_call_on_the_pool() -> Iterator[Callable[[], None]]:
    """Sends every kernel call to the thread pool, however small (calls below the inline
    bound normally run on the calling thread, where the thread count does not split them),
    so that tests can compare thread counts. Yields a function that brings the default
    bound back early (to compare the inline path too); on exit the bound and the thread
    count are restored whatever happened."""
    threads = oc.get_num_threads()
    bound = _core._set_inline_passes(0)

    def inline_again() -> None:
        _core._set_inline_passes(bound)

    try:
        yield inline_again
    finally:
        oc.set_num_threads(threads)
        _core._set_inline_passes(bound)
