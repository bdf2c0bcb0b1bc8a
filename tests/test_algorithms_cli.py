"""``orthoclimb climb`` end to end on small cases."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
import scipy.linalg

import orthoclimb as oc
from orthoclimb.cli import main


def test_climb_hessian_writes_files(tmp_path, capsys):
    out = tmp_path / "a"
    code = main(
        [
            "climb",
            "--gammas",
            "3:1",
            "--n",
            "40",
            "--seed",
            "4",
            "--method",
            "hessian",
            "--steps",
            "20",
            "--out",
            str(out),
            "--no-progress",
        ]
    )
    assert code == 0
    text = capsys.readouterr().out
    assert "of coefficients" in text and "estimated run time" in text
    assert "ALG" in text and "local maximum" in text
    for name in ("result.json", "result.npz", "path.png"):
        assert (out / name).stat().st_size > 0
    res = oc.load_result(out / "result")
    assert res.config["n"] == 40 and res.config["steps"] == 20


@pytest.mark.parametrize(("method", "cap"), [("gradient", "--max-iter"), ("anneal", "--steps")])
def test_climb_baselines_json(tmp_path, capsys, method, cap):
    out = tmp_path / method
    code = main(
        [
            "climb",
            "--xi",
            "2:1,4:0.0625",
            "--n",
            "20",
            "--method",
            method,
            cap,
            "50",
            "--out",
            str(out),
            "--json",
            "--threads",
            "1",
        ]
    )
    assert code == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["method"] == method and summary["alg"] > 0
    # the output names its instance: xi = q^2 + q^4/16 is gammas 2:1, 4:0.25
    assert summary["gammas"] == oc.Mixture({2: 1.0, 4: 0.25}).to_text()
    assert (summary["n"], summary["seed"], summary["dtype"]) == (20, 0, "float64")
    assert summary["start_seed"] == 0
    assert (out / "path.png").exists()
    config = oc.load_result(out / "result").config
    assert config["max_iter" if method == "gradient" else "steps"] == 50


@pytest.mark.parametrize(
    "extra",
    [
        ["--steps", "0"],
        ["--steps", str(10**20)],  # ran after estimating 1.7e13 h (a review)
        ["--method", "anneal", "--steps", str(10**14)],  # a MemoryError traceback
        ["--tol", "-1"],
        ["--tol", "1e-400"],
        ["--n", "0"],
        ["--n", "1"],  # Hessian ascent needs a tangent direction
        ["--n", "1", "--method", "gradient"],  # and so does every method (it returned -1 or +1)
        ["--out", ""],  # wrote into the working folder
        ["--method", "gradient", "--tol", "5"],  # an option of another method: not ignored
        ["--method", "gradient", "--no-polish"],
        ["--method", "gradient", "--steps", "50"],  # gradient's cap is --max-iter, as in sweep
        ["--method", "anneal", "--max-iter", "50"],
        ["--method", "gradient", "--max-iter", "0"],
        ["--gammas", "9:1"],
        ["--seed", "-3"],
        ["--start-seed", str(2**64)],
    ],
)
def test_climb_bad_input(tmp_path, capsys, extra):
    args = ["climb", "--gammas", "3:1", "--n", "10", "--out", str(tmp_path)]
    if extra[0] == "--gammas":
        args[2] = extra[1]
    else:
        args += extra
    try:  # argparse's own checks of a value exit; the later ones return the code
        code = main(args)
    except SystemExit as stop:
        code = stop.code
    assert code == 2
    assert "error" in capsys.readouterr().err


def test_climb_refused_for_memory_says_what_the_command_can_do(tmp_path, capsys):
    # p = 3 at n = 100000 needs 1.3e15 bytes; the refusal ended "(in Python, check_memory=False
    # skips this check)", which a command-line user cannot do (a user trial)
    args = ["climb", "--gammas", "3:1", "--n", "100000", "--out", str(tmp_path / "c")]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert f"needs {8 * math.comb(100002, 3)} bytes" in err and "check_memory" not in err
    assert (
        "a smaller --n fits; --plan-only prints the plan, timing a small instance that fits" in err
    )


@pytest.mark.parametrize(
    ("method", "extra", "done"),
    [("hessian", [], 24), ("anneal", ["--steps", "30"], 30), ("hessian", ["--steps", "1"], 0)],
)
def test_climb_bar_says_polishing_once_the_steps_are_done(
    tmp_path, capsys, monkeypatch, method, extra, done
):
    # the bar counted the steps and then stood still at its end through the polish, which
    # can take as long as the steps; its label now says what runs
    import tqdm

    labels = []

    class Bar:
        def __init__(self, total, **_kwargs):
            self.total, self.n = total, 0

        def update(self, k):
            self.n += k

        def set_postfix(self, **_kwargs):
            pass

        def set_description_str(self, text, refresh=True):
            labels.append((self.n, text))

        def close(self):
            pass

    monkeypatch.setattr(tqdm, "tqdm", Bar)
    args = ["climb", "--gammas", "3:1", "--n", "30", "--method", method, *extra]
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    assert len(labels) == 1 and labels[0][1] == "polishing"
    # after K - 1 steps (K = 25), 30 Langevin steps, or at once when K = 1 makes no step
    assert labels[0][0] == done
    labels.clear()
    assert main([*args, "--no-polish", "--out", str(tmp_path / "b")]) == 0
    assert labels == []
    capsys.readouterr()


@pytest.mark.parametrize("method", ["hessian", "gradient", "anneal"])
def test_climb_estimates_the_polish_and_a_gradient_cap_and_draws_no_bar_in_a_log(
    tmp_path, capsys, method
):
    # the estimate counts what the run will do: the polish's passes (hessian, anneal), and
    # for gradient ascent its typical passes with the time at the cap; a log (stderr not
    # a terminal, as under capsys) gets no progress-bar frames
    args = ["climb", "--gammas", "3:1", "--n", "30", "--method", method, "--out", str(tmp_path)]
    assert main(args) == 0
    captured = capsys.readouterr()
    line = next(s for s in captured.out.splitlines() if "estimated run time" in s)
    if method == "gradient":
        # the mean pass count at n = 30 is the model's floor of 40 (studies.estimate)
        assert "typically 40 passes at this n; at most" in line and "--max-iter 2000" in line
    else:
        assert "and the polish)" in line
    assert "\r" not in captured.err and "it/s" not in captured.err and "step/s" not in captured.err
    if method != "gradient":
        assert main([*args, "--no-polish"]) == 0
        assert "and the polish" not in capsys.readouterr().out


def test_the_sampling_time_is_estimated_before_a_large_instance_is_sampled(monkeypatch):
    # above 256 MB, climb times an instance of at most 64 MB and scales by the bytes (one
    # Gaussian per coefficient): the probe's size and the scaling, with a fake clock
    import orthoclimb.cli.climb_cmd as climb_module

    ticks = iter([0.0, 0.5])
    monkeypatch.setattr(climb_module.time, "perf_counter", lambda: next(ticks))
    mix = oc.Mixture({3: 1.0})
    need = oc.estimate_memory(mix, 800)
    text = climb_module._sampling_estimate(mix, 800, "float64", need)
    n0 = int(text.split("n = ")[1].rstrip(")"))
    probe = oc.estimate_memory(mix, n0)
    # the largest size of the chain n, 0.9 n, 0.81 n, ... within 64 MB: at p = 3 at least
    # 0.9^3 of it
    assert 0.9**3 * 64 * 2**20 < probe <= 64 * 2**20
    assert text.startswith(f"sampling: about {0.5 * need / probe:.2g} s")
    assert (
        climb_module._sampling_estimate(mix, 400, "float64", oc.estimate_memory(mix, 400)) is None
    )


@pytest.mark.parametrize(
    "command",
    [
        ["climb", "--gammas", "3:1", "--n", "10", "--seed", "1", "--steps", "2"],
        ["sweep", "--gammas", "3:1", "--n", "10", "--seeds", "0-1", "--methods", "gradient"],
        ["profile", "--gammas", "3:1", "--n", "10"],
    ],
)
@pytest.mark.parametrize("where", ["out", ""])  # under a file, or the file itself
def test_an_output_folder_that_cannot_be_made_is_refused_before_the_work(
    tmp_path, capsys, command, where
):
    blocker = tmp_path / "a-file"
    blocker.write_text("not a folder")
    code = main([*command, "--out", str(blocker / where)])
    captured = capsys.readouterr()
    assert code == 2
    assert f"orthoclimb {command[0]}: error:" in captured.err and str(blocker) in captured.err
    assert "Traceback" not in captured.err
    assert "instance:" not in captured.out and "study:" not in captured.out  # nothing ran


def _refuse_sampling(monkeypatch):
    def sample(*args, **kwargs):
        raise AssertionError("the instance was sampled before the output was checked")

    monkeypatch.setattr(oc.Hamiltonian, "sample", sample)


@pytest.mark.parametrize("blocked", ["result.json", "result.npz", "path.png"])
def test_climb_checks_its_files_before_the_run(tmp_path, capsys, monkeypatch, blocked):
    # a folder at out/result.json was found only after sampling and the whole run, and the
    # run was lost (a review)
    (tmp_path / "c" / blocked).mkdir(parents=True)
    _refuse_sampling(monkeypatch)
    args = ["climb", "--gammas", "3:1", "--n", "12", "--steps", "3", "--out", str(tmp_path / "c")]
    assert main(args) == 2
    err = capsys.readouterr().err
    assert f"{str(tmp_path / 'c' / blocked)!r}: it is a folder" in err


def test_climb_checks_that_its_folder_takes_files_before_the_run(tmp_path, capsys, monkeypatch):
    # an immutable folder (chattr +i) refused result.npz after the run; root ignores modes,
    # so the refusal is simulated at the temporary file the check makes
    import errno
    import tempfile

    real = tempfile.mkstemp

    def refusing(*args, dir=None, **kwargs):
        if str(dir) == str(tmp_path / "c"):
            raise PermissionError(errno.EPERM, "Operation not permitted")
        return real(*args, dir=dir, **kwargs)

    (tmp_path / "c").mkdir()
    monkeypatch.setattr(tempfile, "mkstemp", refusing)
    _refuse_sampling(monkeypatch)
    args = ["climb", "--gammas", "3:1", "--n", "12", "--steps", "3", "--out", str(tmp_path / "c")]
    assert main(args) == 2
    assert "does not take new files: Operation not permitted" in capsys.readouterr().err


def test_a_closed_pipe_ends_the_command_quietly():
    # common practice (POSIX tools): a reader that goes away (`orthoclimb theory | head -1`)
    # stops the writer with status 141 and no message; the pipe is closed before it writes
    import subprocess
    import sys

    cmd = [sys.executable, "-m", "orthoclimb", "theory", "--gammas", "3:1"]
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == 141, err
    assert err == ""


def test_climb_notes_threads_beyond_the_cores(tmp_path, capsys):
    # sweep lowers such a request with a note; climb keeps what was asked, but says that the
    # threads will share fewer cores (before: silently)
    from orthoclimb.studies.engine import available_cores

    cores, before = available_cores(), oc.get_num_threads()
    args = ["climb", "--gammas", "3:1", "--n", "12", "--steps", "3", "--no-progress"]
    assert main([*args, "--threads", str(cores + 1), "--out", str(tmp_path / "a")]) == 0
    out = capsys.readouterr().out
    assert f"note: --threads {cores + 1} is more than the {cores} core" in out
    assert main([*args, "--threads", "1", "--out", str(tmp_path / "b")]) == 0
    assert "note: --threads" not in capsys.readouterr().out
    oc.set_num_threads(before)


def test_a_failed_command_leaves_no_empty_output_folder(tmp_path, monkeypatch, capsys):
    # a refusal after --out was made (profile's sizes are checked after it), an error and a
    # Ctrl-C during the run used to leave the new, empty folder (and its new parents) behind
    new = tmp_path / "a" / "b"
    assert main(["profile", "--gammas", "3:1", "--n", "50", "--out", str(new)]) == 2
    assert not (tmp_path / "a").exists()

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(oc.Hamiltonian, "sample", interrupted)
    climb = ["climb", "--gammas", "3:1", "--n", "20", "--no-progress"]
    assert main([*climb, "--out", str(new)]) == 130
    assert not (tmp_path / "a").exists()
    # folders that existed stay, and so does a new one that received a file
    kept = tmp_path / "kept"
    kept.mkdir()
    assert main([*climb, "--out", str(kept / "run")]) == 130
    assert kept.is_dir() and not (kept / "run").exists()
    monkeypatch.undo()

    def fails_after_writing(result, png):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr("orthoclimb.algorithms.plotting.plot_result", fails_after_writing)
    assert main([*climb, "--out", str(tmp_path / "c")]) == 1
    assert sorted(p.name for p in (tmp_path / "c").iterdir()) == ["result.json", "result.npz"]
    capsys.readouterr()


@pytest.mark.parametrize("method", ["hessian", "anneal"])
def test_climb_shows_the_energy_before_polish_only_when_it_polished(tmp_path, capsys, method):
    # with --no-polish the table printed a "before polish" line equal to the energy (user
    # review); anneal's pre-polish energy was not shown at all
    base = ["climb", "--gammas", "3:1", "--n", "20", "--method", method, "--no-progress"]
    base += ["--json", "--out", str(tmp_path / method)]
    assert main(base) == 0
    polished = json.loads(capsys.readouterr().out)
    key = "energy_ascent" if method == "hessian" else "energy_anneal"
    result = oc.load_result(tmp_path / method / "result")
    assert polished["energy_before_polish"] == result.info[key]
    assert main([*base, "--no-polish"]) == 0
    assert "energy_before_polish" not in json.loads(capsys.readouterr().out)


def test_climb_plan_only_estimates_without_sampling_or_writing(tmp_path, capsys, monkeypatch):
    # --plan-only times an instance of at most 64 MB and scales by the bytes: for p = 3 at
    # n = 6000 (268 GiB, more than this machine has) it prints the plan and the memory note,
    # samples nothing at n and makes no folder
    sizes = []
    real = oc.Hamiltonian.sample

    def recording(mixture, n, *args, **kwargs):
        sizes.append(n)
        return real(mixture, n, *args, **kwargs)

    monkeypatch.setattr(oc.Hamiltonian, "sample", staticmethod(recording))
    out = tmp_path / "never"
    args = ["climb", "--gammas", "3:1", "--n", "6000", "--method", "gradient", "--plan-only"]
    assert main([*args, "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "268.4 GiB of coefficients" in text and "sampling: about" in text
    assert "estimated run time about" in text and "plan only: no run, nothing written" in text
    assert sizes and max(sizes) < 400 and not out.exists()


def test_a_plan_says_when_its_hessian_steps_must_run_matrix_free(tmp_path, capsys, monkeypatch):
    # a plan of hours where the dense Hessian does not fit beside the instance, with no word
    # of why (a float32 plan at n = 3000 read 7.8 h): it now says that each Lanczos product
    # will be a pass over the coefficients, and what the dense work needs
    from orthoclimb.model import estimate_memory
    from orthoclimb.model import memory as memory_module

    args = ["climb", "--gammas", "3:1", "--n", "300", "--plan-only"]
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    assert "matrix-free" not in capsys.readouterr().out
    instance = estimate_memory(oc.Mixture({3: 1.0}), 300)
    monkeypatch.setattr(memory_module, "available_memory", lambda: instance + 2**20)
    assert main([*args, "--out", str(tmp_path / "b")]) == 0
    out = capsys.readouterr().out
    assert "note: matrix-free Lanczos: the dense Hessian's work at n = 300 (" in out
    assert "does not fit in half of what this machine leaves beside the instance (512.0 KiB)" in out
    assert "every Lanczos product is a Hessian-vector product, a pass over the coefficients" in out
    assert "with that memory free (or with --dtype float32, which halves the instance)" in out


def test_a_runs_estimate_decides_dense_as_the_run_does_with_its_instance_held(monkeypatch):
    # after sampling, the estimate took the instance's bytes off the available memory a second
    # time (they are already held), so it could plan matrix-free Lanczos for a run that then
    # went dense; it now asks the run's own rule, the work in half of what is available
    from orthoclimb.cli import climb_cmd
    from orthoclimb.model import memory as memory_module

    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 60, 0)
    need = ham.hessian_workspace_nbytes + 4 * 60 * 60 * 8
    monkeypatch.setattr(memory_module, "available_memory", lambda: 2 * need)
    text, dense = climb_cmd._run_estimate(ham, "hessian", 10, True)
    assert "matrix-free" not in text
    monkeypatch.setattr(memory_module, "available_memory", lambda: 2 * need - 2)
    text, free = climb_cmd._run_estimate(ham, "hessian", 10, True)
    assert "note: matrix-free Lanczos: the dense Hessian's work at n = 60" in text
    assert dense is not None and free is not None and dense < 0.5 * free


def test_a_plan_timed_on_a_busy_machine_says_so(tmp_path, capsys, monkeypatch):
    # a trial's plans for one run varied 3-5x while its own sweep kept both cores busy: the
    # plan now says when other processes were busy while it timed the kernels (the measure
    # itself is tested in test_load.py; here it reads 1.6 cores, then nothing)
    from orthoclimb import _load

    args = ["climb", "--gammas", "3:1", "--n", "40", "--plan-only"]
    monkeypatch.setattr(_load.OtherLoad, "stop", lambda self, settle=0.0: 1.6)
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    out = capsys.readouterr().out
    assert "note: other processes kept 1.6 of this machine's" in out
    assert "the plan is for free cores, and the run takes longer" in out
    monkeypatch.setattr(_load.OtherLoad, "stop", lambda self, settle=0.0: 0.1)
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    assert "other processes" not in capsys.readouterr().out
    # a real run says it of the estimate it prints before running
    monkeypatch.setattr(_load.OtherLoad, "stop", lambda self, settle=0.0: 1.2)
    run = ["climb", "--gammas", "3:1", "--n", "12", "--steps", "3", "--out", str(tmp_path / "r")]
    assert main(run) == 0
    assert "the estimate is for free cores" in capsys.readouterr().out


def test_climb_names_a_point_that_is_not_critical_and_refuses_a_json_plan(tmp_path, capsys):
    # "no (0 positive eigenvalues)" contradicted itself for a run stopped on a slope; a plan
    # under --json printed nothing at all (a review)
    args = ["climb", "--gammas", "3:1", "--n", "60", "--method", "gradient", "--max-iter", "20"]
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    assert "no (not a critical point" in capsys.readouterr().out
    assert main([*args, "--plan-only", "--json", "--out", str(tmp_path / "b")]) == 2
    assert "--plan-only prints its plan as text" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("seconds", "text"),
    [
        (2e-5, "20 us"),
        (0.0009996, "1 ms"),
        (-1.0, "unknown"),
        (float("nan"), "unknown"),
        (0.85, "850 ms"),
        (0.9996, "1.0 s"),
        (3.24, "3.2 s"),
        (99.4, "99 s"),
        (99.6, "2 min"),
        (5969, "99 min"),
        (9000, "2.5 h"),
        (71.9 * 3600, "71.9 h"),
        (72 * 3600, "3 days"),
        (729 * 86400, "729 days"),
        (729.7 * 86400, "2.0 years"),
        (731 * 86400, "2.0 years"),
        (1.077e12 * 3600, "1.2e+08 years"),
    ],
)
def test_durations_read_as_people_write_them(seconds, text):
    # "1e+02 s", "1.5e+02 s" and "1000 ms" came out of the %g formats before (a review); a
    # plan for degree 8 at n = 2000 said "1077240293454.1 h" (a user trial)
    from orthoclimb.cli import seconds_text

    assert seconds_text(seconds) == text


def test_a_plan_without_hessian_steps_does_not_time_a_hessian(tmp_path, capsys):
    # a field strong enough that q_hat = 1 ends Hessian ascent's first stage on the sphere:
    # the plan printed "one Hessian pass: 0 us ... (0 Hessian steps ...)" (a review)
    args = ["climb", "--gammas", "1:3,2:1", "--n", "200", "--method", "hessian", "--plan-only"]
    assert main([*args, "--out", str(tmp_path / "p")]) == 0
    out = capsys.readouterr().out
    assert (
        "no Hessian step: the field stage ends on the sphere; the field stage and the polish" in out
    )
    assert "one Hessian pass" not in out


def test_climb_with_one_step_says_why_there_is_no_hessian_step(tmp_path, capsys):
    # without a field, steps = 1 was explained by "the field stage ends on the sphere"
    args = ["climb", "--gammas", "3:1", "--n", "30", "--steps", "1", "--out", str(tmp_path)]
    assert main(args) == 0
    out = capsys.readouterr().out
    assert "no Hessian step: --steps 1 has none" in out and "field stage" not in out


def test_ctrl_c_while_the_parser_is_built_is_one_line(monkeypatch, capsys):
    # a Ctrl-C in the first second of a command, while its parser imports SciPy, printed
    # about 50 lines of traceback (a review)
    import orthoclimb.cli as cli

    def interrupted():
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "build_parser", interrupted)
    assert cli.main(["theory", "--gammas", "3:1"]) == 130
    assert capsys.readouterr().err == "orthoclimb: interrupted\n"


def test_climb_reports_its_sampling_time_and_the_top_riemannian_eigenvalue(tmp_path, capsys):
    # a user trial could not set the sampling estimate against the sampling time, and found
    # the end point's top tangent eigenvalue only in result.json; a later one read that
    # number (the Riemannian Hessian's) for the projected Hessian's of the path's column
    args = ["climb", "--gammas", "3:1", "--n", "40", "--steps", "5", "--no-progress"]
    assert main([*args, "--json", "--out", str(tmp_path / "a")]) == 0
    summary = json.loads(capsys.readouterr().out)
    saved = oc.load_result(tmp_path / "a" / "result")
    assert summary["top_eigenvalue"] == saved.info["top_eigenvalue"] < 0
    assert 0 < summary["seconds_sampling"] < 60
    # and the estimate printed before the run, to set beside its time (a user trial's wish);
    # none where nothing is estimated (no Hessian step and no polish), not 0
    assert summary["seconds_estimated"] > 0
    bare = ["climb", "--gammas", "3:1", "--n", "40", "--steps", "1", "--no-polish", "--json"]
    assert main([*bare, "--out", str(tmp_path / "c")]) == 0
    assert json.loads(capsys.readouterr().out)["seconds_estimated"] is None
    # the Riemannian Hessian on the unit sphere, B^T (Hess H - (x . grad H) I) B for an
    # orthonormal basis B of the tangent space (Absil, Mahony and Sepulchre 2008, ch. 5),
    # with scipy.linalg.null_space and eigvalsh
    ham = oc.Hamiltonian.sample(oc.Mixture({3: 1.0}), 40, seed=0)
    x = saved.x / np.linalg.norm(saved.x)
    basis = scipy.linalg.null_space(x[None, :])
    riem = basis.T @ (ham.hessian(x) - (x @ ham.gradient(x)) * np.eye(40)) @ basis
    top = scipy.linalg.eigvalsh(riem)[-1] / 40
    assert summary["top_eigenvalue"] == pytest.approx(top, rel=1e-9, abs=1e-12)
    assert main([*args, "--out", str(tmp_path / "b")]) == 0
    out = capsys.readouterr().out
    assert "top Riemannian eigenvalue" in out and "; sampling " in out and "(estimated " in out


@pytest.mark.parametrize(
    ("argv", "words"),
    [
        (["climb", "--gammas", "2:1", "--n", "20", "--method", "gradient", "--start", "top"],
         "--start applies to --method hessian only, not gradient"),
        (["climb", "--gammas", "3:1", "--n", "20", "--start", "top"],
         "start='top' needs a degree-2 term"),
        (["sweep", "--gammas", "2:1", "--n", "20", "--seeds", "0", "--methods", "gradient",
          "--start", "top"], "--start applies to the method hessian, not in --methods gradient"),
    ],
)  # fmt: skip
def test_the_start_flag_is_refused_where_it_does_nothing(tmp_path, capsys, argv, words):
    assert main([*argv, "--out", str(tmp_path / "o")]) == 2
    assert words in capsys.readouterr().err


def test_climb_starts_along_the_top_eigenvector_where_there_is_a_degree_2_term(tmp_path, capsys):
    base = ["climb", "--gammas", "2:1,4:0.25", "--n", "40", "--steps", "10", "--json"]
    for start, used in ((None, "top"), ("random", "random")):
        flag = [] if start is None else ["--start", start]
        assert main([*base, *flag, "--out", str(tmp_path / used)]) == 0
        capsys.readouterr()
        assert oc.load_result(tmp_path / used / "result").config["start"] == used


def test_the_table_shows_energies_far_from_order_one_in_significant_digits(tmp_path, capsys):
    # a user trial: gammas of 1e-100 printed every energy, ALG and GS as 0.000000. The
    # table's numbers must read back as the JSON's to six significant digits
    args = ["climb", "--gammas", "3:1e-100", "--n", "30", "--steps", "10", "--no-progress"]
    assert main([*args, "--out", str(tmp_path / "a")]) == 0
    table = capsys.readouterr().out.splitlines()
    lines = dict(line.split("  ", 1) for line in table if "  " in line)
    assert main([*args, "--json", "--out", str(tmp_path / "b")]) == 0
    summary = json.loads(capsys.readouterr().out)
    for label, key in (
        ("energy per spin", "energy"),
        ("ALG", "alg"),
        ("GS (Parisi)", "ground_state"),
    ):
        shown = float(lines[label].strip())
        assert shown == pytest.approx(summary[key], rel=1e-5) and shown != 0, label


@pytest.mark.parametrize(
    "command",
    [
        ["climb", "--gammas", "3:1", "--n", "10", "--steps", "2"],
        ["sweep", "--gammas", "3:1", "--n", "10", "--seeds", "0-1", "--methods", "gradient"],
        ["profile", "--gammas", "3:1", "--n", "10,12", "--repeats", "1"],
        ["demo", "--quick", "--plan-only"],
        ["report", "a-study"],
    ],
)
def test_every_command_refuses_an_empty_out_the_same_way(tmp_path, monkeypatch, capsys, command):
    # a review: sweep and profile wrote into the working folder and demo took "" as ".",
    # while climb and report refused it
    monkeypatch.chdir(tmp_path)
    assert main([*command, "--out", ""]) == 2
    err = capsys.readouterr().err
    assert err == f"orthoclimb {command[0]}: error: --out must name a folder, got an empty string\n"
    assert list(tmp_path.iterdir()) == []  # nothing was written


def test_cli_warnings_are_one_line_without_the_source(tmp_path, capsys):
    # a review: the scale warning of `climb --gammas 2:1e150` (and --tol 1e308's) printed
    # Python's display, the path of climb_cmd.py, its line and the source line of the call
    import warnings

    before = warnings.showwarning
    args = ["climb", "--gammas", "2:1e150", "--n", "12", "--steps", "3", "--no-progress"]
    assert main([*args, "--out", str(tmp_path / "c")]) == 0
    err = capsys.readouterr().err
    line = "orthoclimb climb: warning: hessian_ascent: the energy scale sqrt(xi(1)) = 1e+150"
    assert line in err
    assert "climb_cmd.py" not in err and "RuntimeWarning" not in err
    assert "hessian_ascent(" not in err and len(err.splitlines()) == 1, err
    # the library's callers keep Python's display, warning category included
    assert warnings.showwarning is before
    ham = oc.Hamiltonian.sample(oc.Mixture({2: 1e150}), 12, seed=0)
    with pytest.warns(RuntimeWarning, match="the energy scale sqrt"):
        oc.hessian_ascent(ham, steps=3, polish=False)
