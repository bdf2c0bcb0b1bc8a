"""Instance files: recipe and coefficient round trips, fingerprint, corruption, atomicity, size.

Sources: the file format is our own (documented in orthoclimb.model.instance_file); the checks
are exact identities (bitwise equality after a round trip) or common practice (a corrupted file
must be refused, never silently loaded).
"""

from __future__ import annotations

import hashlib
import json
import math
import os
import types
import zipfile

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb import _core, fileio
from orthoclimb.errors import InstanceFileError, InsufficientMemoryError
from orthoclimb.model import hamiltonian as ham_module
from orthoclimb.model import instance_file, memory


def _sign(doc: dict) -> dict:
    """Recompute the payload checksum as the module docstring specifies it."""
    text = json.dumps(doc["payload"], sort_keys=True, separators=(",", ":"))
    doc["sha256"] = hashlib.sha256(text.encode("utf-8")).hexdigest()
    return doc


def _edit(json_path, change, sign=True):
    doc = json.loads(json_path.read_text())
    change(doc)
    json_path.write_text(json.dumps(_sign(doc) if sign else doc))


def _bits(a: np.ndarray) -> np.ndarray:
    return np.ascontiguousarray(a, dtype=np.float64).view(np.uint64)


def _assert_same(a: oc.Hamiltonian, b: oc.Hamiltonian, rng) -> None:
    """Bitwise-equal coefficients and kernels (exact identity after a round trip)."""
    assert (a.n, a.degrees, a.dtype) == (b.n, b.degrees, b.dtype)
    for p in a.degrees:
        np.testing.assert_array_equal(_bits(a.coefficients(p)), _bits(b.coefficients(p)))
    xs = rng.standard_normal((3, a.n))
    xs /= np.linalg.norm(xs, axis=1, keepdims=True)
    np.testing.assert_array_equal(_bits(a.energy(xs)), _bits(b.energy(xs)))
    np.testing.assert_array_equal(_bits(a.gradient(xs[0])), _bits(b.gradient(xs[0])))


SAMPLED = {
    "float64": dict(mixture={2: 1.0, 3: 0.5}, n=40, seed=7, dtype="float64"),
    "float32": dict(mixture={2: 1.0, 3: 0.5}, n=40, seed=7, dtype="float32"),
    "correlated": dict(mixture={3: 1.0}, n=30, seed=11, correlated_with=(5, 0.6)),
    "correlated-float32-field": dict(
        mixture={1: 0.3, 4: 0.7}, n=16, seed=2**64 - 1, dtype="float32", correlated_with=(9, -1.0)
    ),
}


def _sample(spec: dict) -> oc.Hamiltonian:
    spec = dict(spec)
    return oc.Hamiltonian.sample(oc.Mixture(spec.pop("mixture")), **spec)


@pytest.fixture
def recipe(tmp_path):
    ham = _sample(SAMPLED["float64"])
    (json_path,) = ham.save(tmp_path / "inst")
    return ham, json_path


@pytest.fixture
def given(tmp_path, rng):
    n = 9
    coefs = {1: rng.standard_normal(n), 3: rng.standard_normal(math.comb(n + 2, 3))}
    ham = oc.Hamiltonian.from_coefficients(n, coefs)
    json_path, npz_path = ham.save(tmp_path / "given")
    return ham, json_path, npz_path


# -- round trips --------------------------------------------------------------------------


def test_exports():
    assert oc.load_instance is oc.model.load_instance is instance_file.load_instance
    assert "load_instance" in oc.__all__ and "load_instance" in oc.model.__all__
    assert issubclass(InstanceFileError, ValueError)


@pytest.mark.parametrize("name", list(SAMPLED))
def test_recipe_round_trip(name, tmp_path, rng):
    ham = _sample(SAMPLED[name])
    written = ham.save(tmp_path / "inst")
    assert written == (tmp_path / "inst.json",)
    assert sorted(os.listdir(tmp_path)) == ["inst.json"]  # a recipe has no .npz
    doc = json.loads(written[0].read_text())
    assert doc["format"] == "orthoclimb-instance" and doc["format_version"] == 1
    payload = doc["payload"]
    assert payload["kind"] == "recipe" and payload["seed"] == ham.seed
    assert payload["dtype"] == ham.dtype and payload["orthoclimb_version"] == oc.__version__
    assert oc.Mixture.from_dict(payload["mixture"]) == ham.mixture
    back = oc.load_instance(tmp_path / "inst")
    assert back.mixture == ham.mixture and back.seed == ham.seed
    assert back.correlated_with == ham.correlated_with
    _assert_same(ham, back, rng)


