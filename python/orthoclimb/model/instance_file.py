"""Instance files: save a Hamiltonian and load it back elsewhere.

``ham.save("inst/a")`` (a ``.json`` or ``.npz`` suffix on the path is dropped to get the stem)
writes one of two kinds, chosen automatically:

* **recipe** (an instance from :meth:`Hamiltonian.sample`): only ``inst/a.json``, about a
  kilobyte whatever n is. The payload holds the mixture (degree -> gamma), n, seed, storage dtype,
  ``correlated_with``, the orthoclimb version and a *fingerprint*: the energy H(x0) at a fixed
  check point x0 (below) and the first and last few coefficients of each degree. Loading
  regenerates the instance from the seed (after the memory check of ``sample``) and compares the
  fingerprint; a mismatch (for example a generator that changed between versions) is an error.
* **coefficients** (an instance from :meth:`Hamiltonian.from_coefficients` or ``from_dense``):
  ``inst/a.npz`` with one float64 array ``p<degree>.npy`` per degree (uncompressed zip; the
  values of a float32 instance are exact in float64), and ``inst/a.json`` whose payload holds n,
  dtype, the degrees and, per degree, the array length and the SHA-256 of its little-endian
  float64 bytes. Loading checks each array against its digest.

Both JSON files are ``{"format": "orthoclimb-instance", "format_version": 1, "sha256": ...,
"payload": {"kind": "recipe" | "coefficients", ...}}`` where ``sha256`` is the hex digest of the
payload serialized canonically (``json.dumps`` with sorted keys and separators ``(",", ":")``,
UTF-8), as in result files. Every file is written atomically (temporary file, then rename); the
``.npz`` goes first and the ``.json`` last, so a crash in between leaves the old JSON, whose
digests then refuse the new arrays instead of loading a mix. A recipe save leaves an existing
``<stem>.npz`` alone (it is not read for a recipe).

The check point is x0_i = (-1)^i sqrt(q_i) / |.|, i = 0..n-1, q_i the i-th prime. Every entry is
nonzero, so every coefficient enters H(x0) with a nonzero weight; and the monomials of one
degree take pairwise different absolute values at x0 (unique factorization), so in exact
arithmetic neither a changed coefficient nor two exchanged (unequal) ones leave H(x0)
unchanged. x0 is computed with correctly rounded operations only (sqrt, products, math.fsum),
so it is bitwise the same on every machine.

:func:`load_instance` raises :class:`orthoclimb.errors.InstanceFileError` (a ValueError) naming
the file and the problem for a missing, unreadable, truncated, corrupted, foreign or
newer-version file, and :class:`~orthoclimb.errors.InsufficientMemoryError` when the instance
would not fit in the available memory.
"""

from __future__ import annotations

import hashlib
import math
import os
import struct
import zipfile
import zlib
from pathlib import Path
from typing import IO, Any

import numpy as np

from .. import _core
from ..errors import InstanceFileError, InsufficientMemoryError
from ..fileio import (
    checked_path,
    envelope,
    is_folder,
    json_writer,
    open_envelope,
    output_pair_paths,
    pair_paths,
    parse_json,
    write_all_atomic,
    write_json_atomic,
)
from .arrays import as_flag
from .hamiltonian import Hamiltonian, _check_correlation, _check_seed
from .memory import check_size, normalize_dtype, require_memory
from .mixture import Mixture, _check_degree

__all__ = ["FORMAT", "FORMAT_VERSION", "check_point", "load_instance", "save_instance"]

FORMAT = "orthoclimb-instance"
FORMAT_VERSION = 1

_EDGE = 4
"""Coefficients kept at each end (first and last) of each degree in a recipe's fingerprint."""

