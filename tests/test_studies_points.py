"""End points kept by ``sweep --keep-points`` and the report's overlaps between methods."""

from __future__ import annotations

import io
import json
import math
import shutil

import numpy as np
import pytest
import scipy.linalg

from orthoclimb import Hamiltonian, Mixture
from orthoclimb.cli import main
from orthoclimb.studies.grid import spec_from_flags
from orthoclimb.studies.points import (
    end_point_overlaps,
    load_end_points,
    overlap_summary,
    point_path,
)
from orthoclimb.studies.report import build_report
from orthoclimb.studies.store import Store, read_config
from orthoclimb.studies.tasks import run_task


@pytest.fixture(scope="module")
def kept(tmp_path_factory):
    """A small pure 2-spin study swept with --keep-points (two methods, two sizes)."""
    folder = tmp_path_factory.mktemp("kept") / "s"
    code = main(
        ["sweep", "--gammas", "2:1", "--n", "16,24", "--seeds", "0-2", "--out", str(folder),
         "--keep-points", "--no-progress", "--no-report"]
    )  # fmt: skip
    assert code == 0
    return folder


def _rows(folder):
    return Store(folder, read_config(folder)).rows()


def test_each_kept_point_is_its_runs_end_point(kept):
    rows = _rows(kept)
    points = load_end_points(kept)
    assert len(rows) == 12 and set(points) == {r["task_id"] for r in rows}
    for r in rows:
        x = points[r["task_id"]]
        assert np.linalg.norm(x) == pytest.approx(1.0, abs=1e-12)
        # the row's energy is H(x)/n at its point (exact identity, the instance regenerated)
        ham = Hamiltonian.sample(Mixture({2: 1.0}), r["n"], r["seed"])
        assert ham.energy(x) / r["n"] == pytest.approx(r["energy"], rel=1e-12, abs=1e-14)


def test_pure_2spin_end_points_are_the_top_eigenvector(kept):
    # pure p = 2: H(x) = x^T A x (A symmetric) on the unit sphere is maximized by the top
    # eigenvector of A (Rayleigh quotient), computed with scipy.linalg.eigh; gradient ascent
    # reaches the maximum here, so its end point is +-v_top, an overlap of +-1
    points = load_end_points(kept)
    for r in _rows(kept):
        if r["method"] != "gradient":
            continue
        ham = Hamiltonian.sample(Mixture({2: 1.0}), r["n"], r["seed"])
        _, vecs = scipy.linalg.eigh(ham.hessian(np.zeros(r["n"])))  # the Hessian is 2 A
        assert abs(float(points[r["task_id"]] @ vecs[:, -1])) == pytest.approx(1.0, abs=1e-6)


def test_overlaps_are_the_inner_products_of_the_two_methods_points(kept):
    rows = _rows(kept)
    points = load_end_points(kept)
    overlaps = end_point_overlaps(rows, points, ["hessian", "gradient"])
    assert len(overlaps) == 6  # two sizes x three seeds, one pair of methods
    by = {(r["n"], r["seed"], r["method"]): points[r["task_id"]] for r in rows}
    for o in overlaps:
        assert (o["method_a"], o["method_b"]) == ("hessian", "gradient")
        a, b = by[(o["n"], o["seed"], "hessian")], by[(o["n"], o["seed"], "gradient")]
        assert o["overlap"] == float(np.dot(a, b))
        assert abs(o["overlap"]) <= 1 + 1e-12  # Cauchy-Schwarz for unit vectors
        energies = {(r["n"], r["seed"], r["method"]): r["energy"] for r in rows}
        assert o["energy_a"] == energies[(o["n"], o["seed"], "hessian")]
        assert o["energy_b"] == energies[(o["n"], o["seed"], "gradient")]
    rep = build_report(kept, n_boot=200)
    assert {(s["n"], s["count"]) for s in rep.overlaps} == {(16, 3), (24, 3)}
    assert all(s["field_share"] is None for s in rep.overlaps)  # no field, no share
    assert "end_point_overlaps" in rep.to_dict()
    # every instance's overlap is exported, not only the summaries (a user trial)
    by_run = rep.to_dict()["end_point_overlaps_by_run"]
    assert [(o["n"], o["seed"]) for o in by_run] == [
        (16, 0),
        (16, 1),
        (16, 2),
        (24, 0),
        (24, 1),
        (24, 2),
    ]
    assert sorted(o["overlap"] for o in by_run) == sorted(o["overlap"] for o in overlaps)
    assert "end-point overlaps R = <x_a, x_b>" in rep.table()  # on the terminal too


