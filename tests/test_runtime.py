"""The process-wide thread setting."""

from __future__ import annotations

import os
import subprocess
import sys
import threading

import pytest
from threadpoolctl import threadpool_info

import orthoclimb as oc
from conftest import hung_forks


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


def test_an_empty_environment_variable_counts_as_unset():
    # `ORTHOCLIMB_NUM_THREADS= python ...` (or a job script's empty substitution) raised
    # ValueError at the first kernel call (a user trial); the CLI already read it as unset
    code = "import orthoclimb as oc; print(oc.get_num_threads())"
    unset = dict(os.environ)
    unset.pop("ORTHOCLIMB_NUM_THREADS", None)
    want = subprocess.run(
        [sys.executable, "-c", code], env=unset, capture_output=True, text=True, timeout=120
    )
    assert want.returncode == 0, want.stderr
    for value in ("", "  "):
        out = _run(code, value)
        assert out.returncode == 0, out.stderr
        assert out.stdout == want.stdout


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


def _blas_threads() -> list[int]:
    return [info["num_threads"] for info in threadpool_info() if info["user_api"] == "blas"]


def test_hessian_ascent_from_two_threads_gives_blas_its_threads_back():
    # Hessian ascent runs BLAS on one thread. threadpoolctl's limit is process-wide, and
    # entered directly from two threads, the first run to end restored the count while the
    # second still ran; the second then restored the single thread it had found, for good.
    # Here run B starts inside run A, and A ends while B waits in its first step: the order
    # that lost the threads.
    before = _blas_threads()
    if not before or max(before) < 2:
        pytest.skip(f"BLAS runs on one thread here already ({before}): nothing to restore")
    mix = oc.Mixture({2: 1.0, 4: 0.5})
    errors: list[Exception] = []
    a_done, b_inside = threading.Event(), threading.Event()

    def run(seed, tell, wait_for, done):
        def step(row):
            tell.set()
            if not wait_for.wait(timeout=60):
                raise TimeoutError("the other run did not get there")

        try:
            ham = oc.Hamiltonian.sample(mix, 30, seed=seed)
            oc.hessian_ascent(ham, steps=20, seed=0, polish=False, callback=step)
        except Exception as exc:  # reported below, not lost in the thread
            errors.append(exc)
        finally:
            done.set()

    thread_a = threading.Thread(target=run, args=(1, threading.Event(), b_inside, a_done))
    thread_b = threading.Thread(target=run, args=(2, b_inside, a_done, threading.Event()))
    thread_a.start()
    thread_b.start()
    thread_a.join(timeout=120)
    thread_b.join(timeout=120)
    assert not errors, errors
    assert _blas_threads() == before


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_a_child_forked_while_another_thread_limits_blas_does_not_hang():
    # The limiter's lock is held while threadpoolctl works (milliseconds, GIL released); a
    # child forked then inherited it locked and hung at its first solve (15 of 57 in a
    # review). The child now starts with a fresh lock and no users.
    setup = (
        "from orthoclimb.runtime import one_blas_thread\n"
        "def enter():\n"
        "    with one_blas_thread():\n"
        "        pass\n"
    )
    call = "enter()"
    assert hung_forks(setup, call, 60) == 0, "forked children hung"


