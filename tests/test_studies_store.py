"""The study folder: rows written once, checked against their tasks, failure records, and
folders that hold something else."""

from __future__ import annotations

import json

import pytest

from orthoclimb import Mixture
from orthoclimb.studies.grid import MethodSpec, MixtureSpec, StudySpec
from orthoclimb.studies.store import Store, StudyMismatchError


def _spec(seeds=(0, 1)) -> StudySpec:
    mix = MixtureSpec.make(Mixture({3: 1.0}), "cubic")
    return StudySpec((mix,), (8,), tuple(seeds), (MethodSpec.make("gradient", None),))


def _row(task, energy=0.5, **change):
    row = {"task_id": task.task_id, "mixture": task.mixture.name, "method": task.method.name}
    return {**row, "n": task.n, "seed": task.seed, "energy": energy, **change}


def test_a_row_is_written_once_and_its_failure_record_goes_with_the_success(tmp_path):
    # the store's contract (module doc): a completed task's row is never rewritten, so a task
    # run twice (a resumed sweep racing a straggler) keeps its first result; and a failure
    # record left by an earlier attempt is removed once the task succeeds
    spec = _spec()
    store = Store.open(tmp_path / "s", spec)
    task = spec.tasks()[0]
    store.write_failure(task.task_id, task.config(), "worker died")
    assert [f["task_id"] for f in store.failures()] == [task.task_id]
    assert store.write_row(_row(task, energy=0.5)) is True
    assert store.failures() == []
    assert store.write_row(_row(task, energy=0.9)) is False
    (row,) = store.rows()
    assert row["energy"] == 0.5


def test_a_row_whose_seed_is_not_its_tasks_is_refused(tmp_path):
    # a row under task 0's file that says seed 1 would be counted as seed 1 by the report,
    # overwriting that seed's energy in the paired comparisons; it must be named instead
    spec = _spec()
    store = Store.open(tmp_path / "s", spec)
    first, second = spec.tasks()
    assert (first.seed, second.seed) == (0, 1)
    store.write_row(_row(first, seed=1))
    with pytest.raises(ValueError, match="has seed = 1, but its task has 0"):
        store.rows()


def test_a_folder_holding_other_files_is_not_taken_for_a_new_study(tmp_path):
    # an --out folder that already holds someone's files but no study.json is refused, and
    # nothing is written into it
    folder = tmp_path / "busy"
    folder.mkdir()
    (folder / "notes.txt").write_text("keep")
    with pytest.raises(StudyMismatchError, match="is not empty and holds no study.json"):
        Store.open(folder, _spec())
    assert sorted(p.name for p in folder.iterdir()) == ["notes.txt"]


def test_a_temporary_file_left_by_an_interrupted_write_is_no_other_study(tmp_path):
    # a Ctrl-C while the first study.json was written left '.study.json.<random>.tmp', and
    # every later sweep into the folder (empty to `ls`) was refused (a review)
    folder = tmp_path / "new"
    folder.mkdir()
    (folder / ".study.json.lpd7r56d.tmp").write_text("{")
    store = Store.open(folder, _spec())
    assert store.created and (folder / "study.json").is_file()


def test_a_row_of_a_newer_format_is_not_to_be_deleted(tmp_path):
    # the message told the user both to upgrade and to delete the row and rerun, which would
    # throw away a row that is likely valid (a review)
    import json

    from orthoclimb.fileio import json_digest

    spec = _spec()
    store = Store.open(tmp_path / "s", spec)
    task = spec.tasks()[0]
    store.write_row(_row(task))
    (path,) = (tmp_path / "s" / "rows").glob("*.json")
    doc = json.loads(path.read_text())
    doc["format_version"] += 1
    doc["sha256"] = json_digest(doc["payload"])
    path.write_text(json.dumps(doc))
    with pytest.raises(ValueError, match="newer than this orthoclimb") as info:
        store.rows()
    assert "delete" not in str(info.value)


