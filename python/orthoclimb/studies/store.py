"""The study folder: configuration, one row file per completed task, the tidy table.

Layout of ``STUDY_DIR``::

    study.json            {"format": 1, "config": <StudySpec.to_dict()>, "created": ..., ...}
    rows/<task_id>.json   one completed task: {"format": "orthoclimb-study-row",
                          "format_version": 1, "sha256": ..., "payload": <the row>} (see
                          orthoclimb.studies.tasks for the row's fields; sha256 as in
                          orthoclimb.fileio.json_digest)
    failed/<task_id>.json the last error of a failed task (its method's, or its group's
                          sampling's after Dask's retries); a rerun runs it again
    points/<task_id>.npy  the run's final point, for tasks run with ``keep_points``
                          (orthoclimb.studies.points; checked against its row's digest)
    results.parquet       the tidy table (pyarrow), one row per completed task
    results.csv           the same table as CSV

Every file is written atomically (orthoclimb.fileio: temporary file, fsync, os.replace), so a
killed sweep leaves only complete files; a row file, once written, is never rewritten. Reading a
row checks its checksum and that it describes the task its name says: the task id inside must
be the file name (the id hashes the whole task: mixture, gammas, method, options, n, seed and
dtype), and its mixture, method, n and seed fields must be that task's. Rows written before
rows were sealed (plain objects) are read without a checksum. Rerunning the same configuration
skips the tasks whose row exists; the same grid in another order (mixtures, methods, seeds,
sizes) is the same study. A configuration that only adds seeds and/or sizes (study-wide or a
mixture's own) extends the study: study.json gets the new configuration (and an "extended" list
of what it grew from) and only the new tasks run. Any other change in the same folder is refused
(:class:`StudyMismatchError`) rather than mixing two studies. A sweep whose cluster never started
removes the study it created, or takes back the extension it recorded (:meth:`Store.undo_open`).
A sweep holds the folder (:func:`sweep_lock`): a second sweep into it is refused.
"""

from __future__ import annotations

import contextlib
import io
import json
import math
import os
from collections.abc import Iterable, Iterator
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from ..fileio import (
    FOLDER_LOCKS,
    ensure_folder,
    envelope,
    is_folder,
    lock_folder,
    open_envelope,
    require_writable,
    write_atomic,
    write_json_atomic,
)
from .grid import StudySpec

__all__ = [
    "FORMAT",
    "ROW_FORMAT",
    "ROW_FORMAT_VERSION",
    "Store",
    "StudyMismatchError",
    "SweepRunningError",
    "read_config",
    "write_completed_row",
]

FORMAT = 1

# The study folder's subfolders: one row file per completed task, one record per failure, and
# the end points of the tasks that keep one (``sweep --keep-points``, see ``points``).
ROWS_DIR = "rows"
FAILED_DIR = "failed"
POINTS_DIR = "points"


def row_file(folder: str | os.PathLike, task_id: str) -> Path:
    """The row file of task ``task_id`` in the study folder ``folder``."""
    return row_file_in(Path(folder) / ROWS_DIR, task_id)


def row_file_in(rows_dir: Path, task_id: Any) -> Path:
    """The row file of task ``task_id`` in a study's rows folder ``rows_dir``."""
    return rows_dir / f"{task_id}.json"


ROW_FORMAT = "orthoclimb-study-row"
ROW_FORMAT_VERSION = 1


def _counts(name: str) -> bool:
    """Whether a file in a folder without study.json makes it a folder of other things: not
    .DS_Store, nor a temporary file an interrupted write left (.<name>.<random>.tmp)."""
    return name != ".DS_Store" and not (name.startswith(".") and name.endswith(".tmp"))


class StudyMismatchError(ValueError):
    """The study folder holds a study with another configuration."""


def _canonical(data: Any) -> str:
    return json.dumps(data, sort_keys=True, separators=(",", ":"))


def _differences(old: dict, new: dict) -> list[str]:
    keys = sorted(set(old) | set(new))
    return [k for k in keys if _canonical(old.get(k)) != _canonical(new.get(k))]


