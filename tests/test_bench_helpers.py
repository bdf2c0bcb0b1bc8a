"""The benchmark's bookkeeping (bench/, not part of the package): how samples are spread over
rounds, the host check and the peers whose results are wrong. No timing is asserted here."""

from __future__ import annotations

import sys
from pathlib import Path
from types import SimpleNamespace

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))

import _cases  # noqa: E402
import _report  # noqa: E402
import _targets  # noqa: E402
import _timing  # noqa: E402


@pytest.mark.parametrize("wanted", range(5, 42))
def test_samples_are_spread_evenly_over_every_round(wanted):
    # a peer of 7 samples got blocks [2, 2, 2, 1] and no sample in round 5 (a review)
    shares = [_timing.round_share(wanted, r, 5) for r in range(5)]
    assert sum(shares) == wanted
    assert max(shares) - min(shares) <= 1 and min(shares) >= 1


def _probe(rate, blocks):
    return {"host_rate": rate, "block_spread": max(blocks) / min(blocks)}


def test_one_case_with_an_unsteady_probe_is_busy():
    # one case is 1.00 of its own best by construction; its blocks still tell a busy host
    check = _cases.host_check([{"name": "dense4", "rows": [_probe(1.1e9, [0.4, 16.0])]}])
    assert check["busy"] == ["dense4"] and check["single_case"]
    text = _report.host_check_text(check)
    assert "BUSY  dense4" in text and "40.0x apart" in text and "one case ran" in text


def test_a_slow_case_against_the_runs_best_is_busy_and_a_steady_one_is_not():
    cases = [
        {"name": "a", "rows": [_probe(40e9, [1.0, 1.1])]},
        {"name": "b", "rows": [_probe(20e9, [1.0, 1.2])]},
    ]
    check = _cases.host_check(cases)
    assert check["busy"] == ["b"] and check["fractions"] == {"a": 1.0, "b": 0.5}
    assert not check["single_case"] and "one case ran" not in _report.host_check_text(check)


def test_unsteady_text_says_when_nothing_could_be_checked():
    one_round = {"cases": [{"rows": [{"block_spread": None}]}]}
    assert "not measured" in _report.unsteady_text(one_round)
    steady = {"cases": [{"rows": [{"block_spread": 1.1}]}]}
    assert _report.unsteady_text(steady).endswith(": none")


def _stats(seconds):
    return _timing.Stats([seconds] * 5, 1, [1] * 5)


def test_a_peer_with_a_wrong_result_is_never_the_best_row_a_target_reads():
    # a NumPy variant returning zeros was marked best and its 0.02x read as the target
    p, n = 3, 400
    stats, errors = {}, {}
    for kernel in ("energy", "gradient", "hessian", "hvp"):
        stats[("orthoclimb", "", kernel)] = _stats(0.002)
        stats[("numpy", "wrong", kernel)] = _stats(0.0001)
        stats[("numpy", "matmul", kernel)] = _stats(0.02)
        errors[("numpy", "wrong", kernel)] = 1.0 if kernel != "hvp" else float("nan")
        errors[("numpy", "matmul", kernel)] = 1e-15
    h = SimpleNamespace(nbytes=10)
    tensor = SimpleNamespace(ndim=p, shape=(n,) * p, nbytes=8 * n**p)
    rows = _cases.dense_rows(stats, errors, h, tensor, None)
    for row in rows:
        if row["variant"] == "wrong":
            assert not row["best"] and row["note"].startswith("WRONG result")
        if row["variant"] == "matmul":
            assert row["best"]
    case = {"name": f"dense{p}", "rows": rows}
    for t in _targets.evaluate_targets(case):
        assert t["value"] == pytest.approx(10.0)  # 0.02 / 0.002, the right peer


def test_every_batch_row_is_checked_against_single_calls():
    # only the 32-point batch energy had an error column (a review); energy_and_gradient's
    # gradients are compared too
    import orthoclimb as oc

    h = oc.Hamiltonian.sample(oc.Mixture({2: 1.0, 3: 0.5}), 12, seed=1)
    xs = _cases.points(8, 12)
    assert _cases.batch_error(h, xs, "energy") < 1e-13
    assert _cases.batch_error(h, xs, "energy_and_gradient") < 1e-13

    def wrong_batch(y):  # a batch whose gradients are off, single calls right
        e, g = h.energy_and_gradient(y)
        return (e, 1.5 * g) if y.ndim == 2 else (e, g)

    broken = SimpleNamespace(energy=h.energy, energy_and_gradient=wrong_batch)
    assert _cases.batch_error(broken, xs, "energy_and_gradient") > 0.1


def test_measure_spreads_each_functions_samples_over_every_round():
    # the wiring of round_share into measure(): 7 samples over 5 rounds, none empty
    plan = _timing.Plan(
        min_repeats=7, max_repeats=7, budget_s=0.0, settle_s=0.0, warm_s=0.0, warm_calls=1,
        warm_max_s=0.0, min_sample_s=0.0,
    )  # fmt: skip
    stats = _timing.measure({"a": lambda: None, "b": lambda: None}, plan)
    for st in stats.values():
        assert len(st.blocks) == 5 and min(st.blocks) >= 1 and sum(st.blocks) == 7


def test_the_batch_case_checks_every_batch_row(capsys):
    # the wiring of batch_error into case_batch (seconds at n = 12 with the quick plan)
    cfg = _cases.Config(
        plan=_timing.QUICK_PLAN, sizes={"batch": (12,)}, threads=2, quick=True, torch_version=None
    )
    case = _cases.case_batch(cfg, _cases.Workspace())
    batches = [r for r in case["rows"] if r["variant"].startswith("batch b=")]
    assert len(batches) == 6  # b = 32 for both kernels, and 2, 4, 8, 16 for the energy
    assert all(r["rel_err"] is not None and r["rel_err"] < 1e-12 for r in batches)


def test_the_sampling_case_puts_numpy_over_each_sample(capsys):
    # its wiring at n = 10 (220 coefficients): the ratio is the peer's time over each
    # orthoclimb row's, and the count is C(n + 2, 3)
    cfg = _cases.Config(
        plan=_timing.QUICK_PLAN, sizes={"sampling": 10}, threads=2, quick=True, torch_version=None
    )
    case = _cases.case_sampling(cfg, _cases.Workspace())
    assert case["params"]["count"] == 220
    *ours, peer = case["rows"]
    assert [r["variant"] for r in ours] == ["float64", "float32"]
    assert peer["impl"] == "numpy" and peer["ratio"] is None
    for row in ours:
        assert row["ratio"] == peer["median_s"] / row["median_s"]
        assert row["note"].endswith(" M/s")


def test_a_case_with_a_probe_per_size_is_checked_per_size():
    # the batch case measures two sizes, each with its own host probe; keyed by the case
    # alone, the second probe hid the first
    slow, fast = _probe(10e9, [1.0, 1.1]), _probe(40e9, [1.0, 1.1])
    check = _cases.host_check([{"name": "batch", "rows": [{**slow, "n": 400}, {**fast, "n": 800}]}])
    assert check["fractions"] == {"batch n=400": 0.25, "batch n=800": 1.0}
    assert check["busy"] == ["batch n=400"]
