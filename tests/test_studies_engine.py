"""The Dask engine: worker sizing, a real two-process LocalCluster, resume after a kill,
an unreachable scheduler, a folder of another study."""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Callable
from typing import Any

import pyarrow.parquet as pq
import pytest

from conftest import thread_cluster
from orthoclimb import Mixture
from orthoclimb.cli import main
from orthoclimb.studies import external
from orthoclimb.studies.engine import (
    WorkerPlan,
    _connect,
    _reduced_requests,
    counted,
    plan_workers,
    run_study,
)
from orthoclimb.studies.grid import MethodSpec, MixtureSpec, StudySpec, spec_from_flags
from orthoclimb.studies.store import Store, StudyMismatchError


@pytest.mark.parametrize("cores", [1, 2, 3, 4, 7, 8, 16, 64])
@pytest.mark.parametrize("tasks", [1, 2, 5, 1000])
@pytest.mark.parametrize("workers", [None, 1, 3, 100])
def test_plan_never_oversubscribes(cores, tasks, workers):
    # common practice: processes x tasks per process x kernel threads <= cores
    plan = plan_workers(cores, tasks, workers)
    assert plan.workers * plan.dask_threads * plan.rayon_threads <= cores
    assert plan.workers >= 1 and plan.rayon_threads >= 1 and plan.dask_threads == 1
    assert plan.workers <= tasks
    if workers is not None:
        assert plan.workers <= workers
    # and uses the machine: no more than one worker's share of cores is idle
    assert plan.cores_used > cores - plan.workers


def test_plan_memory_and_examples():
    assert plan_workers(8, 1000) == WorkerPlan(8, 1, 1)
    assert plan_workers(8, 2) == WorkerPlan(2, 1, 4)
    assert plan_workers(8, 1000, memory_per_task=10, memory=45).workers == 2
    with pytest.raises(ValueError):
        plan_workers(0)


def test_lowered_requests_are_reported_never_silent():
    # --workers and --threads beyond what the plan allows are lowered (workers x threads <=
    # cores, common practice) and each lowering gets a note naming the request and the bound
    plan = plan_workers(2, 5, workers=9)
    assert plan == WorkerPlan(2, 1, 1)
    notes = _reduced_requests(plan, 9, 4, cores=2, pending=5)
    assert notes == [
        "note: --workers 9 lowered to 2 (at most one worker per core, per task and per memory"
        " share; here: 2 cores, 5 tasks to run)",
        "note: --threads 4 lowered to 1, the share of each of 2 workers in 2 cores",
    ]
    # the memory bound is named when it is the one that bit
    tight = plan_workers(8, 100, workers=8, memory_per_task=10, memory=45)
    assert tight.workers == 2
    (note,) = _reduced_requests(tight, 8, None, cores=8, pending=100)
    assert note.endswith(
        "here: the memory for each worker process and two instances per running task)"
    ), note
    # 3 cores, 2 tasks: 2 workers of 1 thread leave a core idle; the note claims no more
    (note,) = _reduced_requests(plan_workers(3, 2), None, 4, cores=3, pending=2)
    assert note == "note: --threads 4 lowered to 1, the share of each of 2 workers in 3 cores"
    # requests the plan grants give no note
    assert _reduced_requests(WorkerPlan(2, 1, 1), 2, 1, cores=2, pending=5) == []
    assert _reduced_requests(WorkerPlan(2, 1, 1), None, None, cores=2, pending=5) == []
    assert (counted(1, "core"), counted(3, "core")) == ("1 core", "3 cores")
    assert counted(2, "worker process", "worker processes") == "2 worker processes"


def test_absurd_thread_counts_are_refused_before_the_study_folder(tmp_path):
    # the kernels take at most 1024 threads (orthoclimb.set_num_threads): a larger --threads
    # would fail in every task, so it is refused before anything is written
    for bad in (0, 1025, 9999, 1.5):
        words = rf"threads \(--threads\) must be an integer in 1..1024, got {bad}"
        with pytest.raises(ValueError, match=words):
            run_study(_spec(), tmp_path / "s", threads=bad, progress=False)
    with pytest.raises(ValueError, match=r"retries \(--retries\) must be an integer >= 0"):
        run_study(_spec(), tmp_path / "s", retries=-1, progress=False)
    with pytest.raises(ValueError, match=r"timeout \(--timeout\) must be a positive number"):
        run_study(_spec(), tmp_path / "s", timeout=True, progress=False)
    assert not (tmp_path / "s").exists()


def _spec(seeds="0-3"):
    return spec_from_flags(
        ["3:1"], None, "16,24", seeds, "hessian,gradient", {"hessian": {"steps": 10}}
    )


def test_sweep_on_two_worker_local_cluster(tmp_path):
    spec = _spec()
    said: list[str] = []
    out = run_study(spec, tmp_path / "s", workers=2, progress=False, log=said.append)
    assert out.plan is not None and out.plan.workers == 2
    # from Python too, the sweep says what it will take before it starts (a user trial: only
    # the command line printed the memory and the time estimate)
    assert said[0] == f"study: 16 tasks (0 already done, 16 to run) in {tmp_path / 's'}"
    assert said[1].startswith("largest instance: ") and "of coefficients" in said[1]
    # every method with every option it runs with (a user trial missed that --steps had set
    # anneal's steps too)
    assert said[2] == (
        "methods: hessian (polish = True, start = auto, steps = 10, tol = 0.001);"
        " gradient (gtol = 1e-07, max_iter = 2000)"
    )
    assert any(line.startswith("rough time estimate: ") for line in said)
    assert out.done == len(spec.tasks()) == 16 and out.failed == 0
    table = pq.read_table(tmp_path / "s" / "results.parquet").to_pylist()
    assert len(table) == 16
    # the README lists the table's columns (a user trial found them only in a source file)
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[1] / "README.md").read_text()
    assert [c for c in table[0] if f"`{c}`" not in readme] == []
    assert sorted(r["task_id"] for r in table) == sorted(t.task_id for t in spec.tasks())
    assert len({r["worker"] for r in table}) >= 1
    assert all(r["threads"] == out.plan.rayon_threads for r in table)
    assert all(r["steps"] == 10 for r in table if r["method"] == "hessian")
    assert all(r["steps"] >= 1 for r in table if r["method"] == "gradient")
    # 8 instances for 2 workers: the two methods of each ran on one sampling of it
    assert all(r["sample_shared_by"] == 2 for r in table)
    by_instance: dict[tuple, set] = {}
    for r in table:
        by_instance.setdefault((r["n"], r["seed"]), set()).add(r["seconds_sample"])
    assert len(by_instance) == 8 and all(len(v) == 1 for v in by_instance.values())
    assert any("16 tasks on 8 instances: each instance is sampled once" in x for x in said)
    # rerun: everything skipped, nothing rewritten
    said.clear()
    again = run_study(spec, tmp_path / "s", workers=2, progress=False, log=said.append)
    assert again.skipped == 16 and again.done == 0
    assert said[0] == f"study: 16 tasks, all done already, in {tmp_path / 's'}"