def _differences_text(old: dict, new: dict, diff: list[str]) -> str:
    """The differing keys with both values: "methods: [...] in the folder, [...] now" (a user
    trial: the names alone did not say that steps were 30 there, 40 here). For lists, the
    entries only one side has, so that a long list shows where it differs (a review)."""

    def short(value: Any) -> str:
        text = _canonical(value)
        return text if len(text) <= 160 else text[:157] + "..."

    def one(k: str) -> str:
        a, b = old.get(k), new.get(k)
        if isinstance(a, list) and isinstance(b, list):
            ca, cb = [_canonical(v) for v in a], [_canonical(v) for v in b]
            gone = [v for v, c in zip(a, ca, strict=True) if c not in cb]
            added = [v for v, c in zip(b, cb, strict=True) if c not in ca]
            if gone or added:
                return f"{k}: {short(gone)} only in the folder, {short(added)} only now"
        return f"{k}: {short(a)} in the folder, {short(b)} now"

    return "; ".join(one(k) for k in diff)


_GROWABLE = ("seeds", "sizes")


def _frame(config: dict) -> dict:
    """What an extension must keep: the mixtures (names and gammas, without their own sizes)
    and the methods, each in any order, the exponent and the dtype. Orders do not matter: a
    task's id depends on its mixture, method, options, n, seed and dtype only."""
    mixtures = [{k: v for k, v in m.items() if k != "sizes"} for m in config["mixtures"]]
    return {
        "mixtures": sorted(mixtures, key=_canonical),
        "methods": sorted(config["methods"], key=_canonical),
        "exponent": config.get("exponent"),
        "dtype": config.get("dtype"),
    }


def _task_keys(config: dict) -> set[tuple[str, str, str]]:
    """(task id, mixture name, method name) of every task: a row must match all three."""
    spec = StudySpec.from_dict(config)
    return {(t.task_id, t.mixture.name, t.method.name) for t in spec.tasks()}


def _more(big: dict, small: dict) -> str:
    """What ``big`` has more of than ``small`` (its tasks contain the other's): 'seeds',
    'sizes' or both."""
    spec_big, spec_small = StudySpec.from_dict(big), StudySpec.from_dict(small)
    what = ["seeds"] if set(spec_big.seeds) > set(spec_small.seeds) else []
    sizes_big = {m.name: set(m.sizes or spec_big.sizes) for m in spec_big.mixtures}
    if any(sizes_big[m.name] > set(m.sizes or spec_small.sizes) for m in spec_small.mixtures):
        what.append("sizes")
    return " and ".join(what) or "tasks"


def _only_start_differs(old: dict, new: dict) -> bool:
    """Whether two configurations differ only in a method's ``start`` option (a study made
    before the option, read as random starts, against the new default)."""

    def without_start(config: dict) -> dict:
        methods = [{k: v for k, v in m.items() if k != "start"} for m in config["methods"]]
        return {**config, "methods": methods}

    return old != new and without_start(old) == without_start(new)


def _relation(old: dict, new: dict) -> str:
    """'same', 'grows' (new adds seeds or sizes, study-wide or a mixture's own), 'contained'
    (old has more) or 'other'. Reordered mixtures, methods, seeds or sizes are the same
    study; before, they were refused ('differs in: methods') or, for seeds, recorded as an
    extension that added nothing (a review). Growing a mixture's own sizes was refused."""
    if _canonical(_frame(old)) != _canonical(_frame(new)):
        return "other"
    old_keys, new_keys = _task_keys(old), _task_keys(new)
    if old_keys == new_keys:
        return "same"
    if old_keys < new_keys:
        return "grows"
    return "contained" if new_keys < old_keys else "other"


def _record_growth(meta: Path, data: dict, config: dict) -> None:
    """Rewrite study.json (atomically; ``data`` is what it held) with the grown configuration,
    keeping its creation time and listing each extension with the seeds and sizes it started
    from (and the mixtures' own sizes, where any has them)."""
    old = data["config"]
    history = data.get("extended", [])
    history = list(history) if isinstance(history, list) else []  # `data` stays as it was
    stamp = datetime.now(timezone.utc).isoformat(timespec="seconds")
    start = {k: old.get(k) for k in _GROWABLE}
    own = {m["name"]: m["sizes"] for m in old["mixtures"] if "sizes" in m}
    if own:
        start["mixture_sizes"] = own
    history.append({"at": stamp, "from": start})
    write_json_atomic(meta, {**data, "config": config, "extended": history})


