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
from orthoclimb.studies.extrapolate import extrapolate
from orthoclimb.studies.grid import spec_from_flags
from orthoclimb.studies.report import _verdict, build_report, write_report
from orthoclimb.studies.store import Store
from orthoclimb.studies.tasks import TheoryValues


def test_extrapolation_exact_law_without_noise():
    # exact identity: a noiseless e_inf + a n^(-2/3) law is recovered exactly
    sizes = [50, 100, 200, 400]
    samples = [1.5 - 2.0 * n ** (-2 / 3) + np.array([-1e-3, 1e-3]) for n in sizes]
    ex = extrapolate(sizes, samples)
    assert ex.value == pytest.approx(1.5, abs=1e-10)
    assert ex.slope == pytest.approx(-2.0, abs=1e-8)


def test_extrapolation_interval_covers_at_stated_rate():
    # common practice (frequentist coverage): over 200 synthetic studies with a known
    # n^(-2/3) law and Gaussian noise, the 90% interval covers e_inf = 1.5 in 90% +- 3
    # binomial s.e. (sqrt(0.9 * 0.1 / 200) = 0.021) of draws; fixed seeds, not flaky.
    rng = np.random.default_rng(20261201)
    sizes = [50, 100, 200, 400]
    draws, hits, widths = 200, 0, []
    for r in range(draws):
        samples = [
            1.5 - 2.0 * n ** (-2 / 3) + 0.3 * n ** (-1 / 3) * rng.standard_normal(10) for n in sizes
        ]
        ex = extrapolate(sizes, samples, level=0.9, n_boot=1000, seed=r)
        hits += ex.low <= 1.5 <= ex.high
        widths.append(ex.high - ex.low)
    rate = hits / draws
    assert abs(rate - 0.9) <= 3 * math.sqrt(0.9 * 0.1 / draws), rate
    assert np.median(widths) < 0.2  # and the interval is not trivially wide


def test_extrapolation_refuses_too_little_data():
    with pytest.raises(ValueError, match="2 sizes"):
        extrapolate([10], [[1.0, 2.0]])
    with pytest.raises(ValueError, match="2 seeds"):
        extrapolate([10, 20], [[1.0], [1.0, 2.0]])


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


def test_profile_command(tmp_path, capsys):
    code = main(
        [
            "profile",
            "--gammas",
            "3:1",
            "--n",
            "30,60",
            "--repeats",
            "1",
            "--out",
            str(tmp_path / "p"),
            "--json",
        ]
    )
    assert code == 0
    prof = json.loads(capsys.readouterr().out)
    assert [r["n"] for r in prof["rows"]] == [30, 60]
    assert set(prof["exponents"]) >= {"energy", "hessian"}
    # exact identities: N(n) = C(n+2, 3) coefficients at p = 3, and with two sizes the
    # least-squares slope is the slope between them
    for r in prof["rows"]:
        assert r["coefficients"] == math.comb(r["n"] + 2, 3)
        assert r["ns_per_coefficient"]["hvp"] == pytest.approx(1e9 * r["hvp"] / r["coefficients"])
    for k, b in prof["exponents"].items():
        assert prof["exponents_largest_pair"][k] == pytest.approx(b)
    assert (tmp_path / "p" / "profile.png").stat().st_size > 0


def test_demo_quick_completes_and_writes_report(tmp_path, capsys):
    out = tmp_path / "demo"
    assert main(["demo", "--quick", "--out", str(out), "--no-progress"]) == 0
    text = capsys.readouterr().out
    assert "rough time estimate" in text and "of coefficients" in text
    assert "what this run measured" in text and "GS" in text
    md = (out / "report.md").read_text()
    assert "rugged (3)" in md and "gentle (2+4)" in md and "full-RSB criterion fails" in md
    data = json.loads((out / "report.json").read_text())
    assert data["theory"]["rugged (3)"]["gap_gs_alg"] == pytest.approx(0.024, abs=1e-3)
    assert (out / "energy_vs_n.png").stat().st_size > 0