@pytest.mark.parametrize("version", [2, 99])
def test_a_study_of_a_newer_format_is_refused_as_such(tmp_path, version):
    # a user trial: "format": 2 in study.json was read (and reported) as format 1, and 99
    # with another config failed on a missing key; the README promises newer files fail
    import json

    from orthoclimb.studies.store import read_config

    Store.open(tmp_path / "s", _spec())
    path = tmp_path / "s" / "study.json"
    doc = json.loads(path.read_text())
    doc["format"] = version
    if version == 99:
        doc["config"] = {}
    path.write_text(json.dumps(doc))
    with pytest.raises(ValueError, match=rf"its format {version} is newer than this orthoclimb"):
        read_config(tmp_path / "s")
    # nor does a sweep resume or extend it (a review)
    with pytest.raises(StudyMismatchError, match=rf"its format {version} is newer"):
        Store.open(tmp_path / "s", _spec())


def _study(order=("a", "b"), own_b=(8,), seeds=(0, 1), methods=("gradient",), exponent=None):
    mixtures = {
        "a": MixtureSpec.make(Mixture({3: 1.0}), "a"),
        "b": MixtureSpec.make(Mixture({2: 1.0}), "b", sizes=",".join(map(str, own_b))),
    }
    extra = {} if exponent is None else {"exponent": exponent}
    return StudySpec(
        tuple(mixtures[k] for k in order),
        (8,),
        tuple(seeds),
        tuple(MethodSpec.make(m, None) for m in methods),
        **extra,
    )


def test_growing_a_mixtures_own_sizes_extends_the_study(tmp_path):
    # refused before, with a message that told the user to add sizes (a review)
    import json

    folder = tmp_path / "s"
    Store.open(folder, _study(own_b=(8,)))
    store = Store.open(folder, _study(own_b=(8, 12)))
    assert store.grown_from is not None
    meta = json.loads((folder / "study.json").read_text())
    assert meta["extended"][0]["from"]["mixture_sizes"] == {"b": [8]}
    # and the smaller grid again: the folder's study contains it
    with pytest.raises(StudyMismatchError, match="contains this one \\(it has more sizes\\)"):
        Store.open(folder, _study(own_b=(8,)))


def test_reordered_mixtures_methods_and_seeds_are_the_same_study(tmp_path):
    # the same tasks in another order were refused ("differs in: methods") or, for seeds,
    # recorded as an extension that added nothing (a review)
    import json

    folder = tmp_path / "s"
    Store.open(folder, _study(methods=("hessian", "gradient"), seeds=(0, 1)))
    for spec in (
        _study(methods=("gradient", "hessian"), seeds=(0, 1)),
        _study(order=("b", "a"), methods=("hessian", "gradient"), seeds=(0, 1)),
        _study(methods=("hessian", "gradient"), seeds=(1, 0)),
    ):
        assert Store.open(folder, spec).grown_from is None
    assert "extended" not in json.loads((folder / "study.json").read_text())


def test_another_exponent_points_to_the_report(tmp_path):
    folder = tmp_path / "s"
    Store.open(folder, _study())
    with pytest.raises(StudyMismatchError, match="differs in: exponent.*report .* --exponent K"):
        Store.open(folder, _study(exponent=1.0))


@pytest.mark.parametrize("name", ["rows", "points", "failed"])
def test_a_study_folder_that_takes_no_files_is_refused_on_opening(tmp_path, monkeypatch, name):
    # a resumed sweep into a read-only rows/ (or points/ with --keep-points) ran its tasks,
    # then failed at the first write (reviews); the refusal is simulated at the check's
    # temporary file (root ignores modes)
    import errno
    import tempfile

    folder = tmp_path / "s"
    Store.open(folder, _spec())
    (folder / name).mkdir(exist_ok=True)
    real = tempfile.mkstemp

    def refusing(*args, dir=None, **kwargs):
        if str(dir) == str(folder / name):
            raise PermissionError(errno.EPERM, "Operation not permitted")
        return real(*args, dir=dir, **kwargs)

    monkeypatch.setattr(tempfile, "mkstemp", refusing)
    with pytest.raises(OSError, match=f"its {name} folder .* does not take new files"):
        Store.open(folder, _spec())


