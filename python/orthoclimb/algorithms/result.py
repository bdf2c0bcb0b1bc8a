"""The result of a run, and its files.

``result.save("runs/a")`` writes two files atomically (temporary file, then rename):

* ``runs/a.json``: ``{"format": "orthoclimb-result", "format_version": 2, "sha256": ...,
  "payload": {...}}``. The payload holds the summary (energy per spin, seconds, info), the full
  configuration, the per-step path table (one list per column) and the SHA-256 and shape of x.
  It is strict JSON: a number that is not finite is written as ``null`` (the path's last row,
  which has no step, holds several), and comes back as NaN in the path table and as None in
  ``info``. Version 1 wrote bare ``NaN`` tokens instead; it is still read.
  ``sha256`` is the hex digest of the payload serialized canonically (``json.dumps`` with sorted
  keys and separators ``(",", ":")``, UTF-8), so any edit or truncation is detected.
* ``runs/a.npz``: the final point ``x`` (float64, |x| = 1).

:func:`load_result` reads both back and checks format, version, checksum, and that x matches its
recorded digest; any failure is a ValueError that names the file and the problem.
"""

from __future__ import annotations

import hashlib
import math
import os
import reprlib
import zipfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..errors import ResultFileError
from ..fileio import (
    checked_path,
    envelope,
    finite_json,
    is_folder,
    json_digest,
    json_writer,
    open_envelope,
    output_pair_paths,
    pair_paths,
    parse_json,
    write_all_atomic,
)

__all__ = ["FORMAT_VERSION", "Result", "load_result"]

FORMAT = "orthoclimb-result"
FORMAT_VERSION = 2
OLDEST_VERSION = 1  # version 1 had bare NaN tokens where version 2 has null


def _plain(value: Any) -> Any:
    """JSON-ready copy: NumPy scalars and arrays become Python numbers and lists."""
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return _plain(value.tolist())
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value


def vector_digest(x: np.ndarray) -> str:
    """SHA-256 (hex) of a vector as little-endian float64 bytes: a result's x, a polish's start."""
    return hashlib.sha256(np.ascontiguousarray(x, dtype="<f8").tobytes()).hexdigest()