def write_completed_row(folder: str | os.PathLike, row: dict[str, Any]) -> bool:
    """Write the row of a completed task into the study folder ``folder`` atomically, and
    first its end point where the row holds one (``end_point``, which the row file leaves
    out), and remove the task's failure record; False (and no write) if its row exists. The
    sweep's driver writes each row it receives with it, and so do the workers of its embedded
    cluster (same machine, same folder) as each task ends, so that a sweep stopped in the
    middle of a group of tasks keeps the group's finished rows."""
    from .points import write_point

    folder = Path(folder)
    path = row_file(folder, row["task_id"])
    if path.exists():
        return False
    point = row.get("end_point")
    if point is not None:  # first: a row naming a point has it
        write_point(folder, row["task_id"], point)
    payload = {key: value for key, value in row.items() if key != "end_point"}
    write_json_atomic(path, envelope(ROW_FORMAT, ROW_FORMAT_VERSION, payload))
    failed = folder / FAILED_DIR / path.name
    if failed.exists():
        failed.unlink()
    return True


def read_config(folder: str | os.PathLike) -> StudySpec:
    """The study configuration stored in ``folder/study.json``."""
    path = Path(folder) / "study.json"
    if not Path(folder).exists():
        raise ValueError(f"{str(folder)!r} does not exist (a study folder written by sweep)")
    if not Path(folder).is_dir():
        raise ValueError(f"{str(folder)!r} is a file, not a study folder")
    if not path.is_file():
        raise ValueError(f"{str(folder)!r} is not a study folder (no study.json)")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        _refuse_newer(data, ValueError)
        return StudySpec.from_dict(data["config"])
    except (OSError, ValueError, KeyError, TypeError, AttributeError, RecursionError) as exc:
        # ValueError covers malformed JSON, non-UTF-8 bytes and invalid configuration values
        raise ValueError(f"cannot read {str(path)!r}: {exc}") from None


def _refuse_newer(data: Any, error: type[Exception]) -> None:
    """Raise ``error`` when a study.json's format is newer than this version's: it is refused
    as a newer row file is, not read (or extended) as this version's (a user trial: "format":
    2 was reported as usual; a review: a sweep resumed and extended it)."""
    from .. import __version__

    version = data.get("format") if isinstance(data, dict) else None
    if isinstance(version, int) and not isinstance(version, bool) and version > FORMAT:
        raise error(
            f"its format {version} is newer than this orthoclimb {__version__} reads"
            f" ({FORMAT}); use a newer orthoclimb"
        )


_ROW_FIELDS: dict[str, tuple[type, ...]] = {
    "task_id": (str,),
    "mixture": (str,),
    "method": (str,),
    "n": (int,),
    "seed": (int,),
    "energy": (int, float),
}


def _number(v: Any) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _count(least: int) -> Any:
    return lambda v: isinstance(v, int) and not isinstance(v, bool) and v >= least


def _json_object(v: Any) -> bool:
    try:
        return isinstance(v, str) and isinstance(json.loads(v), dict)
    except ValueError:
        return False


# Fields a row may hold (older rows lack some; null where a number is unknown), each with its
# test and what it expects, checked as the report reads them: a row edited with its checksum
# recomputed carried options that were no JSON, a negative seconds_run and steps = 2.5, and
# the report took them (a user trial).
_OPTIONAL_FIELDS: dict[str, tuple[Any, str]] = {
    "steps": (_count(0), "an integer >= 0"),
    "sample_shared_by": (_count(1), "an integer >= 1"),
    "threads": (_count(1), "an integer >= 1"),
    **{
        key: (lambda v: _number(v) and 0 <= v < math.inf, "a finite number >= 0")
        for key in ("seconds_run", "seconds_sample")
    },
    "local_max": (lambda v: isinstance(v, bool), "true, false or null"),
    "options": (_json_object, "a JSON object as text"),
    "end_point_sha256": (
        lambda v: isinstance(v, str) and len(v) == 64 and all(c in "0123456789abcdef" for c in v),
        "64 hexadecimal digits",
    ),
    **{
        key: (lambda v: _number(v) and math.isfinite(v), "a finite number or null")
        for key in (
            "energy_before_polish",
            "alg",
            "ground_state",
            "gap_alg",
            "gap_gs",
            "grad_norm",
            "top_eigenvalue",
        )
    },
}


