"""Extrapolation (synthetic coverage, pure p = 2 real sweep), the report, profile and demo."""

from __future__ import annotations

import json
import math
import os

import numpy as np
import pytest

from orthoclimb import Mixture
from orthoclimb.cli import main
from orthoclimb.studies.engine import run_study
from orthoclimb.studies.grid import spec_from_flags
from orthoclimb.studies.report import build_report, write_report
from orthoclimb.studies.report_text import caveats
from orthoclimb.studies.store import Store
from orthoclimb.studies.tasks import TheoryValues


def test_pure_p2_sweep_extrapolates_to_sqrt2(tmp_path):
    # Wigner semicircle edge: pure p = 2 has GS = ALG = sqrt(2); the top eigenvalue's mean
    # approaches it as n^(-2/3) (Tracy-Widom scale), and gradient ascent finds the maximum.
    spec = spec_from_flags(["2:1"], None, "20,40,80,160", "0-15", "gradient")
    out = run_study(spec, tmp_path / "p2", workers=2, progress=False)
    assert out.failed == 0
    rep = write_report(tmp_path / "p2", n_boot=2000)
    (fit,) = rep.fits
    assert fit["low"] <= math.sqrt(2) <= fit["high"], fit
    assert fit["high"] - fit["low"] < 0.15
    assert rep.theory["2:1.0"]["alg"] == pytest.approx(math.sqrt(2), abs=1e-9)
    for name in (
        "report.md",
        "report.json",
        "energy_vs_n.png",
        "distribution.png",
        "results.parquet",
        "results.csv",
    ):
        assert (tmp_path / "p2" / name).stat().st_size > 0
    # the report command reads the same folder
    assert main(["report", str(tmp_path / "p2"), "--no-plots", "--json"]) == 0