def test_refuses_folder_of_a_different_study(tmp_path, capsys):
    folder = tmp_path / "s"
    Store.open(folder, _spec("0-3"))
    # dropping seeds is not an extension: refused (adding them is, see the next test), and
    # named as what it is: a study the folder's contains
    with pytest.raises(StudyMismatchError, match="larger study that contains this one.*seeds"):
        Store.open(folder, _spec("0-2"))
    code = main(
        [
            "sweep",
            "--gammas",
            "3:1",
            "--n",
            "16,24",
            "--seeds",
            "0-3",
            "--out",
            str(folder),
            "--no-progress",
        ]
    )
    assert code == 2  # other methods than the stored study's
    # the values too, not only the key (a user trial)
    assert "different configuration (differs in: methods: [" in capsys.readouterr().err


def test_adding_seeds_and_sizes_extends_a_study_and_runs_only_the_new_tasks(tmp_path):
    folder = tmp_path / "s"
    small = spec_from_flags(["3:1"], None, "16,24", "0-1", "gradient")
    assert run_study(small, folder, workers=1, progress=False).done == 4
    rows = folder / "rows"
    before = {p.name: p.read_bytes() for p in rows.glob("*.json")}
    grown = spec_from_flags(["3:1"], None, "16,24,32", "0-2", "gradient")
    out = run_study(grown, folder, workers=1, progress=False)
    assert (out.skipped, out.done, out.failed) == (4, 9 - 4, 0)
    after = {p.name: p.read_bytes() for p in rows.glob("*.json")}
    assert all(after[name] == data for name, data in before.items()), "old rows rewritten"
    meta = json.loads((folder / "study.json").read_text())
    assert meta["config"]["seeds"] == [0, 1, 2] and meta["config"]["sizes"] == [16, 24, 32]
    assert meta["extended"][0]["from"] == {"seeds": [0, 1], "sizes": [16, 24]}
    assert len(Store(folder, grown).rows()) == 9
    # the report reads the grown study: every size, every seed
    from orthoclimb.studies.report import build_report

    counts = {g["n"]: g["count"] for g in build_report(folder).groups}
    assert counts == {16: 3, 24: 3, 32: 3}
    # the first command again: refused, but told that the folder's study contains it (a
    # review read "differs in: seeds, sizes; refusing to mix two studies")
    with pytest.raises(ValueError, match="holds a larger study that contains this one") as err:
        run_study(small, folder, workers=1, progress=False)
    assert "more seeds and sizes" in str(err.value) and "orthoclimb report" in str(err.value)


def test_an_instance_larger_than_memory_is_refused_before_anything_starts(tmp_path, capsys):
    # p = 3, n = 100000: C(100002, 3) coefficients of 8 bytes, 1.3 PB, on any machine
    out = tmp_path / "s"
    code = main(["sweep", "--gammas", "3:1", "--n", "100000", "--seeds", "0", "--out", str(out)])
    assert code == 2
    err = capsys.readouterr().err
    assert "n = 100000" in err and "1333373333600000 bytes" in err and "--scheduler" in err
    assert not out.exists()


def test_unreachable_scheduler_is_a_clear_error(tmp_path, capsys):
    start = time.perf_counter()
    code = main(
        [
            "sweep",
            "--gammas",
            "3:1",
            "--n",
            "16,24",
            "--seeds",
            "0-1",
            "--out",
            str(tmp_path / "s"),
            "--scheduler",
            "tcp://127.0.0.1:9",
            "--timeout",
            "2",
            "--no-progress",
        ]
    )
    assert code == 2
    assert "cannot reach the Dask scheduler" in capsys.readouterr().err
    assert time.perf_counter() - start < 30
    # the new study never started: nothing of it stays, so another configuration may use
    # the folder (before, study.json stayed and the rerun below was refused as a mismatch);
    # the command also removes the folder it made
    assert not (tmp_path / "s").exists()
    Store.open(tmp_path / "s", _spec("0-2"))