def combined_error(errors: list[Exception], what: str) -> ValueError:
    """One ValueError for several unusable files: the error itself when there is one, else
    all of them counted and up to ten listed (so one run names every file to fix)."""
    if len(errors) == 1:
        return errors[0] if isinstance(errors[0], ValueError) else ValueError(str(errors[0]))
    listed = "\n".join(f"  - {e}" for e in errors[:10])
    more = f"\n  ... and {len(errors) - 10} more" if len(errors) > 10 else ""
    return ValueError(f"{len(errors)} {what} of the study cannot be used:\n{listed}{more}")


def _read_json(path: Path, what: str) -> Any:
    """The JSON content of ``path``; a ValueError naming the file when it is unreadable."""
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError, RecursionError) as exc:  # bad JSON, not UTF-8, too deep
        raise ValueError(
            f"cannot read the {what} {str(path)!r} (truncated or corrupted?): {exc}; delete it "
            "and rerun the sweep to redo that task"
        ) from None


def _redo(path: Path, problem: str) -> ValueError:
    return ValueError(
        f"the row file {str(path)!r} {problem}; delete it and rerun the sweep to redo that task"
    )


def _unseal_row(path: Path, doc: Any) -> Any:
    """The row inside a sealed row file (format, version and checksum checked); a plain
    object (a row written before rows were sealed) as it is."""
    if not isinstance(doc, dict) or "format" not in doc:
        return doc
    if doc["format"] != ROW_FORMAT:
        raise _redo(path, f"has format {doc['format']!r}, not {ROW_FORMAT!r}")
    version = doc.get("format_version")
    if isinstance(version, int) and not isinstance(version, bool) and version > ROW_FORMAT_VERSION:
        # a row of a newer orthoclimb is likely valid: no advice to delete it
        return open_envelope(
            doc, ROW_FORMAT_VERSION, lambda why: ValueError(f"the row file {str(path)!r}: {why}")
        )
    return open_envelope(doc, ROW_FORMAT_VERSION, lambda why: _redo(path, f"fails: {why}"))


def _read_row(path: Path) -> dict[str, Any]:
    """A row file, checked to be an object with the fields the report reads."""
    row = _unseal_row(path, _read_json(path, "row file"))
    if not isinstance(row, dict):
        raise _redo(path, f"holds {type(row).__name__} {row!r}, not a JSON object")
    for key, types in _ROW_FIELDS.items():
        value = row.get(key)
        if isinstance(value, bool) or not isinstance(value, types):
            expected = " or ".join(t.__name__ for t in types)
            raise _redo(path, f"has {key} = {value!r}, expected {expected}")
    if not math.isfinite(row["energy"]):  # an edited row's Infinity printed inf, exit 0
        raise _redo(path, f"has energy = {row['energy']!r}, not a finite number")
    for key, (test, expected) in _OPTIONAL_FIELDS.items():
        value = row.get(key)
        if value is not None and not test(value):
            raise _redo(path, f"has {key} = {value!r}, expected {expected}")
    if row["task_id"] != path.stem:
        raise _redo(path, f"holds task {row['task_id']!r}, not {path.stem!r}")
    return row


def _checked_row(path: Path, task: Any) -> dict[str, Any]:
    """The row of ``task`` from ``path``, checked to describe that task."""
    row = _read_row(path)
    want = {"mixture": task.mixture.name, "method": task.method.name, "n": task.n}
    want["seed"] = task.seed
    wrong = [k for k, v in want.items() if row[k] != v]
    if wrong:
        k = wrong[0]
        raise _redo(path, f"has {k} = {row[k]!r}, but its task has {want[k]!r}")
    return row


class _NewerStudy(Exception):
    """A study.json of a newer format, met by :meth:`Store.open`."""


