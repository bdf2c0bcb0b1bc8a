"""Atomic file writes: results are never left half-written.

Each writer creates a temporary file in the destination folder, writes and flushes it, then
renames it over the destination (os.replace, atomic on POSIX and Windows). A crash at any
moment leaves either the old file or the new one. A file pair (an instance's or a result's
.npz and .json) is written to two temporary files first and renamed only once both are
complete, so a full disk or Ctrl-C while writing leaves the old pair whole. A new file gets
the permissions an ordinary ``open(path, "w")`` would give it (0666 less the process umask),
not the private 0600 of a temporary file; a replaced file keeps its own. A symbolic link at
the destination is replaced by the new file (its target is left alone), as os.replace does.
"""

from __future__ import annotations

import contextlib
import hashlib
import json
import math
import os
import signal
import stat
import tempfile
import threading
from collections.abc import Callable, Iterator, Sequence
from contextvars import ContextVar
from pathlib import Path
from typing import IO, Any

import numpy as np

try:  # POSIX; elsewhere no folder is locked
    import fcntl
except ImportError:  # pragma: no cover - Windows
    fcntl = None  # type: ignore[assignment]

from .errors import OutputPathError


def _umask() -> int:
    """The process umask, read without changing it (Linux reports it in /proc; elsewhere the
    usual 022 is assumed, common practice)."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError, IndexError):
        pass
    return 0o022


# Folders made by ensure_folder while a command runs (see undone_on_failure); None outside one.
_made_folders: ContextVar[list[Path] | None] = ContextVar("_made_folders", default=None)


@contextlib.contextmanager
def undone_on_failure() -> Iterator[None]:
    """Run a block (a command) that may make output folders: if it raises (a refusal, an
    error, Ctrl-C), the folders :func:`ensure_folder` made during it are removed again while
    they are still empty, innermost first, so a failed command leaves no empty folder behind.
    A folder that received a file is kept with it."""
    made: list[Path] = []
    token = _made_folders.set(made)
    try:
        yield
    except BaseException:
        _remove_empty(made)
        raise
    finally:
        _made_folders.reset(token)


def _remove_empty(made: list[Path]) -> None:
    for folder in reversed(made):
        if _locked_elsewhere(folder):
            continue
        try:
            folder.rmdir()  # only if empty
        except OSError:
            pass
    made.clear()


#: Whether this platform has flock (POSIX); elsewhere no folder is locked.
FOLDER_LOCKS = fcntl is not None


def lock_folder(fd: int) -> bool | None:
    """Try to take an exclusive flock on the open folder ``fd`` without waiting: True when
    taken (held until ``fd`` is closed), False when another open file holds one, None where
    there is no flock (off POSIX, or a file system without it, some network mounts)."""
    if fcntl is None:  # pragma: no cover - not POSIX
        return None
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except BlockingIOError:
        return False
    except OSError:
        return None
    return True


def _locked_elsewhere(folder: Path) -> bool:
    """Whether another open file holds an flock on ``folder`` (a sweep's study folder lock,
    ``studies.store.sweep_lock``). Two sweeps started at once on a new path: the one whose
    mkdir made the folder was refused by the other's lock and removed the folder, still
    empty, from under it, which then held a lock on a deleted folder that a third sweep could
    not see. A held folder is left to its holder."""
    if not FOLDER_LOCKS:  # pragma: no cover - not POSIX
        return False
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return False
    try:
        return lock_folder(fd) is False
    finally:
        os.close(fd)  # (and with it a lock this call took)


def remove_made_folders() -> None:
    """Inside :func:`undone_on_failure`, remove the folders made so far that are still empty,
    innermost first: for a command that ends, successfully, without writing anything (``sweep
    --plan-only``)."""
    made = _made_folders.get()
    if made is not None:
        _remove_empty(made)


def _make_noting(folder: Path, made: list[Path]) -> None:
    """Make the missing folders of ``folder``'s chain, outermost first, noting in ``made`` only
    those this call's own mkdir created: a folder another process made in between (two
    commands started at once on one new path) is not ours to remove."""
    missing = [f for f in (folder, *folder.parents) if not os.path.lexists(f)]
    for f in reversed(missing):
        try:
            f.mkdir()
        except FileExistsError:
            if not f.is_dir():
                raise
            continue
        made.append(f)


def ensure_folder(path: str | os.PathLike, what: str = "output folder") -> Path:
    """Create the folder ``path`` and its parents (if missing) and return it, or raise
    :class:`~orthoclimb.errors.OutputPathError` naming the path. Commands call it before their
    work, so a bad ``--out`` fails at once instead of after a long run; inside
    :func:`undone_on_failure` the folders it makes are noted, to be removed if the command
    fails."""
    folder = Path(path)
    made = _made_folders.get()
    try:
        if made is not None:
            _make_noting(folder, made)
        folder.mkdir(parents=True, exist_ok=True)
    except (FileExistsError, NotADirectoryError):
        raise OutputPathError(
            f"{what} {str(folder)!r} cannot be made: a file (not a folder) stands at that path"
            " or at one of its parents"
        ) from None
    except PermissionError:
        raise OutputPathError(f"{what} {str(folder)!r} cannot be made: permission denied") from None
    except OSError as exc:  # a read-only or virtual file system, a name too long, ...
        raise _path_error(f"{what} {str(folder)!r} cannot be made", exc) from None
    return folder


def is_folder(path: str | os.PathLike) -> bool:
    """Whether a folder stands at ``path``; False where the system cannot tell (a name too
    long), so that the write or read that follows reports the problem with its path."""
    try:
        return Path(path).is_dir()
    except OSError:
        return False


def write_atomic(path: str | os.PathLike, write: Callable[[IO[bytes]], None]) -> Path:
    """Create or replace `path` with what `write(fh)` writes to a binary file handle.

    A destination that cannot be written (a folder stands at it, the file system refuses the
    temporary file or the rename) raises :class:`~orthoclimb.errors.OutputPathError` naming
    `path`, never the temporary file, with the OS error's ``errno``. An OS error while the
    data are written (a full disk or a quota at write, flush or fsync) is no bad path: it
    keeps its type and errno and gets `path` as its file name, where it names none. Other
    errors of ``write`` pass through unchanged."""
    return write_all_atomic([(path, write)])[0]


def write_all_atomic(
    files: Sequence[tuple[str | os.PathLike, Callable[[IO[bytes]], None]]],
) -> list[Path]:
    """:func:`write_atomic` for several files that belong together: every file is written to
    a temporary file first, in order (so a later writer may use what an earlier one noted),
    and only when all are complete are they renamed into place, in order. An error or Ctrl-C
    while writing removes the temporary files and leaves every old file as it was; a Ctrl-C
    during the renames waits for them to end (a new .npz beside an old .json loaded as neither,
    a review). A name longer than the file system takes is refused before anything is written.
    (A crash between the renames, a few system calls, can still pair a new first file with an
    old second one; the loaders' checksums tell.)"""
    staged: list[tuple[str, Path]] = []
    for path, _ in files:
        _check_name_length(Path(path))
    try:
        for path, write in files:
            _stage(Path(path), write, staged)
        with interrupts_deferred():
            while staged:
                tmp, dest = staged[0]
                try:
                    os.replace(tmp, dest)
                except OSError as exc:
                    raise _path_error(f"cannot write {str(dest)!r}", exc) from exc
                staged.pop(0)
    except BaseException:
        for tmp, _ in staged:
            try:
                os.unlink(tmp)
            except OSError:  # gone already, or the file system refuses: keep the first error
                pass
        raise
    return [Path(path) for path, _ in files]


@contextlib.contextmanager
def interrupts_deferred() -> Iterator[None]:
    """Run a short block that must not be cut in two by Ctrl-C: a SIGINT that comes meanwhile
    is recorded and raised as KeyboardInterrupt when the block ends (or handed to the handler
    that was installed). Off the main thread, or where SIGINT is ignored or left to the
    system, nothing is done."""
    old = signal.getsignal(signal.SIGINT)
    if threading.current_thread() is not threading.main_thread() or not callable(old):
        yield
        return
    came: list[Any] = []
    signal.signal(signal.SIGINT, lambda signum, frame: came.append(frame))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, old)
        if came:  # also when the block raised: the Ctrl-C wins, the error is its context
            old(signal.SIGINT, came[0])  # the default handler raises KeyboardInterrupt


