"""Result files: round trip, checksum, truncation."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
import pytest

import orthoclimb as oc
from orthoclimb.errors import ResultFileError


@pytest.fixture(scope="module")
def result():
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 30, seed=1)
    return oc.hessian_ascent(ham, steps=10, seed=2)


def test_round_trip(result, tmp_path):
    json_path, npz_path = result.save(tmp_path / "run")
    assert json_path.name == "run.json" and npz_path.name == "run.npz"
    back = oc.load_result(tmp_path / "run.json")
    np.testing.assert_array_equal(back.x, result.x)
    assert back.energy == result.energy
    assert back.config == json.loads(json.dumps(result.config))
    for k, v in result.path.items():
        np.testing.assert_array_equal(back.path[k], v)
    assert back.path["step"].dtype.kind == "i"
    assert back.info["local_max"] == result.info["local_max"]
    doc = json.loads(json_path.read_text())
    assert doc["format_version"] == oc.algorithms.FORMAT_VERSION and len(doc["sha256"]) == 64


def test_the_file_is_strict_json_and_its_nulls_read_as_nan(result, tmp_path):
    # the path's last row has no step (NaN eigenvalue); the file writes null there, which
    # RFC 8259 parsers accept, and loading gives NaN in a float column again
    from conftest import strict_json_loads

    assert np.isnan(result.path["eigenvalue"][-1])
    json_path, _ = result.save(tmp_path / "run")
    doc = strict_json_loads(json_path.read_text())
    assert doc["payload"]["path"]["eigenvalue"][-1] is None
    back = oc.load_result(json_path)
    assert back.path["eigenvalue"].dtype == np.float64
    np.testing.assert_array_equal(back.path["eigenvalue"], result.path["eigenvalue"])
    # a NaN in info is written as null too and reads back as None
    odd = dataclasses.replace(result, info={**result.info, "spread": float("nan")})
    odd.save(tmp_path / "odd")
    assert oc.load_result(tmp_path / "odd").info["spread"] is None


def test_version_1_files_with_bare_nan_tokens_still_load(result, tmp_path):
    # version 1 wrote NaN as a bare token and took its checksum over that text
    from orthoclimb.fileio import json_digest

    json_path, _ = result.save(tmp_path / "old")
    doc = json.loads(json_path.read_text())
    payload = doc["payload"]
    payload["path"] = {
        k: [math.nan if v is None else v for v in col] for k, col in payload["path"].items()
    }
    old = {**doc, "format_version": 1, "sha256": json_digest(payload), "payload": payload}
    json_path.write_text(json.dumps(old, allow_nan=True))
    assert "NaN" in json_path.read_text()
    back = oc.load_result(json_path)
    np.testing.assert_array_equal(back.path["eigenvalue"], result.path["eigenvalue"])
    assert back == result
    doc["format_version"] = 0
    json_path.write_text(json.dumps(doc))
    with pytest.raises(ResultFileError, match="version 0 .*reads 1 to 2"):
        oc.load_result(json_path)


def test_modified_json_fails(result, tmp_path):
    json_path, _ = result.save(tmp_path / "run")
    doc = json.loads(json_path.read_text())
    doc["payload"]["energy"] += 0.1
    json_path.write_text(json.dumps(doc))
    with pytest.raises(ValueError, match="checksum"):
        oc.load_result(json_path)


def test_truncated_files_fail(result, tmp_path):
    json_path, npz_path = result.save(tmp_path / "a")
    text = json_path.read_text()
    json_path.write_text(text[: len(text) // 2])
    with pytest.raises(ValueError, match="truncated"):
        oc.load_result(tmp_path / "a")
    json_path, npz_path = result.save(tmp_path / "b")
    data = npz_path.read_bytes()
    npz_path.write_bytes(data[: len(data) // 2])
    with pytest.raises(ValueError, match="npz"):
        oc.load_result(tmp_path / "b")


def test_an_npy_file_in_the_npz_slot_is_named(result, tmp_path):
    # np.save of x under result.npz made load_result fail with a TypeError from a `with`
    # on an ndarray (a review)
    json_path, npz_path = result.save(tmp_path / "a")
    with open(npz_path, "wb") as fh:
        np.save(fh, result.x)
    with pytest.raises(ResultFileError, match="not an .npz archive but a single ndarray"):
        oc.load_result(json_path)


def test_a_climb_folder_given_for_its_result_is_told_the_stem(result, tmp_path):
    # load_result("c3") on a climb --out folder said "'c3.json': file not found"
    result.save(tmp_path / "c3" / "result")
    with pytest.raises(ResultFileError, match="it is a folder; give the stem .*result'"):
        oc.load_result(tmp_path / "c3")


def test_wrong_version_and_missing(result, tmp_path):
    json_path, _ = result.save(tmp_path / "c")
    doc = json.loads(json_path.read_text())
    doc["format_version"] = 99
    json_path.write_text(json.dumps(doc))
    with pytest.raises(ValueError, match="version"):
        oc.load_result(json_path)
    with pytest.raises(ResultFileError, match="not found"):  # a ValueError subclass
        oc.load_result(tmp_path / "missing")


def test_equality_is_same_content(result, tmp_path):
    # a result equals its reloaded copy and its pickle (the path holds NaN: NaN == NaN here);
    # one ulp in x or a different energy makes them differ; other types compare unequal
    import copy
    import pickle

    assert np.isnan(result.path["eigenvalue"][-1])
    assert result == oc.load_result(result.save(tmp_path / "eq")[0])
    assert result == pickle.loads(pickle.dumps(result))
    changed = copy.deepcopy(result)
    changed.x = changed.x.copy()
    changed.x[0] = np.nextafter(changed.x[0], 2.0)
    assert changed != result
    assert dataclasses.replace(result, energy=result.energy + 1e-12) != result
    assert result != "a result" and result is not None


def test_swapped_npz_of_the_same_shape_fails(result, tmp_path):
    # the JSON records the SHA-256 of x: the x of another result of the same n (same shape,
    # other values) must be refused, not loaded beside the wrong energy and path
    other = oc.hessian_ascent(oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 30, seed=5), steps=5)
    assert other.x.shape == result.x.shape and not np.array_equal(other.x, result.x)
    _, npz_a = result.save(tmp_path / "a")
    _, npz_b = other.save(tmp_path / "b")
    data_a, data_b = npz_a.read_bytes(), npz_b.read_bytes()
    npz_a.write_bytes(data_b)
    npz_b.write_bytes(data_a)
    for stem in ("a", "b"):
        with pytest.raises(ResultFileError, match="digest"):
            oc.load_result(tmp_path / stem)


def test_repr_of_a_hand_made_result_without_numbers():
    # the file format allows energy: null; a Result built by hand with None still prints
    from orthoclimb.algorithms.result import Result

    res = Result(np.ones(3) / 3**0.5, None, {}, {"method": "x", "n": 3}, None, {})
    assert repr(res) == "Result(method='x', n=3, energy=None, rows=0, seconds=None)"


@pytest.mark.parametrize(
    "column",
    [[[1.0, 2.0], [3.0]], [[1.0, 2.0], [3.0, 4.0]], ["a", "b"], [True, False], [{"x": 1}]],
    ids=["ragged", "nested", "text", "flags", "objects"],
)
def test_an_edited_file_with_a_malformed_path_is_a_clear_error(result, tmp_path, column):
    # a file edited by hand (checksum recomputed) whose path column is no flat list of numbers
    # raised NumPy's bare ValueError (ragged rows) or loaded as text, 2-D or object arrays
    from orthoclimb.fileio import json_digest

    json_path, _ = result.save(tmp_path / "run")
    doc = json.loads(json_path.read_text())
    doc["payload"]["path"]["energy"] = column
    doc["sha256"] = json_digest(doc["payload"])
    json_path.write_text(json.dumps(doc))
    with pytest.raises(ResultFileError, match="run.json.*path column"):
        oc.load_result(json_path)


def test_an_edited_file_with_an_integer_beyond_float64_is_a_clear_error(result, tmp_path):
    # a huge JSON integer (checksum recomputed) raised a bare OverflowError in float()
    from orthoclimb.fileio import json_digest

    json_path, _ = result.save(tmp_path / "run")
    for key in ("energy", "seconds"):
        doc = json.loads(json_path.read_text())
        doc["payload"][key] = 10**400
        doc["sha256"] = json_digest(doc["payload"])
        edited = tmp_path / f"edited_{key}.json"
        edited.write_text(json.dumps(doc))
        (tmp_path / f"edited_{key}.npz").write_bytes((tmp_path / "run.npz").read_bytes())
        with pytest.raises(ResultFileError, match=f"'{key}' is an integer of 401 digits"):
            oc.load_result(edited)


@pytest.mark.parametrize(
    "change, error, match",
    [
        ({"x": None}, ValueError, "x must be a 1-D array of finite numbers"),
        ({"x": np.full(3, np.nan)}, ValueError, r"x must be .* got \[nan nan nan\]"),
        ({"x": np.ones((2, 2))}, ValueError, "x must be a 1-D array"),
        ({"energy": "a"}, TypeError, "energy must be a number within float64's range, got 'a'"),
        ({"energy": 10**400}, TypeError, "energy must be a number within float64's range"),
        ({"seconds": math.nan}, ValueError, "seconds must be a finite number >= 0, got nan"),
        ({"seconds": None}, TypeError, "seconds must be a number within float64's range"),
        ({"config": []}, TypeError, r"config must be a dict, got \[\]"),
        ({"path": {"a": [1, 2], "b": [1]}}, ValueError, "differ in length: {'a': 2, 'b': 1}"),
        ({"path": {"a": ["u", "v"]}}, ValueError, "path column 'a' must be a 1-D array of num"),
        ({"path": {"b": [[1, 2], [1]]}}, ValueError, "path column 'b' must be a 1-D array of num"),
    ],
)
def test_a_result_load_result_could_not_read_back_is_refused_before_writing(
    result, tmp_path, change, error, match
):
    # save wrote such hand-made results, which load_result then refused or read as NaN
    bad = dataclasses.replace(result, **change)
    with pytest.raises(error, match=match):
        bad.save(tmp_path / "run")
    assert list(tmp_path.iterdir()) == []
    dataclasses.replace(result, energy=None).save(tmp_path / "ok")  # energy None is allowed


def test_a_polish_records_which_start_point_it_had():
    # the start point is the caller's and not stored; its digest lets a rerun check it
    import hashlib

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 12, seed=1)
    start = np.arange(1.0, 13.0)
    unit = start / 12.0  # normalized as documented: by the largest |entry|, then the norm
    unit /= np.linalg.norm(unit)
    run = oc.polish(ham, start)
    want = hashlib.sha256(unit.astype("<f8").tobytes()).hexdigest()
    assert run.config["start_sha256"] == want
    assert oc.polish(ham, -start).config["start_sha256"] != want


def test_a_result_regenerates_its_instance(tmp_path):
    # a user had to rebuild the instance by hand, and Mixture(config["mixture"]) refuses the
    # saved text keys (a review); the recipe gives the same coefficients bit for bit
    ham = oc.Hamiltonian.sample(
        oc.Mixture({2: 0.5, 3: 1.0}), 40, seed=5, correlated_with=(9, 0.5), dtype="float32"
    )
    res = oc.hessian_ascent(ham, seed=1)
    res.save(tmp_path / "r")
    again = oc.load_result(tmp_path / "r").hamiltonian()
    assert (again.n, again.seed, again.correlated_with, again.dtype) == (40, 5, (9, 0.5), "float32")
    for p in (2, 3):
        np.testing.assert_array_equal(again.coefficients(p), ham.coefficients(p))
    assert again.energy(res.x) == ham.energy(res.x)
    given = oc.Hamiltonian.from_coefficients(4, {2: np.arange(10.0)})
    with pytest.raises(ValueError, match="given by its coefficients"):
        oc.gradient_ascent(given).hamiltonian()