def test_paired_comparison_sign_test_is_the_exact_binomial():
    # exact identity: under H0 the count of seeds where a is higher is Binomial(m, 1/2), so
    # 9 of 10 has two-sided p = 2 (C(10,9) + C(10,10)) / 2^10 = 22/1024; ties are dropped
    from orthoclimb.studies.report import paired_comparison

    d = np.array([0.01] * 9 + [-0.02, 0.0])
    c = paired_comparison(d)
    assert (c["higher"], c["nonzero"]) == (9, 10)
    assert c["sign_p"] == pytest.approx(22 / 1024, rel=1e-12)
    assert c["diff"] == pytest.approx(d.mean())
    assert c["se"] == pytest.approx(d.std(ddof=1) / math.sqrt(d.size))
    balanced = paired_comparison(np.array([1.0, -1.0] * 5))
    assert balanced["sign_p"] == pytest.approx(1.0) and balanced["diff"] == 0.0
    with pytest.raises(ValueError, match="at least 2 seeds"):
        paired_comparison(np.array([0.1]))


def test_the_mean_edge_is_the_paired_t_test_not_a_normal_z():
    # Student (1908): the mean of m paired differences over its standard error has a t law
    # with m - 1 degrees of freedom (scipy.stats.ttest_1samp as the reference). Five seeds
    # with z = 2.28 give p = 0.085: no edge (before: "ahead", since |z| > 2)
    from scipy import stats

    from orthoclimb.studies.report import _head_to_head, paired_comparison

    d = np.array([0.01, 0.02, -0.003, 0.015, 0.004])
    c = paired_comparison(d)
    assert c["t_p"] == pytest.approx(stats.ttest_1samp(d, 0.0).pvalue, rel=1e-10)
    assert c["z"] > 2 and c["t_p"] > 0.05
    a = {s: 1.6 for s in range(5)}
    b = {s: 1.6 - d[s] for s in range(5)}
    seeds = {("m", "x", 100): a, ("m", "y", 100): b}
    line = _head_to_head("m", "x", "y", seeds, {"gs": 1.657, "alg": 1.633})
    assert "not distinguishable in the mean" in line and "t-test over 5 seeds: p = 0.085" in line
    b = {s: 1.6 - 3 * d[s] - 0.01 for s in range(5)}  # all positive: the t-test sees it
    line = _head_to_head("m", "x", "y", {**seeds, ("m", "y", 100): b}, {"gs": 1.657, "alg": 1.6})
    assert "x is ahead of y" in line and "paired t-test over 5 seeds: p = " in line


def test_a_sign_test_edge_is_led_by_the_counts_and_a_constant_edge_is_certain():
    # eleven small wins and one large loss: the sign test (p = 0.0063) sees x higher on most
    # instances while the mean favours y; the line must name x (before: "y is ahead"). And a
    # difference that is the same on every seed has no spread: a certain edge (before:
    # "not distinguishable ... nan s.e.")
    from orthoclimb.studies.report import _head_to_head

    theory = {"gs": 1.657, "alg": 1.633}
    d = [0.001] * 11 + [-0.1]
    seeds = {("m", "x", 50): {s: 1.6 for s in range(12)}}
    seeds[("m", "y", 50)] = {s: 1.6 - d[s] for s in range(12)}
    line = _head_to_head("m", "x", "y", seeds, theory)
    assert "x is higher on most instances (x higher on 11, y on 1" in line
    assert "p = 0.0063" in line and "y is ahead" not in line
    seeds[("m", "y", 50)] = {s: 1.59 for s in range(12)}
    line = _head_to_head("m", "x", "y", seeds, theory)
    assert (
        "x is ahead of y by 0.0100 per spin on average (the same difference on each of the 12"
        in line
    )
    assert "nan" not in line


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