def test_a_ctrl_c_while_sigterm_is_taken_over_undoes_the_new_study(tmp_path, monkeypatch):
    # the last step before the cluster starts (SIGTERM -> KeyboardInterrupt) sat between the
    # block that undoes an unstarted study and the one that closes the cluster: a Ctrl-C
    # landing there left study.json of a study that never ran. Simulated: the handler's
    # installation raises KeyboardInterrupt, as a signal arriving at that statement would.
    import orthoclimb.studies.engine as engine

    before = signal.getsignal(signal.SIGTERM)
    real_signal = signal.signal

    def interrupted(signum, handler):
        if signum == signal.SIGTERM and handler is engine._term_to_interrupt:
            real_signal(signum, handler)  # installed, then the Ctrl-C comes
            raise KeyboardInterrupt
        return real_signal(signum, handler)

    monkeypatch.setattr(engine.signal, "signal", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run_study(_spec("0-1"), tmp_path / "s", workers=1, progress=False, log=lambda _: None)
    monkeypatch.undo()
    assert not (tmp_path / "s" / "study.json").exists()
    assert signal.getsignal(signal.SIGTERM) == before  # given back
    Store.open(tmp_path / "s", _spec("0-2"))  # another configuration may use the folder


def test_a_new_study_refused_before_its_cluster_starts_leaves_nothing(tmp_path, capsys):
    # --workers 0 is refused by the worker plan, after the study folder was opened: the
    # study it created is removed again, so the next sweep there may differ
    args = ["sweep", "--gammas", "3:1", "--n", "16", "--seeds", "0-1", "--no-progress"]
    assert main([*args, "--workers", "0", "--out", str(tmp_path / "w")]) == 2
    assert "--workers" in capsys.readouterr().err
    assert not (tmp_path / "w").exists()
    Store.open(tmp_path / "w", _spec("0-2"))


def test_a_cluster_that_fails_to_close_still_leaves_the_table(tmp_path, monkeypatch):
    # a user trial's interrupted sweeps ended 2 times in 6 with rows but no table, after 10 s
    # in closing the cluster: an error there skipped the client, SIGTERM's handler and the
    # table. Each step now runs whatever the one before it raised, and the error goes on
    from distributed import LocalCluster

    real_close = LocalCluster.close

    def failing_close(self, *args, **kwargs):
        real_close(self, *args, **kwargs)
        raise TimeoutError("the cluster took too long to close")

    monkeypatch.setattr(LocalCluster, "close", failing_close)
    before = signal.getsignal(signal.SIGTERM)
    with pytest.raises(TimeoutError, match="took too long"):
        run_study(_spec("0"), tmp_path / "s", workers=1, progress=False, log=lambda _: None)
    table = pq.read_table(tmp_path / "s" / "results.parquet").to_pylist()
    assert len(table) == len(_spec("0").tasks()) == 4
    assert signal.getsignal(signal.SIGTERM) == before
    # interrupted, with the same failing close: the interruption goes on (exit 130, not an
    # error's 1: a review), the failure is a warning, and the rows written so far are tabled
    real_write = Store.write_row
    calls = []

    def interrupted_write(self, row):
        calls.append(row)
        if len(calls) == 2:
            raise KeyboardInterrupt
        return real_write(self, row)

    monkeypatch.setattr(Store, "write_row", interrupted_write)
    with pytest.warns(RuntimeWarning, match="closing the sweep's cluster failed: TimeoutError"):
        with pytest.raises(KeyboardInterrupt):
            run_study(_spec("0-1"), tmp_path / "t", workers=1, progress=False, log=print)
    table = pq.read_table(tmp_path / "t" / "results.parquet").to_pylist()
    # every row on disk is tabled: the driver's first, and those the worker wrote itself
    written = {p.stem for p in (tmp_path / "t" / "rows").glob("*.json")}
    assert len(table) >= 1 and {r["task_id"] for r in table} == written
    assert signal.getsignal(signal.SIGTERM) == before


def test_a_study_with_results_stays_when_its_scheduler_is_unreachable(tmp_path, monkeypatch):
    # only a study that this very call created, and that holds nothing, is undone; an
    # existing one keeps its configuration, rows and table
    folder = tmp_path / "s"
    spec = _spec("0-1")
    store = Store.open(folder, spec)
    task = spec.tasks()[0]
    row = {"task_id": task.task_id, "mixture": task.mixture.name, "method": task.method.name}
    store.write_row({**row, "n": task.n, "seed": task.seed, "energy": 1.0})
    before = (folder / "study.json").read_bytes()
    # nothing listens there: refused before the folder is touched or a kernel is timed (a
    # user trial: the plan timed the kernels first, and --plan-only never asked)
    with pytest.raises(ValueError, match="cannot reach the Dask scheduler"):
        run_study(spec, folder, scheduler="tcp://127.0.0.1:9", timeout=2, progress=False)
    assert (folder / "study.json").read_bytes() == before
    assert store.completed_ids() == {task.task_id}
    with pytest.raises(StudyMismatchError, match="larger study that contains this one"):
        Store.open(folder, _spec("0"))
    # a scheduler that answers the probe but whose client then fails: the study is opened,
    # and an extension (more seeds) that could not start is taken back: study.json holds its
    # previous bytes, so the old configuration is still the study's (before, the seeds 0-3
    # stayed recorded and a rerun with 0-1 was refused as dropping seeds)
    import socket

    import distributed

    def failing_client(*args, **kwargs):
        raise TimeoutError("no reply")

    monkeypatch.setattr(external, "scheduler_identity", lambda *a: {"type": "Scheduler"})
    monkeypatch.setattr(distributed, "Client", failing_client)
    with socket.create_server(("127.0.0.1", 0)) as silent:
        address = f"tcp://127.0.0.1:{silent.getsockname()[1]}"
        with pytest.raises(ValueError, match="cannot reach the Dask scheduler"):
            run_study(_spec("0-3"), folder, scheduler=address, timeout=2, progress=False)
        assert json.loads((folder / "study.json").read_bytes()) == json.loads(before)
        assert Store.open(folder, spec).completed_ids() == {task.task_id}
        # a second extension taken back leaves the history of the first one alone
        Store.open(folder, _spec("0-2"))
        with pytest.raises(ValueError, match="cannot reach the Dask scheduler"):
            run_study(_spec("0-3"), folder, scheduler=address, timeout=2, progress=False)
    stored = json.loads((folder / "study.json").read_text())
    assert len(stored["extended"]) == 1 and stored["config"]["seeds"] == [0, 1, 2]


def _wait_for_rows(proc: subprocess.Popen, rows, count: int, before: str) -> None:
    """Wait (at most 120 s) until the sweep in ``proc`` has written ``count`` rows."""
    deadline = time.time() + 120
    while time.time() < deadline:
        if rows.is_dir() and len(list(rows.glob("*.json"))) >= count:
            return
        assert proc.poll() is None, f"sweep finished or died before {before}"
        time.sleep(0.05)
    pytest.fail("no rows appeared within 120 s")


def test_kill_driver_then_resume(tmp_path):
    # the guarantee under test: atomic rows + skip-on-rerun => each task done exactly once
    folder = tmp_path / "s"
    args = [
        "--gammas",
        "3:1",
        "--n",
        "40,60",
        "--seeds",
        "0-11",
        "--methods",
        "hessian",
        "--steps",
        "30",
        "--workers",
        "2",
        "--out",
        str(folder),
        "--no-progress",
        "--no-report",
    ]
    cmd = [sys.executable, "-m", "orthoclimb", "sweep", *args]
    proc = subprocess.Popen(
        cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True
    )
    rows = folder / "rows"
    try:
        _wait_for_rows(proc, rows, 3, "it could be killed")
        os.killpg(proc.pid, signal.SIGKILL)  # the driver and its cluster, abruptly
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    before = {p.name: p.read_bytes() for p in rows.glob("*.json")}
    spec = spec_from_flags(["3:1"], None, "40,60", "0-11", "hessian", {"hessian": {"steps": 30}})
    assert 3 <= len(before) < len(spec.tasks()), "kill came too late to test a resume"
    for b in before.values():
        json.loads(b)  # complete files only
    assert main(["sweep", *args]) == 0
    after = {p.name: p.read_bytes() for p in rows.glob("*.json")}
    assert sorted(after) == sorted(f"{t.task_id}.json" for t in spec.tasks())
    for name, data in before.items():
        assert after[name] == data, f"row {name} changed on rerun"
    table = pq.read_table(folder / "results.parquet").to_pylist()
    ids = [r["task_id"] for r in table]
    assert len(ids) == len(set(ids)) == len(spec.tasks())


def test_a_killed_worker_loses_only_its_running_task(tmp_path):
    # Dask's nanny restarts a worker that dies and the scheduler reschedules the tasks it
    # held (Dask distributed documentation, "worker failure"); the rows written so far stay.
    psutil = pytest.importorskip("psutil")
    folder = tmp_path / "s"
    args = ["--gammas", "3:1", "--n", "40,60", "--seeds", "0-11", "--methods", "hessian"]
    args += ["--steps", "30", "--workers", "2", "--out", str(folder), "--no-progress"]
    args += ["--no-report"]
    proc = subprocess.Popen(
        [sys.executable, "-m", "orthoclimb", "sweep", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
    )
    rows = folder / "rows"
    killed, before = [], {}
    try:
        deadline = time.time() + 120
        while time.time() < deadline and not killed:
            assert proc.poll() is None, "sweep ended before a worker could be killed"
            if rows.is_dir() and len(list(rows.glob("*.json"))) >= 2:
                # the workers are the driver's children started by multiprocessing's spawn
                # (the resource tracker is another child, left alone)
                before = {p.name: p.read_bytes() for p in rows.glob("*.json")}
                for child in psutil.Process(proc.pid).children():
                    try:
                        if "spawn_main" in " ".join(child.cmdline()):
                            child.kill()
                            killed.append(child.pid)
                            break
                    except psutil.Error:
                        continue  # exited meanwhile
            time.sleep(0.05)
        assert killed, "found no worker process to kill"
        out, err = proc.communicate(timeout=300)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    failures = [p.read_text()[:500] for p in (folder / "failed").glob("*")]
    assert proc.returncode == 0, (err.decode()[-2000:], failures)
    spec = spec_from_flags(["3:1"], None, "40,60", "0-11", "hessian", {"hessian": {"steps": 30}})
    table = pq.read_table(folder / "results.parquet").to_pylist()
    ids = [r["task_id"] for r in table]
    assert sorted(ids) == sorted(t.task_id for t in spec.tasks())
    assert len(ids) == len(set(ids))
    for name, data in before.items():
        assert (rows / name).read_bytes() == data, f"row {name} rewritten after the kill"
    assert "1 worker process(es) died during the sweep" in out.decode(), out.decode()[-2000:]


def _one_task_study(gamma=1.0, options=None, dtype="float64") -> StudySpec:
    mix = MixtureSpec.make(Mixture({3: gamma}), "cubic")  # the same name whatever gamma
    return StudySpec((mix,), (8,), (0,), (MethodSpec.make("gradient", options),), dtype=dtype)


@pytest.mark.parametrize(
    "other",
    [{"gamma": 2.0}, {"options": {"max_iter": 7}}, {"dtype": "float32"}],
    ids=["gammas", "options", "dtype"],
)
def test_a_row_of_another_study_with_the_same_names_is_refused(tmp_path, other):
    # the module doc's guarantee: a row must describe the task its file name says. A row of a
    # study that differs only in what the names do not show (the gammas behind the mixture's
    # name, the method's options, the dtype) has the same mixture, method, n and seed but
    # another task id; copied under this study's file name it must be refused, not reported.
    mine, theirs = _one_task_study(), _one_task_study(**other)
    (task,), (their_task,) = mine.tasks(), theirs.tasks()
    assert (task.mixture.name, task.method.name, task.n, task.seed) == (
        their_task.mixture.name,
        their_task.method.name,
        their_task.n,
        their_task.seed,
    )
    assert task.task_id != their_task.task_id
    store = Store.open(tmp_path / "mine", mine)
    other_store = Store.open(tmp_path / "theirs", theirs)
    row = {"mixture": "cubic", "method": "gradient", "n": 8, "seed": 0, "energy": 0.5}
    assert other_store.write_row({"task_id": their_task.task_id, **row})
    data = other_store.row_path(their_task.task_id).read_bytes()
    store.row_path(task.task_id).write_bytes(data)
    with pytest.raises(ValueError, match=f"holds task '{their_task.task_id}', not"):
        store.rows()
    # the study's own row, written the same way, is read back
    store.row_path(task.task_id).unlink()
    assert store.write_row({"task_id": task.task_id, **row})
    assert [r["task_id"] for r in store.rows()] == [task.task_id]


def test_ctrl_c_stops_the_sweep_without_worker_tracebacks(tmp_path):
    # Ctrl-C in a terminal sends SIGINT to the whole process group (POSIX job control), so the
    # worker processes get it too; they used to die printing ~70 lines of tracebacks. Only the
    # sweep's one-line message may remain, with the shell's status for SIGINT (128 + 2).
    folder = tmp_path / "s"
    args = ["--gammas", "3:1", "--n", "40,60", "--seeds", "0-199", "--methods", "hessian"]
    _interrupt_after_rows([*args, "--steps", "30", "--workers", "2"], folder, 2)


def _interrupt_after_rows(args: list[str], folder, count: int) -> None:
    """:func:`_interrupted_sweep` of ``orthoclimb sweep ARGS`` into ``folder`` (no progress bar,
    no report), interrupted once ``count`` rows are written."""
    _interrupted_sweep(
        [*args, "--out", str(folder), "--no-progress", "--no-report"],
        lambda proc: _wait_for_rows(proc, folder / "rows", count, "Ctrl-C"),
    )


#: One instance whose gradient ascent ends in about a second and whose Hessian ascent (3000
#: steps at n = 300) would take half a minute, on one worker.
_GRADIENT_THEN_LONG_HESSIAN = [
    *("--gammas", "3:1", "--n", "300", "--seeds", "0", "--methods", "gradient,hessian"),
    *("--steps", "3000", "--workers", "1"),
]


def _interrupted_sweep(args: list[str], wait: Callable[[subprocess.Popen], Any]) -> None:
    """Run ``orthoclimb sweep ARGS`` in a process group of its own, send the group SIGINT (as
    Ctrl-C in a terminal does) once ``wait(proc)`` returns, and check that the sweep stopped
    with its one line and the shell's status for SIGINT (128 + 2), and that neither it nor a
    worker printed a traceback."""
    cmd = [sys.executable, "-m", "orthoclimb", "sweep", *args]
    env = {**os.environ, "PYTHONUNBUFFERED": "1"}  # stdout lines arrive as printed
    proc = subprocess.Popen(
        cmd,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        start_new_session=True,
        text=True,
        env=env,
    )
    try:
        wait(proc)
        os.killpg(proc.pid, signal.SIGINT)
        _, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and "KeyboardInterrupt" not in err, err
    assert err.strip() == "orthoclimb sweep: interrupted"


def test_ctrl_c_keeps_the_finished_methods_of_a_running_instance(tmp_path):
    # the methods of one instance run as one Dask task on one sampling; their rows used to
    # reach the folder only when the last method ended, so a Ctrl-C lost the finished ones.
    # The embedded cluster's worker now writes each row as its method ends
    folder = tmp_path / "s"
    _interrupt_after_rows(_GRADIENT_THEN_LONG_HESSIAN, folder, 1)
    table = pq.read_table(folder / "results.parquet").to_pylist()
    assert [(r["method"], r["sample_shared_by"]) for r in table] == [("gradient", 2)]
    assert Store(folder, spec_from_flags(["3:1"], None, "300", "0", "gradient,hessian")).rows()


def test_ctrl_c_while_the_cluster_starts_stops_the_sweep(tmp_path):
    # The sweep used to ignore SIGINT while its cluster started (so the workers would inherit
    # that), and a Ctrl-C in that second or two was lost: the sweep ran every task and exited
    # 0 (8 of 8 tries of a user review). SIGINT is now held (blocked) and delivered once the
    # start is over: the sweep stops with its one line and 130, no worker prints a traceback,
    # and the new study folder, with nothing run, is removed.
    folder = tmp_path / "s"
    args = ["--gammas", "3:1", "--n", "40,60", "--seeds", "0-99", "--methods", "gradient"]
    args += ["--workers", "2", "--out", str(folder), "--no-progress", "--no-report"]

    def until_the_cluster_starts(proc: subprocess.Popen) -> None:
        for line in proc.stdout:  # printed just before the cluster starts
            if line.startswith("embedded Dask cluster"):
                return

    _interrupted_sweep(args, until_the_cluster_starts)
    assert not folder.exists()


def test_a_second_sweep_into_a_busy_folder_is_refused(tmp_path):
    # two sweeps into one folder both ran the unfinished tasks and rewrote rows (a user
    # review); a sweep now holds the folder (flock), and another is refused at once. The
    # lock is per open file, so a second holder in this same process conflicts too.
    from orthoclimb.studies.store import sweep_lock

    folder = tmp_path / "s"
    spec = spec_from_flags(["2:1"], None, "8", "0-1", "gradient")
    with sweep_lock(folder):
        with pytest.raises(ValueError, match="another sweep is running"):
            run_study(spec, folder, workers=1, progress=False)
        assert list(folder.iterdir()) == []  # refused before the study was opened
    out = run_study(spec, folder, workers=1, progress=False)  # released: it runs
    assert out.done == 2


def _worker_sigint() -> tuple[int, bool]:
    return os.getpid(), signal.getsignal(signal.SIGINT) == signal.SIG_IGN


def test_a_worker_that_replaces_a_dead_one_ignores_ctrl_c_too():
    # the first workers inherit SIGINT blocked from the sweep and ignore it on import; a
    # replacement is spawned after the sweep handles SIGINT again, and used to die with
    # tracebacks on the next Ctrl-C
    client, cluster = _connect(None, WorkerPlan(1, 1, 1), 60)
    try:
        ((first, ignored),) = client.run(_worker_sigint).values()
        assert ignored
        os.kill(first, signal.SIGKILL)
        deadline, after = time.time() + 60, []
        while time.time() < deadline:
            with contextlib.suppress(Exception):  # no worker while the nanny restarts it
                after = list(client.run(_worker_sigint).values())
            if after and after[0][0] != first:
                break
            time.sleep(0.2)
        assert after and after[0][0] != first, "the nanny started no replacement within 60 s"
        assert after[0][1], "the replacement worker does not ignore SIGINT"
    finally:
        client.close()
        cluster.close()


def test_no_progress_bar_when_stderr_is_not_a_terminal(tmp_path, capsys):
    # common practice (tqdm's disable=None): a bar redrawn into a log file is noise; the
    # captured stderr here is not a terminal, so without --no-progress there is still no bar
    args = ["sweep", "--gammas", "2:1", "--n", "8,10", "--seeds", "0-1", "--methods", "gradient"]
    assert main([*args, "--workers", "1", "--out", str(tmp_path / "s"), "--no-report"]) == 0
    err = capsys.readouterr().err
    assert "task/s" not in err and "%|" not in err and "it/s" not in err, err


def test_every_unusable_row_is_named_in_one_error(tmp_path):
    # a user fixing a damaged folder should see all of it at once, not one file per run
    folder = tmp_path / "s"
    spec = spec_from_flags(["3:1"], None, "16,24", "0-5", "gradient")
    store = Store.open(folder, spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        store.write_row({**row, "n": t.n, "seed": t.seed, "energy": 1.0})
    broken = sorted((folder / "rows").glob("*.json"))[:3]
    for path in broken:
        path.write_text(path.read_text().replace('"energy": 1.0', '"energy": 2.0'))
    with pytest.raises(ValueError, match="3 row files of the study cannot be used") as err:
        store.rows()
    for path in broken:
        assert str(path) in str(err.value)
    broken[0].write_text("{")  # and a single bad file keeps its own message
    for path in broken[1:]:
        path.unlink()
    with pytest.raises(ValueError, match="delete it and rerun the sweep") as err:
        store.rows()
    assert "row files of the study" not in str(err.value)


def test_the_api_shows_the_bar_when_asked_even_without_a_terminal(tmp_path, capsys):
    # a notebook's stderr is no terminal: progress=True must still draw the bar (only the
    # command line asks for "terminal only")
    spec = spec_from_flags(["2:1"], None, "8,10", "0-1", "gradient")
    run_study(spec, tmp_path / "s", workers=1, progress=True)
    assert "task" in capsys.readouterr().err


def test_an_anneal_task_runs_langevin_with_its_options(tmp_path):
    # the row of a study task equals a direct call with the same instance, seed and schedule
    # (same code path, so bitwise: the instance and the run are pure functions of the seed)
    import orthoclimb as oc
    from orthoclimb.algorithms.baselines import geometric_schedule
    from orthoclimb.studies.tasks import run_task

    opts = {"steps": 30, "eta": 0.01, "t_start": 0.5, "t_end": 0.05}
    spec = spec_from_flags(["3:1"], None, "16", "3", "anneal", {"anneal": opts})
    (task,) = spec.tasks()
    row = run_task(task, threads=1)
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 16, seed=3)
    direct = oc.langevin_anneal(ham, seed=3, schedule=geometric_schedule(0.5, 0.05, 30), eta=0.01)
    assert row["method"] == "anneal" and row["energy"] == direct.energy
    assert row["energy_before_polish"] == direct.info["energy_anneal"] <= row["energy"] + 1e-12
    with pytest.raises(ValueError, match="eta"):
        spec_from_flags(["3:1"], None, "16", "3", "anneal", {"anneal": {"eta": -1.0}})


def test_climb_with_the_seed_as_start_seed_reruns_a_sweep_row(tmp_path, capsys):
    # a user could not reproduce a sweep row with climb: the sweep starts each run from its
    # disorder seed, climb from --start-seed 0. The row names its start seed, and climb with
    # it gives the row's energy bit for bit (same defaults, same code path).
    from orthoclimb.studies.tasks import run_task

    spec = spec_from_flags(["3:1"], None, "30", "5", "hessian")
    (task,) = spec.tasks()
    row = run_task(task, threads=1)
    assert row["start_seed"] == row["seed"] == 5
    climb = ["climb", "--gammas", "3:1", "--n", "30", "--seed", "5", "--threads", "1"]
    climb += ["--json", "--no-progress", "--out", str(tmp_path / "c")]
    assert main([*climb, "--start-seed", "5"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["energy"] == row["energy"]
    # and the same quantity has the same name in both (climb said gap_to_alg and
    # gap_to_ground_state where rows say gap_alg and gap_gs: a user trial)
    shared = ["energy", "energy_before_polish", "alg", "ground_state", "gap_alg", "gap_gs"]
    shared += ["local_max", "start_seed", "method", "n", "seed", "dtype"]
    assert {k: summary[k] for k in shared} == pytest.approx({k: row[k] for k in shared})


def _run_script(folder, text: str) -> subprocess.CompletedProcess:
    """Run ``text`` as the script ``folder/script.py`` with this Python, in ``folder``."""
    script = folder / "script.py"
    script.write_text(text)
    return subprocess.run(
        [sys.executable, str(script)], cwd=folder, capture_output=True, text=True, timeout=180
    )


def test_a_script_without_the_main_guard_gets_told_and_leaves_no_study(tmp_path):
    # Dask's worker processes import the main script again (as __mp_main__); a study call at
    # its top level would run the whole study once more inside every worker, in the same
    # folder. The workers refuse with a message naming the fix, and the folder is left
    # clean (before: the workers wrote results tables and the parent removed study.json)
    proc = _run_script(
        tmp_path,
        "from orthoclimb.studies.grid import spec_from_flags\n"
        "from orthoclimb.studies.engine import run_study\n"
        "spec = spec_from_flags(['3:1'], None, '16', '0', 'gradient')\n"
        "run_study(spec, 'st', workers=1, progress=False)\n",
    )
    assert proc.returncode != 0
    assert 'put the call under `if __name__ == "__main__":`' in proc.stderr
    assert list((tmp_path / "st").iterdir()) == []


def test_a_study_started_from_a_spawned_pool_is_no_reimport(tmp_path):
    # a script with the main guard may run studies from a function that a spawn-started
    # pool calls; that function lives in __mp_main__ too, but is not the script's import, so
    # the call goes on (here to its own argument check) instead of the main-guard refusal
    proc = _run_script(
        tmp_path,
        "import multiprocessing as mp\n"
        "def attempt(_):\n"
        "    from orthoclimb.studies.grid import spec_from_flags\n"
        "    from orthoclimb.studies.engine import run_study\n"
        "    spec = spec_from_flags(['3:1'], None, '16', '0', 'gradient')\n"
        "    try:\n"
        "        run_study(spec, 'st', retries=-1, progress=False)\n"
        "    except Exception as exc:\n"
        "        return type(exc).__name__ + ': ' + str(exc)\n"
        "if __name__ == '__main__':\n"
        "    with mp.get_context('spawn').Pool(1) as pool:\n"
        "        print(pool.map(attempt, [0])[0])\n",
    )
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.startswith("ValueError: retries (--retries)"), proc.stdout


def test_a_sweep_that_leaves_the_report_behind_says_so(tmp_path, capsys, monkeypatch):
    # after a sweep with --no-report (or an interrupted one) added rows, report.md still
    # described the old study with nothing to tell (user review); the sweep now says so
    base = ["sweep", "--gammas", "2:1", "--n", "8,10", "--methods", "gradient", "--workers", "1"]
    base += ["--out", str(tmp_path / "s"), "--no-progress"]
    assert main([*base, "--seeds", "0-1"]) == 0
    assert (tmp_path / "s" / "report.md").is_file()
    out = capsys.readouterr().out
    assert "predates" not in out
    # the verdicts too, as report and demo print them (sweep printed only the table)
    assert "\n- 2:1.0: the full-RSB criterion holds" in out, out
    assert main([*base, "--seeds", "0-2", "--no-report"]) == 0
    assert "predates this sweep's new rows" in capsys.readouterr().out
    assert main([*base, "--seeds", "0-2", "--no-report"]) == 0  # nothing new: no note
    assert "predates" not in capsys.readouterr().out

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    # a Ctrl-C before any new row: one line, no note (the note used to come on any Ctrl-C)
    monkeypatch.setattr("orthoclimb.studies.engine.run_study", interrupted)
    assert main([*base, "--seeds", "0-3"]) == 130
    assert capsys.readouterr().err.strip() == "orthoclimb sweep: interrupted"


def test_the_table_keeps_every_field_of_rows_from_older_versions(tmp_path):
    # pyarrow's from_pylist takes its columns from the first row: a study extended by this
    # version after an older one wrote its first rows lost the new start_seed column (a
    # review); a number missing in every row (no converged ground state) is a float column
    import pyarrow.parquet as pq

    spec = spec_from_flags(["3:1"], None, "16", "0-1", "gradient")
    store = Store.open(tmp_path / "s", spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5, ground_state=None)
        store.write_row({**row, "start_seed": t.seed} if t.seed == 1 else row)
    store.write_table()
    table = pq.read_table(tmp_path / "s" / "results.parquet")
    assert table.column("start_seed").to_pylist() == [None, 1]
    assert str(table.schema.field("ground_state").type) == "double"


def test_the_hold_raises_a_ctrl_c_after_its_block_not_inside_it():
    # a review found that blocking SIGINT in the main thread alone did not hold it: another
    # thread (the kernels' pool, here a fresh one) took the signal and KeyboardInterrupt came
    # in the middle of the cluster's start. Inside the hold the signal is only recorded.
    import threading

    from orthoclimb.studies.engine import _interrupts_held

    other = threading.Thread(target=time.sleep, args=(1.0,))  # SIGINT deliverable there
    other.start()
    reached_the_end = False
    with pytest.raises(KeyboardInterrupt):
        with _interrupts_held():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.2)  # time for the handler to run, inside the block
            reached_the_end = True
    assert reached_the_end
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler  # restored
    # a process that ignores SIGINT (a background job of a script) keeps ignoring it
    old = signal.signal(signal.SIGINT, signal.SIG_IGN)
    try:
        with _interrupts_held():
            os.kill(os.getpid(), signal.SIGINT)
            time.sleep(0.1)
    finally:
        signal.signal(signal.SIGINT, old)
    other.join()


@pytest.mark.parametrize("address", ["inproc://x", "tls://127.0.0.1:1"])
def test_a_scheduler_address_of_another_transport_is_refused_up_front(tmp_path, address):
    # inproc:// failed inside Dask with "not enough values to unpack (expected 3, got 1)",
    # tls:// with "TLS expects a ssl_context" (a review); the folder is not created
    folder = tmp_path / "s"
    with pytest.raises(ValueError, match=r"takes a tcp://HOST:PORT address, got '.*' \(scheme"):
        run_study(_spec("0-1"), folder, scheduler=address, timeout=2, progress=False)
    assert not folder.exists()


def test_a_listener_that_is_no_scheduler_gets_a_message_naming_the_address(monkeypatch):
    # whatever Dask's client raises besides OSError/TimeoutError left as its own message
    import socket

    import distributed

    from orthoclimb.studies import engine

    def refusing_client(*args, **kwargs):
        raise RuntimeError("handshake failed")

    monkeypatch.setattr(distributed, "Client", refusing_client)
    with socket.socket() as listener:
        listener.bind(("127.0.0.1", 0))
        listener.listen()
        address = f"tcp://127.0.0.1:{listener.getsockname()[1]}"
        with pytest.raises(ValueError, match=rf"cannot connect to a Dask scheduler at {address}"):
            engine._connect(address, None, 2.0)


def test_a_scheduler_without_workers_is_announced_and_the_tasks_wait_for_one(tmp_path):
    # outside a terminal (no bar) a sweep against a scheduler with no workers waited without
    # a word until killed (a review); it now says so, and runs once a worker joins
    import threading

    with thread_cluster(0) as cluster:
        spec = spec_from_flags(["3:1"], None, "8", "0-1", "gradient")
        logs: list[str] = []
        out = {}

        def sweep() -> None:
            out["outcome"] = run_study(
                spec,
                tmp_path / "s",
                scheduler=cluster.scheduler_address,
                progress=False,
                log=logs.append,
            )

        thread = threading.Thread(target=sweep)
        thread.start()
        deadline = time.monotonic() + 60
        while not any("has no workers yet" in line for line in logs):
            assert time.monotonic() < deadline and thread.is_alive(), logs
            time.sleep(0.05)
        cluster.scale(1)
        thread.join(120)
        assert not thread.is_alive() and out["outcome"].done == 2
        assert f"`dask worker {cluster.scheduler_address}`" in logs[-1]


def test_a_method_that_fails_in_a_group_leaves_the_other_rows(tmp_path, monkeypatch):
    # in-process workers (an external cluster of threads), so that the patch reaches them
    import orthoclimb.algorithms as algorithms

    def broken(*args, **kwargs):
        raise RuntimeError("gradient ascent broke")

    monkeypatch.setattr(algorithms, "gradient_ascent", broken)
    with thread_cluster(1) as cluster:
        spec = spec_from_flags(["3:1"], None, "8", "0-1", "hessian,gradient", {})
        out = run_study(
            spec, tmp_path / "s", scheduler=cluster.scheduler_address, progress=False, retries=0
        )
    assert (out.done, out.failed) == (2, 2)
    table = pq.read_table(tmp_path / "s" / "results.parquet").to_pylist()
    assert sorted(r["method"] for r in table) == ["hessian", "hessian"]
    assert all(r["sample_shared_by"] == 2 for r in table)
    failures = sorted((tmp_path / "s" / "failed").glob("*"))
    gradient_ids = {t.task_id for t in spec.tasks() if t.method.name == "gradient"}
    assert {p.stem for p in failures} == gradient_ids
    assert all("RuntimeError: gradient ascent broke" in p.read_text() for p in failures)


def test_a_table_that_cannot_be_written_does_not_replace_the_sweeps_own_exception():
    # the sweep's last step rewrites the table from the row files; one bad row file made it
    # raise ValueError inside the finally block, replacing a Ctrl-C (exit 130 became 2)
    from orthoclimb.studies.engine import _write_table_after

    class BadRows:
        def write_table(self):
            raise ValueError("1 row file of the study cannot be used")

    with pytest.raises(ValueError, match="cannot be used"):
        _write_table_after(BadRows(), None)  # a sweep that ends well still reports it
    with pytest.warns(RuntimeWarning, match="table was not updated: 1 row file"):
        _write_table_after(BadRows(), KeyboardInterrupt())


def test_a_plain_row_with_an_infinite_energy_is_refused(tmp_path, capsys):
    # a plain (unsealed, older) row file with energy Infinity was read, printed as inf in the
    # table and as null in the JSON, with exit 0 (a review); and `report ""` reported on "."
    import json as json_module

    folder = tmp_path / "s"
    spec = spec_from_flags(["3:1"], None, "16,24", "0-1", "gradient")
    store = Store.open(folder, spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.0)
        (folder / "rows" / f"{t.task_id}.json").write_text(json_module.dumps(row))
    assert len(store.rows()) == 4  # plain rows are read
    path = sorted((folder / "rows").glob("*.json"))[0]
    path.write_text(path.read_text().replace('"energy": 1.0', '"energy": Infinity'))
    with pytest.raises(ValueError, match="has energy = inf, not a finite number"):
        store.rows()
    assert main(["report", ""]) == 2
    assert "the study folder must be named, got an empty string" in capsys.readouterr().err


def test_a_group_result_of_the_wrong_shape_fails_its_tasks_before_any_row_is_written():
    # a review: zip(strict=True) raised midway, after writing the first rows, and stopped the
    # whole sweep; the outcomes are now checked first, and the sweep records each task failed
    from orthoclimb.studies.engine import checked_outcomes

    group = _spec("0").tasks()[:2]
    good = [("row", {"task_id": "a"}), ("error", "RuntimeError: x")]
    assert checked_outcomes(group, good) == good
    for bad, words in (
        (good[:1], "returned 1 outcomes for a group of 2 tasks"),
        ({"task_id": "a"}, "returned dict for a group of 2 tasks"),
        ([("row", {}), ("row", "not a row")], "returned 2 outcomes"),
        ([("row", {}), ("rows", {})], "returned 2 outcomes"),
        ([("row", {}), ("error",)], "returned 2 outcomes"),
    ):
        with pytest.raises(ValueError, match=words):
            checked_outcomes(group, bad)


def test_a_server_that_accepts_but_never_answers_is_no_scheduler(tmp_path):
    # a user trial's hang, found again in review: Dask's Client(timeout=2) waited forever on a
    # port whose server accepts connections and never answers (another service); the probe
    # asks for the scheduler's identity with a deadline, before the folder or a kernel is
    # touched
    import socket

    with socket.create_server(("127.0.0.1", 0)) as silent:
        address = f"tcp://127.0.0.1:{silent.getsockname()[1]}"
        started = time.perf_counter()
        with pytest.raises(ValueError, match="does not answer as a Dask scheduler within 2 s"):
            run_study(_spec("0"), tmp_path / "s", scheduler=address, timeout=2, progress=False)
    assert time.perf_counter() - started < 30 and not (tmp_path / "s").exists()


def test_workers_running_other_code_are_named_before_the_tasks_go_out(monkeypatch):
    # a user trial: a worker of an external cluster imported a copy of the package with one
    # line changed; its rows differed by up to 0.08 per spin and nothing said so
    from orthoclimb.runtime import code_digest

    class Client:
        def __init__(self, answer, delay=0.0):
            self.answer, self.delay = answer, delay

        def run(self, fn, on_error="raise"):
            assert fn is code_digest and on_error == "return"
            time.sleep(self.delay)
            if isinstance(self.answer, Exception):
                raise self.answer
            return self.answer

    same, other = code_digest(), "0123456789abcdef"
    missing = ModuleNotFoundError("No module named 'orthoclimb'")
    notes = external.foreign_code_notes(
        Client({"tcp://b:2": other, "tcp://a:1": same, "tcp://c:3": missing})
    )
    assert notes == [
        f"note: the worker tcp://b:2 runs other orthoclimb code (digest {other}) than this"
        f" process ({same}): its rows may differ from this code's; install the same code on"
        " every worker",
        "note: the worker tcp://c:3 cannot run orthoclimb (ModuleNotFoundError: No module"
        " named 'orthoclimb'): its tasks will fail",
    ]
    assert external.foreign_code_notes(Client({"tcp://a:1": same})) == []
    assert external.foreign_code_notes(Client(OSError("scheduler gone"))) == []
    # a worker that never answers: Client.run has no deadline, the check has one
    monkeypatch.setattr(external, "CODE_CHECK_SECONDS", 0.2)
    (note,) = external.foreign_code_notes(Client({"tcp://a:1": same}, delay=2.0))
    assert (
        note == "note: the workers did not say within 0.2 s which orthoclimb they run (not checked)"
    )


def test_an_external_cluster_that_loses_every_worker_is_announced(monkeypatch):
    # a user trial's only worker died on its first task, and the sweep waited without a word
    # until it was killed (the "no workers yet" note comes only at the start)
    import threading

    class Client:  # the scheduler's view: 1 worker, then none, then 2
        def __init__(self):
            self.counts = iter([1, 0, 0, 2, 2])

        def scheduler_info(self):
            return {"workers": dict.fromkeys(range(next(self.counts, 2)))}

    said: list[str] = []
    stop = threading.Event()
    monkeypatch.setattr(external, "WORKER_WATCH_SECONDS", 0.01)
    watch = threading.Thread(
        target=external.watch_workers, args=(Client(), "tcp://s:1", said.append, stop)
    )
    watch.start()
    deadline = time.time() + 10
    while len(said) < 2 and time.time() < deadline:
        time.sleep(0.01)
    stop.set()
    watch.join(5)
    assert said == [
        "note: the Dask cluster at tcp://s:1 has no workers now: the tasks wait until one joins"
        " (Ctrl-C stops the sweep and keeps the rows written)",
        "note: 2 workers in the cluster again",
    ]


def test_a_task_whose_row_the_worker_wrote_is_not_failed_with_its_group(tmp_path):
    # a review: the embedded cluster's worker writes each row as its method ends, and the
    # group can still fail afterwards (the worker killed in its next method); the driver then
    # wrote failed/ records for every task of the group, the finished one included, and that
    # record stayed beside its row for good
    folder = tmp_path / "s"
    args = [*_GRADIENT_THEN_LONG_HESSIAN, "--retries", "0", "--out", str(folder)]
    cmd = [sys.executable, "-m", "orthoclimb", "sweep", *args, "--no-progress", "--no-report"]
    # Dask reruns a task whose worker died up to allowed-failures times: here none
    env = {**os.environ, "DASK_DISTRIBUTED__SCHEDULER__ALLOWED_FAILURES": "0"}
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    try:
        _wait_for_rows(proc, folder / "rows", 1, "the kill")
        (row_file,) = (folder / "rows").glob("*.json")
        pid = int(json.loads(row_file.read_text())["payload"]["worker"].rsplit(":", 1)[1])
        os.kill(pid, signal.SIGKILL)  # in the middle of the Hessian ascent
        out, err = proc.communicate(timeout=120)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 1, err
    assert "sweep: 1 tasks run, 0 skipped (already done), 1 failed" in out
    failed = {p.stem for p in (folder / "failed").glob("*.json")}
    assert row_file.stem not in failed and len(failed) == 1
