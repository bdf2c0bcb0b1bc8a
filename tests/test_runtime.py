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
    for bad, exc in ((0, ValueError), (-2, ValueError), (1.5, TypeError), (True, TypeError)):
        with pytest.raises(exc):
            oc.set_num_threads(bad)
    assert oc.kernel_path() in ("avx2+fma", "baseline")


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
    out = _run(code, "lots")
    assert out.returncode == 0, out.stderr
    assert "ValueError" in out.stdout and "'lots'" in out.stdout.replace('"', "'")