def test_paired_comparison_counts_runs_at_the_same_point_as_ties():
    # exact identity: rounding-level differences (both runs at the same maximum) are ties; of
    # the 3 seeds that really differ, a is higher on 3: two-sided p = 2 / 2^3 = 0.25
    from orthoclimb.studies.report import paired_comparison

    noise = np.array([4e-15, 4e-14, 3e-14, 2e-15, 1e-15, 1e-14, 3e-14])
    real = np.array([0.038, 0.072, 0.0035])
    c = paired_comparison(np.concatenate([noise, real]), tie=1e-9)
    assert (c["higher"], c["lower"], c["ties"], c["nonzero"]) == (3, 0, 7, 3)
    assert c["sign_p"] == pytest.approx(0.25, rel=1e-12)
    assert c["diff"] == pytest.approx(real.sum() / 10)
    only_noise = paired_comparison(noise, tie=1e-9)
    assert only_noise["nonzero"] == 0 and math.isnan(only_noise["sign_p"])
    assert math.isnan(only_noise["z"])  # no "ahead by 0.0000 (3.2 s.e.)"
    # without a tie width the same noise is 7 of 7 (p = 2/128): what the report used to say
    assert paired_comparison(noise)["sign_p"] == pytest.approx(2 / 128)
    with pytest.raises(ValueError, match="tie"):
        paired_comparison(real, tie=-1.0)


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
    text = build_report(tmp_path / "same").findings[-1]
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
    text = build_report(tmp_path / "edge").findings[-1]
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
    assert f"so the value lies in [{fit['low']:.4f}, 1.6570]" in text
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


def test_fit_exponents_recovers_power_laws():
    from orthoclimb.studies.profile import KERNELS, fit_exponents

    # synthetic times: t = c n^3 for every kernel except a fixed 1 ms added to the Hessian,
    # whose fit must then fall below 3 over all sizes and approach 3 at the largest pair
    rows = []
    for n in (50, 100, 200, 400, 800):
        row = {k: 2e-9 * n**3 for k in (*KERNELS, "sample")}
        row["hessian"] += 1e-3
        rows.append({"n": n, **row})
    fit, pair = fit_exponents(rows[::-1])  # order of rows does not matter
    assert fit["energy"] == pytest.approx(3.0) and pair["energy"] == pytest.approx(3.0)
    assert fit["hessian"] < 2.9 < pair["hessian"] < 3.0


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


def test_findings_flag_an_extrapolation_above_the_ground_state_and_an_unchecked_law(tmp_path):
    # GS (Parisi, pure 3-spin: 1.6570) bounds every n -> infinity energy; energies that
    # extrapolate to 1.9 from two sizes must be flagged, not reported as a finding
    noise = np.random.default_rng(0).standard_normal(64)
    _synthetic_study(tmp_path / "s", "20,40", lambda n, s: 1.9 - n ** (-2 / 3) + 0.01 * noise[s])
    text = build_report(tmp_path / "s").findings[-1]
    assert "WARNING: the whole interval lies above the ground state GS = 1.6570" in text
    assert "with 2 sizes the fit has no degree of freedom left" in text
    assert "consistent with" not in text
    # a law that holds, from three sizes, near ALG: neither remark
    _synthetic_study(
        tmp_path / "t", "20,40,80", lambda n, s: 1.6 - n ** (-2 / 3) + 0.01 * noise[s + 8 * n % 5]
    )
    text = build_report(tmp_path / "t").findings[-1]
    assert "WARNING" not in text and "no degree of freedom" not in text


@pytest.mark.parametrize(
    ("value", "interval", "other", "z", "words"),
    [
        (1.445, (1.40, 1.49), None, -1.9, "0.0550 below ALG = 1.5000 (-1.9 s.e. under"),
        (1.50, (1.45, 1.55), None, -0.5, "consistent with ALG = 1.5000 (-0.5 s.e.)"),
        (1.555, (1.51, 1.60), None, 2.5, "above ALG"),
        # ALG outside the chosen interval, inside the n^(-1) law's, which fits
        (1.555, (1.51, 1.60), (1.47, 1.53, 0.4), 2.5, "only under n^(-1) (+2.5 s.e. under"),
        # ... but not when the data reject n^(-1)
        (1.555, (1.51, 1.60), (1.47, 1.53, 0.01), 2.5, "0.0550 above ALG"),
        # between two kept laws' intervals: an exponent between them fits too
        (1.555, (1.51, 1.60), (1.40, 1.49, 0.4), 2.5, "only under a law between n^(-2/3) and"),
        # outside the span of the kept laws
        (1.555, (1.51, 1.60), (1.52, 1.56, 0.4), 2.5, "outside the interval under n^(-1) too"),
        # the chosen law rejected, ALG inside its interval but below the kept n^(-1)'s: the
        # side and distance come from the law kept (e_inf = 1.54 there)
        (
            1.505,
            (1.49, 1.52, 0.01),
            (1.52, 1.56, 0.4),
            0.5,
            "0.0400 above ALG = 1.5000 under n^(-1)",
        ),
        (1.45, (math.nan, math.nan), None, -1.9, "consistent with ALG"),  # no interval: |z|
    ],
)
def test_the_verdict_agrees_with_the_printed_intervals(value, interval, other, z, words):
    fit = {"value": value, "low": interval[0], "high": interval[1], "exponent": 2 / 3}
    fit.update(fit_p=interval[2] if len(interval) > 2 else 0.5, other_laws=[])
    if other is not None:
        fit["other_laws"] = [{"exponent": 1.0, "low": other[0], "high": other[1]}]
        fit["other_laws"][0].update(fit_p=other[2], value=(other[0] + other[1]) / 2)
    assert words in _verdict(fit, 1.5, z, "ALG")