def test_recipe_fingerprint_is_what_it_says(recipe):
    ham, json_path = recipe
    fp = json.loads(json_path.read_text())["payload"]["fingerprint"]
    x0 = instance_file.check_point(ham.n)
    assert fp["energy"] == ham.energy(x0)
    for p in ham.degrees:
        a = ham.coefficients(p)
        assert fp["coefficients"][str(p)]["head"] == a[:4].tolist()
        assert fp["coefficients"][str(p)]["tail"] == a[-4:].tolist()


@pytest.mark.parametrize("dtype", ["float64", "float32"])
def test_coefficients_round_trip(dtype, tmp_path, rng):
    n = 11
    coefs = {
        2: rng.standard_normal(math.comb(n + 1, 2)),
        5: rng.standard_normal(math.comb(n + 4, 5)),
    }
    ham = oc.Hamiltonian.from_coefficients(n, coefs, dtype=dtype)
    json_path, npz_path = ham.save(tmp_path / "c.json")
    assert (json_path.name, npz_path.name) == ("c.json", "c.npz")
    payload = json.loads(json_path.read_text())["payload"]
    assert payload["kind"] == "coefficients" and payload["dtype"] == dtype
    for p in (2, 5):
        digest = hashlib.sha256(ham.coefficients(p).astype("<f8").tobytes()).hexdigest()
        assert payload["arrays"][str(p)] == {"length": len(coefs[p]), "sha256": digest}
    with np.load(npz_path) as data:  # a plain .npz that NumPy itself reads
        np.testing.assert_array_equal(data["p5"], ham.coefficients(5))
    for name in ("c", "c.json", "c.npz"):
        back = oc.load_instance(tmp_path / name)
        assert back.mixture is None and back.seed is None
        _assert_same(ham, back, rng)


def test_from_dense_round_trip(tmp_path, rng):
    n = 6
    t = rng.standard_normal((n, n))
    ham = oc.Hamiltonian.from_dense({2: t, 1: rng.standard_normal(n)}, symmetrize=True)
    ham.save(tmp_path / "d")
    _assert_same(ham, oc.load_instance(tmp_path / "d"), rng)


# -- fingerprint --------------------------------------------------------------------------


def test_check_point_hides_no_coefficient():
    n = 8
    x0 = instance_file.check_point(n)
    assert math.isclose(math.fsum(x0 * x0), 1.0, rel_tol=1e-15)
    assert np.all(x0 != 0) and np.all(np.sign(x0) == (-1.0) ** np.arange(n))
    np.testing.assert_array_equal(x0, instance_file.check_point(n))
    # every monomial of one degree has its own |value| at x0 (unique factorization)
    for p in (2, 3):
        idx = _core.multiset_table(n, p)
        mono = np.abs(np.prod(x0[idx], axis=1))
        gaps = np.diff(np.sort(mono))
        assert gaps.min() > 1e-6 * mono.max()
    # so changing any one coefficient changes H(x0)
    k = math.comb(n + 2, 3)
    base = np.linspace(-1.0, 1.0, k)
    e0 = oc.Hamiltonian.from_coefficients(n, {3: base}).energy(x0)
    for r in range(k):
        bumped = base.copy()
        bumped[r] += 1.0
        assert oc.Hamiltonian.from_coefficients(n, {3: bumped}).energy(x0) != e0


def test_changed_generator_is_refused(recipe, monkeypatch):
    _, json_path = recipe
    real = _core.PackedPolynomial

    def other_sample(n, degrees, gammas, seed, dtype, corr):  # a "new version" of the generator
        return real.sample(n, degrees, gammas, seed ^ 1, dtype, corr)

    fake = types.SimpleNamespace(PackedPolynomial=types.SimpleNamespace(sample=other_sample))
    monkeypatch.setattr(ham_module, "_core", fake)
    with pytest.raises(InstanceFileError, match="differs from the saved one") as info:
        oc.load_instance(json_path)
    assert str(json_path) in str(info.value) and oc.__version__ in str(info.value)
    _edit(json_path, lambda d: d["payload"].update(orthoclimb_version="0.0.1"))
    _refused(json_path, "'0.0.1'.*changed between these versions")
    monkeypatch.undo()
    assert oc.load_instance(json_path).seed == 7  # the real generator still matches


