"""Atomic writes: a failed write leaves the old file and no debris; modes follow the umask."""

from __future__ import annotations

import os
import stat
from pathlib import Path

import numpy as np
import pytest

from orthoclimb.errors import InstanceFileError, OutputPathError, ResultFileError
from orthoclimb.fileio import (
    ensure_folder,
    pair_paths,
    write_atomic,
    write_json_atomic,
    write_text_atomic,
)


def test_replaces_the_file_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "sub" / "a.txt"
    write_text_atomic(target, "first")
    write_text_atomic(target, "second")
    assert target.read_text() == "second"
    assert sorted(p.name for p in target.parent.iterdir()) == ["a.txt"]


def test_a_failing_writer_keeps_the_old_content(tmp_path):
    target = tmp_path / "a.json"
    write_json_atomic(target, {"v": 1})

    def broken(fh):
        fh.write(b'{"v": 2, "half')
        raise RuntimeError("disk full")

    with pytest.raises(RuntimeError, match="disk full"):
        write_atomic(target, broken)
    assert target.read_text().strip().replace(" ", "").replace("\n", "") == '{"v":1}'
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.json"]


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
@pytest.mark.parametrize("mask", [0o022, 0o077, 0o002])
def test_mode_follows_the_umask_like_open(tmp_path, mask):
    old = os.umask(mask)
    try:
        atomic = write_text_atomic(tmp_path / "atomic.txt", "x")
        plain = tmp_path / "plain.txt"
        with open(plain, "w") as fh:  # what a user expects a new file to look like
            fh.write("x")
    finally:
        os.umask(old)
    assert stat.S_IMODE(atomic.stat().st_mode) == stat.S_IMODE(plain.stat().st_mode)


def test_a_folder_blocked_by_a_file_is_a_clear_error(tmp_path):
    blocker = tmp_path / "a-file"
    blocker.write_text("keep me")
    for target in (blocker, blocker / "below"):
        with pytest.raises(OutputPathError, match="a-file.*a file \\(not a folder\\)"):
            ensure_folder(target)
        with pytest.raises(OutputPathError, match=str(target)):
            write_json_atomic(target / "x.json", {"a": 1})
    assert blocker.read_text() == "keep me"
    assert issubclass(OutputPathError, ValueError) and issubclass(OutputPathError, OSError)
    made = ensure_folder(tmp_path / "new" / "deeper")
    assert made.is_dir() and ensure_folder(made) == made  # existing folders are fine


def test_a_folder_at_the_destination_is_a_clear_error(tmp_path):
    # os.replace onto a folder fails with IsADirectoryError naming the temporary file; the
    # error must name the path the caller gave, and no temporary may be left behind
    folder = tmp_path / "plots"
    folder.mkdir()
    with pytest.raises(OutputPathError, match=r"'.*plots': it is a folder"):
        write_text_atomic(folder, "x")
    assert list(folder.iterdir()) == [] and [p.name for p in tmp_path.iterdir()] == ["plots"]


@pytest.mark.parametrize("where", ["mkstemp", "replace"])
def test_a_refusing_file_system_is_a_clear_error(tmp_path, monkeypatch, where):
    # a read-only or virtual file system (EROFS, or ENOENT in /proc) refuses the temporary
    # file or the rename: an OutputPathError naming the destination, not a bare OSError
    # naming the hidden temporary; nothing is left behind
    import errno

    import orthoclimb.fileio as fileio

    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(tmp_path / ".a.txt.tmp"))

    monkeypatch.setattr(fileio.tempfile if where == "mkstemp" else fileio.os, where, refuse)
    with pytest.raises(OutputPathError, match=r"cannot write '.*a\.txt': Read-only") as info:
        write_text_atomic(tmp_path / "a.txt", "x")
    assert ".tmp" not in str(info.value) and info.value.errno == errno.EROFS
    assert list(tmp_path.iterdir()) == []


def test_errors_while_writing_the_data_pass_through(tmp_path, monkeypatch):
    # a full disk at fsync is no bad path: it keeps its type and errno (the CLI reports it with
    # exit status 1, not 2), and no temporary is left behind
    import errno

    import orthoclimb.fileio as fileio

    def full(fd):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))

    monkeypatch.setattr(fileio.os, "fsync", full)
    with pytest.raises(OSError) as info:
        write_text_atomic(tmp_path / "a.txt", "x")
    assert not isinstance(info.value, OutputPathError) and info.value.errno == errno.ENOSPC
    assert list(tmp_path.iterdir()) == []
    # it names the file being written (it named none), never the temporary
    assert info.value.filename == str(tmp_path / "a.txt"), info.value
    assert str(tmp_path / "a.txt") in str(info.value)


