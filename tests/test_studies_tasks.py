"""Tasks that share an instance: grouping, one sampling for the group, and a method's failure
kept to its own task. The sweep side (a real cluster) is in test_studies_engine.py."""

from __future__ import annotations

import pytest

import orthoclimb as oc
from orthoclimb.studies.grid import MethodSpec, MixtureSpec, StudySpec
from orthoclimb.studies.tasks import instance_groups, instance_key, run_instance_tasks, run_task

# fields that depend on the clock, the process or the sharing, not on the computation
_CIRCUMSTANCES = {"seconds_sample", "seconds_run", "sample_shared_by", "worker", "finished"}


def _spec(seeds=(0, 1), methods=("hessian", "gradient"), sizes=(12,), dtype="float64"):
    mix = MixtureSpec.make(oc.Mixture({3: 1.0}), "cubic")
    methods = tuple(MethodSpec.make(m, {"steps": 6} if m == "hessian" else None) for m in methods)
    return StudySpec((mix,), tuple(sizes), tuple(seeds), methods, dtype=dtype)


def test_groups_hold_the_tasks_of_one_instance_in_order():
    tasks = _spec(seeds=(0, 1, 2), sizes=(12, 16)).tasks()
    groups = instance_groups(tasks, slots=2)
    assert len(groups) == 6  # 2 sizes x 3 seeds
    ids = [t.task_id for g in groups for t in g]
    assert sorted(ids) == sorted(t.task_id for t in tasks)  # each task once
    for g in groups:
        assert len(g) == 2 and len({instance_key(t) for t in g}) == 1
        at = [tasks.index(t) for t in g]
        assert at == sorted(at)  # in the order of the tasks
    # the group order is that of each group's first task
    firsts = [tasks.index(g[0]) for g in groups]
    assert firsts == sorted(firsts)


def test_fewer_instances_than_workers_split_their_tasks_among_the_workers():
    # one instance, two methods, two workers: grouped, one worker would wait
    tasks = _spec(seeds=(0,)).tasks()
    assert instance_groups(tasks, slots=2) == [[t] for t in tasks]
    assert instance_groups(tasks, slots=1) == [tasks]
    assert instance_groups(tasks, slots=0) == [tasks]  # no worker yet: as one
    # three methods on two workers: two share a sampling, the third runs beside them (a
    # user trial saw three samplings of the one instance, two on the same worker)
    three = _spec(seeds=(0,), methods=("hessian", "gradient", "anneal")).tasks()
    assert instance_groups(three, slots=2) == [three[:2], three[2:]]
    assert instance_groups(three, slots=8) == [[t] for t in three]  # at most one per task
    # two instances of three methods: only as many cuts as workers need (a review: cutting
    # every instance alike made 10 samplings for 6 workers where 6 do)
    six = _spec(seeds=(0, 1), methods=("hessian", "gradient", "anneal")).tasks()
    assert [len(g) for g in instance_groups(six, slots=5)] == [1, 1, 1, 2, 1]
    assert [len(g) for g in instance_groups(six, slots=3)] == [2, 1, 3]
    assert [len(g) for g in instance_groups(six, slots=6)] == [1] * 6
    many = _spec(seeds=(0, 1, 2, 3, 4), methods=("hessian", "gradient", "anneal")).tasks()
    assert len(instance_groups(many, slots=6)) == 6
    assert instance_groups([], slots=2) == []


def test_dtype_seed_and_size_each_make_another_instance():
    a = _spec(seeds=(0,)).tasks()[0]
    others = [
        _spec(seeds=(1,)).tasks()[0],
        _spec(seeds=(0,), sizes=(13,)).tasks()[0],
        _spec(seeds=(0,), dtype="float32").tasks()[0],
    ]
    for b in others:
        assert instance_key(a) != instance_key(b)
        assert instance_groups([a, b], slots=1) == [[a], [b]]


def test_a_group_gives_each_task_the_row_it_gets_alone():
    tasks = _spec(seeds=(3,)).tasks()
    outcomes = run_instance_tasks(tasks, threads=1)
    assert [kind for kind, _ in outcomes] == ["row", "row"]
    rows = [row for _, row in outcomes]
    for task, row in zip(tasks, rows, strict=True):
        alone = run_task(task, threads=1)
        assert alone["sample_shared_by"] == 1 and row["sample_shared_by"] == 2
        same = {k: v for k, v in row.items() if k not in _CIRCUMSTANCES}
        assert same == {k: v for k, v in alone.items() if k not in _CIRCUMSTANCES}
    # one sampling for both: its time is in each row, and the group's rows name it alike
    assert rows[0]["seconds_sample"] == rows[1]["seconds_sample"] > 0


def test_sampling_runs_once_per_group(monkeypatch):
    calls = []
    sample = oc.Hamiltonian.sample

    def counting(*args, **kwargs):
        calls.append(args[1:3])
        return sample(*args, **kwargs)

    monkeypatch.setattr(oc.Hamiltonian, "sample", counting)
    run_instance_tasks(_spec(seeds=(0,), methods=("hessian", "gradient", "anneal")).tasks())
    assert calls == [(12, 0)]


def test_a_method_that_raises_fails_its_own_task_only(monkeypatch):
    import orthoclimb.algorithms as algorithms

    def broken(*args, **kwargs):
        raise RuntimeError("gradient ascent broke")

    monkeypatch.setattr(algorithms, "gradient_ascent", broken)
    tasks = _spec(seeds=(0,)).tasks()
    (k1, row), (k2, error) = run_instance_tasks(tasks, threads=1)
    assert (k1, k2) == ("row", "error")
    assert row["method"] == "hessian" and row["task_id"] == tasks[0].task_id
    assert error == "RuntimeError: gradient ascent broke"


def test_a_failed_sampling_fails_the_group(monkeypatch):
    def no_memory(*args, **kwargs):
        raise MemoryError("no room")

    monkeypatch.setattr(oc.Hamiltonian, "sample", no_memory)
    with pytest.raises(MemoryError, match="no room"):
        run_instance_tasks(_spec(seeds=(0,)).tasks())


def test_tasks_of_different_instances_are_refused_as_a_group():
    tasks = _spec(seeds=(0, 1), methods=("gradient",)).tasks()
    with pytest.raises(ValueError, match="must share their instance") as err:
        run_instance_tasks(tasks)
    assert tasks[0].task_id in str(err.value) and tasks[1].task_id in str(err.value)
    assert run_instance_tasks([]) == []