def test_a_study_of_random_starts_refuses_the_new_start_and_says_how_to_resume(tmp_path):
    # a study made before Hessian ascent's start option (study.json without it) on a mixture
    # with a degree-2 term ran from random starts: the new default (top) is refused, naming
    # the way to resume; start = "random" resumes it (a review: "differs in: methods" alone)
    from orthoclimb.studies.grid import spec_from_flags

    old = spec_from_flags(
        ["2:1,4:0.25"], None, "20", "0-1", "hessian", {"hessian": {"start": "random"}}
    )
    Store.open(tmp_path / "s", old)
    assert (
        "start"
        not in json.loads((tmp_path / "s" / "study.json").read_text())["config"]["methods"][0]
    )
    new = spec_from_flags(["2:1,4:0.25"], None, "20", "0-1", "hessian")
    with pytest.raises(StudyMismatchError, match='resume it with start = "random"'):
        Store.open(tmp_path / "s", new)
    Store.open(tmp_path / "s", old)  # resumes


@pytest.mark.parametrize(
    ("field", "good", "bad", "kind"),
    [("worker", "host:12", 12, "str"), ("extra_note", 1.5, "x", "number")],
)
def test_a_row_value_of_another_kind_than_its_column_is_named(tmp_path, field, good, bad, kind):
    # a user trial: an edited row ("local_max": "yes" among booleans) stopped the table with
    # Arrow's "Could not convert 'yes' with type str", naming neither the file nor the field;
    # fields the report reads are checked when a row is read (below), the rest here
    spec = _spec(seeds=(0, 1, 2))
    store = Store.open(tmp_path / "s", spec)
    first, second, third = spec.tasks()
    for task, value in ((first, good), (second, bad), (third, good)):
        store.write_row(_row(task, **{field: value}))
    path = store.row_path(second.task_id)
    with pytest.raises(ValueError) as info:
        store.write_table()
    assert str(info.value) == (
        f"the row file {str(path)!r} has {field} = {bad!r}, where the other rows have"
        f" {kind}s; delete it and rerun the sweep to redo that task"
    )


@pytest.mark.parametrize(
    ("field", "bad", "expected"),
    [
        ("local_max", "yes", "true, false or null"),
        ("seconds_run", -1.0, "a finite number >= 0"),
        ("seconds_sample", "x", "a finite number >= 0"),
        ("steps", 2.5, "an integer >= 0"),
        ("steps", True, "an integer >= 0"),
        ("sample_shared_by", 0, "an integer >= 1"),
        ("options", "{not json", "a JSON object as text"),
        ("options", "[1]", "a JSON object as text"),
        ("end_point_sha256", "00", "64 hexadecimal digits"),
        ("gap_alg", "0.1", "a finite number or null"),
    ],
)
def test_a_row_field_the_report_reads_is_checked_when_read(tmp_path, field, bad, expected):
    # a user trial: rows edited with their checksums recomputed (options that are no JSON, a
    # negative seconds_run, steps = 2.5, a digest of two digits) were reported with exit 0
    spec = _spec()
    store = Store.open(tmp_path / "s", spec)
    task = spec.tasks()[0]
    store.write_row(_row(task, **{field: bad}))
    with pytest.raises(ValueError) as info:
        store.rows()
    assert str(info.value) == (
        f"the row file {str(store.row_path(task.task_id))!r} has {field} = {bad!r}, expected"
        f" {expected}; delete it and rerun the sweep to redo that task"
    )
    # null (an unknown number, or an older row's missing field) is fine
    store.row_path(task.task_id).unlink()
    store.write_row(_row(task, **{field: None}))
    assert len(store.rows()) == 1
