"""The profile command: kernel timings against n, the fitted exponents and the plan it
prints before timing."""

from __future__ import annotations

import json
import math

import pytest

from orthoclimb import Mixture
from orthoclimb.cli import main


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
    _fake_profile(monkeypatch, lambda n, big: 2.0 if n == big else 1.0)
    assert main(["profile", "--gammas", "3:1", "--n", "100,200,400", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "b above that growth between n = 200 and 400 (hessian)" in out
    assert "hessian 1 -> 2 ns" in out
    assert "energy," not in out.split("b above")[1]  # only the kernel whose slope is above


def _fake_profile(monkeypatch, hessian_factor, count=lambda n: n**3, mixture="3:1"):
    """profile_kernels replaced by synthetic timings: count(n) ns for every kernel, the
    Hessian's times multiplied by hessian_factor(n, largest n); the real summary on top."""
    import orthoclimb.studies.profile as profile_module
    from orthoclimb.studies.profile import KERNELS, summarize

    def fake(mix, sizes, repeats, on_size=None):
        rows = []
        for n in sorted(sizes):
            t = {k: 1e-9 * count(n) for k in (*KERNELS, "sample")}
            t["hessian"] *= hessian_factor(n, max(sizes))
            per = {k: 1e9 * t[k] / count(n) for k in t}
            rows.append({"n": n, "coefficients": count(n), **t, "ns_per_coefficient": per})
        return summarize(rows, Mixture.parse(mixture), 1)

    monkeypatch.setattr(profile_module, "profile_kernels", fake)
    monkeypatch.setattr(
        profile_module, "write_profile", lambda prof, out: {"json": "j", "plot": "p"}
    )


def test_profile_reads_b_against_the_count_growth_not_p(tmp_path, capsys, monkeypatch):
    # degree 8 at n = 16..28: C(n+7, 8) grows like n^6.9 there, so times that follow the count
    # are not "below P" and need no larger sizes (a review); exact binomials, math.comb
    _fake_profile(monkeypatch, lambda n, big: 1.0, lambda n: math.comb(n + 7, 8), "8:1")
    args = ["profile", "--gammas", "8:1", "--n", "16,20,24,28", "--out", str(tmp_path)]
    assert main(args) == 0
    out = capsys.readouterr().out
    q = math.log(math.comb(35, 8) / math.comb(23, 8)) / math.log(28 / 16)
    assert 6.5 < q < 7.2 and "count grows like n^6." in out
    assert "below" not in out and "above" not in out and "loosely" not in out


def test_profile_flags_a_slope_above_over_all_sizes_and_a_loose_fit(tmp_path, capsys, monkeypatch):
    # a 4x step of the Hessian's time per coefficient between the two smallest sizes: the
    # largest pair is back at n^3, the all-sizes slope is 3.6 and the line misses the points
    _fake_profile(monkeypatch, lambda n, big: 1.0 if n == 100 else 4.0)
    assert main(["profile", "--gammas", "3:1", "--n", "100,200,400,800", "--json",
                 "--out", str(tmp_path)]) == 0  # fmt: skip
    prof = json.loads(capsys.readouterr().out)
    text = " ".join(prof["notes"])
    assert "b above that growth over all sizes (hessian)" in text
    assert "hessian 1 -> 4 ns" in text and "hessian up to" in text
    assert prof["coefficient_exponent"] == pytest.approx(3.0)
    assert prof["fit_spread"]["energy"] == pytest.approx(1.0)


def test_profile_of_a_linear_mixture_expects_n2_for_the_hessian(tmp_path, capsys, monkeypatch):
    # P = 1: the Hessian's n x n output sets its growth, not the n coefficients
    _fake_profile(monkeypatch, lambda n, big: n / 100, lambda n: n, "1:1")
    assert main(["profile", "--gammas", "1:1", "--n", "100,200,400", "--out", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "grows like n^2 at least" in out and "above" not in out


def test_profile_refuses_before_timing_or_printing_its_plan(tmp_path, capsys):
    # an instance too large for memory (p = 3 at n = 100000: 1.3e15 bytes) and --repeats 0
    # are refused before any size is sampled or timed and before the plan line is printed
    from orthoclimb.studies.profile import profile_kernels

    seen = []
    with pytest.raises(MemoryError) as refused:
        profile_kernels(Mixture.parse("3:1"), [50, 100000], 1, lambda *a: seen.append(a))
    assert seen == []  # n = 50 was not timed first
    # the way on that the message gives is one this function has (it has no check_memory)
    assert str(refused.value).endswith("(smaller sizes fit)")
    for extra in (["--n", "50,100000"], ["--n", "50,60", "--repeats", "0"]):
        args = ["profile", "--gammas", "3:1", *extra, "--out", str(tmp_path / "p")]
        assert main(args) == 2
        err = capsys.readouterr().err
        assert "error:" in err and "profile: n =" not in err and "done in" not in err
    # a user trial: --repeats 100000000 printed its plan and timed on without an end in sight
    args = ["profile", "--gammas", "3:1", "--n", "50,60", "--repeats", "1001"]
    assert main([*args, "--out", str(tmp_path / "p")]) == 2
    assert "--repeats must be in 1..1000, got 1001" in capsys.readouterr().err


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


def test_profile_counts_the_hessian_workspace_before_it_starts(tmp_path, capsys):
    # 1:1 at n = 100000 holds 0.8 MB of coefficients, but its Hessian's n x n accumulators
    # need about 149 GiB: the plan did not count them, and the profile failed after timing
    # the smaller sizes (a review). Now refused before anything is sampled or printed
    from orthoclimb.model.memory import hessian_workspace_estimate

    big = hessian_workspace_estimate(Mixture({1: 1.0}), 100000)
    assert big >= 2 * 100000**2 * 8  # at least one accumulator and the result
    args = ["profile", "--gammas", "1:1", "--n", "50,100000", "--out", str(tmp_path / "p")]
    assert main(args) == 2
    captured = capsys.readouterr()
    assert "and its Hessian" in captured.err and "n = 50: done" not in captured.err
    # a profile that fits announces the workspace beside the coefficients
    assert main(["profile", "--gammas", "2:1", "--n", "20,40", "--out", str(tmp_path / "q")]) == 0
    assert "and its Hessian takes" in capsys.readouterr().err


def test_profile_refuses_a_size_given_twice_through_the_api():
    # profile_kernels(mix, [20, 20]) fitted exponents of -1.67 and -inf (a review)
    from orthoclimb.studies.profile import profile_kernels

    with pytest.raises(ValueError, match="sizes must be distinct"):
        profile_kernels(Mixture({3: 1.0}), [20, 20])


def test_the_workspace_estimate_counts_the_accumulators_of_the_core():
    # profile's check estimates the Hessian workspace without sampling; it passed n^2 where
    # the core takes n, counted too few accumulators and understated it (3:1 at n = 400:
    # 2.56 MB against 3.84 MB). rust/kernels.rs `pieces`, as in test_model_kernels: one
    # accumulator per 32 n^2 coefficients, a power of two; plus the result
    from orthoclimb.model.memory import hessian_workspace_estimate

    assert hessian_workspace_estimate(Mixture({3: 1.0}), 50) == (1 + 1) * 50 * 50 * 8
    assert hessian_workspace_estimate(Mixture({3: 1.0}), 400) == (2 + 1) * 400 * 400 * 8
    assert hessian_workspace_estimate(Mixture({3: 1.0}), 300) == (2 + 1) * 300 * 300 * 8


def test_best_time_warms_up_once_untimed():
    # the profile timed the first call after sampling, often the slowest (a review); the
    # estimate's calibration keeps its cold calls
    from orthoclimb.studies.profile import best_time

    calls = []
    assert best_time(lambda: calls.append(1), repeats=3) >= 0.0 and len(calls) == 4
    calls.clear()
    assert best_time(lambda: calls.append(1), repeats=3, warm_up=False) >= 0 and len(calls) == 3


def test_a_folder_where_a_profile_file_goes_is_refused_before_the_timings(tmp_path, capsys):
    # the timings ran (35 s at n = 30000), profile.json was written, then the figure failed
    # on a folder at its path (a review); write_profile also writes both or neither
    from orthoclimb.errors import OutputPathError
    from orthoclimb.studies.profile import profile_kernels, write_profile

    (tmp_path / "profile.png").mkdir()
    assert main(["profile", "--gammas", "3:1", "--n", "20,30", "--out", str(tmp_path)]) == 2
    assert "profile.png': it is a folder" in capsys.readouterr().err
    assert not (tmp_path / "profile.json").exists()
    prof = profile_kernels(Mixture({3: 1.0}), [20, 30], 1)
    with pytest.raises(OutputPathError, match="it is a folder"):
        write_profile(prof, tmp_path)
    assert not (tmp_path / "profile.json").exists()