def test_a_polishing_method_is_also_reported_before_its_polish(kept):
    # Hessian ascent's energy where the ascent ended, before its polish, is a series of its
    # own: a user trial found the report's verdict on Hessian ascent was the polish's
    rows = _rows(kept)
    rep = build_report(kept, n_boot=200)
    assert rep.labels == ["hessian", "gradient", "hessian before polish"]
    for g in rep.groups:
        mine = [r for r in rows if r["n"] == g["n"] and r["method"] == g["method"].split()[0]]
        key = "energy_before_polish" if g["method"].endswith("before polish") else "energy"
        assert g["mean"] == pytest.approx(np.mean([r[key] for r in mine]), rel=1e-12)
        assert g["steps"] == np.median([r["steps"] for r in mine])
    (fit,) = [f for f in rep.fits if f["method"] == "hessian before polish"]
    # K = 25 at both sizes, but pure 2-spin from the top eigenvector of Hess H(0) reaches
    # E_K = sqrt(2) = ALG (the left Riemann sum of a constant): nothing to set beside
    assert "e_k" not in fit and not any("reaches E_K" in t for t in rep.findings)


def test_the_summary_is_mean_abs_and_standard_error():
    overlaps = [
        {"mixture": "m", "n": 10, "seed": s, "method_a": "a", "method_b": "b", "overlap": r}
        for s, r in enumerate([0.5, -0.25, 1.0, -1.0])
    ]
    overlaps.append(dict(overlaps[0], n=20))
    first, second = overlap_summary(overlaps)
    r = np.array([0.5, -0.25, 1.0, -1.0])
    assert first["count"] == 4 and first["mean"] == pytest.approx(r.mean())
    assert first["mean_abs"] == pytest.approx(np.abs(r).mean())
    assert first["se_abs"] == pytest.approx(np.abs(r).std(ddof=1) / 2)
    assert (first["min"], first["max"]) == (-1.0, 1.0)
    assert second["count"] == 1 and math.isnan(second["se_abs"])
    # same point: R > 0.999 (1.0), mirror: R < -0.999 (-1.0); the others' mean |R| =
    # (0.5 + 0.25) / 2; unrelated: Gamma(5) / (sqrt(pi) Gamma(5.5)) at n = 10 (exact identity)
    assert (first["same"], first["mirror"]) == (1, 1)
    assert first["mean_abs_other"] == pytest.approx(0.375)
    assert first["unrelated"] == pytest.approx(
        math.gamma(5) / (math.sqrt(math.pi) * math.gamma(5.5)), rel=1e-12
    )


def test_the_unrelated_value_is_the_mean_overlap_of_random_directions():
    # two independent uniform unit vectors in R^n (normalized Gaussians): checked over 4000
    # pairs at n = 30 within 4 standard errors (fixed seed), where the large-n value
    # sqrt(2/(pi n)) is 0.8 % low
    rng = np.random.default_rng(7)
    n, pairs = 30, 4000
    a = rng.standard_normal((pairs, n))
    b = rng.standard_normal((pairs, n))
    r = np.abs(np.einsum("ij,ij->i", a, b)) / (
        np.linalg.norm(a, axis=1) * np.linalg.norm(b, axis=1)
    )
    (summary,) = overlap_summary(
        [{"mixture": "m", "n": n, "seed": 0, "method_a": "a", "method_b": "b", "overlap": 0.0}]
    )
    assert abs(r.mean() - summary["unrelated"]) < 4 * r.std(ddof=1) / math.sqrt(pairs)
    assert summary["unrelated"] == pytest.approx(math.sqrt(2 / (math.pi * n)), rel=0.01)


def test_without_keep_points_nothing_is_kept_and_the_report_has_no_section(tmp_path):
    folder = tmp_path / "s"
    assert main(
        ["sweep", "--gammas", "2:1", "--n", "12", "--seeds", "0-1", "--out", str(folder),
         "--no-progress"]
    ) == 0  # fmt: skip
    assert not (folder / "points").exists()
    assert load_end_points(folder) == {}
    assert all("end_point_sha256" not in r for r in _rows(folder))
    assert "Overlaps of end points" not in (folder / "report.md").read_text()
    assert not (folder / "overlaps.png").exists()
    assert json.loads((folder / "report.json").read_text())["end_point_overlaps"] == []


def _npz_bytes(**arrays) -> bytes:
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    return buf.getvalue()


def _damaged(kept, tmp_path, damage):
    folder = tmp_path / "s"
    shutil.copytree(kept, folder)
    row = _rows(folder)[0]
    path = point_path(folder, row["task_id"])
    damage(path)
    return folder, path


@pytest.mark.parametrize(
    "damage, words",
    [
        (lambda p: p.unlink(), "is missing"),
        (lambda p: p.write_bytes(p.read_bytes()[:-8]), "cannot read"),
        (lambda p: p.write_bytes(p.read_bytes()[:-8] + np.float64(0.5).tobytes()), "digest"),
        (lambda p: np.save(p, np.zeros(3)), "expected (16,) float64"),
        (lambda p: p.write_bytes(_npz_bytes(x=np.zeros(16))), "not an .npy array"),
    ],
)
def test_a_damaged_point_is_refused_by_name(kept, tmp_path, damage, words):
    folder, path = _damaged(kept, tmp_path, damage)
    with pytest.raises(ValueError, match="end point") as err:
        load_end_points(folder)
    assert str(path) in str(err.value) and words in str(err.value)
    # the report still stands (it reads a study at any point): it says so and leaves the
    # run out of its overlaps (a removed points/ folder refused the whole report, a review)
    rep = build_report(folder, n_boot=200)
    (note,) = [f for f in rep.findings if "cannot be read" in f]
    assert note.startswith("1 of the end points kept by --keep-points") and str(path) in note
    assert sum(s["count"] for s in rep.overlaps) == 5 and rep.fits