def test_a_failing_cleanup_does_not_hide_the_first_error(tmp_path, monkeypatch):
    # the rename fails, and so does removing the temporary (a file system turned read-only):
    # the caller still gets the rename's error naming the destination
    import errno

    import orthoclimb.fileio as fileio

    def refuse(*args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS))

    monkeypatch.setattr(fileio.os, "replace", refuse)
    monkeypatch.setattr(fileio.os, "unlink", refuse)
    with pytest.raises(OutputPathError, match=r"cannot write '.*a\.txt': Read-only"):
        write_text_atomic(tmp_path / "a.txt", "x")


def test_a_folder_the_file_system_refuses_is_a_clear_error(tmp_path, monkeypatch):
    import errno
    from pathlib import Path

    def refuse(self, *args, **kwargs):
        raise OSError(errno.EROFS, os.strerror(errno.EROFS), str(self))

    monkeypatch.setattr(Path, "mkdir", refuse)
    with pytest.raises(OutputPathError, match=r"'.*out' cannot be made: Read-only"):
        ensure_folder(tmp_path / "out")


def test_saving_a_pair_into_a_folder_path_is_refused(tmp_path):
    # ham.save("runs/") or ham.save(existing_folder) would write runs.json beside the folder;
    # it is refused with a message that suggests a stem inside it. Loading keeps its own rule.
    import orthoclimb as oc
    from orthoclimb.fileio import output_pair_paths, pair_paths

    folder = tmp_path / "runs"
    folder.mkdir()
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 4, seed=1)
    for given in (folder, str(folder) + os.sep, str(tmp_path / "new") + os.sep):
        with pytest.raises(OutputPathError, match=r"is a folder; give a file stem in it, e\.g\."):
            ham.save(given)
    assert [p.name for p in tmp_path.iterdir()] == ["runs"] and list(folder.iterdir()) == []
    # stems and either file name give the same pair
    want = (tmp_path / "a.json", tmp_path / "a.npz")
    for given in ("a", "a.json", "a.npz"):
        assert pair_paths(tmp_path / given) == want
        assert output_pair_paths(tmp_path / given, "x") == want


def test_json_files_are_strict_json(tmp_path):
    # RFC 8259 has no NaN or infinity; every such float is written as null, at any depth and
    # for NumPy floats too, while finite numbers, integers, booleans and text are kept
    from conftest import strict_json_loads
    from orthoclimb.fileio import finite_json, json_text

    data = {
        "a": float("nan"),
        "b": [1.5, float("inf"), -float("inf"), (np.float32("nan"), 2)],
        "c": {"d": np.float64("-inf"), "e": True, "f": "NaN", "g": 0, "h": -0.0},
    }
    want = {
        "a": None,
        "b": [1.5, None, None, [None, 2]],
        "c": {"d": None, "e": True, "f": "NaN", "g": 0, "h": -0.0},
    }
    assert finite_json(data) == want
    assert data["b"][1] == float("inf")  # the input is not changed
    write_json_atomic(tmp_path / "a.json", data)
    assert strict_json_loads((tmp_path / "a.json").read_text()) == want
    assert strict_json_loads(json_text(data, indent=None)) == want


def test_a_failed_command_keeps_a_folder_another_process_made(tmp_path, monkeypatch):
    # two sweeps started at once on one new folder: both saw it missing, the second's mkdir
    # found it made by the first; the refused second must not remove the folder the first has
    # just locked (before, both noted it as their own and the failing one removed it)
    from orthoclimb import fileio

    theirs = tmp_path / "study"
    theirs.mkdir()  # made by the other process after our lexists check
    seen_missing = {theirs, theirs / "sub"}
    real = os.path.lexists
    monkeypatch.setattr(
        fileio.os.path, "lexists", lambda p: False if Path(p) in seen_missing else real(p)
    )
    with pytest.raises(RuntimeError), fileio.undone_on_failure():
        ensure_folder(theirs / "sub")
        raise RuntimeError("refused")
    assert theirs.is_dir() and not (theirs / "sub").exists()  # ours removed, theirs kept