@pytest.mark.skipif(not hasattr(os, "fork"), reason="needs os.fork")
def test_a_fork_waits_while_another_thread_is_inside_threadpoolctl():
    # a child forked while another thread was inside threadpoolctl's calls (which run under
    # the limiter's lock) could inherit OpenBLAS's own lock taken and hang in its first
    # openblas_set_num_threads (1 child in 1500 under load; faulthandler showed where). The
    # fork now waits for the lock: held here for 0.5 s by a thread, the fork takes that long
    code = (
        "import os, threading, time\n"
        "from orthoclimb import runtime\n"
        "held = threading.Event()\n"
        "def hold():\n"
        "    with runtime._blas_lock:\n"
        "        held.set()\n"
        "        time.sleep(0.5)\n"
        "t = threading.Thread(target=hold)\n"
        "t.start()\n"
        "held.wait()\n"
        "t0 = time.monotonic()\n"
        "pid = os.fork()\n"
        "if pid == 0:\n"
        "    os._exit(0)\n"
        "waited = time.monotonic() - t0\n"
        "os.waitpid(pid, 0)\n"
        "t.join()\n"
        "print(waited)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.returncode == 0, out.stderr[-2000:]
    assert float(out.stdout.strip().splitlines()[-1]) >= 0.4


def test_a_failing_blas_restore_warns_and_hides_no_error(monkeypatch):
    # threadpoolctl failing to restore used to replace the block's own error and leave its
    # limiter behind, so the next block recorded one thread as the original count
    from orthoclimb import runtime

    class Stuck:
        def restore_original_limits(self):
            raise RuntimeError("cannot restore")

    monkeypatch.setattr(runtime, "_limit_blas_to_one", Stuck)
    with pytest.warns(RuntimeWarning, match="could not restore the BLAS thread count"):
        with pytest.raises(KeyError, match="the block's own"):
            with runtime.one_blas_thread():
                raise KeyError("the block's own")
    assert runtime._blas_limits is None and runtime._blas_users == 0

    def refuse():
        raise OSError("no BLAS control here")

    monkeypatch.setattr(runtime, "_limit_blas_to_one", refuse)
    with pytest.warns(RuntimeWarning, match="could not limit the BLAS thread count"):
        with runtime.one_blas_thread():
            value = 42  # the work goes on without the limit
    assert value == 42 and runtime._blas_users == 0


def test_results_and_rows_record_which_code_made_them(tmp_path):
    # the version stays 0.x.0 across unreleased changes and editable installs; a digest of
    # the code tells two versions apart (a user trial could not). Checked on a copy of a
    # small tree: the same files give the same digest, a changed byte or name another
    import orthoclimb as oc
    from orthoclimb.runtime import code_digest, tree_digest
    from orthoclimb.studies.grid import spec_from_flags
    from orthoclimb.studies.tasks import run_task

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 12, seed=0)
    res = oc.gradient_ascent(ham, max_iter=3, check=False)
    assert res.config["code"] == code_digest() and len(code_digest()) == 16
    (task,) = spec_from_flags(["3:1"], None, "12", "0", "gradient").tasks()
    assert run_task(task, threads=1)["code"] == code_digest()
    (tmp_path / "a").mkdir()
    (tmp_path / "a" / "m.py").write_text("x = 1\n")
    (tmp_path / "core.so").write_bytes(b"\0\1")
    first = tree_digest(tmp_path / "a", tmp_path / "core.so")
    assert tree_digest(tmp_path / "a", tmp_path / "core.so") == first
    (tmp_path / "a" / "m.py").write_text("x = 2\n")
    assert tree_digest(tmp_path / "a", tmp_path / "core.so") != first
    (tmp_path / "a" / "m.py").write_text("x = 1\n")
    (tmp_path / "core.so").write_bytes(b"\0\2")
    assert tree_digest(tmp_path / "a", tmp_path / "core.so") != first
    (tmp_path / "core.so").write_bytes(b"\0\1")
    (tmp_path / "a" / "m.py").rename(tmp_path / "a" / "n.py")  # the same bytes, another name
    assert tree_digest(tmp_path / "a", tmp_path / "core.so") != first


def test_one_blas_thread_is_public_and_limits_blas_inside_its_block():
    # a user trial lost 2x mixing NumPy products with kernel calls (OpenBLAS's threads spin
    # after each call); the README points to this block, so it is part of the package's API
    assert oc.one_blas_thread is oc.runtime.one_blas_thread
    assert "one_blas_thread" in oc.__all__
    before = _blas_threads()
    if not before or max(before) < 2:
        pytest.skip(f"BLAS runs on one thread here already ({before})")
    with oc.one_blas_thread():
        assert set(_blas_threads()) == {1}
    assert _blas_threads() == before