def test_run_task_returns_the_point_and_its_digest_only_when_asked():
    spec = spec_from_flags(["3:1"], None, "12", "4", "gradient")
    (task,) = spec.tasks()
    plain = run_task(task)
    kept = run_task(task, keep_point=True)
    assert "end_point" not in plain and "end_point_sha256" not in plain
    x = kept["end_point"]
    assert x.shape == (12,) and kept["energy"] == plain["energy"]
    ham = Hamiltonian.sample(Mixture({3: 1.0}), 12, 4)
    assert ham.energy(x) / 12 == pytest.approx(kept["energy"], rel=1e-12)


def test_a_row_records_the_top_tangent_eigenvalue_of_its_end_point():
    # the Riemannian Hessian on the unit sphere at a critical point x: P (Hess H - <x, grad H> I) P
    # with P = I - x x^T; its largest eigenvalue on the tangent space (scipy.linalg.eigh, the
    # x direction's zero left out) is the row's top_eigenvalue times n (a user trial asked for
    # it in the rows: marginality of the end points)
    spec = spec_from_flags(["3:1"], None, "30", "2", "gradient")
    (task,) = spec.tasks()
    row = run_task(task, keep_point=True)
    x = row["end_point"]
    ham = Hamiltonian.sample(Mixture({3: 1.0}), 30, 2)
    p = np.eye(30) - np.outer(x, x)
    riem = p @ (ham.hessian(x) - float(x @ ham.gradient(x)) * np.eye(30)) @ p
    vals, vecs = scipy.linalg.eigh(riem)
    tangent = vals[np.abs(vecs.T @ x) < 0.5]  # all but the eigenvector along x
    assert row["top_eigenvalue"] * 30 == pytest.approx(tangent.max(), rel=1e-6)
    assert row["top_eigenvalue"] < 0 and row["local_max"]
    bare = spec_from_flags(["3:1"], None, "30", "2", "hessian", {"hessian": {"polish": False}})
    assert math.isnan(run_task(bare.tasks()[0])["top_eigenvalue"])  # no check without polish


def test_kept_points_add_the_overlap_figure(kept, tmp_path, capsys):
    # the report draws each instance's overlap when end points were kept, and names the file
    assert main(["report", str(kept), "--out", str(tmp_path)]) == 0
    figure = tmp_path / "overlaps.png"
    assert figure.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert str(figure) in capsys.readouterr().out


def test_a_fields_share_of_the_overlap_is_measured_from_the_instances_own_field(tmp_path):
    # with a field every good end point leans toward e = h/|h|, so two otherwise unrelated
    # end points overlap by about <x_a, e><x_b, e> (a user trial: 0.145 of 0.161 at n = 400);
    # the records carry both projections, with e regenerated from the seed: checked against
    # the whole instance's own degree-1 coefficients
    folder = tmp_path / "f"
    code = main(
        ["sweep", "--gammas", "1:0.5,3:1", "--n", "16,24", "--seeds", "0-2", "--out",
         str(folder), "--keep-points", "--no-progress", "--no-report"]
    )  # fmt: skip
    assert code == 0
    rep = build_report(folder, n_boot=200)
    points = load_end_points(folder)
    by = {(r["n"], r["seed"], r["method"]): points[r["task_id"]] for r in _rows(folder)}
    assert len(rep.overlaps_by_run) == 6
    for o in rep.overlaps_by_run:
        h = Hamiltonian.sample(Mixture({1: 0.5, 3: 1.0}), o["n"], o["seed"]).coefficients(1)
        e = h / np.linalg.norm(h)
        assert o["field_a"] == pytest.approx(by[(o["n"], o["seed"], "hessian")] @ e, abs=1e-12)
        assert o["field_b"] == pytest.approx(by[(o["n"], o["seed"], "gradient")] @ e, abs=1e-12)
        assert o["field_a"] > 0 and o["field_b"] > 0  # both lean toward the field
    for s in rep.overlaps:  # over the pairs that are not at the same point, as mean |R|
        mine = [o for o in rep.overlaps_by_run if o["n"] == s["n"] and abs(o["overlap"]) <= 0.999]
        share = np.mean([o["field_a"] * o["field_b"] for o in mine]) if mine else math.nan
        assert s["field_share"] == pytest.approx(share, nan_ok=True)
    assert "with the field, <x_a, e><x_b, e> = " in rep.table()