def test_a_gap_between_kept_laws_counts_only_without_a_rejected_law_inside_it():
    # n^(-1/2) at [1.52, 1.56] and n^(-1) at [1.40, 1.48] both fit; ALG = 1.5 lies between
    # their intervals. With n^(-2/3) also kept, an exponent between fits: "a law between";
    # with n^(-2/3) rejected, no tested law between them fits, and ALG is outside both
    def fit(p_chosen):
        f = {"value": 1.505, "low": 1.49, "high": 1.52, "exponent": 2 / 3, "fit_p": p_chosen}
        f["other_laws"] = [
            {"exponent": 0.5, "low": 1.52, "high": 1.56, "value": 1.54, "fit_p": 0.3},
            {"exponent": 1.0, "low": 1.40, "high": 1.48, "value": 1.44, "fit_p": 0.3},
        ]
        return f

    text = _verdict(fit(0.5), 1.50, 0.5, "ALG")
    assert text.startswith("consistent with ALG = 1.5000 (")  # inside the chosen interval
    text = _verdict(fit(0.5), 1.485, 0.5, "ALG")  # between n^(-2/3)'s and n^(-1)'s
    assert "only under a law between n^(-2/3) and n^(-1)" in text
    text = _verdict(fit(0.01), 1.50, 0.5, "ALG")
    assert "only under" not in text and "the nearest law the data keep" in text
    # the kept laws form one region, or two split by the rejected n^(-2/3)
    from orthoclimb.studies.report import _regions

    assert [[law["exponent"] for law in run] for run in _regions(fit(0.5))] == [[0.5, 2 / 3, 1.0]]
    assert [[law["exponent"] for law in run] for run in _regions(fit(0.01))] == [[0.5], [1.0]]


def test_no_error_estimate_never_tells_alg_from_gs(tmp_path):
    # every seed at one energy per size: the intervals are points, and the span of the three
    # laws' points may hold both ALG and GS; without an error estimate nothing is told apart
    # (before: "cannot tell ALG (+nan s.e.) from GS (+nan s.e.)")
    _synthetic_study(tmp_path / "n", "20,40,80", lambda n, s: 1.648 - n ** (-2 / 3))
    text = build_report(tmp_path / "n").findings[-1]
    assert "no error estimate" in text and "cannot tell" not in text and "nan" not in text


def test_a_z_from_few_degrees_of_freedom_says_so():
    # with 2 sizes of 3 seeds the interval is a Student t one with nu ~ 2-3 (Welch 1947): a
    # z of +2.7 is then inside a 90% interval, which the sentence must not leave unexplained
    fit = {"value": 1.527, "low": 1.45, "high": 1.61, "exponent": 2 / 3, "t_dof": 2.4}
    fit.update(fit_p=math.nan, other_laws=[])
    assert "consistent with ALG = 1.5000 (+2.7 s.e. with 2.4 degrees of freedom)" in _verdict(
        fit, 1.5, 2.7, "ALG"
    )
    fit["t_dof"] = 40.0
    assert "(+2.7 s.e.)" in _verdict(fit, 1.5, 2.7, "ALG")


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
    assert rep.fits[0]["chi2"] / rep.fits[0]["dof"] < 4 and rep.fits[0]["fit_p"] < 0.05