def test_a_folder_another_sweep_holds_is_not_removed_by_a_failed_command(tmp_path):
    # two sweeps started at once on a new path: the one whose mkdir made the folder was
    # refused by the other's lock and removed the still-empty folder from under its holder
    import fcntl

    from orthoclimb import fileio

    folder = tmp_path / "held"
    with pytest.raises(RuntimeError), fileio.undone_on_failure():
        ensure_folder(folder)
        fd = os.open(folder, os.O_RDONLY)  # the other sweep's lock (flock: per open file)
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        raise RuntimeError("another sweep is running")
    assert folder.is_dir()  # left to its holder
    os.close(fd)
    free = tmp_path / "free"  # nobody holds it: removed, as before
    with pytest.raises(RuntimeError), fileio.undone_on_failure():
        ensure_folder(free)
        raise RuntimeError("refused")
    assert not free.exists()


def _fail_at_fsync(monkeypatch, which: int) -> None:
    """Make the ``which``-th os.fsync of fileio (1-based) fail as a full disk does."""
    import errno

    import orthoclimb.fileio as fileio

    calls = []
    real = fileio.os.fsync

    def fsync(fd):
        calls.append(fd)
        if len(calls) == which:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        real(fd)

    monkeypatch.setattr(fileio.os, "fsync", fsync)


@pytest.mark.parametrize("which", [1, 2])
def test_a_pair_that_fails_to_write_keeps_the_old_pair(tmp_path, monkeypatch, which):
    # A result is a .npz and a .json. The .npz used to replace the old one before the .json
    # was written, so a full disk at the .json (which = 2) left a new .npz beside the old
    # .json: neither result loaded. Both are now complete before either is renamed.
    import orthoclimb as oc

    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), 12, seed=1)
    old = oc.gradient_ascent(ham, seed=0, max_iter=3)
    new = oc.gradient_ascent(ham, seed=1, max_iter=3)
    old.save(tmp_path / "run")
    _fail_at_fsync(monkeypatch, which)
    with pytest.raises(OSError, match="No space left"):
        new.save(tmp_path / "run")
    monkeypatch.undo()
    back = oc.load_result(tmp_path / "run")
    assert np.array_equal(back.x, old.x) and not np.array_equal(back.x, new.x)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.json", "run.npz"]


@pytest.mark.parametrize("which", [1, 2])
def test_an_instance_pair_that_fails_to_write_keeps_the_old_pair(tmp_path, monkeypatch, which):
    # the same for an instance of given coefficients (a .npz of coefficients and a .json)
    import orthoclimb as oc

    n = 6
    size = n * (n + 1) // 2

    def given(offset: float) -> oc.Hamiltonian:
        return oc.Hamiltonian.from_coefficients(n, {2: np.arange(size) + offset})

    given(0.0).save(tmp_path / "inst")
    _fail_at_fsync(monkeypatch, which)
    with pytest.raises(OSError, match="No space left"):
        given(100.0).save(tmp_path / "inst")
    monkeypatch.undo()
    back = oc.load_instance(tmp_path / "inst")
    assert np.array_equal(back.coefficients(2), np.arange(size, dtype=float))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["inst.json", "inst.npz"]


def test_a_name_near_the_file_system_limit_can_be_written(tmp_path):
    # The temporary file's name is the target's plus 14 bytes, so names of 242-255 bytes
    # (which the file system takes) could not be written. It now starts with 32 characters
    # of the target's only.
    for name in ("a" * 250 + ".txt", "\u5b57" * 83 + ".txt"):  # 254 and 253 bytes
        assert len(name.encode()) <= 255
        target = write_text_atomic(tmp_path / name, "x")
        assert target.read_text() == "x"
    assert len(list(tmp_path.iterdir())) == 2


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_a_replaced_file_keeps_its_permissions(tmp_path):
    # A user who made a result private (0600) found it 0644 again after the next save.
    target = write_text_atomic(tmp_path / "private.txt", "first")
    target.chmod(0o600)
    write_text_atomic(target, "second")
    assert stat.S_IMODE(target.stat().st_mode) == 0o600 and target.read_text() == "second"