def test_report_of_non_study_folder(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    assert "not a study folder" in capsys.readouterr().err


def test_demo_quick_completes_and_writes_report(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--quick", "--out", str(out), "--no-progress"]) == 0
    text = capsys.readouterr().out
    assert "rough time estimate" in text and "of coefficients" in text
    assert "what this run measured" in text and "GS" in text
    assert "caution: 6 seeds per size make these findings a sketch" in text
    md = (out / "report.md").read_text()
    assert "rugged (3)" in md and "gentle (2+4)" in md and "full-RSB criterion fails" in md
    data = json.loads((out / "report.json").read_text())
    assert data["theory"]["rugged (3)"]["gap_gs_alg"] == pytest.approx(0.024, abs=1e-3)
    assert (out / "energy_vs_n.png").stat().st_size > 0


def test_theory_finding_names_a_field_that_closes_the_gap(tmp_path):
    # a field strong enough (1:2,3:1: q_hat = 1) leaves a replica-symmetric solution with
    # GS = ALG = sqrt(xi'(1)) = sqrt(7) (Chen and Sen 2017, from memory), though the full-RSB
    # criterion fails on (0, 1]; before, the report said the criterion "fails" and named a gap
    # of 0.0000 "no algorithm of this kind is predicted to close"
    _synthetic_study(
        tmp_path / "f", "20,40", lambda n, s: 2.6 - 1 / n + 1e-3 * s, mixture="1:2,3:1"
    )
    rep = build_report(tmp_path / "f")
    (th,) = rep.theory.values()
    assert th["full_rsb"] is False and th["gs_equals_alg"] is True
    assert th["alg"] == pytest.approx(math.sqrt(7), rel=1e-12)
    text = rep.findings[0]
    assert f"GS = ALG = {math.sqrt(7):.4f} predicted" in text and "q_hat = 1" in text
    assert "exceeds" not in text and "no algorithm" not in text
    write_report(tmp_path / "f", plots=False)
    assert "| fails | yes | 2.645751 | 2.645751 |" in (tmp_path / "f" / "report.md").read_text()


def _tied_study(folder, seeds: int) -> dict[int, float]:
    """Two methods whose energies differ by rounding (1e-14) only, on every seed; returns the
    gradient energies by seed."""
    rng = np.random.default_rng(seeds)
    base = {s: 1.6 + 0.02 * rng.standard_normal() for s in range(seeds)}
    _synthetic_study(
        folder,
        "20,40",
        lambda n, s, m: base[s] + (1e-14 if m == "hessian" else 0.0),
        methods="hessian,gradient",
        seeds=f"0-{seeds - 1}",
    )
    return base


def test_findings_report_runs_that_stop_at_the_same_point(tmp_path):
    # hessian above gradient by rounding only (1e-14) on every seed: no edge, all ties
    base = _tied_study(tmp_path / "same", 10)
    text = build_report(tmp_path / "same").findings[-2]  # the last: the limits' difference
    assert "stopped at the same point" in text and "on all 10 paired seeds" in text
    assert "ahead" not in text
    # a real edge of 0.01 on 9 seeds, one tie: ahead by the sign test (p = 2/512)
    _synthetic_study(
        tmp_path / "edge",
        "20,40",
        lambda n, s, m: base[s] + (0.01 * (s > 0) if m == "hessian" else 0.0),
        methods="hessian,gradient",
        seeds="0-9",
    )
    text = build_report(tmp_path / "edge").findings[-2]
    assert "hessian is ahead of gradient by 0.0090 per spin" in text
    assert "hessian higher on 9, gradient on 0, the same point on 1" in text
    assert "p = 0.0039" in text


def test_report_statistics_against_independent_formulas(tmp_path):
    # per-size s.e. = sample sd (ddof = 1, statistics.stdev) / sqrt(count); z(ALG) has the
    # sign of e_inf - ALG; e_inf under the other laws equals numpy.polyfit's weighted line
    # (w = 1/s.e.) at n^(-k) = 0
    import statistics

    noise = np.random.default_rng(2).standard_normal(64)
    e = {
        (n, s): 1.8 - 1.5 * n ** (-2 / 3) + 0.01 * noise[s + 8 * (n // 40)]
        for n in (20, 40, 80)
        for s in range(8)
    }
    _synthetic_study(tmp_path / "s", "20,40,80", lambda n, s: e[(n, s)])
    rep = build_report(tmp_path / "s")
    for g in rep.groups:
        a = [e[(g["n"], s)] for s in range(8)]
        assert g["se"] == pytest.approx(statistics.stdev(a) / math.sqrt(8), rel=1e-12)
    (fit,) = rep.fits
    assert fit["value"] > fit["alg"] and fit["z_alg"] > 0 and fit["z_gs"] > 0
    # z = (e_inf - theory)/s.e. against each theory value, ALG = 2 sqrt(2/3) (Subag 2018)
    alg = 2 * math.sqrt(2 / 3)
    assert fit["alg"] == pytest.approx(alg, rel=1e-12) and fit["gs"] > alg + 0.02
    assert fit["z_alg"] == pytest.approx((fit["value"] - alg) / fit["se"], rel=1e-12)
    assert fit["z_gs"] == pytest.approx((fit["value"] - fit["gs"]) / fit["se"], rel=1e-12)
    # the range over laws spans the intervals of the laws the data do not reject (p >= 0.05)
    laws = [fit, *fit["other_laws"]]
    kept = [law for law in laws if not law["fit_p"] < 0.05] or laws
    assert fit["laws_kept"] == [law["exponent"] for law in kept]
    lows, highs = [law["low"] for law in kept], [law["high"] for law in kept]
    assert (fit["law_low"], fit["law_high"]) == (min(lows), max(highs))
    regions = fit["law_regions"]
    assert (min(r[0] for r in regions), max(r[1] for r in regions)) == (min(lows), max(highs))
    assert rep.missing == 0 and not any("no result yet" in f for f in rep.findings)
    sizes = np.array([20, 40, 80])
    means = np.array([np.mean([e[(n, s)] for s in range(8)]) for n in sizes])
    ses = np.array([statistics.stdev([e[(n, s)] for s in range(8)]) / math.sqrt(8) for n in sizes])
    for other in fit["other_laws"]:
        slope, intercept = np.polyfit(sizes ** (-other["exponent"]), means, 1, w=1 / ses)
        assert other["value"] == pytest.approx(intercept, rel=1e-10)
    assert [o["exponent"] for o in fit["other_laws"]] == [0.5, 1.0]


def test_samples_without_spread_say_that_nothing_checks_the_law(tmp_path):
    # every seed at the same energy (a method that finds the same point from every start):
    # no error estimate, and no claim that the law fits (before: chi2 = 0.0, a perfect fit)
    _synthetic_study(
        tmp_path / "z", "20,40,80", lambda n, s: 1.6 - n ** (-2 / 3) + 1e-3 * (n == 40)
    )
    text = build_report(tmp_path / "z").findings[-1]
    assert "no error estimate" in text
    assert "the samples have no spread, so nothing measures how well the n^(-2/3) law fits" in text


def test_a_partly_run_study_says_how_many_tasks_are_missing(tmp_path):
    # 3 sizes x 8 seeds, two rows removed: the report counts 2 missing and says to rerun
    _synthetic_study(tmp_path / "p", "20,40,80", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    store = Store(tmp_path / "p", build_report(tmp_path / "p").spec)
    for task in store.spec.tasks()[:2]:
        store.row_path(task.task_id).unlink()
    rep = build_report(tmp_path / "p")
    assert rep.missing == 2
    assert "2 task(s) of the study have no result yet; rerun the sweep." in rep.findings
    assert rep.stray_files == [] and not any("rows/" in f for f in rep.findings)


def test_the_report_never_puts_back_an_older_table(tmp_path, monkeypatch):
    # a review: a report read its rows, a sweep ended and wrote its full table, and the report
    # then renamed its older, shorter table over it. In the study folder the report writes
    # under the sweep's lock: rows that came since its reading go into the table; while a
    # sweep holds the folder the table is left to it; an --out holding another study is refused
    import pyarrow.parquet as pq

    import orthoclimb.studies.report as report_module
    from orthoclimb.errors import OutputPathError
    from orthoclimb.studies.store import sweep_lock

    folder = tmp_path / "r"
    _synthetic_study(folder, "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    store = Store(folder, build_report(folder).spec)
    late = store.row_path(store.spec.tasks()[0].task_id)
    saved = late.read_bytes()
    late.unlink()
    real = report_module.build_report

    def read_then_a_sweep_ends(*args, **kwargs):
        rep = real(*args, **kwargs)
        late.write_bytes(saved)  # the row of a sweep that ended after the reading
        return rep

    monkeypatch.setattr(report_module, "build_report", read_then_a_sweep_ends)
    rep = write_report(folder, plots=False)
    assert rep.missing == 1  # the report is of what it read ...
    assert len(pq.read_table(folder / "results.parquet")) == len(
        store.spec.tasks()
    )  # ... not older
    monkeypatch.setattr(report_module, "build_report", real)
    (folder / "results.parquet").unlink()
    with sweep_lock(folder):  # a sweep running there
        rep = write_report(folder, plots=False)
    assert not (folder / "results.parquet").exists()
    assert "a sweep is running in this folder and writes it when it ends" in rep.findings[-1]
    other = tmp_path / "other"
    _synthetic_study(other, "20", lambda n, s: 1.5)
    with pytest.raises(OutputPathError, match="holds another study"):
        write_report(folder, plots=False, out=other)


def test_a_long_mixture_name_keeps_the_table_aligned(tmp_path):
    # a user trial: --xi 2:1,4:0.3 is named 2:1.0,4:0.5477225575051661, longer than the
    # 22 columns the table gave names, and every row after it shifted
    name = "2:1.0,4:0.5477225575051661"
    _synthetic_study(
        tmp_path / "x", "20,40", lambda n, s: 1.5 - n ** (-2 / 3) + 0.01 * s, mixture=name
    )
    lines = build_report(tmp_path / "x").table().splitlines()
    head, rows = lines[0], lines[1:3]
    assert all(line.startswith(name) for line in rows)
    # the method column starts at the same place in the heading and in the rows
    assert all(line.index("gradient") == head.index("method") for line in rows)


def test_files_in_rows_that_belong_to_no_task_are_named_not_read(tmp_path):
    # a user trial: a row copied from another study, a renamed duplicate and a note in rows/
    # were ignored without a word; the report still reads only its tasks' rows, and says so
    _synthetic_study(tmp_path / "p", "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    store = Store(tmp_path / "p", build_report(tmp_path / "p").spec)
    first = store.row_path(store.spec.tasks()[0].task_id)
    (first.parent / "copy-of-a-row.json").write_bytes(first.read_bytes())
    (first.parent / "notes.txt").write_text("seed 3 looked odd")
    (first.parent / ".partial.json.tmp").write_text("{")  # a write in progress: not named
    rep = build_report(tmp_path / "p")
    assert rep.stray_files == ["copy-of-a-row.json", "notes.txt"]
    assert (
        "2 file(s) in rows/ are no row of this study's tasks and were not read"
        " (copy-of-a-row.json, notes.txt)"
    ) in rep.findings[-1]
    assert rep.to_dict()["stray_row_files"] == ["copy-of-a-row.json", "notes.txt"]
    (first.parent / "copy-of-a-row.json").unlink()
    (first.parent / "notes.txt").unlink()
    assert rep.groups == build_report(tmp_path / "p").groups  # nothing of them was read


def test_the_report_brings_the_tidy_table_in_step_with_the_row_files(tmp_path):
    # a user trial: after kill -9 of a sweep's driver, results.parquet kept the rows of the
    # last finished sweep (164 of 246 row files; none at all in a new study) and the report
    # did not rewrite it, so pandas users read other data than the report. The report now
    # writes the table of the rows it read (checked here with pyarrow and the csv module)
    import csv

    import pyarrow.parquet as pq

    folder = tmp_path / "t"
    _synthetic_study(folder, "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    store = Store(folder, build_report(folder).spec)
    for name in ("results.parquet", "results.csv"):
        (folder / name).unlink(missing_ok=True)  # as a killed driver leaves a new study
    gone = store.spec.tasks()[0].task_id
    store.row_path(gone).unlink()  # and the table of a study whose rows changed since
    rep = write_report(folder, plots=False)
    table = pq.read_table(folder / "results.parquet").to_pylist()
    with open(folder / "results.csv", newline="") as fh:
        from_csv = list(csv.DictReader(fh))
    ids = sorted(r["task_id"] for r in store.rows())
    assert len(ids) == len(store.spec.tasks()) - 1 and gone not in ids
    assert sorted(r["task_id"] for r in table) == ids == sorted(r["task_id"] for r in from_csv)
    assert rep.files["parquet"] == str(folder / "results.parquet")
    # with --out the study folder is left alone and the table goes beside the report
    out = tmp_path / "elsewhere"
    write_report(folder, plots=False, out=out)
    assert len(pq.read_table(out / "results.parquet")) == len(ids)


def test_every_report_file_is_written_by_an_atomic_rename(tmp_path, monkeypatch):
    # results are never lost: each file appears by os.replace of a finished temporary, so a
    # crash mid-write leaves the previous report whole (common practice)
    import orthoclimb.fileio as fileio

    _synthetic_study(tmp_path / "a", "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    renamed = []
    real = fileio.os.replace

    def recording(src, dst, *args, **kwargs):
        renamed.append(os.path.basename(dst))
        return real(src, dst, *args, **kwargs)

    monkeypatch.setattr(fileio.os, "replace", recording)
    write_report(tmp_path / "a")
    expected = {"report.md", "report.json", "energy_vs_n.png", "distribution.png"}
    expected |= {"results.parquet", "results.csv"}
    assert expected <= set(renamed), renamed
    written = {p.name for p in (tmp_path / "a").iterdir() if p.is_file()}
    assert expected <= written


def test_findings_name_ties_between_alg_and_gs_and_a_point_above_gs(tmp_path):
    # pure 3-spin: ALG = 1.6330 (2 sqrt(2/3), Subag 2018), GS = 1.6570; wide noise puts both
    # inside the interval: the data cannot tell them apart
    rng = np.random.default_rng(3)
    noise = {(n, s): rng.standard_normal() for n in (20, 40, 80) for s in range(8)}
    _synthetic_study(
        tmp_path / "w", "20,40,80", lambda n, s: 1.645 - n ** (-2 / 3) + 0.4 * noise[(n, s)]
    )
    rep = build_report(tmp_path / "w")
    fit, text = rep.fits[0], rep.findings[-1]
    assert fit["low"] < fit["alg"] < fit["gs"] < fit["high"]
    assert "cannot tell ALG = 1.6330" in text and "from GS = 1.6570" in text
    # a point estimate above GS whose interval still holds GS: named, but no WARNING
    _synthetic_study(
        tmp_path / "a", "20,40,80", lambda n, s: 1.64 - n ** (-2 / 3) + 0.1 * noise[(n, s)]
    )
    rep = build_report(tmp_path / "a")
    fit, text = rep.fits[0], rep.findings[-1]
    assert fit["low"] <= fit["gs"] < fit["value"]
    assert "the point estimate lies above GS = 1.6570" in text
    assert "at these sizes the extrapolation overshoots" in text
    assert "the value lies in" not in text  # a cut interval, which left out ALG (a review)
    assert "WARNING" not in text


def test_verdicts_read_the_laws_the_data_do_not_reject(tmp_path):
    # data from an exact n^(-1) law ending at ALG (pure 3-spin: 2 sqrt(2/3) = 1.6330,
    # Subag 2018) with tiny noise, fitted in n^(-2/3): the data reject that law and n^(-1/2)
    # (parametric-bootstrap test), and the interval under n^(-1), the law that fits, holds ALG:
    # "consistent only under n^(-1)", not "above" (before: "0.0053 above ALG")
    alg = 2 * math.sqrt(2 / 3)
    noise = np.random.default_rng(4).standard_normal(64)
    _synthetic_study(tmp_path / "l", "100,200,400", lambda n, s: alg - 2 / n + 1e-4 * noise[s])
    rep = build_report(tmp_path / "l")
    fit = rep.fits[0]
    assert not fit["low"] <= alg <= fit["high"] and fit["laws_kept"] == [1.0]
    law_one = next(o for o in fit["other_laws"] if o["exponent"] == 1.0)
    assert law_one["low"] <= alg <= law_one["high"] and law_one["fit_p"] > 0.05
    text = rep.findings[-1]
    assert f"consistent with ALG = {alg:.4f} only under n^(-1) (" in text
    assert "under n^(-2/3), which the data reject)" in text and "above ALG" not in text
    assert "the data reject n^(-1/2) and n^(-2/3)" in text
    assert "so the verdicts read n^(-1)" in text
    assert caveats(fit) == "n^(-2/3) rejected"
    # ending 0.004 below ALG: no law that fits holds ALG, though the span of all three
    # intervals would (the review's case: the span is not the union)
    _synthetic_study(
        tmp_path / "b", "100,200,400", lambda n, s: alg - 0.004 - 2 / n + 1e-4 * noise[s]
    )
    fit = build_report(tmp_path / "b").fits[0]
    spans_all = min(fit["low"], *(o["low"] for o in fit["other_laws"])) <= alg
    assert spans_all and alg <= max(fit["high"], *(o["high"] for o in fit["other_laws"]))
    text = build_report(tmp_path / "b").findings[-1]
    # the side comes from n^(-1), the law kept (about 0.004 below ALG), not from the
    # rejected n^(-2/3), which ends above it (the re-review's case)
    assert f"below ALG = {alg:.4f} under n^(-1), the nearest law the data keep" in text
    assert "only under" not in text and "above ALG" not in text
    # with noise wider than the laws' spread, every law fits and ALG is plainly consistent
    _synthetic_study(tmp_path / "q", "200,400,800", lambda n, s: alg - 2 / n + 0.005 * noise[s])
    text = build_report(tmp_path / "q").findings[-1]
    assert f"consistent with ALG = {alg:.4f} (" in text and "only under" not in text


def _synthetic_study(
    folder, sizes: str, energy, methods="gradient", seeds="0-7", mixture="3:1"
) -> None:
    """A study folder whose rows carry energy(n, seed) (or energy(n, seed, method) with two
    methods) instead of a run (report tests)."""
    spec = spec_from_flags([mixture], None, sizes, seeds, methods)
    store = Store.open(folder, spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        args = (t.n, t.seed) if "," not in methods else (t.n, t.seed, t.method.name)
        store.write_row({**row, "n": t.n, "seed": t.seed, "energy": energy(*args)})


def test_findings_flag_a_fit_that_one_sizes_small_spread_dominates(tmp_path):
    # weights 1/s_j^2 (the fit's own, extrapolate's module doc). A size whose per-seed variance
    # lies far below the trend of the others' takes most of the weight, which the finding and
    # the table say (a user trial: 82 % at n = 190 from 8 seeds, and 8 more seeds moved e_inf
    # by 2.75 s.e.); variances that fall steeply but on one power law are not flagged
    from orthoclimb.studies.report import heaviest_size

    z = np.random.default_rng(3).standard_normal(8)
    z = (z - z.mean()) / z.std(ddof=1)  # exact: sample variance 1 for every size

    def make(sd):  # samples with sample variance sd^2 exactly
        return [list(1.5 + s * z) for s in sd]

    sizes = [50, 100, 200, 400]
    steep = make([0.05 * (n / 50) ** -1.0 for n in sizes])  # per-seed variance ~ n^-2
    assert heaviest_size(sizes, steep) is None  # 75.3 % of the weights, but on the trend
    near = make([0.05, 0.035, 0.025, 0.0045])  # n = 400 off the trend (0.0125 expected)
    n, share, ratio, count = heaviest_size(sizes, near)
    w = [1 / (sd**2 / 8) for sd in (0.05, 0.035, 0.025, 0.0045)]
    assert (n, count) == (400, 8) and share == pytest.approx(w[3] / sum(w)) and share > 0.75
    slope, icept = np.polyfit(np.log(sizes[:3]), np.log([0.05**2, 0.035**2, 0.025**2]), 1)
    assert ratio == pytest.approx(0.0045**2 / math.exp(icept + slope * math.log(400)))
    assert ratio < 1 / 3
    mild = make([0.05, 0.035, 0.025, 0.0105])  # 76 % of the weights, 0.35 of the trend
    assert heaviest_size(sizes, mild) is None
    # sizes without spread (rounding level counts as none, as in the fit): the fit's own rule
    assert heaviest_size(sizes, [*near[:3], [0.3, 0.1 + 0.2] * 4]) is None
    assert heaviest_size([20, 40], [[1.0, 2.0], [1.0, 1.0001]]) is None  # two sizes: no test
    # in a report
    noise = np.random.default_rng(3).standard_normal((200, 8))

    def energy(n, s):
        sd = 0.0025 if n == 80 else 0.05
        return 1.6 - n ** (-2 / 3) + sd * noise[n, s]

    _synthetic_study(tmp_path / "a", "20,40,80", energy)
    rep = build_report(tmp_path / "a")
    fit = rep.fits[0]
    n, share = fit["heaviest"][:2]
    assert (
        n == 80 and f"n = 80 carries {100 * share:.0f} % of the fit's weights" in rep.findings[-1]
    )
    assert f"n = 80 weighs {100 * share:.0f} %" in caveats(fit)


def test_findings_flag_an_extrapolation_above_the_ground_state_and_an_unchecked_law(tmp_path):
    # GS (Parisi, pure 3-spin: 1.6570) bounds every n -> infinity energy; energies that
    # extrapolate to 1.9 from two sizes must be flagged, not reported as a finding
    noise = np.random.default_rng(0).standard_normal(64)
    _synthetic_study(tmp_path / "s", "20,40", lambda n, s: 1.9 - n ** (-2 / 3) + 0.01 * noise[s])
    text = build_report(tmp_path / "s").findings[-1]
    assert "WARNING: the whole interval lies above the ground state GS = 1.6570" in text
    assert "with 2 sizes the fit has no degree of freedom left" in text
    assert "consistent with" not in text
    # the tables carry both remarks beside the numbers (a trial read the z columns alone)
    rep = build_report(tmp_path / "s")
    assert caveats(rep.fits[0]) == "unchecked, above GS"
    (row,) = [t for t in rep.table().splitlines() if t.startswith("3:1.0")][-1:]
    assert row.endswith("  unchecked, above GS") and "caveats: 'unchecked'" in rep.table()
    # a law that holds, from three sizes, near ALG: neither remark
    _synthetic_study(
        tmp_path / "t", "20,40,80", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * noise[s + 8 * n % 5]
    )
    text = build_report(tmp_path / "t").findings[-1]
    assert "WARNING" not in text and "no degree of freedom" not in text


def test_no_error_estimate_never_tells_alg_from_gs(tmp_path):
    # every seed at one energy per size: the intervals are points, and the span of the three
    # laws' points may hold both ALG and GS; without an error estimate nothing is told apart
    # (before: "cannot tell ALG (+nan s.e.) from GS (+nan s.e.)")
    _synthetic_study(tmp_path / "n", "20,40,80", lambda n, s: 1.648 - n ** (-2 / 3))
    text = build_report(tmp_path / "n").findings[-1]
    assert "no error estimate" in text and "cannot tell" not in text and "nan" not in text


def test_poor_fit_flag_follows_the_laws_test(tmp_path):
    # a p-value below FIT_LEVEL = 0.05 flags the law (common practice). Ten sizes on the exact
    # n^(-2/3) law with noise: chi2 near dof = 8, no flag. A curved law (n^(-1/3)) fitted in
    # n^(-2/3): flagged with small noise, and also with noise for which chi2/dof = 3.7 < 4
    # (p = 0.02), which the former rule chi2/dof > 4 let pass
    rng = np.random.default_rng(5)
    sizes = (20, 30, 40, 60, 80, 120, 160, 240, 320, 480)
    noise = {(n, s): rng.standard_normal() for n in sizes for s in range(8)}
    text_sizes = ",".join(map(str, sizes))
    _synthetic_study(
        tmp_path / "ok", text_sizes, lambda n, s: 1.6 - n ** (-2 / 3) + 0.02 * noise[(n, s)]
    )
    rep = build_report(tmp_path / "ok")
    assert rep.fits[0]["dof"] == 8 and rep.fits[0]["fit_p"] > 0.05, rep.fits[0]["fit_p"]
    # the chosen law passes; n^(-1), wrong here, is rejected and left out of the verdicts
    assert "the data reject n^(-1) (" in rep.findings[-1] and "no law" not in rep.findings[-1]
    assert rep.fits[0]["laws_kept"] == [2 / 3, 0.5]
    for amp in (0.002, 0.06):
        folder = tmp_path / f"bad{amp}"
        _synthetic_study(
            folder, text_sizes, lambda n, s, amp=amp: 1.6 - n ** (-1 / 3) + amp * noise[(n, s)]
        )
        rep = build_report(folder)
        assert "the data reject n^(-2/3)" in rep.findings[-1] or "no law from" in rep.findings[-1]
        assert caveats(rep.fits[0]) in ("n^(-2/3) rejected", "no law fits")
    assert rep.fits[0]["chi2"] / rep.fits[0]["dof"] < 4 and rep.fits[0]["fit_p"] < 0.05


def test_ties_are_still_counted_when_the_ground_state_is_unknown(tmp_path, monkeypatch):
    # the Parisi solver may fail (GS = NaN in the study); the tie width then follows ALG
    # (ALG <= GS, same scale) instead of becoming NaN and stopping the report
    import orthoclimb.studies.report as report_module

    monkeypatch.setattr(
        report_module,
        "theory_values",
        lambda gammas: TheoryValues(1.6330, math.nan, False, False, "fails"),
    )
    _tied_study(tmp_path / "n", 6)
    assert "stopped at the same point" in build_report(tmp_path / "n").findings[-1]


def test_every_pair_of_methods_is_compared(tmp_path):
    # three methods give three head-to-head lines per mixture (3 choose 2), each on the same
    # instances: hessian = anneal + 0.01 = gradient + 0.02 on every seed
    rng = np.random.default_rng(7)
    base = {s: 1.6 + 0.02 * rng.standard_normal() for s in range(8)}
    shift = {"hessian": 0.02, "anneal": 0.01, "gradient": 0.0}
    _synthetic_study(
        tmp_path / "three",
        "20,40",
        lambda n, s, m: base[s] + shift[m],
        methods="hessian,gradient,anneal",
    )
    pairs = [f for f in build_report(tmp_path / "three").findings if ", n = 40: " in f]
    assert len(pairs) == 3
    assert "hessian is ahead of gradient by 0.0200" in pairs[0]
    assert "hessian is ahead of anneal by 0.0100" in pairs[1]
    assert "anneal is ahead of gradient by 0.0100" in pairs[2]


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"level": 2}, r"level must be in \(0, 1\), got 2"),
        ({"n_boot": 0}, "n_boot must be an integer in \\[2, 1000000\\]"),
        ({"exponent": -1.0}, "exponent must be a positive number, got -1.0"),
        (
            {"level": np.float32(0.9), "n_boot": np.int64(1)},
            "n_boot must be an integer in \\[2, 1000000\\]",
        ),
    ],
)
def test_report_options_are_checked_before_the_study_is_read(tmp_path, kwargs, words):
    # before, a bad level reached each fit and ended up as its note, with no error at all
    with pytest.raises(ValueError, match=words):
        build_report(tmp_path / "nothing-here", **kwargs)


def test_report_json_is_strict_json_with_null_for_undefined_numbers(tmp_path, monkeypatch, capsys):
    # an unknown ground state (NaN) and energies equal on every seed (standard error 0, so
    # no z-score) leave numbers undefined; report.json and `report --json` write them as
    # null, as RFC 8259 requires (Python's json would write a bare NaN token, which jq and
    # JavaScript refuse)
    import orthoclimb.studies.report as report_module
    from conftest import strict_json_loads

    monkeypatch.setattr(
        report_module,
        "theory_values",
        lambda gammas: TheoryValues(1.6330, math.nan, False, False, "fails"),
    )
    _synthetic_study(tmp_path / "s", "20,40", lambda n, seed: 1.5, seeds="0-3")
    assert main(["report", str(tmp_path / "s"), "--no-plots", "--json"]) == 0
    printed = strict_json_loads(capsys.readouterr().out)
    stored = strict_json_loads((tmp_path / "s" / "report.json").read_text())
    assert printed == stored
    assert stored["theory"]["3:1.0"]["gs"] is None


def test_runs_that_stopped_before_a_local_maximum_are_flagged(tmp_path):
    # a user capped gradient ascent at 3 iterations: every row had local_max false and the
    # report extrapolated e_inf = 0.94 without a word. The report now counts such runs per
    # size and warns; runs whose check passed or was not made (None) are not counted.
    spec = spec_from_flags(["3:1"], None, "20,40", "0-3", "gradient")
    store = Store.open(tmp_path / "s", spec)
    flags = {0: False, 1: True, 2: None, 3: False}
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        local_max = flags[t.seed] if t.n == 40 else True
        store.write_row({**row, "n": t.n, "seed": t.seed, "energy": 1.5, "local_max": local_max})
    rep = build_report(tmp_path / "s")
    assert [g["not_local_max"] for g in rep.groups] == [0, 2]
    (warning,) = [f for f in rep.findings if "no local maximum" in f]
    assert "2 of 8 runs" in warning and "2 at n = 40" in warning
    _synthetic_study(tmp_path / "c", "20,40", lambda n, seed: 1.5, seeds="0-3")  # no flags
    assert not [f for f in build_report(tmp_path / "c").findings if "no local maximum" in f]


def test_the_grid_line_names_own_sizes_and_the_storage_type():
    # the report's header said "Sizes [30, 45]" for a study whose first mixture ran at
    # [20, 40], said nothing of float32, and wrote "1 seeds" (user review)
    from orthoclimb.studies.grid import MethodSpec, MixtureSpec, StudySpec
    from orthoclimb.studies.report_text import grid_line

    a = MixtureSpec.make(Mixture({3: 1.0}), "a", "20,40")
    b = MixtureSpec.make(Mixture({2: 1.0}), "b")
    gradient = MethodSpec.make("gradient", {})
    line = grid_line(StudySpec((a, b), (30, 45), (0,), (gradient,), dtype="float32"))
    assert line.startswith("Sizes [30, 45]; a: [20, 40]; 1 seed; float32 storage")
    assert "methods gradient (" in line
    line = grid_line(StudySpec((a,), (30, 45), (0, 1), (gradient,)))
    assert line.startswith("Sizes; a: [20, 40]; 2 seeds; float64; methods")


@pytest.mark.parametrize(("flags", "folder"), [([], "orthoclimb-demo"), (["--quick"], "-quick")])
def test_the_quick_demo_has_its_own_default_folder(monkeypatch, flags, folder):
    # `demo --quick` and then `demo` (the README's order) used to meet in one folder, where
    # the second refused a study of another configuration
    import orthoclimb.cli.demo_cmd as demo_module

    seen = []

    def fake_execute(spec, out, args, report):
        seen.append(out)
        raise KeyboardInterrupt  # stop before any work (main returns 130)

    monkeypatch.setattr(demo_module, "execute", fake_execute)
    assert main(["demo", *flags]) == 130
    assert seen and seen[0].endswith(folder) and seen[0].startswith("orthoclimb-demo")


def test_a_size_with_one_seed_is_left_out_of_the_fit_not_the_whole_fit(tmp_path):
    # an interrupted sweep left n = 50 with one seed: the report gave "no extrapolation" for
    # each method although n = 20, 30, 40 had six seeds each, dropped the head-to-head, and
    # report.md printed nan for that size's s.e. (a review)
    noise = np.random.default_rng(1).standard_normal((6, 2))
    folder = tmp_path / "part"
    _synthetic_study(
        folder,
        "20,30,40,50",
        lambda n, s, m: 1.6 - n ** (-2 / 3) + 0.01 * noise[s, int(m == "hessian")],
        methods="hessian,gradient",
        seeds="0-5",
    )
    for row in (folder / "rows").glob("*.json"):
        if json.loads(row.read_text())["payload"]["n"] == 50:
            if json.loads(row.read_text())["payload"]["seed"] != 0:
                row.unlink()
    rep = write_report(folder, n_boot=200, plots=False)
    for fit in rep.fits:
        assert fit["value"] is not None and fit["sizes"] == [20, 30, 40]
        assert fit["left_out"] == [[50, 1]]
    text = "\n".join(rep.findings)
    assert text.count("left out: n = 50 (1 seed), a fit needs 2 seeds per size") == 2
    # the comparison moves to the largest size with two paired seeds, and names the one skipped
    assert "n = 40:" in text and "(n = 50 has 1 paired seed)." in text
    md = (folder / "report.md").read_text()
    assert "| 50 |" in md and "nan" not in md


def test_report_out_writes_elsewhere_and_a_failed_write_points_to_it(tmp_path, capsys):
    # the report wrote only into the study folder: a study on a read-only medium gave an
    # error and no numbers at all (a review)
    noise = np.random.default_rng(2).standard_normal(8)
    folder = tmp_path / "s"
    _synthetic_study(folder, "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * noise[s])
    before = sorted(p.name for p in folder.iterdir())
    out = tmp_path / "elsewhere"
    assert main(["report", str(folder), "--out", str(out), "--bootstrap", "200"]) == 0
    assert sorted(p.name for p in folder.iterdir()) == before
    for name in ("report.md", "report.json", "energy_vs_n.png", "distribution.png"):
        assert (out / name).stat().st_size > 0
    assert (out / "results.parquet").stat().st_size > 0  # the table the report read
    printed = capsys.readouterr().out
    assert f"report: {out / 'report.md'}" in printed
    assert "results.parquet" not in printed.split("plots:")[1]  # the table is no plot
    # a study folder that cannot take the report (here a folder stands at report.md)
    (folder / "report.md").mkdir()
    assert main(["report", str(folder), "--no-plots", "--bootstrap", "200"]) == 2
    assert "give --out FOLDER" in capsys.readouterr().err


def test_confidence_levels_are_labelled_without_rounding():
    # int(round(100 level)) printed 0.996 as a "100%" interval and 0.004 as "0%" (a review)
    from orthoclimb.studies.report_text import level_text

    assert [level_text(v) for v in (0.9, 0.996, 0.004, 0.95)] == ["90", "99.6", "0.4", "95"]


def test_a_report_is_written_all_or_nothing(tmp_path, monkeypatch):
    # a folder at report.json: the report's plots and report.md were replaced, the old JSON
    # kept, and the new report.md listed a JSON never written (a review); now the clash is
    # refused before the work and, if it arises while writing, nothing is replaced
    import orthoclimb.studies.report as report_module
    from orthoclimb.errors import OutputPathError

    _synthetic_study(tmp_path / "a", "20,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * s)
    write_report(tmp_path / "a", exponent=1.0)
    before = {p.name: p.read_bytes() for p in (tmp_path / "a").iterdir() if p.is_file()}
    (tmp_path / "a" / "report.json").unlink()
    (tmp_path / "a" / "report.json").mkdir()
    with pytest.raises(OutputPathError, match="report.json': it is a folder"):
        write_report(tmp_path / "a")
    # the same clash found only at writing time (the early check skipped)
    monkeypatch.setattr(report_module, "refuse_folder", lambda path, advice: None)
    with pytest.raises(OutputPathError, match="it is a folder"):
        write_report(tmp_path / "a")
    for name in ("report.md", "energy_vs_n.png", "distribution.png"):
        assert (tmp_path / "a" / name).read_bytes() == before[name], name


def test_a_polishing_series_from_older_rows_is_named_and_its_groups_are_unchecked(tmp_path):
    # rows without energy_before_polish (an older version) leave the series on fewer runs;
    # the report says so. A before-polish group's end points were never checked: its
    # not_local_max is None, not 0; steps print whole (1000000, not 1e+06) (a review)
    spec = spec_from_flags(["3:1"], None, "20,40", "0-3", "hessian")
    store = Store.open(tmp_path / "s", spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.6 - t.n**-0.5 + 1e-3 * t.seed, steps=1000000)
        if t.seed > 0:
            row["energy_before_polish"] = row["energy"] - 0.05
        store.write_row(row)
    write_report(tmp_path / "s", plots=False)
    rep = build_report(tmp_path / "s")
    assert rep.findings[1].startswith("2 rows of polishing methods lack energy_before_polish")
    before = [g for g in rep.groups if g["method"] == "hessian before polish"]
    assert [g["count"] for g in before] == [3, 3]
    assert all(g["not_local_max"] is None for g in before)
    text = (tmp_path / "s" / "report.md").read_text()
    assert "| 1000000 |" in text and "e+06" not in text


@pytest.mark.parametrize("mixture, even", [("3:1", False), ("2:1,4:1", True)])
def test_the_gap_finding_cites_the_proof_only_where_it_holds(tmp_path, mixture, even):
    # Huang-Sellke 2021 prove the Lipschitz hardness for mixtures of even degrees; for others
    # the report speaks of a prediction (a review)
    from orthoclimb.studies.report_text import theory_finding

    th = {"alg": 1.6, "gs": 1.65, "full_rsb": False, "gs_equals_alg": False, "even": even}
    th["gap_gs_alg"] = 0.05
    text = theory_finding(mixture, th)
    assert ("cannot close (Huang-Sellke 2021" in text) == even
    assert ("are predicted not to close (proved for mixtures of even degrees only" in text) == (
        not even
    )


def test_a_gap_below_the_solvers_tolerance_is_not_called_unclosable():
    # a user trial: 2:1,4:0.4 (criterion fails) has GS - ALG = 9.7e-08, which the report
    # called "a gap that algorithms ... cannot close"; the ground state is computed to 1e-6
    from orthoclimb.studies.report_text import theory_finding

    th = {"alg": 1.6156635, "gs": 1.6156636, "full_rsb": False, "gs_equals_alg": False}
    th.update(even=True, gap_gs_alg=1.0e-7)
    text = theory_finding("2:1,4:0.4", th)
    assert "differ by only +1.0e-07, within the Parisi solver's default tolerance (1e-06)" in text
    assert "cannot close" not in text and "predicted not to close" not in text
    th.update(gap_gs_alg=2e-6)  # above the tolerance: the usual sentence
    assert "cannot close (Huang-Sellke 2021" in theory_finding("2:1,4:0.4", th)


def test_the_report_extrapolates_the_difference_of_two_methods_limits(tmp_path):
    # hessian - gradient = 0.01 + 0.3 n^(-2/3) + small noise on each instance, over a shared
    # instance effect 10 times larger: the paired fit recovers 0.01 with an s.e. well below
    # the two fits' combined one, and the report writes it to its JSON, table and findings
    rng = np.random.default_rng(11)
    noise = {(n, s): rng.standard_normal(2) for n in (20, 40, 80) for s in range(8)}

    def energy(n, s, m):
        shared, own = 0.05 * noise[(n, s)][0], 0.005 * noise[(n, s)][1]
        gap = 0.01 + 0.3 * n ** (-2 / 3) + own if m == "hessian" else 0.0
        return 1.6 - n ** (-2 / 3) + shared + gap

    _synthetic_study(tmp_path / "s", "20,40,80", energy, methods="hessian,gradient")
    rep = write_report(tmp_path / "s", plots=False)
    (d,) = rep.limit_differences
    assert (d["mixture"], d["a"], d["b"], d["sizes"]) == (
        "3:1.0",
        "hessian",
        "gradient",
        [20, 40, 80],
    )
    assert d["low"] < 0.01 < d["high"] and d["se"] < d["separate_se"] / 3
    stored = json.loads((tmp_path / "s" / "report.json").read_text())["limit_differences"]
    assert stored[0]["value"] == pytest.approx(d["value"])
    text = (tmp_path / "s" / "report.md").read_text()
    assert (
        "## Difference of limits" in text and "| 3:1.0 | hessian - gradient | 20, 40, 80 |" in text
    )
    line = [f for f in rep.findings if "as n -> infinity:" in f]
    assert len(line) == 1 and line[0].startswith("3:1.0: hessian - gradient as n -> infinity")


def test_a_fit_before_polish_over_sizes_of_different_k_says_so(tmp_path):
    # a trial: one law was fitted over sizes whose paths had K = 25, 25, 37 points, each
    # heading for its own E_K, without a word. Pure 3-spin: E_K = sqrt(6) K^(-3/2)
    # sum_{i<K} sqrt(i) (exact identity)
    spec = spec_from_flags(["3:1"], None, "100,150,300", "0-5", "hessian")
    store = Store.open(tmp_path / "s", spec)
    noise = np.random.default_rng(4).standard_normal(64)
    ks = {100: 25, 150: 25, 300: 37}  # the default K = n // 8 in [25, 200]
    for i, t in enumerate(spec.tasks()):
        e = 1.55 - 0.8 * t.n ** (-2 / 3) + 0.01 * noise[i]
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": "hessian"}
        row.update(n=t.n, seed=t.seed, energy=e + 0.03, energy_before_polish=e, steps=ks[t.n])
        store.write_row(row)
    rep = build_report(tmp_path / "s", n_boot=200)
    (fit,) = [f for f in rep.fits if f["method"] == "hessian before polish"]
    assert "e_k" not in fit and fit["steps_by_n"] == [[100, 25], [150, 25], [300, 37]]
    e25 = math.sqrt(6) * 25**-1.5 * sum(math.sqrt(i) for i in range(25))
    assert caveats(fit).endswith("mixed K")
    (line,) = [t for t in rep.findings if "K differs across the sizes" in t]
    assert f"K = 25, its floor, at n = 100, 150, where the path tends to E_25 = {e25:.4f}" in line
    assert "K = n/8 at n = 300" in line and fit["mixed_k"] in line


def test_hessian_ascent_before_polish_is_set_beside_e_k_when_k_is_fixed(tmp_path):
    # pure 3-spin, K = 25 at every size: a path of K points reaches E_K = sqrt(6) K^(-3/2)
    # sum_{i<K} sqrt(i) as n -> infinity (exact identity of the left Riemann sum of sqrt(6 q))
    spec = spec_from_flags(["3:1"], None, "20,40,80", "0-5", "hessian")
    store = Store.open(tmp_path / "s", spec)
    noise = np.random.default_rng(3).standard_normal(64)
    for i, t in enumerate(spec.tasks()):
        e = 1.55 - 0.8 * t.n ** (-2 / 3) + 0.01 * noise[i]
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": "hessian"}
        row.update(n=t.n, seed=t.seed, energy=e + 0.03, energy_before_polish=e, steps=25)
        store.write_row(row)
    rep = build_report(tmp_path / "s", n_boot=200)
    (fit,) = [f for f in rep.fits if f["method"] == "hessian before polish"]
    e_k = math.sqrt(6) * 25**-1.5 * sum(math.sqrt(i) for i in range(25))
    assert fit["steps_k"] == 25 and fit["e_k"] == pytest.approx(e_k, rel=1e-12)
    (text,) = [t for t in rep.findings if "is predicted to reach E_K" in t]
    assert f"a path of K points is predicted to reach E_K = {e_k:.4f}" in text
    # 1.55 against E_25 = 1.58: far off, which the finding reads as sizes short of the limit
    assert fit["z_k"] <= -3 and "either these sizes are short of the n -> infinity" in text
    # without the polish the run's own energy is the path's: set beside E_K as well (a
    # review: the plan noted such a study, the report did not)
    bare = spec_from_flags(
        ["3:1"], None, "20,40,80", "0-5", "hessian", {"hessian": {"polish": False}}
    )
    store = Store.open(tmp_path / "bare", bare)
    for i, t in enumerate(bare.tasks()):
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": "hessian"}
        e = 1.55 - 0.8 * t.n ** (-2 / 3) + 0.01 * noise[i]
        row.update(n=t.n, seed=t.seed, energy=e, energy_before_polish=e, steps=25)
        store.write_row(row)
    (fit,) = build_report(tmp_path / "bare", n_boot=200).fits
    assert fit["method"] == "hessian" and fit["e_k"] == pytest.approx(e_k, rel=1e-12)


def test_rows_of_several_versions_are_named_and_the_sampler_change_is_said(tmp_path):
    # a study extended after an upgrade: its rows come from two versions; across 0.2.0 the
    # same seed is not bitwise the same instance (the sampler's ln, sin and cos changed)
    spec = spec_from_flags(["3:1"], None, "20,40", "0-3", "gradient")
    for folder, versions in (("a", ("0.1.0", "0.2.0")), ("b", ("0.2.0", "0.2.1")), ("c", None)):
        store = Store.open(tmp_path / folder, spec)
        for i, t in enumerate(spec.tasks()):
            row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
            row.update(n=t.n, seed=t.seed, energy=1.6 - t.n ** (-2 / 3) + 0.01 * t.seed)
            if versions is not None:
                row["version"] = versions[i % 5 == 0]
            store.write_row(row)
    found = {f: "\n".join(build_report(tmp_path / f).findings) for f in "abc"}
    assert "written by 2 versions of orthoclimb (0.1.0: 6 rows, 0.2.0: 2 rows)" in found["a"]
    assert "the same seed is not bitwise the same instance" in found["a"]
    assert "written by 2 versions of orthoclimb (0.2.0: 6 rows, 0.2.1: 2 rows)" in found["b"]
    assert "bitwise" not in found["b"]
    assert "versions of orthoclimb" not in found["c"]  # one (unrecorded) version: nothing
    from orthoclimb.studies.report_text import mixed_versions_text

    text = mixed_versions_text([{"version": "0.10.0"}, {"version": "0.2.0"}, {}])
    assert "(no version recorded: 1 rows, 0.2.0: 1 rows, 0.10.0: 1 rows)" in text


def test_rows_of_one_version_from_different_code_are_pointed_out():
    # a user trial: a worker of an external cluster imported another copy of the package (the
    # same version, one line changed): 4 of 16 rows came from it, two energies moved by up to
    # 0.08 per spin, and the report said nothing
    from orthoclimb.studies.report_text import mixed_code_text

    rows = [{"version": "0.2.0", "code": "aaaa"}] * 12 + [{"version": "0.2.0", "code": "bbbb"}] * 4
    assert mixed_code_text(rows) == (
        "rows of the same version of orthoclimb were written by different code (the rows'"
        " code digests: 0.2.0: aaaa (12 rows), bbbb (4 rows)): an edited or rebuilt package, or"
        " a worker importing another copy of it; if that code changed what a method computes,"
        " its runs are not comparable (the table's worker column says where each row ran)."
    )
    # one digest per version (two versions are the other finding's), or none recorded: nothing
    assert (
        mixed_code_text([{"version": "0.2.0", "code": "a"}, {"version": "0.2.1", "code": "b"}])
        is None
    )
    assert mixed_code_text([{"version": "0.2.0"}, {"version": "0.2.0", "code": "a"}]) is None


def test_a_row_that_breaks_the_table_is_named_by_its_path_in_the_study(tmp_path, monkeypatch):
    # a review: the report (which every sweep writes) named such a row "rows/<id>.json",
    # relative to wherever the command ran, not to the study folder
    from orthoclimb.studies.report import write_report

    spec = spec_from_flags(["3:1"], None, "20,40", "0-2", "gradient")
    store = Store.open(tmp_path / "s", spec)
    tasks = spec.tasks()
    for i, t in enumerate(tasks):
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.6 - t.n ** (-2 / 3) + 0.01 * t.seed)
        row["worker"] = 12 if i == 1 else f"h:{i}"
        store.write_row(row)
    monkeypatch.chdir(tmp_path)  # so that a relative path would not point at the study
    with pytest.raises(ValueError) as info:
        write_report(tmp_path / "s", plots=False)
    path = str(tmp_path / "s" / "rows" / f"{tasks[1].task_id}.json")
    assert str(info.value).startswith(f"the row file {path!r} has worker = 12, where")


@pytest.mark.parametrize("level", ["1e-17", "1e-300", "0.9999999999999999"])
def test_a_level_near_0_or_1_gives_an_interval_not_nan(tmp_path, capsys, level):
    # a review: `report --level 1e-17` printed the interval [nan, nan] and exited 0 (the
    # Student stretch was 0/0 once (1 + level)/2 rounded to 1/2; inf/inf near 1)
    noise = np.random.default_rng(5).standard_normal(8)
    folder = tmp_path / "s"
    _synthetic_study(folder, "20,30,40", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * noise[s])
    args = ["report", str(folder), "--no-plots", "--bootstrap", "200", "--level", level]
    assert main(args) == 0
    assert "nan" not in capsys.readouterr().out
    fit = json.loads((folder / "report.json").read_text())["extrapolations"][0]
    assert all(math.isfinite(fit[k]) for k in ("low", "high"))
    assert fit["low"] <= fit["value"] <= fit["high"]