def _check_name_length(dest: Path) -> None:
    """:class:`~orthoclimb.errors.OutputPathError` for a file name longer than the file
    system of its folder takes (the first file of a pair was renamed into place and the second
    then failed, a review). Where the limit cannot be read, the write reports it."""
    # the nearest folder that exists: the ones still to be made are on its file system
    folder = next((f for f in (dest.parent, *dest.parent.parents) if is_folder(f)), None)
    if folder is None:
        return
    try:
        limit = os.pathconf(folder, "PC_NAME_MAX")
    except (OSError, ValueError, AttributeError):  # no limit to read, or no pathconf
        return
    size = len(os.fsencode(dest.name))
    if size > limit:
        raise OutputPathError(
            f"cannot write {str(dest)!r}: its name has {size} bytes, more than the {limit} the"
            " file system takes"
        )


def require_writable(folder: str | os.PathLike, what: str = "output folder") -> None:
    """:class:`~orthoclimb.errors.OutputPathError` when the existing ``folder`` does not take
    new files (no permission, a read-only or immutable folder), found by making and removing
    a temporary file in it: commands that write after long work check before it (climb ran to
    its end and then lost its result, a review)."""
    tmp = None
    try:
        with interrupts_deferred():
            fd, tmp = tempfile.mkstemp(dir=folder, prefix=".orthoclimb-probe.", suffix=".tmp")
            os.close(fd)
    except OSError as exc:
        raise _path_error(f"{what} {str(folder)!r} does not take new files", exc) from None
    finally:
        if tmp is not None:
            with contextlib.suppress(OSError):
                os.unlink(tmp)