# Tolerances of the fingerprint check. Every machine regenerates every coefficient bitwise since the
# Gaussians' ln, sin and cos come from a pure-Rust math library compiled into orthoclimb; recipes
# saved by earlier versions, which took them from the platform's math library, differ in the last
# bit of some coefficients (about 6 %), and float32 storage may then round to the neighbouring
# float32. The energy is a sum over all coefficients whose order and fused multiply-adds depend on
# the instruction-set path (AVX2+FMA or plain), which moves it by a few ulps of the sum of |terms|.
# Hence a relative 1e-9 on H(x0), measured against the larger of |H(x0)| and its standard deviation
# sqrt(n xi(1)) (|x0| = 1) so that an instance whose H(x0) happens to be near 0 is not held to an
# impossible bound; and a few ulps of the storage type on the listed coefficients. A different
# generator moves both by O(1).
_ENERGY_RTOL = 1e-9
_COEF_RTOL = {"float64": 1e-12, "float32": 2.5e-7}

_CHECK_POINT = "x_i = (-1)^i sqrt(prime_i) / norm, i = 0..n-1"


# -- helpers ------------------------------------------------------------------------------


def _array_digest(a: np.ndarray) -> str:
    return hashlib.sha256(memoryview(np.ascontiguousarray(a, dtype="<f8"))).hexdigest()


def _version() -> str:
    from .. import __version__

    return __version__


def _first_primes(n: int) -> np.ndarray:
    """The first n primes (int64), by a sieve up to Rosser's bound n (ln n + ln ln n)."""
    limit = 15 if n < 6 else int(n * (math.log(n) + math.log(math.log(n)))) + 16
    while True:
        sieve = np.ones(limit + 1, dtype=bool)
        sieve[:2] = False
        for k in range(2, math.isqrt(limit) + 1):
            if sieve[k]:
                sieve[k * k :: k] = False
        primes = np.flatnonzero(sieve)
        if len(primes) >= n:
            return primes[:n].astype(np.int64)
        limit *= 2  # not reached: the bound holds for n >= 6


def check_point(n: int) -> np.ndarray:
    """The fingerprint's unit vector x0 of length n (see the module docstring)."""
    n = check_size(n)
    x = np.sqrt(_first_primes(n).astype(np.float64))
    x[1::2] *= -1.0
    return x / math.sqrt(math.fsum((x * x).tolist()))


def _degree_size(n: int, p: int) -> int:
    return int(_core.storage_nbytes(n, [p], 8)) // 8


def _fingerprint(ham: Hamiltonian) -> dict[str, Any]:
    """H(x0) and the first and last few coefficients of each degree."""
    coefs = {}
    for p in ham.degrees:
        size = _degree_size(ham.n, p)
        head = ham.coefficients(p, 0, min(_EDGE, size))
        tail = ham.coefficients(p, max(size - _EDGE, 0), size)
        coefs[str(p)] = {"head": head.tolist(), "tail": tail.tolist()}
    return {"point": _CHECK_POINT, "energy": ham.energy(check_point(ham.n)), "coefficients": coefs}


# -- saving -------------------------------------------------------------------------------


def _write_npz(fh: IO[bytes], ham: Hamiltonian) -> dict[str, dict[str, Any]]:
    """Write the coefficients as an uncompressed .npz, one degree in memory at a time; return
    the per-degree length and digest."""
    info = {}
    with zipfile.ZipFile(fh, "w", compression=zipfile.ZIP_STORED, allowZip64=True) as zf:
        for p in ham.degrees:
            a = np.ascontiguousarray(ham.coefficients(p), dtype="<f8")
            with zf.open(f"p{p}.npy", "w", force_zip64=True) as member:
                np.lib.format.write_array(member, a, allow_pickle=False)
            info[str(p)] = {"length": int(a.size), "sha256": _array_digest(a)}
            del a
    return info