def test_a_path_too_long_for_the_system_is_a_clear_error(tmp_path):
    # pathlib's is_dir() raised a bare OSError (name too long) for paths over 4096 bytes
    import orthoclimb as oc
    from orthoclimb.errors import InstanceFileError

    long = tmp_path / (("d" * 200 + "/") * 25 + "inst")  # about 5,000 bytes
    ham = oc.Hamiltonian.from_coefficients(3, {2: np.arange(6.0)})
    with pytest.raises(OutputPathError, match="cannot be made"):
        ham.save(long)
    with pytest.raises(InstanceFileError, match="cannot load the instance file"):
        oc.load_instance(long)


@pytest.mark.skipif(os.name != "posix", reason="POSIX symbolic links")
def test_a_link_at_the_destination_is_replaced_and_its_target_kept(tmp_path):
    # the documented choice (README, Files are whole or absent): the link becomes the new file
    target = tmp_path / "elsewhere.txt"
    target.write_text("kept")
    link = tmp_path / "result.txt"
    link.symlink_to(target)
    write_text_atomic(link, "new")
    assert not link.is_symlink() and link.read_text() == "new" and target.read_text() == "kept"


@pytest.mark.skipif(os.name != "posix", reason="POSIX rlimits")
def test_a_file_size_limit_at_close_still_names_the_file(tmp_path):
    # A full disk usually fails at the last flush, which close() repeats outside the rename
    # of the error, so the error that reached the caller named no file. A file size limit
    # (RLIMIT_FSIZE; Python ignores SIGXFSZ) stands in for the full disk, in a child process.
    import subprocess
    import sys
    import textwrap

    script = textwrap.dedent(
        f"""
        import resource
        import orthoclimb as oc
        ham = oc.Hamiltonian.sample(oc.Mixture({{3: 1.0}}), 30, seed=1)
        run = oc.gradient_ascent(ham, seed=0, max_iter=50)
        resource.setrlimit(resource.RLIMIT_FSIZE, (4096, resource.RLIM_INFINITY))
        try:
            run.save({str(tmp_path / "run")!r})
        except OSError as exc:
            print(exc.errno, exc.filename)
        """
    )
    out = subprocess.run(
        [sys.executable, "-c", script], capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr[-2000:]
    errno_text, filename = out.stdout.split()
    assert int(errno_text) == 27 and filename.startswith(str(tmp_path / "run")), out.stdout
    assert sorted(p.name for p in tmp_path.iterdir()) == [], "no temporaries left"


def _interrupt_after(real, calls: list, at: int = 1):
    """``real`` wrapped to send this process SIGINT (Ctrl-C) right after its call number
    ``at`` returns: the KeyboardInterrupt lands at the next Python line of the caller."""
    import signal

    def wrapped(*args, **kwargs):
        out = real(*args, **kwargs)
        calls.append(args)
        if len(calls) == at:
            os.kill(os.getpid(), signal.SIGINT)
        return out

    return wrapped


def _two_results():
    import orthoclimb as oc

    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), 12, seed=1)
    return oc.gradient_ascent(ham, seed=0, max_iter=3), oc.gradient_ascent(ham, seed=1, max_iter=3)


def _save_interrupted(tmp_path, monkeypatch, owner, name: str, at: int = 1):
    """Save a new result over an old one at tmp_path/run while ``owner.<name>`` sends a
    Ctrl-C after its call ``at``; the save must raise KeyboardInterrupt. Returns (old, new,
    the calls made)."""
    old, new = _two_results()
    old.save(tmp_path / "run")
    calls: list = []
    monkeypatch.setattr(owner, name, _interrupt_after(getattr(owner, name), calls, at))
    with pytest.raises(KeyboardInterrupt):
        new.save(tmp_path / "run")
    monkeypatch.undo()
    return old, new, calls


def test_ctrl_c_between_the_renames_of_a_pair_waits_for_both(tmp_path, monkeypatch):
    # a Ctrl-C after the .npz was renamed left it beside the old .json: neither result
    # loaded (a review). The renames now finish, then the KeyboardInterrupt comes.
    import orthoclimb as oc

    _, new, calls = _save_interrupted(tmp_path, monkeypatch, os, "replace")
    assert len(calls) == 2
    assert np.array_equal(oc.load_result(tmp_path / "run").x, new.x)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.json", "run.npz"]