def test_profile_says_its_size_first_and_estimates_each_next_size(tmp_path, capsys):
    # exact: pure p = 3 at n = 60 has C(62, 3) = 37820 coefficients; the guess for the next
    # size is this size's wall time times the ratio of coefficient counts
    seen = []
    from orthoclimb.studies.profile import profile_kernels

    profile_kernels(Mixture.parse("3:1"), [60, 30], 1, lambda *a: seen.append(a))
    (row30, nxt, guess), (row60, last, none) = seen
    assert (row30["n"], nxt, row60["n"], last, none) == (30, 60, 60, None, None)
    assert guess == pytest.approx(row30["wall"] * math.comb(62, 3) / math.comb(32, 3))
    args = ["profile", "--gammas", "3:1", "--n", "30,60", "--repeats", "1"]
    assert main([*args, "--out", str(tmp_path / "p")]) == 0
    err = capsys.readouterr().err
    assert err.index("holds 37,820 coefficients") < err.index("n = 30: done")
    assert "next n = 60: about" in err


def test_profile_explains_a_slope_above_the_degree(tmp_path, capsys, monkeypatch):
    # synthetic timings: n^3 throughout, except that the Hessian's time per coefficient
    # doubles between the two largest sizes (the step of a cache): b = 4 there, above P = 3
    import orthoclimb.studies.profile as profile_module
    from orthoclimb.studies.profile import KERNELS, fit_exponents

    def fake(mixture, sizes, repeats, on_size=None):
        rows = []
        for n in sorted(sizes):
            t = {k: 1e-9 * n**3 for k in (*KERNELS, "sample")}
            if n == max(sizes):
                t["hessian"] *= 2
            per = {k: 1e9 * t[k] / n**3 for k in t}
            rows.append({"n": n, "coefficients": n**3, **t, "ns_per_coefficient": per})
        fit, pair = fit_exponents(rows)
        return {
            "mixture": "3:1.0",
            "max_degree": 3,
            "threads": 1,
            "rows": rows,
            "exponents": fit,
            "exponents_largest_pair": pair,
        }

    monkeypatch.setattr(profile_module, "profile_kernels", fake)
    monkeypatch.setattr(
        profile_module, "write_profile", lambda prof, out: {"json": "j", "plot": "p"}
    )
    assert main(["profile", "--gammas", "3:1", "--n", "100,200,400", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "b above P between n = 200 and 400 (hessian)" in out
    assert "hessian 1 -> 2 ns" in out
    assert "energy," not in out.split("b above P")[1]  # only the kernel whose slope is above


def test_report_fits_the_cost_of_a_run_against_n(tmp_path):
    # exact identity: medians of t = c n^3 (1 + s/100) over seeds s are c' n^3, so the
    # least-squares slope of log t on log n is 3 (numpy.polyfit on exact data), and it does
    # not rise; a tenfold outlier at one seed leaves the median of four (1.015 c n^3) alone,
    # where a mean would move; rows without a time (older studies) or with a zero time are
    # left out, not counted
    spec = spec_from_flags(["3:1"], None, "20,40,80", "0-4", "gradient")
    store = Store.open(tmp_path / "c", spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5 + 0.01 * t.seed - t.n ** (-2 / 3))
        if t.seed < 4:
            factor = 10.0 if t.seed == 3 else 1 + t.seed / 100
            row.update(seconds_run=2e-9 * t.n**3 * factor, seconds_sample=1e-3)
        elif t.n == 20:
            row.update(seconds_run=0.0, seconds_sample=1e-3)
        store.write_row(row)
    rep = build_report(tmp_path / "c")
    (cost,) = rep.cost
    assert cost["sizes"] == [20, 40, 80] and cost["count"] == [4, 4, 4]
    assert cost["exponent"] == pytest.approx(3.0, abs=1e-12)
    assert cost["median_seconds_run"][0] == pytest.approx(2e-9 * 20**3 * 1.015)
    assert cost["max_degree"] == 3
    line = "\n".join(rep.findings)
    assert "a run's median time grows like n^3.00 +- 0.00 over n = 20..80" in line
    assert cost["fixed_cost_bound"] is False and cost["rising"] is False
    write_report(tmp_path / "c", plots=False)
    md = (tmp_path / "c" / "report.md").read_text()
    assert "## Cost" in md and "| 3.00 +- 0.00 | 3.00 |" in md


def test_cost_exponent_has_its_standard_error_and_says_when_the_slope_rises(tmp_path):
    # t = c0 + c n^3 with c0 half the time at n = 100, 1% apart over seeds: the medians'
    # log-log line (reference: scipy.stats.linregress, slope and its standard error) has
    # b = 2.44 +- 0.15 while the last pair's slope is 2.84, far beyond the seeds' noise, so b
    # is a lower bound and the report says so
    from scipy import stats

    sizes = [100, 150, 220, 320]
    spec = spec_from_flags(["3:1"], None, ",".join(map(str, sizes)), "0-2", "gradient")
    store = Store.open(tmp_path / "r", spec)
    for t in spec.tasks():
        base = 1e-9 * (100**3 + t.n**3)
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5 - t.n ** (-2 / 3) + 0.01 * t.seed)
        row.update(seconds_run=base * (1.0 + 0.01 * t.seed))
        store.write_row({**row, "seconds_sample": 1e-4})
    (cost,) = build_report(tmp_path / "r").cost
    medians = [1e-9 * (100**3 + n**3) * 1.01 for n in sizes]
    assert cost["median_seconds_run"] == pytest.approx(medians, rel=1e-12)
    fit = stats.linregress(np.log(sizes), np.log(medians))
    assert cost["exponent"] == pytest.approx(fit.slope, rel=1e-10)
    assert cost["exponent_se"] == pytest.approx(fit.stderr, rel=1e-8)
    assert cost["exponent_last"] == pytest.approx(
        math.log(medians[3] / medians[2]) / math.log(320 / 220)
    )
    assert cost["rising"] is True and cost["fixed_cost_bound"] is False
    (line,) = [f for f in build_report(tmp_path / "r").findings if "median time" in f]
    assert "grows like n^2.44 +- 0.15" in line and "the slope rises with n (n^2.84" in line


def test_a_last_slope_within_the_seeds_noise_is_not_called_rising():
    # a pure n^3 law with 30% lognormal noise over 5 seeds at 3 sizes (generator fixed): the
    # last pair's slope exceeds b by more than RISING_MIN = 0.1, but by less than twice its
    # bootstrap spread over seeds, so it is noise, not fixed costs; with 2 seeds per size the
    # bootstrap has no spread to measure, and nothing is claimed
    from orthoclimb.studies.cost import RISING_MIN, cost_table

    rng = np.random.default_rng(9)
    sizes = [100, 150, 220]
    rows = []
    for n in sizes:
        for _ in range(5):
            t = 1e-9 * n**3 * math.exp(0.3 * rng.standard_normal())
            rows.append({"mixture": "m", "method": "x", "n": n, "seconds_run": t})
    (cost,) = cost_table(rows, {"m": 3})
    assert cost["exponent_last"] - cost["exponent"] > RISING_MIN
    assert cost["rising"] is False
    # two seeds per size (generator 24: excess 0.73, which a bootstrap over two values calls
    # far beyond its spread) are too few to tell
    rng = np.random.default_rng(24)
    two = [
        {"mixture": "m", "method": "x", "n": n, "seconds_run": 1e-9 * n**3 * math.exp(0.3 * g)}
        for n in sizes
        for g in rng.standard_normal(2)
    ]
    (few,) = cost_table(two, {"m": 3})
    assert few["count"] == [2, 2, 2] and few["exponent_last"] - few["exponent"] > 0.5
    assert few["rising"] is False


def test_a_time_that_grows_more_slowly_than_n_is_flagged_as_fixed_costs(tmp_path):
    # exact identity: medians of t = c n^0.5 give the slope 0.5 < 1, which no method reading
    # every coefficient per step can have; the report says so instead of quoting it as the
    # method's scaling, and the table shows b in parentheses
    spec = spec_from_flags(["3:1"], None, "20,40,80", "0-2", "gradient")
    store = Store.open(tmp_path / "f", spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5 - t.n ** (-2 / 3))
        row.update(seconds_run=1e-3 * t.n**0.5, seconds_sample=1e-4)
        store.write_row(row)
    rep = build_report(tmp_path / "f")
    (cost,) = rep.cost
    assert cost["exponent"] == pytest.approx(0.5, abs=1e-12)
    assert cost["fixed_cost_bound"] is True
    (line,) = [f for f in rep.findings if "median time" in f]
    assert "grows more slowly than n (n^0.50) over n = 20..80" in line
    assert "fixed per-run costs" in line and "grows like" not in line
    write_report(tmp_path / "f", plots=False)
    assert "| (0.50 +- 0.00) | 0.50 |" in (tmp_path / "f" / "report.md").read_text()
    # times that fall with n (the quick demo's n^-0.44) are not said to grow
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5, seconds_run=1e-3 * t.n**-0.5)
        store.row_path(t.task_id).unlink()
        store.write_row({**row, "seconds_sample": 1e-4})
    (line,) = [f for f in build_report(tmp_path / "f").findings if "median time" in f]
    assert "falls as n grows (n^-0.50)" in line and "grows" not in line.replace("n grows", "")


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


