"""The study folder: configuration, one row file per completed task, the tidy table.

Layout of ``STUDY_DIR``::

    study.json            {"format": 1, "config": <StudySpec.to_dict()>, "created": ..., ...}
    rows/<task_id>.json   one completed task (see orthoclimb.studies.tasks for the fields)
    failed/<task_id>.json the last error of a task that failed after its retries
    results.parquet       the tidy table (pyarrow), one row per completed task
    results.csv           the same table as CSV

Every file is written atomically (orthoclimb.fileio: temporary file, fsync, os.replace), so a
killed sweep leaves only complete files; a row file, once written, is never rewritten. Rerunning
the same configuration skips the tasks whose row exists; a *different* configuration in the same
folder is refused (:class:`StudyMismatchError`) rather than mixing two studies.
"""

from __future__ import annotations

import io
import json
import os
from collections.abc import Iterable
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from ..fileio import write_atomic, write_json_atomic
from .grid import StudySpec

__all__ = ["FORMAT", "Store", "StudyMismatchError", "read_config"]

FORMAT = 1


class StudyMismatchError(ValueError):
    """The study folder holds a study with another configuration."""


def _canonical(data: Any) -> str:
    return json.dumps(data, sort_keys=True, separators=(",", ":"))


def _differences(old: dict, new: dict) -> list[str]:
    keys = sorted(set(old) | set(new))
    return [k for k in keys if _canonical(old.get(k)) != _canonical(new.get(k))]


def read_config(folder: str | os.PathLike) -> StudySpec:
    """The study configuration stored in ``folder/study.json``."""
    path = Path(folder) / "study.json"
    if not path.is_file():
        raise ValueError(f"{str(folder)!r} is not a study folder (no study.json)")
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return StudySpec.from_dict(data["config"])
    except (json.JSONDecodeError, KeyError, TypeError) as exc:
        raise ValueError(f"cannot read {str(path)!r}: {exc}") from None


class Store:
    """A study folder bound to one configuration (see the module doc)."""

    def __init__(self, folder: str | os.PathLike, spec: StudySpec):
        self.folder = Path(folder)
        self.spec = spec
        self.rows_dir = self.folder / "rows"
        self.failed_dir = self.folder / "failed"

    @classmethod
    def open(cls, folder: str | os.PathLike, spec: StudySpec) -> Store:
        """Create the study folder for ``spec``, or reopen it if it holds the same study."""
        from .. import __version__

        folder = Path(folder)
        if folder.exists() and not folder.is_dir():
            raise ValueError(f"study folder {str(folder)!r} exists and is not a folder")
        meta = folder / "study.json"
        config = spec.to_dict()
        if meta.exists():
            try:
                old = json.loads(meta.read_text(encoding="utf-8"))["config"]
            except (json.JSONDecodeError, KeyError, TypeError):
                raise StudyMismatchError(
                    f"{str(meta)!r} is not a readable study configuration; use another --out folder"
                ) from None
            diff = _differences(old, json.loads(_canonical(config)))
            if diff:
                raise StudyMismatchError(
                    f"the folder {str(folder)!r} holds a study with a different configuration "
                    f"(differs in: {', '.join(diff)}); refusing to mix two studies. Use another "
                    "--out folder, or rerun with the same configuration to resume"
                )
        else:
            if folder.exists() and any(p.name != ".DS_Store" for p in folder.iterdir()):
                raise StudyMismatchError(
                    f"the folder {str(folder)!r} is not empty and holds no study.json; "
                    "use an empty or new --out folder"
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
        store.rows_dir.mkdir(parents=True, exist_ok=True)
        return store

    # -- rows ----------------------------------------------------------------------------

    def row_path(self, task_id: str) -> Path:
        return self.rows_dir / f"{task_id}.json"

    def completed_ids(self) -> set[str]:
        """Ids of the tasks with a complete row file (temporary files are ignored)."""
        if not self.rows_dir.is_dir():
            return set()
        return {p.stem for p in self.rows_dir.glob("*.json") if not p.name.startswith(".")}

    def pending(self, tasks: Iterable) -> list:
        done = self.completed_ids()
        return [t for t in tasks if t.task_id not in done]

    def write_row(self, row: dict[str, Any]) -> bool:
        """Write the row of a completed task atomically; False (and no write) if it exists."""
        path = self.row_path(row["task_id"])
        if path.exists():
            return False
        write_json_atomic(path, row)
        failed = self.failed_dir / path.name
        if failed.exists():
            failed.unlink()
        return True

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
                out.append(json.loads(p.read_text(encoding="utf-8")))
        return out

    def rows(self) -> list[dict[str, Any]]:
        """Rows of this study's tasks, in task order."""
        out = []
        for task in self.spec.tasks():
            path = self.row_path(task.task_id)
            if path.exists():
                out.append(json.loads(path.read_text(encoding="utf-8")))
        return out

    # -- table ---------------------------------------------------------------------------

    def write_table(self) -> dict[str, Path]:
        """Write results.parquet and results.csv (atomically) from the row files."""
        import pyarrow as pa
        import pyarrow.csv as pacsv
        import pyarrow.parquet as pq

        rows = self.rows()
        table = (
            pa.Table.from_pylist(rows) if rows else pa.table({"task_id": pa.array([], pa.string())})
        )
        buf = io.BytesIO()
        pq.write_table(table, buf)
        parquet = write_atomic(self.folder / "results.parquet", lambda fh: fh.write(buf.getvalue()))
        cbuf = io.BytesIO()
        pacsv.write_csv(table, cbuf)
        csv = write_atomic(self.folder / "results.csv", lambda fh: fh.write(cbuf.getvalue()))
        return {"parquet": parquet, "csv": csv}