def save_instance(
    ham: Hamiltonian, path: str | os.PathLike, check_memory: bool = True
) -> tuple[Path, ...]:
    """Write `ham` to ``<stem>.json`` (a recipe) or ``<stem>.npz`` + ``<stem>.json`` (given
    coefficients), atomically; returns the paths written, JSON first. ``check_memory`` guards
    the float64 copy of one degree that each kind makes."""
    if not isinstance(ham, Hamiltonian):
        raise TypeError(f"expected an orthoclimb.Hamiltonian, got {type(ham).__name__}")
    check_memory = as_flag(check_memory, "check_memory")
    json_path, npz_path = output_pair_paths(path, "instance")
    common = {"n": ham.n, "dtype": ham.dtype, "degrees": list(ham.degrees)}
    if ham.mixture is not None and ham.seed is not None:
        corr = ham.correlated_with
        payload = {
            "kind": "recipe",
            **common,
            "mixture": ham.mixture.to_dict(),
            "seed": ham.seed,
            "correlated_with": [corr[0], corr[1]] if corr is not None else None,
            "orthoclimb_version": _version(),
            "fingerprint": _fingerprint(ham),
        }
        write_json_atomic(json_path, envelope(FORMAT, FORMAT_VERSION, payload))
        return (json_path,)
    if check_memory:
        need = 8 * max(_degree_size(ham.n, p) for p in ham.degrees)
        require_memory(need, "reading the coefficients to save them")
    arrays_info: dict[str, dict[str, Any]] = {}

    def write_npz(fh: IO[bytes]) -> None:
        arrays_info.update(_write_npz(fh, ham))

    def write_json(fh: IO[bytes]) -> None:  # after the .npz is written to its temporary file
        payload = {
            "kind": "coefficients",
            **common,
            "orthoclimb_version": _version(),
            "npz": npz_path.name,
            "arrays": dict(arrays_info),
        }
        json_writer(envelope(FORMAT, FORMAT_VERSION, payload))(fh)

    # both files complete before either replaces an old one (fileio.write_all_atomic)
    write_all_atomic([(npz_path, write_npz), (json_path, write_json)])
    return json_path, npz_path


# -- loading ------------------------------------------------------------------------------


def _fail(path: Path, why: str) -> InstanceFileError:
    return InstanceFileError(f"cannot load the instance file {str(path)!r}: {why}")