@dataclass(eq=False)
class Result:
    """What an algorithm returns.

    Attributes: ``x`` the final unit vector (|x| = 1), ``energy`` the energy per spin H(x)/n at
    x, ``path`` the per-step table (column name -> 1-D NumPy array), ``config`` everything needed
    to reproduce the run (mixture, n, seeds, steps, tol, dtype, version, threads, kernel path,
    method; where the start point is the caller's, in :func:`~orthoclimb.polish` and with
    ``x0=`` in the baselines, ``start_sha256`` the SHA-256 of the unit vector it started from,
    little-endian float64, the point divided by its largest |entry| and then by its norm: keep
    the point to rerun; ``seed`` is then unused by gradient ascent and drives only the noise
    of Langevin dynamics),
    ``seconds`` the wall-clock time of the run, ``info`` method-specific diagnostics
    (polish outcome, local-maximum check, ALG reached or not, ...).

    The names that matter most, and what a study's rows and ``climb --json`` call them:

    * ``config["disorder_seed"]``: the instance's seed (rows and climb: ``seed``);
      ``config["seed"]``: the start point's seed (rows and climb: ``start_seed``; a study
      starts each run from its disorder seed), or, with ``start_sha256`` (a start of the
      caller's), Langevin's noise seed.
    * ``info["alg"]``: ALG, energy per spin; ``info["alg_gap"]`` = energy - ALG (rows and
      climb: ``gap_alg``; negative below ALG). Not ``GroundState.gap``, which is GS - ALG.
    * ``info["energy_ascent"]`` (Hessian ascent) and ``info["energy_anneal"]`` (Langevin):
      the energy per spin where the method ended, before its polish (rows and climb:
      ``energy_before_polish``); for Hessian ascent, ``info["alg_gap_ascent"]`` is that
      energy - ALG.
    * ``info["local_max"]``, ``info["n_positive"]``, ``info["top_eigenvalue"]`` (of the
      Riemannian Hessian P Hess H P - (x . grad H) I at |x| = 1, per spin),
      ``info["grad_norm"]`` (|P grad H|/n): the end point's local-maximum check, under the same
      names everywhere (None or absent where no check ran).
    """

    x: np.ndarray
    energy: float
    path: dict[str, np.ndarray]
    config: dict[str, Any]
    seconds: float
    info: dict[str, Any] = field(default_factory=dict)

    @property
    def method(self) -> str:
        return str(self.config.get("method", "?"))

    def __eq__(self, other: object) -> bool:
        """Equal when they would save the same content: x bit for bit, energy, path (NaN equal
        to NaN), config, seconds and info; so a result equals its reloaded copy or pickle."""
        if not isinstance(other, Result):
            return NotImplemented
        return json_digest(self.payload()) == json_digest(other.payload())

    __hash__ = None  # type: ignore[assignment]  # mutable, like a dataclass with eq

    def hamiltonian(self, check_memory: bool = True) -> Any:
        """The instance the run was on, regenerated from the config's recipe (mixture, n,
        disorder seed, correlation, dtype): the same coefficients bit for bit, so
        ``r.hamiltonian().energy(r.x) / r.config["n"]`` gives ``r.energy`` back (to rounding
        of the last step). An instance given by its coefficients has no recipe: ValueError
        (save it with ``Hamiltonian.save``). The memory check is
        :meth:`~orthoclimb.Hamiltonian.sample`'s."""
        from ..model import Hamiltonian, Mixture

        cfg = self.config
        if cfg.get("mixture") is None or cfg.get("disorder_seed") is None:
            raise ValueError(
                "this result's instance was given by its coefficients, not sampled from a seed,"
                " so it cannot be regenerated; keep it with Hamiltonian.save"
            )
        corr = cfg.get("correlated_with")
        return Hamiltonian.sample(
            Mixture.from_dict(cfg["mixture"]),
            cfg["n"],
            cfg["disorder_seed"],
            dtype=cfg.get("dtype", "float64"),
            correlated_with=None if corr is None else (corr[0], corr[1]),
            check_memory=check_memory,
        )

    def summary(self) -> dict[str, Any]:
        """The JSON-ready summary: energy, seconds, method, config and info (no path table)."""
        return _plain(
            {
                "method": self.method,
                "energy": self.energy,
                "seconds": self.seconds,
                "config": self.config,
                "info": self.info,
            }
        )

    def payload(self) -> dict[str, Any]:
        """The JSON file's payload: the summary, the path table and x's digest and shape, with
        every non-finite number as None (it is written as null)."""
        x = np.asarray(self.x, dtype=np.float64)
        return finite_json(
            {
                **self.summary(),
                "path": _plain({k: np.asarray(v) for k, v in self.path.items()}),
                "x_sha256": vector_digest(x),
                "x_shape": list(x.shape),
            }
        )

    def save(self, path: str | os.PathLike) -> tuple[Path, Path]:
        """Write ``<stem>.json`` and ``<stem>.npz`` atomically (a ``.json``/``.npz`` suffix on
        ``path`` is dropped to get the stem). Returns the two paths. A folder as ``path`` (an
        existing one, or text ending in a separator) raises
        :class:`~orthoclimb.errors.OutputPathError`: give a stem inside it. A result that
        :func:`load_result` could not read back (see :func:`_check_saveable`) raises
        TypeError or ValueError before anything is written."""
        _check_saveable(self)
        json_path, npz_path = output_pair_paths(path, "result")
        payload = self.payload()
        doc = envelope(FORMAT, FORMAT_VERSION, payload)
        x = np.asarray(self.x, dtype=np.float64)
        write_all_atomic([(npz_path, lambda fh: np.savez(fh, x=x)), (json_path, json_writer(doc))])
        return json_path, npz_path

    def __repr__(self) -> str:
        steps = len(next(iter(self.path.values()))) if self.path else 0

        def number(value: Any, spec: str) -> str:  # a hand-made Result may hold None
            return format(value, spec) if isinstance(value, (int, float)) else repr(value)

        return (
            f"Result(method={self.method!r}, n={self.config.get('n')}, "
            f"energy={number(self.energy, '.6f')}, rows={steps}, "
            f"seconds={number(self.seconds, '.3g')})"
        )