class SweepRunningError(ValueError):
    """Another sweep holds the study folder (:func:`sweep_lock`)."""


@contextlib.contextmanager
def sweep_lock(folder: str | os.PathLike) -> Iterator[None]:
    """Hold the study folder for one sweep: an exclusive advisory lock (flock) on the folder
    itself, made if missing, held until the block ends (also when the process dies: the OS
    drops the lock). A second sweep into the same folder, from this machine, is refused
    (:class:`SweepRunningError`, a ValueError) instead of running the same tasks twice and
    rewriting study.json under the first. Where the file system does not support flock on a
    folder, or off POSIX, nothing is locked."""
    path = ensure_folder(folder, "study folder")
    if not FOLDER_LOCKS:  # pragma: no cover - Windows
        yield
        return
    fd = os.open(path, os.O_RDONLY)
    try:
        # None: no flock on this file system (some network mounts): go unlocked
        if lock_folder(fd) is False:
            raise SweepRunningError(
                f"another sweep is running in the study folder {str(path)!r}; wait for it to"
                " end (or stop it), or use another folder (--out; folder= in Python)"
            )
        yield
    finally:
        os.close(fd)  # releases the lock


class Store:
    """A study folder bound to one configuration (see the module doc)."""

    def __init__(self, folder: str | os.PathLike, spec: StudySpec):
        self.folder = Path(folder)
        self.spec = spec
        self.rows_dir = self.folder / ROWS_DIR
        self.failed_dir = self.folder / FAILED_DIR
        #: True when :meth:`open` wrote study.json (the folder held no study before).
        self.created = False
        #: What study.json held before :meth:`open` extended the study, else None.
        self.grown_from: dict | None = None

    @classmethod
    def open(cls, folder: str | os.PathLike, spec: StudySpec) -> Store:
        """Create the study folder for ``spec``, or reopen it if it holds the same study."""
        from .. import __version__

        folder = Path(folder)
        if folder.exists() and not folder.is_dir():
            raise ValueError(f"study folder {str(folder)!r} exists and is not a folder")
        # before any task runs: a resumed sweep into a read-only rows/ (or points/) ran its
        # tasks and then failed at the first row (reviews)
        for name in ("", ROWS_DIR, POINTS_DIR, FAILED_DIR):  # the folders a sweep writes into
            if is_folder(folder / name):
                require_writable(
                    folder / name, f"its {name} folder" if name else "the study folder"
                )
        meta = folder / "study.json"
        config = spec.to_dict()
        meta_existed = meta.exists()
        grown_from: dict | None = None
        if meta_existed:
            try:  # the file, and the configuration in it, which _relation reads as a study
                stored = json.loads(meta.read_text(encoding="utf-8"))
                _refuse_newer(stored, _NewerStudy)
                old = stored["config"]
                if not isinstance(old, dict):
                    raise TypeError(f"config is {type(old).__name__}")
                diff = _differences(old, json.loads(_canonical(config)))
                relation = _relation(old, config) if diff else "same"
            except _NewerStudy as exc:
                raise StudyMismatchError(f"{str(meta)!r}: {exc}") from None
            except (OSError, ValueError, KeyError, TypeError, AttributeError, RecursionError):
                raise StudyMismatchError(
                    f"{str(meta)!r} is not a readable study configuration; use another folder"
                    " (--out; folder= in Python)"
                ) from None
            if relation == "grows":
                _record_growth(meta, stored, config)
                grown_from = stored
            elif relation == "contained":  # the stored study contains this one
                raise StudyMismatchError(
                    f"the folder {str(folder)!r} holds a larger study that contains this one"
                    f" (it has more {_more(old, config)}): rerun with its full grid to resume it"
                    f" (study.json lists it), or `orthoclimb report {folder}` for its results"
                )
            elif relation == "other":
                hint = (
                    "; the exponent is a setting of the report: `orthoclimb report"
                    f" {folder} --exponent K` reads this study under another law"
                    if "exponent" in diff
                    else ""
                )
                if _only_start_differs(old, config):
                    hint += (
                        "; the difference is Hessian ascent's start: since December 2026 it"
                        " starts along the top eigenvector of Hess H(0) where a mixture has a"
                        " degree-2 term, and this study ran from random starts: resume it with"
                        ' start = "random" (sweep --start random, or in its TOML file), or use'
                        " another folder for the new start (the demo: another --out)"
                    )
                raise StudyMismatchError(
                    f"the folder {str(folder)!r} holds a study with a different configuration "
                    f"(differs in: {_differences_text(old, json.loads(_canonical(config)), diff)});"
                    " refusing to mix two studies. Use another "
                    "folder (--out; folder= in Python), rerun with the same configuration to"
                    " resume, or add seeds or "
                    f"sizes (keeping the old ones) to extend it{hint}"
                )
        else:
            if folder.exists() and any(_counts(p.name) for p in folder.iterdir()):
                raise StudyMismatchError(
                    f"the folder {str(folder)!r} is not empty and holds no study.json; "
                    "use an empty or new folder (--out; folder= in Python)"
                )
            write_json_atomic(
                meta,
                {
                    "format": FORMAT,
                    "config": config,
                    "created": datetime.now(timezone.utc).isoformat(timespec="seconds"),
                    "version": __version__,
                    "units": "energy per spin H(x)/n on the unit sphere, maximization",
                },
            )
        store = cls(folder, spec)
        store.created = not meta_existed
        store.grown_from = grown_from
        store.rows_dir.mkdir(parents=True, exist_ok=True)
        return store

    def undo_open(self) -> bool:
        """Undo :meth:`open` for a sweep that never ran a task (its cluster could not start):
        a study it created, and that holds no row or failure record, is removed (study.json
        and the empty rows folder), and an extension it recorded is taken back (study.json
        gets its previous content). The folder then takes another configuration, or the
        old one, as before. Returns whether anything was undone. A sweep holds the folder
        (:func:`sweep_lock`), so no second sweep can have reopened the study in between."""
        meta = self.folder / "study.json"
        try:
            if self.grown_from is not None:
                write_json_atomic(meta, self.grown_from)
                self.grown_from = None
                return True
            if not self.created or self.completed_ids() or self.failed_dir.exists():
                return False
            meta.unlink(missing_ok=True)
        except OSError:  # it runs while another error is raised: never hide that one
            return False
        for folder in (self.rows_dir, self.failed_dir):
            try:
                folder.rmdir()  # only if empty
            except OSError:
                pass
        self.created = False
        return True

    # -- rows ----------------------------------------------------------------------------

    def row_path(self, task_id: str) -> Path:
        return row_file(self.folder, task_id)

    def completed_ids(self) -> set[str]:
        """Ids of the tasks with a complete row file (temporary files are ignored)."""
        if not self.rows_dir.is_dir():
            return set()
        return {p.stem for p in self.rows_dir.glob("*.json") if not p.name.startswith(".")}

    def stray_files(self) -> list[str]:
        """Names of the files in rows/ that are no row of this study's tasks (sorted; hidden
        and temporary files aside): a row copied from another study, a renamed duplicate, a
        note. The report reads only its tasks' rows and says these were not read (a user
        trial: they were ignored without a word)."""
        if not self.rows_dir.is_dir():
            return []
        ids = {t.task_id for t in self.spec.tasks()}
        return sorted(
            p.name
            for p in self.rows_dir.iterdir()
            if not p.name.startswith(".") and not (p.suffix == ".json" and p.stem in ids)
        )

    def pending(self, tasks: Iterable) -> list:
        done = self.completed_ids()
        return [t for t in tasks if t.task_id not in done]

    def write_row(self, row: dict[str, Any]) -> bool:
        """Write the row of a completed task atomically (:func:`write_completed_row`); False
        (and no write) if it exists."""
        return write_completed_row(self.folder, row)

    def write_failure(self, task_id: str, config: dict, error: str) -> None:
        write_json_atomic(
            self.failed_dir / f"{task_id}.json",
            {
                "task_id": task_id,
                "config": config,
                "error": error,
                "when": datetime.now(timezone.utc).isoformat(timespec="seconds"),
            },
        )

    def failures(self) -> list[dict[str, Any]]:
        if not self.failed_dir.is_dir():
            return []
        out = []
        for p in sorted(self.failed_dir.glob("*.json")):
            if not p.name.startswith("."):
                out.append(_read_json(p, "failure record"))
        return out

    def rows(self) -> list[dict[str, Any]]:
        """Rows of this study's tasks, in task order. Every row file is checked before any
        error is raised, so one error names all the unusable files (up to ten listed)."""
        out, bad = [], []
        for task in self.spec.tasks():
            path = self.row_path(task.task_id)
            if path.exists():
                try:
                    out.append(_checked_row(path, task))
                except ValueError as exc:
                    bad.append(exc)
        if bad:
            raise combined_error(bad, "row files")
        return out

    # -- table ---------------------------------------------------------------------------

    def write_table(self) -> dict[str, Path]:
        """Write results.parquet and results.csv (atomically) from the row files."""
        written = {}
        for name, (path, writer) in table_files(self.rows(), self.folder, self.rows_dir).items():
            written[name] = write_atomic(path, writer)
        return written