def _read_payload(json_path: Path) -> dict[str, Any]:
    """The checked payload of an instance JSON file: format, version and checksum verified."""
    try:
        raw = json_path.read_bytes()
    except FileNotFoundError:
        raise _fail(json_path, "file not found") from None
    except IsADirectoryError:
        raise _fail(json_path, "unreadable: it is a directory, not a file") from None
    except OSError as exc:
        raise _fail(json_path, f"unreadable: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise _fail(json_path, "not UTF-8 text (corrupted?)") from None
    if not text.strip():
        raise _fail(json_path, "the file is empty (truncated?)")
    doc = parse_json(text, lambda why: _fail(json_path, why))
    fmt = doc.get("format") if isinstance(doc, dict) else None
    if fmt != FORMAT:
        hint = " (a result file: use orthoclimb.load_result)" if fmt == "orthoclimb-result" else ""
        raise _fail(
            json_path,
            f"not an orthoclimb instance file (format {fmt!r}, expected {FORMAT!r}){hint}",
        )
    return open_envelope(doc, FORMAT_VERSION, lambda why: _fail(json_path, why))


def _close(a: float, b: float, rtol: float, scale: float = 0.0) -> bool:
    return abs(a - b) <= rtol * max(abs(a), abs(b), scale)


def _compare_fingerprint(
    saved: dict[str, Any], got: dict[str, Any], dtype: str, scale: float
) -> str | None:
    """A description of the first difference between two fingerprints, or None."""
    e_saved, e_got = float(saved["energy"]), float(got["energy"])
    if not _close(e_got, e_saved, _ENERGY_RTOL, scale):
        return f"energy at the check point {e_got!r}, saved {e_saved!r}"
    saved_coefs = saved["coefficients"]
    if sorted(saved_coefs) != sorted(got["coefficients"]):
        return f"degrees {sorted(got['coefficients'])}, saved {sorted(saved_coefs)}"
    for p, ends in got["coefficients"].items():
        for end in ("head", "tail"):
            want = [float(v) for v in saved_coefs[p][end]]
            have = ends[end]
            if len(want) != len(have) or not all(
                _close(h, w, _COEF_RTOL[dtype]) for h, w in zip(have, want, strict=True)
            ):
                which = "first" if end == "head" else "last"
                return f"{which} degree-{p} coefficients {have}, saved {want}"
    return None


def _load_recipe(json_path: Path, payload: dict[str, Any], check_memory: bool) -> Hamiltonian:
    try:
        n = check_size(payload["n"])
        dtype = normalize_dtype(payload["dtype"])
        mixture = Mixture.from_dict(payload["mixture"])
        seed = _check_seed(payload["seed"])
        corr = _check_correlation(payload["correlated_with"])
        if payload["degrees"] != list(mixture.degrees):
            raise ValueError(f"degrees {payload['degrees']} are not the mixture's")
        saved = payload["fingerprint"]
        float(saved["energy"])
        if saved["point"] != _CHECK_POINT:
            raise ValueError(f"unknown check point {saved['point']!r}")
        if sorted(saved["coefficients"]) != sorted(str(p) for p in mixture.degrees):
            raise ValueError("the fingerprint's degrees are not the mixture's")
        for ends in saved["coefficients"].values():  # lists of numbers, or malformed
            for end in ("head", "tail"):
                if not isinstance(ends[end], list):  # a text "123" iterates as numbers
                    raise TypeError(f"{end} is {type(ends[end]).__name__}, not a list")
                [float(v) for v in ends[end]]
    except (AttributeError, KeyError, TypeError, ValueError, OverflowError) as exc:
        raise _fail(json_path, f"malformed recipe ({type(exc).__name__}: {exc})") from None
    try:
        ham = Hamiltonian.sample(mixture, n, seed, dtype, corr, check_memory=check_memory)
    except InsufficientMemoryError as exc:  # name the file, keep the kind of error
        raise InsufficientMemoryError(f"loading the instance {str(json_path)!r}: {exc}") from None
    # the standard deviation of H(x0), |x0| = 1; sqrt(n xi(1)) in two factors, since n xi(1)
    # can overflow where each is finite (an infinite scale let any saved energy pass)
    scale = math.sqrt(n) * math.sqrt(float(mixture.xi(1.0)))
    diff = _compare_fingerprint(saved, _fingerprint(ham), dtype, scale)
    if diff is not None:
        written_by, running = payload.get("orthoclimb_version"), _version()
        cause = (
            "the recipe was edited, or this machine's generator differs"
            if written_by == running
            else "the generator has changed between these versions, or the recipe was edited"
        )
        raise _fail(
            json_path,
            f"the instance regenerated from seed {seed} differs from the saved one ({diff}). "
            f"The file was written by orthoclimb {written_by!r} and this is {running!r}: "
            f"{cause}. Load it with the version that wrote it and save it via "
            "Hamiltonian.from_coefficients to carry the coefficients themselves",
        )
    return ham


_READ_CHUNK = 1 << 24  # bytes per read of a stored array (16 MiB)


def _read_member(zf: zipfile.ZipFile, name: str, length: int) -> np.ndarray:
    """One float64 array of the given length from a zip member, read to its end so that the
    zip's CRC-32 is checked."""
    with zf.open(name) as f:
        version = np.lib.format.read_magic(f)
        if version == (1, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_1_0(f)
        elif version == (2, 0):
            shape, fortran, dtype = np.lib.format.read_array_header_2_0(f)
        else:
            raise ValueError(f"{name}: unsupported .npy version {version}")
        if dtype != np.dtype("<f8") or fortran or shape != (length,):
            raise ValueError(
                f"{name}: array of dtype {dtype}, shape {shape}; expected float64 ({length},)"
            )
        # read in chunks straight into the array: a single f.read() joined its chunks into
        # one bytes object, twice the array's size at the peak (172 MB for an 86 MB degree)
        out = np.empty(length, dtype="<f8")
        view = memoryview(out).cast("B")
        filled = 0
        while filled < view.nbytes:
            chunk = f.read(min(_READ_CHUNK, view.nbytes - filled))
            if not chunk:
                break
            view[filled : filled + len(chunk)] = chunk
            filled += len(chunk)
        extra = len(f.read())  # to the member's end, where the zip's CRC-32 is checked
    if filled != 8 * length or extra:
        raise ValueError(f"{name}: {filled + extra} bytes of data, expected {8 * length}")
    return out


def _load_coefficients(
    json_path: Path, npz_path: Path, payload: dict[str, Any], check_memory: bool
) -> Hamiltonian:
    try:
        n = check_size(payload["n"])
        dtype = normalize_dtype(payload["dtype"])
        degrees = [_check_degree(p) for p in payload["degrees"]]
        entries = payload["arrays"]
        if not degrees or sorted(entries) != sorted(str(p) for p in degrees):
            raise ValueError(f"arrays {sorted(entries)} do not match degrees {degrees}")
        lengths = {p: entries[str(p)]["length"] for p in degrees}
        for p, length in lengths.items():  # int() took 6.9 as 6
            if type(length) is not int:
                raise TypeError(f"degree {p} lists a length {length!r}, not an integer")
        digests = {p: str(entries[str(p)]["sha256"]) for p in degrees}
        for p in degrees:
            size = _degree_size(n, p)
            if lengths[p] != size:
                raise ValueError(f"degree {p} lists {lengths[p]} coefficients, n = {n} has {size}")
    except (KeyError, TypeError, ValueError) as exc:
        raise _fail(json_path, f"malformed header ({type(exc).__name__}: {exc})") from None
    if check_memory:
        itemsize = 8 if dtype == "float64" else 4
        # the float64 arrays read, the instance's storage, one read chunk and the one-byte
        # mask of from_coefficients' finiteness check
        count = sum(lengths.values())
        need = 9 * count + int(_core.storage_nbytes(n, degrees, itemsize)) + _READ_CHUNK
        require_memory(need, f"loading the instance {str(npz_path)!r}")
    arrays = {}
    try:
        with zipfile.ZipFile(npz_path) as zf:
            names = sorted(zf.namelist())
            want = sorted(f"p{p}.npy" for p in degrees)
            if names != want:
                raise _fail(npz_path, f"holds arrays {names}, the JSON header lists {want}")
            for p in degrees:
                a = _read_member(zf, f"p{p}.npy", lengths[p])
                if _array_digest(a) != digests[p]:
                    raise _fail(
                        npz_path,
                        f"the degree-{p} coefficients do not match the digest recorded in "
                        f"{json_path.name!r} (corrupted, or from another save)",
                    )
                arrays[p] = a
    except FileNotFoundError:
        raise _fail(npz_path, f"file not found (the coefficients of {json_path.name!r})") from None
    except IsADirectoryError:
        raise _fail(npz_path, "unreadable: it is a directory, not a file") from None
    except InstanceFileError:
        raise
    except (zipfile.BadZipFile, zlib.error, struct.error, EOFError, ValueError, OSError) as exc:
        raise _fail(npz_path, f"unreadable .npz (truncated or corrupted?): {exc}") from None
    except RuntimeError as exc:  # zipfile: a flipped flag bit claims encryption or a method
        raise _fail(npz_path, f"unreadable .npz (truncated or corrupted?): {exc}") from None
    return Hamiltonian.from_coefficients(n, arrays, dtype)


def load_instance(path: str | os.PathLike, check_memory: bool = True) -> Hamiltonian:
    """Read an instance written by :meth:`Hamiltonian.save` (give the stem or either file).

    A recipe is regenerated from its seed and checked against its fingerprint; given
    coefficients are checked against their digests. The memory needed is checked first
    (``check_memory=False`` skips that, as in :meth:`Hamiltonian.sample`). Raises
    :class:`~orthoclimb.errors.InstanceFileError` naming the file and the problem.
    """
    check_memory = as_flag(check_memory, "check_memory")
    if is_folder(checked_path(path)):  # checks the path's type first
        raise _fail(
            Path(checked_path(path)),
            "it is a folder; give the instance's file (NAME.json) or its stem NAME",
        )
    json_path, npz_path = pair_paths(path)
    payload = _read_payload(json_path)
    kind = payload.get("kind")
    if kind == "recipe":
        return _load_recipe(json_path, payload, check_memory)
    if kind == "coefficients":
        return _load_coefficients(json_path, npz_path, payload, check_memory)
    raise _fail(json_path, f"unknown instance kind {kind!r} (expected 'recipe' or 'coefficients')")