def test_ctrl_c_as_a_temporary_file_is_made_leaves_none_behind(tmp_path, monkeypatch):
    # 115 of 1500 interrupted saves left a .tmp file made inside mkstemp before the cleanup
    # knew its name (a review); in a new study folder it then refused every sweep
    import tempfile

    import orthoclimb as oc

    for at in (1, 2):
        old, _, _ = _save_interrupted(tmp_path, monkeypatch, tempfile, "mkstemp", at)
        assert sorted(p.name for p in tmp_path.iterdir()) == ["run.json", "run.npz"]
        assert np.array_equal(oc.load_result(tmp_path / "run").x, old.x)


def test_a_pair_name_too_long_for_the_file_system_writes_nothing(tmp_path):
    # '<stem>.npz' (255 bytes) was renamed into place, then '<stem>.json' (256) failed
    _, new = _two_results()
    with pytest.raises(OutputPathError, match="256 bytes, more than the 255"):
        new.save(tmp_path / ("a" * 251))
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("bad", [None, 123, 1.5])
def test_a_path_of_the_wrong_type_is_named(bad, tmp_path):
    # save(None) said only "expected str, bytes or os.PathLike object, not NoneType"
    import orthoclimb as oc

    ham = oc.Hamiltonian.from_coefficients(3, {2: np.arange(6.0)})
    res, _ = _two_results()
    for call in (res.save, oc.load_result, ham.save, oc.load_instance):
        with pytest.raises(
            TypeError, match=f"a file path must be text or a path object, got .*{bad!r}"
        ):
            call(bad)


def test_a_path_with_a_nul_character_is_named_and_bytes_paths_work(tmp_path):
    import orthoclimb as oc

    res, _ = _two_results()
    with pytest.raises(ValueError, match="cannot hold a NUL character"):
        res.save(str(tmp_path / "a\0b"))
    res.save(os.fsencode(tmp_path / "run"))
    assert np.array_equal(oc.load_result(os.fsencode(tmp_path / "run")).x, res.x)


def test_an_empty_path_is_named(tmp_path, monkeypatch):
    # load_result("") and load_instance("") said "PosixPath('.') has an empty name", and so
    # did ".", "./" and Path("") (a review)
    import orthoclimb as oc

    monkeypatch.chdir(tmp_path)
    ham = oc.Hamiltonian.from_coefficients(3, {2: np.arange(6.0)})
    res, _ = _two_results()
    for call in (res.save, oc.load_result, ham.save, oc.load_instance):
        for empty in ("", b""):
            with pytest.raises(ValueError, match="a file path cannot be empty"):
                call(empty)
    # and a path that ends in no file name is told so: a folder where a file was meant
    for nameless in (".", "./", Path(""), ".."):
        with pytest.raises(ResultFileError, match="it is a folder; give the stem"):
            oc.load_result(nameless)
        with pytest.raises(InstanceFileError, match="it is a folder; give the instance's"):
            oc.load_instance(nameless)
    with pytest.raises(ValueError, match="must end in a file name, got '..'"):
        pair_paths("..")
    assert list(tmp_path.iterdir()) == []


def test_a_pair_name_too_long_for_a_new_folder_writes_nothing(tmp_path):
    # the length was read only from a folder that exists: into a new one the .npz was
    # renamed into place before the .json failed (a review)
    _, new = _two_results()
    with pytest.raises(OutputPathError, match="256 bytes, more than the 255"):
        new.save(tmp_path / "new" / "deeper" / ("a" * 251))
    assert list(tmp_path.iterdir()) == []


def test_ctrl_c_just_after_a_file_is_staged_leaves_no_temporary(tmp_path, monkeypatch):
    # the name of a staged file reached the cleanup only when _stage returned (a review)
    from orthoclimb import fileio

    _save_interrupted(tmp_path, monkeypatch, fileio, "_stage")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["run.json", "run.npz"]


def test_a_deferred_ctrl_c_is_raised_even_when_the_block_fails():
    # the Ctrl-C was dropped when the block raised (a review): it wins, the error is its context
    import signal

    from orthoclimb.fileio import interrupts_deferred

    with pytest.raises(KeyboardInterrupt) as caught:
        with interrupts_deferred():
            os.kill(os.getpid(), signal.SIGINT)
            raise OSError(28, "No space left on device")
    assert isinstance(caught.value.__context__, OSError)