def refuse_folder(dest: str | os.PathLike, advice: str = "give a file name") -> None:
    """:class:`~orthoclimb.errors.OutputPathError` when a folder stands where the file
    ``dest`` is to be written; callers that write after long work check their files first."""
    if is_folder(dest):
        raise OutputPathError(f"cannot write {str(dest)!r}: it is a folder; {advice}")


def figure_writer(fig: Any, fmt: str = "png", **kwargs: Any) -> Callable[[IO[bytes]], None]:
    """A writer for :func:`write_atomic` of a matplotlib figure in format ``fmt``."""
    return lambda fh: fig.savefig(fh, format=fmt, **kwargs)


def _stage(dest: Path, write: Callable[[IO[bytes]], None], staged: list[tuple[str, Path]]) -> None:
    """Write a temporary file beside ``dest`` with ``write`` and note it in ``staged`` as
    (its path, ``dest``) as soon as it exists, so the caller's cleanup knows it whenever a
    Ctrl-C comes (see :func:`write_atomic` for the errors). Its name starts with the first 32
    characters of ``dest``'s, so a name near the file system's limit of 255 bytes still
    fits."""
    ensure_folder(dest.parent, f"the folder of {str(dest)!r},")
    refuse_folder(dest)
    fh = None
    try:
        try:  # a Ctrl-C inside mkstemp, after it made the file, left it behind (a review)
            with interrupts_deferred():
                fd, tmp = tempfile.mkstemp(
                    dir=dest.parent, prefix=f".{dest.name[:32]}.", suffix=".tmp"
                )
                staged.append((tmp, dest))  # the caller's cleanup removes it from here on
                fh = os.fdopen(fd, "wb")
        except OSError as exc:
            raise _path_error(f"cannot write {str(dest)!r}", exc) from None
        try:
            with fh:  # close() flushes too: it fails the same way
                write(fh)
                fh.flush()
                os.fsync(fh.fileno())
        except OSError as exc:  # a full disk, a quota, a file size limit
            if exc.filename is not None:
                raise
            raise OSError(exc.errno, exc.strerror or str(exc), str(dest)) from exc
        try:
            os.chmod(tmp, _mode_for(dest))
        except OSError as exc:
            raise _path_error(f"cannot write {str(dest)!r}", exc) from exc
    except BaseException:
        if fh is not None:
            with contextlib.suppress(OSError):
                fh.close()
        raise


