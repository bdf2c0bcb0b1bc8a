"""The cost section of the report: median run time against n, the exponent b of t ~ n^b,
its standard error and the rising-slope and fixed-cost flags."""

from __future__ import annotations

import math

import numpy as np
import pytest

from orthoclimb.studies.grid import spec_from_flags
from orthoclimb.studies.report import build_report, write_report
from orthoclimb.studies.store import Store


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


def test_a_row_without_its_sampling_time_leaves_out_only_itself():
    # np.median over a size where one row lacked seconds_sample gave NaN for the size
    from orthoclimb.studies.cost import cost_table

    rows = [
        {"mixture": "m", "method": "g", "n": n, "seconds_run": 0.1 * n, "seconds_sample": s}
        for n, s in ((10, 1.0), (10, None), (10, 3.0), (20, 2.0), (20, 4.0))
    ]
    (entry,) = cost_table(rows, {"m": 3})
    assert entry["median_seconds_sample"] == [2.0, 3.0]


def _timed_study(folder, sizes: str, methods: str, timing, seeds: str = "0-2") -> None:
    """A 3:1 study folder whose rows carry made-up energies and the fields timing(task) gives
    (steps, seconds_run), with a sampling time of 1 ms."""
    spec = spec_from_flags(["3:1"], None, sizes, seeds, methods)
    store = Store.open(folder, spec)
    for t in spec.tasks():
        row = {"task_id": t.task_id, "mixture": t.mixture.name, "method": t.method.name}
        row.update(n=t.n, seed=t.seed, energy=1.5 + 0.01 * t.seed - t.n ** (-2 / 3))
        store.write_row({**row, "seconds_sample": 1e-3, **timing(t)})


def test_the_time_of_one_step_has_its_own_exponent(tmp_path):
    # exact identity: t = c n^3 K with K = n/8 (what hessian's default takes from n = 200 on)
    # has b = 4 and, per step, t/K = c n^3: b (step) = 3 (numpy.polyfit on exact data)
    _timed_study(
        tmp_path / "k",
        "240,480,960",
        "hessian",
        lambda t: {
            "steps": t.n // 8,
            "seconds_run": 1e-10 * t.n**3 * (t.n // 8) * (1 + t.seed / 100),
        },
    )
    rep = build_report(tmp_path / "k")
    (cost,) = rep.cost
    assert cost["exponent"] == pytest.approx(4.0, abs=1e-12)
    assert cost["exponent_per_step"] == pytest.approx(3.0, abs=1e-12)
    assert cost["median_seconds_per_step"][0] == pytest.approx(1e-10 * 240**3 * 1.01)
    assert "one step's like n^3.00" in "\n".join(rep.findings)
    write_report(tmp_path / "k", plots=False)
    md = (tmp_path / "k" / "report.md").read_text()
    assert "| 4.00 +- 0.00 | 4.00 | 3.00 +- 0.00 | 3 |" in md
    assert "grows faster than its kernel passes" not in "\n".join(rep.findings)


def test_a_size_without_step_counts_leaves_the_step_exponent_out(tmp_path):
    # rows of older versions carry no steps (or null; a bool is refused when a row is read):
    # no exponent per step, where a fit through the other sizes alone would mislead
    def timing(t):
        steps = {} if t.n == 20 else {"steps": None if t.seed else 50}
        return {"seconds_run": 1e-6 * t.n**3, **steps}

    _timed_study(tmp_path / "o", "20,40", "gradient", timing, seeds="0-1")
    (cost,) = build_report(tmp_path / "o").cost
    assert cost["exponent_per_step"] is None
    per_step = cost["median_seconds_per_step"]
    assert math.isnan(per_step[0]) and per_step[1] == pytest.approx(1e-6 * 40**3 / 50)


def test_a_step_that_grows_faster_than_its_passes_is_flagged_and_a_flat_one_bracketed(tmp_path):
    # one step of a P = 3 method cannot grow like n^4.8 through its passes (a user trial saw
    # 4.1-4.8 on a busy host): the table marks it and the findings say why; a step time that
    # grows more slowly than n is in parentheses, like such a b
    def timing(t):
        per_step = 1e-12 * t.n**4.8 if t.method.name == "hessian" else 1e-3 * t.n**0.5
        return {"steps": 25, "seconds_run": 25 * per_step * (1 + t.seed / 100)}

    _timed_study(tmp_path / "f", "100,200,400", "hessian,gradient", timing)
    rep = build_report(tmp_path / "f")
    by_method = {c["method"]: c for c in rep.cost}
    assert by_method["hessian"]["exponent_per_step"] == pytest.approx(4.8, abs=1e-9)
    findings = "\n".join(rep.findings)
    assert "one step grows faster than its kernel passes can make it (P = 3;" in findings
    assert findings.count("grows faster than its kernel passes") == 1
    # 25 steps at every size: the step's exponent is the run's, and the findings say it once
    assert "one step's like" not in findings
    write_report(tmp_path / "f", plots=False)
    md = (tmp_path / "f" / "report.md").read_text()
    assert "| 4.80 +- 0.00 ! | 3 |" in md
    assert "| (0.50 +- 0.00) | 3 |" in md


def test_the_step_flag_leaves_room_for_the_cubic_work_of_a_run():
    # a review: at P = 2 the end check's n^3 eigenvalues, spread over the steps, lift b (step)
    # towards 3 by themselves; the flag needs max(P, 3) + 0.5, and more than twice the s.e.
    from orthoclimb.studies.cost import above_degree

    def flagged(b, p, se=None):
        return above_degree({"exponent_per_step": b, "max_degree": p, "exponent_per_step_se": se})

    assert not flagged(3.3, 2) and flagged(3.6, 2)
    assert not flagged(3.4, 3) and flagged(3.6, 3) and flagged(3.6, 3, se=0.1)
    assert not flagged(3.6, 3, se=0.4) and flagged(4.6, 4) and not flagged(4.4, 4)
    assert not flagged(None, 3) and not flagged(5.0, None)