TABLE_FILES = ("results.parquet", "results.csv")


def _column_problem(rows: list[dict[str, Any]], fields: list[str], rows_dir: Path) -> ValueError:
    """Which row keeps a column of the table from being built (a value of another kind than
    the column's other values: an edited row's "local_max": "yes" among booleans), as a
    ValueError naming its file and field; Arrow's own message named neither (a user trial)."""
    import pyarrow as pa

    for key in fields:
        values = [r.get(key) for r in rows]
        try:
            pa.array(values)
            continue
        except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError) as exc:
            problem = str(exc)
        # the odd one out: the first value whose kind differs from most of the column's
        # (on a tie, from the kind that comes first)
        kinds = [_kind(v) for v in values]
        seen = [k for k in dict.fromkeys(kinds) if k != "null"]
        common = max(seen, key=kinds.count, default="null")
        for row, kind in zip(rows, kinds, strict=True):
            if kind not in (common, "null"):
                path = row_file_in(rows_dir, row.get("task_id"))
                return _redo(path, f"has {key} = {row[key]!r}, where the other rows have {common}s")
        return ValueError(f"the results table's column {key!r} cannot be built: {problem}")
    return ValueError("the results table cannot be built from the rows")


def _kind(value: Any) -> str:
    """A row value's kind for a table column: "null", "bool", "number", "str" or its type."""
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "bool"
    if isinstance(value, (int, float)):
        return "number"
    return type(value).__name__