def _mode_for(dest: Path) -> int:
    """The permissions of the file ``dest`` being replaced, else those of a new file."""
    try:
        return stat.S_IMODE(os.stat(dest).st_mode)
    except OSError:
        return 0o666 & ~_umask()


def _path_error(what: str, exc: OSError) -> OutputPathError:
    """``OutputPathError("<what>: <reason>")`` carrying ``exc``'s errno."""
    err = OutputPathError(f"{what}: {exc.strerror or str(exc) or type(exc).__name__}")
    err.errno = exc.errno
    return err


def checked_path(path: Any) -> str:
    """The text of a file path given as str, bytes or os.PathLike: a TypeError names any other
    value (pathlib's own said only "expected str, bytes or os.PathLike object, not NoneType"),
    a ValueError an empty text or a NUL character, which no file system takes."""
    if not isinstance(path, (str, bytes, os.PathLike)):
        raise TypeError(
            f"a file path must be text or a path object, got {type(path).__name__} {path!r}"
        )
    text = os.fsdecode(os.fspath(path))
    if not text:
        raise ValueError("a file path cannot be empty, got ''")
    if "\0" in text:
        raise ValueError(f"a file path cannot hold a NUL character, got {text!r}")
    return text


def pair_paths(path: str | os.PathLike) -> tuple[Path, Path]:
    """``(<stem>.json, <stem>.npz)`` of a file pair, the stem being ``path`` less a ``.json``
    or ``.npz`` suffix (so the stem or either file name may be given). A path that ends in
    no file name (".", "..", "/") is a ValueError."""
    p = Path(checked_path(path))
    if p.name in ("", ".", ".."):  # Path.with_name said "PosixPath('.') has an empty name"
        raise ValueError(f"a file path must end in a file name, got {str(path)!r}")
    stem = p.with_suffix("") if p.suffix in (".json", ".npz") else p
    return stem.with_name(stem.name + ".json"), stem.with_name(stem.name + ".npz")


def output_pair_paths(path: str | os.PathLike, example: str) -> tuple[Path, Path]:
    """:func:`pair_paths` for writing: a folder (an existing one, or a path ending in a
    separator) raises :class:`~orthoclimb.errors.OutputPathError`, since ``<folder>.json``
    would land beside it; the message suggests ``<folder>/<example>``. So does a folder
    standing at either file of the pair, before anything is written (the .npz was written,
    replacing an older one, before the .json was found to be a folder)."""
    text = checked_path(path)
    if is_folder(text) or text.endswith(("/", os.sep)):
        inside = str(Path(text) / example)
        raise OutputPathError(f"{text!r} is a folder; give a file stem in it, e.g. {inside!r}")
    pair = pair_paths(text)
    for member in pair:  # both checked before either is written
        if is_folder(member):
            raise OutputPathError(f"cannot write {str(member)!r}: it is a folder; give a file name")
    return pair


def write_text_atomic(path: str | os.PathLike, text: str) -> Path:
    """Create or replace a UTF-8 text file atomically."""
    return write_atomic(path, lambda fh: fh.write(text.encode("utf-8")))