def test_edited_recipe_is_refused(recipe):
    _, json_path = recipe
    _edit(json_path, lambda d: d["payload"].update(seed=8))  # re-signed: checksum passes
    with pytest.raises(InstanceFileError, match="regenerated from seed 8 differs"):
        oc.load_instance(json_path)


@pytest.mark.parametrize(
    ("where", "factor", "ok"),
    [
        ("energy", 1 + 1e-12, True),  # within the 1e-9 instruction-set tolerance
        ("energy", 1 + 1e-7, False),
        ("head", 1 + 1e-15, True),  # an ulp-level difference of the math library
        ("head", 1 + 1e-9, False),
        ("tail", 1 + 1e-9, False),
    ],
)
def test_fingerprint_tolerance(recipe, where, factor, ok):
    ham, json_path = recipe

    def change(doc):
        fp = doc["payload"]["fingerprint"]
        if where == "energy":
            fp["energy"] *= factor
        else:
            fp["coefficients"]["3"][where][2] *= factor

    _edit(json_path, change)
    if ok:
        assert oc.load_instance(json_path).energy(np.ones(ham.n)) == ham.energy(np.ones(ham.n))
    else:
        match = "energy at the check point" if where == "energy" else "degree-3 coefficients"
        with pytest.raises(InstanceFileError, match=match):
            oc.load_instance(json_path)


def test_memory_is_checked_before_regenerating(recipe, given, monkeypatch):
    ham, json_path = recipe
    monkeypatch.setattr(memory, "available_memory", lambda: 1000)
    with pytest.raises(InsufficientMemoryError, match="needs"):
        oc.load_instance(json_path)
    with pytest.raises(InsufficientMemoryError, match="needs"):
        oc.load_instance(given[1])
    assert oc.load_instance(json_path, check_memory=False).nbytes == ham.nbytes
    assert oc.load_instance(given[1], check_memory=False).n == given[0].n


# -- corrupted files ----------------------------------------------------------------------


def _refused(path, match):
    with pytest.raises(InstanceFileError, match=match) as info:
        oc.load_instance(path)
    return str(info.value)


def test_missing_and_unreadable(tmp_path, given):
    message = _refused(tmp_path / "nothing", "file not found")
    assert str(tmp_path / "nothing.json") in message
    (tmp_path / "dir.json").mkdir()
    _refused(tmp_path / "dir", "unreadable")
    message = _refused(tmp_path / "dir.json", "it is a folder; give the instance's file")
    assert str(tmp_path / "dir.json") in message
    (tmp_path / "bin.json").write_bytes(bytes(range(128, 256)))
    _refused(tmp_path / "bin", "not UTF-8")
    (tmp_path / "empty.json").write_bytes(b"")
    _refused(tmp_path / "empty", "empty")
    _, json_path, npz_path = given
    npz_path.unlink()
    assert str(npz_path) in _refused(json_path, "file not found")