def test_profile_refuses_before_timing_or_printing_its_plan(tmp_path, capsys):
    # an instance too large for memory (p = 3 at n = 100000: 1.3e15 bytes) and --repeats 0
    # are refused before any size is sampled or timed and before the plan line is printed
    from orthoclimb.studies.profile import profile_kernels

    seen = []
    with pytest.raises(MemoryError):
        profile_kernels(Mixture.parse("3:1"), [50, 100000], 1, lambda *a: seen.append(a))
    assert seen == []  # n = 50 was not timed first
    for extra in (["--n", "50,100000"], ["--n", "50,60", "--repeats", "0"]):
        args = ["profile", "--gammas", "3:1", *extra, "--out", str(tmp_path / "p")]
        assert main(args) == 2
        err = capsys.readouterr().err
        assert "error:" in err and "profile: n =" not in err and "done in" not in err


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"level": 2}, r"level must be in \(0, 1\), got 2"),
        ({"n_boot": 0}, "n_boot must be an integer >= 2"),
        ({"exponent": -1.0}, "exponent must be a positive number, got -1.0"),
        ({"level": np.float32(0.9), "n_boot": np.int64(1)}, "n_boot must be an integer >= 2"),
    ],
)
def test_report_options_are_checked_before_the_study_is_read(tmp_path, kwargs, words):
    # before, a bad level reached each fit and ended up as its note, with no error at all
    with pytest.raises(ValueError, match=words):
        build_report(tmp_path / "nothing-here", **kwargs)