def finite_json(value: Any) -> Any:
    """A copy of ``value`` (dicts, lists, tuples, numbers, text) for strict JSON: every float
    that is not finite (NaN, +-inf) becomes ``None``, which JSON writes as ``null``.

    JSON has no NaN or infinity (RFC 8259, section 6); Python writes them as the bare tokens
    ``NaN`` and ``Infinity``, which jq, JavaScript and most other readers refuse. orthoclimb
    stores a missing or undefined number (a path column where a step has no value, a
    standard deviation of one sample) as null instead."""
    if isinstance(value, dict):
        return {k: finite_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [finite_json(v) for v in value]
    if isinstance(value, (float, np.floating)) and not math.isfinite(value):
        return None
    return value


def json_text(data: Any, indent: int | None = 2) -> str:
    """Strict JSON text of ``data`` (non-finite floats as null, :func:`finite_json`), as every
    file orthoclimb writes and every ``--json`` output holds it."""
    return json.dumps(finite_json(data), indent=indent, allow_nan=False)


def json_writer(data: Any) -> Callable[[IO[bytes]], None]:
    """A writer for :func:`write_atomic` of the JSON file of ``data`` (strict JSON,
    :func:`json_text`; indented, keys in insertion order)."""
    text = (json_text(data) + "\n").encode("utf-8")
    return lambda fh: fh.write(text)


def write_json_atomic(path: str | os.PathLike, data: Any) -> Path:
    """Create or replace a JSON file atomically (:func:`json_writer`)."""
    return write_atomic(path, json_writer(data))


def save_figure_atomic(fig: Any, path: str | os.PathLike, **kwargs: Any) -> Path:
    """Save a matplotlib figure atomically; the format follows the file name's suffix."""
    fmt = kwargs.pop("format", Path(path).suffix.lstrip(".") or "png")
    return write_atomic(path, figure_writer(fig, fmt, **kwargs))


def envelope(format_name: str, version: int, payload: dict) -> dict:
    """The file envelope ``{"format", "format_version", "sha256", "payload"}`` of ``payload``
    with its non-finite floats as None (:func:`finite_json`; checksum :func:`json_digest`),
    which :func:`open_envelope` reads back."""
    payload = finite_json(payload)
    return {
        "format": format_name,
        "format_version": version,
        "sha256": json_digest(payload),
        "payload": payload,
    }


def open_envelope(
    doc: dict, version: int, fail: Callable[[str], Exception], oldest: int | None = None
) -> dict:
    """The payload of a file envelope ``{"format", "format_version", "sha256", "payload"}``
    whose format the caller has checked: ``fail(why)`` is raised for a version that is not an
    integer, newer than ``version`` (upgrade) or older than ``oldest`` (default: ``version``),
    and for a payload that does not match its checksum (:func:`json_digest`). The caller
    reads ``doc["format_version"]`` where the versions differ."""
    from . import __version__

    got = doc.get("format_version")
    if isinstance(got, bool) or not isinstance(got, int):
        raise fail(f"format version {got!r} is not an integer (corrupted?)")
    if got > version:
        raise fail(
            f"format version {got} is newer than this orthoclimb {__version__} reads "
            f"(version {version}); upgrade orthoclimb to load it"
        )
    first = version if oldest is None else oldest
    if got < first:
        reads = f"{version}" if first == version else f"{first} to {version}"
        raise fail(f"unsupported format version {got} (this orthoclimb reads {reads})")
    payload = doc.get("payload")
    if not isinstance(payload, dict) or json_digest(payload) != doc.get("sha256"):
        raise fail("checksum mismatch: the file was modified or corrupted")
    return payload


def parse_json(text: str, fail: Callable[[str], Exception]) -> Any:
    """``json.loads(text)``, raising ``fail(why)`` for text that is not JSON: malformed or
    truncated (a ValueError, also for an integer too long to read) or nested beyond the
    parser's depth (a RecursionError: not a file orthoclimb writes)."""
    try:
        return json.loads(text)
    except ValueError as exc:
        raise fail(f"not valid JSON (truncated or corrupted?): {exc}") from None
    except RecursionError:
        raise fail("not valid JSON for this format: nested too deeply") from None


def json_digest(payload: Any) -> str:
    """SHA-256 (hex) of the canonical JSON of ``payload``: sorted keys, no spaces. The checksum
    of every file orthoclimb writes with a format name. The payloads it writes hold no NaN
    (:func:`envelope`); the bare ``NaN`` token is still allowed here so that files written
    before that (results of format version 1, study rows) keep their checksums."""
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), allow_nan=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