_FLOAT_MAX = float(np.finfo(np.float64).max)


def _is_real(value: Any) -> bool:
    """A real number a result file can hold: no flag, and no integer beyond float64 (which
    :func:`load_result` refuses)."""
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, (int, np.integer)):
        return abs(int(value)) <= _FLOAT_MAX
    return isinstance(value, (float, np.floating))


def _check_saveable(result: Result) -> None:
    """TypeError or ValueError, naming the field, for a result whose files
    :func:`load_result` would refuse or misread (a hand-made one): x a 1-D array of finite
    numbers, energy a real number or None, seconds a finite number >= 0, config and info
    dicts, path a dict of 1-D numeric columns of one length."""
    try:
        x = np.asarray(result.x)
    except Exception as exc:  # a sequence NumPy cannot shape
        raise TypeError(f"cannot save the result: x is not an array ({exc})") from None
    if x.ndim != 1 or x.dtype.kind not in "iuf" or not np.all(np.isfinite(x)):
        raise ValueError(
            "cannot save the result: x must be a 1-D array of finite numbers, got"
            f" {np.array2string(x, threshold=6) if x.dtype.kind != 'O' else repr(result.x)}"
        )
    for name in ("energy", "seconds"):
        value = getattr(result, name)
        if not (_is_real(value) or (name == "energy" and value is None)):
            raise TypeError(
                f"cannot save the result: {name} must be a number within float64's range,"
                f" got {reprlib.repr(value)}"
            )
    if not 0 <= result.seconds < math.inf:
        raise ValueError(
            f"cannot save the result: seconds must be a finite number >= 0, got {result.seconds!r}"
        )
    for name in ("config", "info", "path"):
        value = getattr(result, name)
        if not isinstance(value, dict):
            raise TypeError(f"cannot save the result: {name} must be a dict, got {value!r}")
    lengths = {}
    for column, values in result.path.items():
        try:
            col = np.asarray(values)
        except ValueError:  # rows of unequal length
            col = np.asarray(values, dtype=object)
        if col.ndim != 1 or (col.size and col.dtype.kind not in "iuf"):
            raise ValueError(
                f"cannot save the result: path column {column!r} must be a 1-D array of"
                f" numbers, got {np.array2string(col, threshold=6)}"
            )
        lengths[str(column)] = col.size
    if len(set(lengths.values())) > 1:
        raise ValueError(f"cannot save the result: path columns differ in length: {lengths}")


def _fail(path: Path, why: str) -> ResultFileError:
    return ResultFileError(f"cannot load the result {str(path)!r}: {why}")


_PAYLOAD_TYPES: dict[str, tuple[type, ...]] = {
    "energy": (int, float, type(None)),
    "seconds": (int, float),
    "config": (dict,),
    "info": (dict,),
    "path": (dict,),
    "x_sha256": (str,),
    "x_shape": (list,),
}


def _check_payload(path: Path, payload: dict[str, Any]) -> None:
    """Each field load_result reads is present with the right type (a file whose checksum was
    recomputed after an edit would otherwise fail later with a bare KeyError)."""
    for key, types in _PAYLOAD_TYPES.items():
        if key not in payload:
            if key == "info":  # optional
                continue
            raise _fail(path, f"the payload lacks the field {key!r}")
        value = payload[key]
        if isinstance(value, bool) or not isinstance(value, types):
            names = " or ".join(t.__name__ for t in types)
            raise _fail(path, f"field {key!r} must be {names}, got {value!r}")
        if isinstance(value, int) and abs(value) > _FLOAT_MAX:  # float() would overflow
            digits = len(str(abs(value)))
            raise _fail(path, f"field {key!r} is an integer of {digits} digits, beyond float64")
    for column, values in payload["path"].items():
        if not isinstance(values, list):
            raise _fail(path, f"path column {column!r} must be a list, got {values!r}")