def table_files(
    rows: list[dict[str, Any]], folder: Path, rows_dir: Path
) -> dict[str, tuple[Path, Any]]:
    """The tidy table of ``rows`` (one per completed task) as {"parquet": (path, writer),
    "csv": (path, writer)} in ``folder``, each writer taking a binary file, for
    :func:`~orthoclimb.fileio.write_atomic` or for staging with a report's files. A row whose
    value does not fit its column is named as a file of ``rows_dir`` (the study's rows/)."""
    import pyarrow as pa
    import pyarrow.csv as pacsv
    import pyarrow.parquet as pq

    if rows:
        # every field of every row: from_pylist takes the columns of the first row only,
        # so rows of an older version (no start_seed) would drop a newer field
        fields = list(dict.fromkeys(k for r in rows for k in r))
        try:
            table = pa.Table.from_pylist([{k: r.get(k) for k in fields} for r in rows])
        except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError):
            raise _column_problem(rows, fields, rows_dir) from None
        for i, column in enumerate(table.schema):  # a number missing in every row (null)
            if pa.types.is_null(column.type):  # stays a number column, not Arrow's null
                table = table.set_column(i, column.name, table.column(i).cast(pa.float64()))
    else:
        table = pa.table({"task_id": pa.array([], pa.string())})
    buf = io.BytesIO()
    pq.write_table(table, buf)
    cbuf = io.BytesIO()
    pacsv.write_csv(table, cbuf)
    parquet, csv = buf.getvalue(), cbuf.getvalue()
    return {
        "parquet": (folder / TABLE_FILES[0], lambda fh: fh.write(parquet)),
        "csv": (folder / TABLE_FILES[1], lambda fh: fh.write(csv)),
    }