def test_profile_notes_threads_beyond_the_cores(tmp_path, capsys):
    # as climb: a --threads above the cores this process may use is kept, with a note first
    import orthoclimb as oc
    from orthoclimb.studies.engine import available_cores

    cores, before = available_cores(), oc.get_num_threads()
    args = ["profile", "--gammas", "3:1", "--n", "20,30", "--repeats", "1"]
    assert main([*args, "--threads", str(cores + 1), "--out", str(tmp_path / "p")]) == 0
    err = capsys.readouterr().err
    assert err.startswith(f"note: --threads {cores + 1} is more than the {cores} core")
    oc.set_num_threads(before)


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
    from orthoclimb.studies.report import _grid_line

    a = MixtureSpec.make(Mixture({3: 1.0}), "a", "20,40")
    b = MixtureSpec.make(Mixture({2: 1.0}), "b")
    gradient = MethodSpec.make("gradient", {})
    line = _grid_line(StudySpec((a, b), (30, 45), (0,), (gradient,), dtype="float32"))
    assert line.startswith("Sizes [30, 45]; a: [20, 40]; 1 seed; float32 storage")
    assert "methods gradient (" in line
    line = _grid_line(StudySpec((a,), (30, 45), (0, 1), (gradient,)))
    assert line.startswith("Sizes; a: [20, 40]; 2 seeds; float64; methods")