def _column(values: list) -> np.ndarray:
    """A path column as written: its nulls (numbers that were not finite) read as NaN. A
    ValueError for anything but a flat list of numbers (rows of unequal length, text, nested
    lists, flags: a file edited by hand)."""
    if any(v is None for v in values):
        values = [math.nan if v is None else v for v in values]
    out = np.asarray(values)  # an empty list gives float64
    if out.ndim != 1 or (out.size and out.dtype.kind not in "iuf"):
        raise ValueError(f"it begins {values[:3]!r}")
    return out


def _pair_beside(folder: str) -> bool:
    """Whether ``<folder>.json`` stands beside the folder (".", ".." and "/" have none)."""
    try:
        return pair_paths(folder)[0].exists()
    except ValueError:
        return False


def load_result(path: str | os.PathLike) -> Result:
    """Read a result written by :meth:`Result.save` (give the stem or either file name)."""
    given = checked_path(path)
    # a climb --out folder given for its result (unless <folder>.json stands beside it)
    if is_folder(given) and not _pair_beside(given):
        raise ResultFileError(
            f"cannot load the result {given!r}: it is a folder; give the stem of the result in"
            f" it, e.g. {str(Path(given) / 'result')!r}"
        )
    json_path, npz_path = pair_paths(path)
    try:
        text = json_path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise _fail(json_path, "file not found") from None
    except UnicodeDecodeError:
        raise _fail(json_path, "not UTF-8 text (corrupted?)") from None
    except OSError as exc:  # a folder in its place, no permission, I/O error
        raise _fail(json_path, f"unreadable: {exc}") from None
    doc = parse_json(text, lambda why: _fail(json_path, why))
    if not isinstance(doc, dict) or doc.get("format") != FORMAT:
        raise _fail(json_path, f"not an orthoclimb result (format is not {FORMAT!r})")
    payload = open_envelope(
        doc, FORMAT_VERSION, lambda why: _fail(json_path, why), oldest=OLDEST_VERSION
    )
    _check_payload(json_path, payload)
    unreadable = (OSError, ValueError, KeyError, EOFError, zipfile.BadZipFile)
    try:
        data = np.load(npz_path, allow_pickle=False)
    except FileNotFoundError:
        raise _fail(npz_path, "file not found") from None
    except unreadable as exc:
        raise _fail(npz_path, f"unreadable (truncated or corrupted?): {exc}") from None
    if not isinstance(data, np.lib.npyio.NpzFile):  # an .npy file saved under that name
        raise _fail(npz_path, f"not an .npz archive but a single {type(data).__name__}")
    try:
        with data:
            x = np.array(data["x"], dtype=np.float64)
    except unreadable as exc:
        raise _fail(npz_path, f"unreadable (truncated or corrupted?): {exc}") from None
    if list(x.shape) != payload.get("x_shape") or vector_digest(x) != payload.get("x_sha256"):
        raise _fail(npz_path, "x does not match the digest recorded in the JSON file")
    try:
        path_table = {k: _column(v) for k, v in payload.get("path", {}).items()}
    except (TypeError, ValueError) as exc:  # rows of unequal length, text, nested lists, flags
        raise _fail(json_path, f"a path column is not a list of numbers: {exc}") from None
    energy = payload["energy"]
    return Result(
        x=x,
        energy=float(energy) if energy is not None else math.nan,
        path=path_table,
        config=payload["config"],
        seconds=float(payload["seconds"]),
        info=payload.get("info", {}),
    )
