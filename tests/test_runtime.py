"""The process-wide thread setting."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

import orthoclimb as oc


def test_set_and_get_threads():
    before = oc.get_num_threads()
    try:
        oc.set_num_threads(3)
        assert oc.get_num_threads() == 3
    finally:
        oc.set_num_threads(before)
    bad_values = [(0, ValueError), (-2, ValueError), (1.5, TypeError), (True, TypeError)]
    # an absurd count must be refused at once, not attempted (it would start that many threads)
    bad_values += [(1025, ValueError), (10**9, ValueError), (2**70, ValueError)]
    for bad, exc in bad_values:
        with pytest.raises(exc, match=str(bad) if exc is ValueError else None):
            oc.set_num_threads(bad)
    assert oc.get_num_threads() == before, "a refused setting keeps the old pool"


def test_kernel_path_follows_the_processor_flags():
    assert oc.kernel_path() in ("avx2+fma+avx512f", "avx2+fma", "baseline")
    try:
        with open("/proc/cpuinfo") as f:
            line = next(x for x in f if x.startswith("flags"))
    except (OSError, StopIteration):
        pytest.skip("no /proc/cpuinfo flags to compare with")
    flags = set(line.split(":", 1)[1].split())
    if {"avx2", "fma", "avx512f"} <= flags:
        want = "avx2+fma+avx512f"
    elif {"avx2", "fma"} <= flags:
        want = "avx2+fma"
    else:
        want = "baseline"
    assert oc.kernel_path() == want


def _run(code: str, env_value: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, ORTHOCLIMB_NUM_THREADS=env_value)
    return subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120
    )


def test_environment_variable_sets_default():
    out = _run("import orthoclimb as oc; print(oc.get_num_threads())", "3")
    assert out.returncode == 0, out.stderr
    assert out.stdout.strip() == "3"


def test_bad_environment_variable_is_a_clear_error():
    code = (
        "import orthoclimb as oc\n"
        "try:\n    oc.get_num_threads()\nexcept ValueError as e:\n    print('ValueError', e)"
    )
    for value in ("lots", "0", "100000000"):
        out = _run(code, value)
        assert out.returncode == 0, out.stderr
        assert "ValueError" in out.stdout and f"'{value}'" in out.stdout.replace('"', "'")


@pytest.mark.skipif(os.name != "posix", reason="environment values are bytes on POSIX only")
def test_environment_value_that_is_not_text_is_refused_not_ignored():
    # Bytes that are not UTF-8 used to be read as "not set", so the pool silently took every
    # core instead of the count the user meant.
    code = (
        "import orthoclimb as oc\n"
        "try:\n    print(oc.get_num_threads())\nexcept ValueError as e:\n    print('ValueError', e)"
    )
    env = {**os.environb, b"ORTHOCLIMB_NUM_THREADS": b"1\xff"}
    out = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr
    assert out.stdout.startswith("ValueError"), out.stdout
    assert "ORTHOCLIMB_NUM_THREADS" in out.stdout, out.stdout