def test_truncated_json(recipe, given):
    for json_path in (recipe[1], given[1]):
        text = json_path.read_text()
        json_path.write_text(text[: len(text) * 2 // 3])
        assert str(json_path) in _refused(json_path, "truncated")


def test_flipped_bit_in_json(recipe):
    _, json_path = recipe
    raw = bytearray(json_path.read_bytes())
    at = raw.index(b'"seed": 7') + len(b'"seed": ')
    raw[at] ^= 1  # 7 -> 6, still valid JSON
    json_path.write_bytes(bytes(raw))
    _refused(json_path, "checksum mismatch")


def test_wrong_format_and_versions(recipe, tmp_path):
    _, json_path = recipe
    result = oc.hessian_ascent(recipe[0], steps=4, seed=1)
    result.save(tmp_path / "run")
    _refused(tmp_path / "run.json", "not an orthoclimb instance file.*load_result")
    (tmp_path / "list.json").write_text("[1, 2]")
    _refused(tmp_path / "list.json", "not an orthoclimb instance file")
    _edit(json_path, lambda d: d.update(format_version=2), sign=False)
    _refused(json_path, "format version 2 is newer.*upgrade")
    _edit(json_path, lambda d: d.update(format_version=0), sign=False)
    _refused(json_path, "unsupported format version 0")
    _edit(json_path, lambda d: d.update(format_version="1"), sign=False)
    _refused(json_path, "not an integer")
    _edit(json_path, lambda d: d.update(format_version=1))
    _edit(json_path, lambda d: d["payload"].update(kind="other"))
    _refused(json_path, "unknown instance kind")
    _edit(json_path, lambda d: d["payload"].update(kind="recipe", degrees=[2]))
    _refused(json_path, "malformed recipe.*not the mixture's")
    _edit(json_path, lambda d: d["payload"].update(degrees=[2, 3]))
    _edit(json_path, lambda d: d["payload"]["fingerprint"].update(point="x_i = 1"))
    _refused(json_path, "malformed recipe.*check point")
    _edit(json_path, lambda d: d["payload"].update(n="forty"))
    _refused(json_path, "malformed recipe")


def test_truncated_and_flipped_npz(given, tmp_path):
    ham, json_path, npz_path = given
    good = npz_path.read_bytes()
    npz_path.write_bytes(good[: len(good) // 2])
    assert str(npz_path) in _refused(json_path, "truncated or corrupted")
    # one bit of the degree-3 data (the zip's CRC-32 or the recorded digest catches it)
    raw = bytearray(good)
    at = raw.index(ham.coefficients(3)[5:6].astype("<f8").tobytes())
    raw[at] ^= 1
    npz_path.write_bytes(bytes(raw))
    _refused(json_path, "corrupted")
    # a valid .npz of another instance: only the digest can tell
    other = oc.Hamiltonian.from_coefficients(
        ham.n, {p: ham.coefficients(p) * 2.0 for p in ham.degrees}
    )
    other.save(tmp_path / "other")
    npz_path.write_bytes((tmp_path / "other.npz").read_bytes())
    _refused(json_path, "do not match the digest")


@pytest.mark.parametrize("kind", ["recipe", "coefficients"])
def test_every_single_bit_flip_is_caught_or_harmless(kind, tmp_path, rng):
    """Flip the lowest bit of each byte in turn: the load must fail with InstanceFileError,
    or (a flip that does not change the data, e.g. in zip metadata) give the same instance."""
    if kind == "recipe":
        ham = oc.Hamiltonian.sample(oc.Mixture({2: 1.0}), 5, seed=3)
    else:
        ham = oc.Hamiltonian.from_coefficients(4, {2: rng.standard_normal(10)})
    paths = ham.save(tmp_path / "f")
    want = [ham.coefficients(p) for p in ham.degrees]
    refused = harmless = 0
    for path in paths:
        good = path.read_bytes()
        with open(path, "r+b", buffering=0) as fh:  # flip in place: no reopen per byte
            for at in range(len(good)):
                os.pwrite(fh.fileno(), bytes([good[at] ^ 1]), at)
                try:
                    back = oc.load_instance(paths[0])
                except InstanceFileError:
                    refused += 1
                    continue
                finally:
                    os.pwrite(fh.fileno(), good[at : at + 1], at)
                assert back.degrees == ham.degrees
                for p, w in zip(ham.degrees, want, strict=True):
                    np.testing.assert_array_equal(_bits(back.coefficients(p)), _bits(w))
                harmless += 1
        assert path.read_bytes() == good
    assert refused > 0.8 * (refused + harmless)


# -- atomic writes ------------------------------------------------------------------------


def _boom(*args, **kwargs):
    raise OSError("disk full (simulated)")


@pytest.mark.parametrize("make", ["recipe", "coefficients"])
def test_failed_rename_leaves_nothing(make, tmp_path, monkeypatch):
    if make == "recipe":
        ham = _sample(SAMPLED["float32"])
    else:
        ham = oc.Hamiltonian.from_coefficients(3, {1: [1.0, 2.0, 3.0]})
    monkeypatch.setattr(os, "replace", _boom)
    with pytest.raises(OSError, match="simulated"):
        ham.save(tmp_path / "x")
    assert os.listdir(tmp_path) == []  # no final file, no temporary left behind


def test_failed_serializer_keeps_the_old_file(tmp_path, monkeypatch, rng):
    old = oc.Hamiltonian.from_coefficients(5, {2: rng.standard_normal(15)})
    old.save(tmp_path / "x")
    before = {name: (tmp_path / name).read_bytes() for name in os.listdir(tmp_path)}
    new = oc.Hamiltonian.from_coefficients(5, {2: rng.standard_normal(15)})
    real = np.lib.format.write_array

    def half_then_fail(fp, array, **kwargs):
        fp.write(b"\x93NUMPY partial")
        raise RuntimeError("serializer failed (simulated)")

    monkeypatch.setattr(np.lib.format, "write_array", half_then_fail)
    with pytest.raises(RuntimeError, match="simulated"):
        new.save(tmp_path / "x")
    monkeypatch.setattr(np.lib.format, "write_array", real)
    assert {name: (tmp_path / name).read_bytes() for name in os.listdir(tmp_path)} == before
    _assert_same(old, oc.load_instance(tmp_path / "x"), rng)


def test_crash_between_the_two_files_is_detected(tmp_path, monkeypatch, rng):
    old = oc.Hamiltonian.from_coefficients(5, {2: rng.standard_normal(15)})
    old.save(tmp_path / "x")
    new = oc.Hamiltonian.from_coefficients(5, {2: rng.standard_normal(15)})
    # both files are written before either is renamed; a crash between the two renames (a
    # few system calls) leaves the new .npz beside the old .json
    renames = []

    def rename_once(src, dst):
        renames.append(dst)
        if len(renames) == 2:
            _boom()
        os.rename(src, dst)

    monkeypatch.setattr(fileio.os, "replace", rename_once)
    with pytest.raises(OSError, match="simulated"):
        new.save(tmp_path / "x")  # the .npz is replaced, the .json is still the old one
    assert sorted(os.listdir(tmp_path)) == ["x.json", "x.npz"]
    _refused(tmp_path / "x", "do not match the digest")


# -- sizes ----------------------------------------------------------------------------------


def test_recipe_is_small_for_big_n(tmp_path):
    mixture = oc.Mixture({1: 0.5, 2: 1.0})
    small = oc.Hamiltonian.sample(mixture, 20, seed=1)
    big = oc.Hamiltonian.sample(mixture, 2500, seed=1)
    assert big.nbytes > 20_000_000
    (small_path,) = small.save(tmp_path / "small")
    (big_path,) = big.save(tmp_path / "big")
    assert big_path.stat().st_size < 2048
    assert abs(big_path.stat().st_size - small_path.stat().st_size) < 100
    assert sorted(os.listdir(tmp_path)) == ["big.json", "small.json"]


def test_coefficient_file_size(given):
    ham, json_path, npz_path = given
    data_bytes = 8 * ham.num_coefficients
    assert data_bytes <= npz_path.stat().st_size < data_bytes + 2048  # float64, uncompressed
    assert json_path.stat().st_size < 2048
    with zipfile.ZipFile(npz_path) as zf:
        assert sorted(zf.namelist()) == ["p1.npy", "p3.npy"]


def test_a_recipe_too_large_for_memory_names_the_file(recipe, monkeypatch):
    import orthoclimb.model.memory as memory
    from orthoclimb.errors import InsufficientMemoryError

    _ham, json_path = recipe
    monkeypatch.setattr(memory, "available_memory", lambda: 1000)
    with pytest.raises(
        InsufficientMemoryError, match=f"loading the instance '{json_path}'.*1000 bytes"
    ):
        oc.load_instance(json_path)


@pytest.mark.parametrize(
    "change",
    [
        lambda fp: fp["coefficients"]["3"].pop("head"),
        lambda fp: fp["coefficients"]["3"].update(head=None),
        lambda fp: fp["coefficients"]["3"].update(head=["a", "b"]),
        lambda fp: fp.update(coefficients=["3"]),
    ],
    ids=["no head", "head null", "head text", "coefficients a list"],
)
def test_a_malformed_fingerprint_is_an_instance_file_error(tmp_path, change):
    # each escaped as KeyError, TypeError or ValueError without the file's name (a review)
    stem = tmp_path / "inst"
    oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 6, seed=1).save(stem)
    json_path = tmp_path / "inst.json"
    _edit(json_path, lambda d: change(d["payload"]["fingerprint"]))
    with pytest.raises(InstanceFileError, match="malformed recipe"):
        oc.load_instance(stem)


def test_json_nested_too_deeply_is_an_instance_file_error(tmp_path):
    # json.loads raises RecursionError past its depth (a review)
    path = tmp_path / "deep.json"
    path.write_text("[" * 100_000 + "]" * 100_000)
    with pytest.raises(InstanceFileError, match="nested too deeply"):
        oc.load_instance(path)


def test_a_folder_at_the_json_path_is_refused_before_the_npz_is_written(tmp_path):
    # the .npz was written (replacing an older one) before the .json turned out to be a folder
    from orthoclimb.errors import OutputPathError

    ham = oc.Hamiltonian.from_coefficients(4, {2: np.arange(10.0)})
    (tmp_path / "d.json").mkdir()
    with pytest.raises(OutputPathError, match="d.json': it is a folder"):
        ham.save(tmp_path / "d")
    assert not (tmp_path / "d.npz").exists()


def test_loading_stored_coefficients_holds_one_copy_of_them(tmp_path, monkeypatch):
    # a single read() of a stored array joined its chunks into one bytes object, so loading
    # peaked at twice the arrays' size, above the memory check's figure (a review measured
    # 182.7 MB against 129.0 MB for n = 400, p = 3, float32). tracemalloc sees the bytes
    # objects and NumPy's buffers; the core's storage is not traced. Chunks of 64 KiB here
    # (16 MiB by default, more than this whole array): zipfile holds up to two of them
    import tracemalloc

    monkeypatch.setattr(instance_file, "_READ_CHUNK", 1 << 16, raising=False)

    a = np.random.default_rng(0).standard_normal(math.comb(80 + 2, 3))  # 0.7 MB
    oc.Hamiltonian.from_coefficients(80, {3: a}, dtype="float32").save(tmp_path / "c")
    tracemalloc.start()
    try:
        loaded = oc.load_instance(tmp_path / "c")
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    np.testing.assert_array_equal(loaded.coefficients(3), a.astype(np.float32))
    assert peak < 1.5 * a.nbytes, peak / a.nbytes


@pytest.mark.parametrize(
    "change",
    [
        lambda fp: fp["coefficients"]["3"].update(head=[10**400]),
        lambda fp: fp.update(energy=10**400),
        lambda fp: fp["coefficients"]["3"].update(head="123"),
    ],
    ids=["huge head", "huge energy", "head text"],
)
def test_a_fingerprint_with_huge_numbers_or_text_is_malformed(tmp_path, change):
    # OverflowError escaped; a text head read as the numbers 1, 2, 3 (a review)
    stem = tmp_path / "inst"
    oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 6, seed=1).save(stem)
    _edit(tmp_path / "inst.json", lambda d: change(d["payload"]["fingerprint"]))
    with pytest.raises(InstanceFileError, match="malformed recipe"):
        oc.load_instance(stem)


def test_result_and_study_files_nested_too_deeply_are_clear_errors(tmp_path):
    from orthoclimb.errors import ResultFileError

    deep = "[" * 100_000 + "]" * 100_000
    (tmp_path / "r.json").write_text(deep)
    with pytest.raises(ResultFileError, match="nested too deeply"):
        oc.load_result(tmp_path / "r.json")
    from orthoclimb.studies.store import read_config

    (tmp_path / "s").mkdir()
    (tmp_path / "s" / "study.json").write_text(deep)
    with pytest.raises(ValueError, match="cannot read"):
        read_config(tmp_path / "s")


def test_the_energy_check_holds_where_n_xi_1_overflows(tmp_path):
    # sqrt(n xi(1)) was computed as one product, which overflowed to inf here and made the
    # tolerance infinite: any saved energy passed (a review)
    stem = tmp_path / "inst"
    oc.Hamiltonian.sample(oc.Mixture({1: 1e154}), 4, seed=1).save(stem)
    assert oc.load_instance(stem).n == 4
    _edit(tmp_path / "inst.json", lambda d: d["payload"]["fingerprint"].update(energy=12345.0))
    with pytest.raises(InstanceFileError, match="differs from the saved one .*energy"):
        oc.load_instance(stem)


def test_a_length_that_is_no_integer_is_malformed(tmp_path):
    # int() read 6.9 as 6
    stem = tmp_path / "c"
    oc.Hamiltonian.from_coefficients(2, {2: np.arange(3.0)}).save(stem)
    _edit(tmp_path / "c.json", lambda d: d["payload"]["arrays"]["2"].update(length=3.0))
    with pytest.raises(InstanceFileError, match="lists a length 3.0, not an integer"):
        oc.load_instance(stem)
