"""Study specification: flags, TOML, seeds text, stable task ids, bad input (exit code 2)."""

from __future__ import annotations

import argparse
import re

import numpy as np
import pytest

from orthoclimb import Mixture
from orthoclimb.cli import main
from orthoclimb.studies.grid import (
    MAX_TASKS,
    TOML_EXAMPLE,
    MethodSpec,
    MixtureSpec,
    StudySpec,
    parse_seeds,
    parse_sizes,
    spec_from_flags,
    spec_from_toml,
)


def test_parse_seeds_ranges_and_lists():
    # common practice: inclusive ranges, comma lists
    assert parse_seeds("0-3") == (0, 1, 2, 3)
    assert parse_seeds("1,5,9") == (1, 5, 9)
    assert parse_seeds("0-1,7") == (0, 1, 7)
    assert parse_seeds([3, 4]) == (3, 4)


@pytest.mark.parametrize(
    "text, words",
    [
        ("5-2", r"^seed range '5-2' is reversed \(end 2 < start 5\); write '2-5'$"),
        ("0--2", r"^seeds must be >= 0, got -2 in the range '0--2'$"),  # no '-2-0' advice
        ("", "empty"),
        ("a-3", "not an integer"),
        ("1,1", "twice"),
        ("-3", ">= 0"),
        ("1,,2", "empty item"),
        ("0-1000000000", "more than 100000 seeds.*'0-1000000000' alone has 1000000001"),
        ("0-60000,70000-130000", "more than 100000 seeds"),
    ],
)
def test_parse_seeds_refuses(text, words):
    with pytest.raises(ValueError, match=words):
        parse_seeds(text)


def test_a_grid_beyond_the_task_cap_is_refused_before_building_it():
    # 4 sizes x 2 methods x 20001 seeds = 160008 tasks > MAX_TASKS; counted, not built
    assert MAX_TASKS == 100_000
    with pytest.raises(ValueError, match="160008 tasks"):
        spec_from_flags(["3:1"], None, "20,30,40,50", "0-20000", "hessian,gradient", {}, 2 / 3)
    ok = spec_from_flags(["3:1"], None, "20,30", "0-99", "hessian,gradient", {}, 2 / 3)
    assert ok.num_tasks == len(ok.tasks()) == 400
    # a mixture with its own sizes counts those: (3 + 2) sizes x 1 method x 4 seeds
    own = MixtureSpec.make(Mixture({3: 1.0}), "own", sizes="20,30,40")
    shared = MixtureSpec.make(Mixture({2: 1.0}), "shared")
    mixed = StudySpec((own, shared), (50, 60), (0, 1, 2, 3), (MethodSpec.make("gradient"),))
    assert mixed.num_tasks == len(mixed.tasks()) == 20


def test_a_seed_beyond_the_tables_integers_is_refused_with_the_reason():
    # results.parquet holds seeds as int64 (pyarrow); 2^63 - 1 fits, 2^63 does not
    assert parse_seeds([2**63 - 1]) == (2**63 - 1,)
    with pytest.raises(ValueError, match=r"\[0, 2\^63\) \(its tables store them as 64-bit"):
        parse_seeds([2**63])


def test_an_anneal_at_one_temperature_is_allowed():
    # t_end = t_start is a constant-temperature run, which geometric_schedule accepts too;
    # only a schedule that heats is refused
    from orthoclimb.algorithms import geometric_schedule

    same = MethodSpec.make("anneal", {"t_start": 0.5, "t_end": 0.5})
    assert dict(same.options)["t_end"] == 0.5
    assert np.all(geometric_schedule(0.5, 0.5, 4) == 0.5)
    with pytest.raises(ValueError, match="t_end = 0.6 is above t_start = 0.5"):
        MethodSpec.make("anneal", {"t_start": 0.5, "t_end": 0.6})


def test_parse_sizes():
    assert parse_sizes("200,100") == (100, 200)
    with pytest.raises(ValueError, match="twice"):
        parse_sizes("100,100")
    with pytest.raises(ValueError, match="size n"):
        parse_sizes("1")


def test_task_ids_stable_and_distinct():
    # exact identity: the id is a hash of the configuration only
    a = spec_from_flags(["3:1"], None, "20,30", "0-2", "hessian,gradient")
    b = spec_from_flags(["3:1"], None, "20,30", "0-2", "hessian,gradient")
    ids = [t.task_id for t in a.tasks()]
    assert ids == [t.task_id for t in b.tasks()]
    assert len(set(ids)) == len(ids) == 2 * 3 * 2
    c = spec_from_flags(
        ["3:1"], None, "20,30", "0-2", "hessian,gradient", {"hessian": {"steps": 7}}
    )
    assert set(ids) != {t.task_id for t in c.tasks()}


def test_toml_matches_flags(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(
        'sizes = [20, 30]\nseeds = "0-2"\n[[mixture]]\ngammas = { 3 = 1.0 }\n'
        '[[method]]\nname = "hessian"\n[[method]]\nname = "gradient"\n'
    )
    flags = spec_from_flags(["3:1"], None, "20,30", "0-2", "hessian,gradient")
    assert [t.task_id for t in spec_from_toml(path).tasks()] == [t.task_id for t in flags.tasks()]


def test_a_study_file_takes_the_exponent_as_a_fraction_like_the_command_line(tmp_path):
    # a user trial: --exponent 2/3 worked while exponent = "2/3" in the file was refused
    from orthoclimb.cli import exponent_value

    body = 'sizes = [20, 30]\nseeds = "0-2"\n[[mixture]]\ngammas = { 3 = 1.0 }\n'
    body += '[[method]]\nname = "gradient"\n'
    for text, value in (('"2/3"', 2 / 3), ('"0.5"', 0.5), ("0.75", 0.75)):
        path = tmp_path / "e.toml"
        path.write_text(f"exponent = {text}\n" + body)
        assert spec_from_toml(path).exponent == value == exponent_value(text.strip('"'))
    for bad in ('"two thirds"', '"-2/3"', '"1/0"', "true"):
        path.write_text(f"exponent = {bad}\n" + body)
        with pytest.raises(ValueError, match="'exponent' must be a number or a fraction"):
            spec_from_toml(path)


def test_malformed_toml_is_a_clear_error(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("sizes = [20, 30\nseeds = 1\n")
    with pytest.raises(ValueError, match="malformed TOML"):
        spec_from_toml(bad)
    assert main(["sweep", str(bad), "--out", str(tmp_path / "o")]) == 2
    assert "malformed TOML" in capsys.readouterr().err


def _one_method_toml(tmp_path, method: str):
    """A study TOML with one mixture and the [[method]] table ``method`` (its lines)."""
    p = tmp_path / "s.toml"
    p.write_text("sizes=[20,30]\nseeds=[0,1]\n[[mixture]]\ngammas={3=1.0}\n[[method]]\n" + method)
    return p


def test_toml_unknown_method_option(tmp_path):
    with pytest.raises(ValueError, match="no option 'stepz'"):
        spec_from_toml(_one_method_toml(tmp_path, 'name="hessian"\nstepz=3\n'))


def test_toml_anneal_that_heats_is_refused(tmp_path):
    # the anneal options describe a cooling schedule from t_start down to t_end; swapped
    # values are refused when the study is read, not after its tasks start
    p = _one_method_toml(tmp_path, 'name="anneal"\nt_start=0.05\nt_end=2\n')
    with pytest.raises(ValueError, match="t_end = 2.0 is above t_start = 0.05"):
        spec_from_toml(p)
    # a study.json written before the rule is still read (and so can be reported)
    stored = {
        "mixtures": [{"name": "3:1", "gammas": {"3": 1.0}}],
        "sizes": [20, 30],
        "seeds": [0, 1],
        "methods": [{"name": "anneal", "t_start": 0.05, "t_end": 2.0}],
    }
    (method,) = StudySpec.from_dict(stored).methods
    assert dict(method.options)["t_end"] == 2.0


@pytest.mark.parametrize("value", ['"x"', "true", "[1]"])
def test_toml_exponent_that_is_no_number_names_the_key(tmp_path, value):
    p = tmp_path / "s.toml"
    p.write_text(
        f"sizes=[20,30]\nseeds=[0,1]\nexponent={value}\n[[mixture]]\ngammas={{3=1.0}}\n"
        '[[method]]\nname="gradient"\n'
    )
    with pytest.raises(ValueError, match="'exponent' must be a number or a fraction such as"):
        spec_from_toml(p)


@pytest.mark.parametrize(
    ("methods", "extra", "words"),
    [
        (
            "gradient",
            ["--tol", "0.1", "--no-polish"],
            "--tol, --no-polish apply to the methods anneal and hessian, not in --methods",
        ),
        ("hessian", ["--max-iter", "5"], "--max-iter applies to the method gradient, not in"),
        ("gradient", ["--steps", "30"], "--steps applies to the methods anneal and hessian"),
    ],
)
def test_cli_options_of_a_method_not_in_the_study_are_refused(
    tmp_path, capsys, methods, extra, words
):
    args = ["sweep", "--gammas", "3:1", "--n", "20,30", "--seeds", "0-1", "--methods", methods]
    assert main([*args, *extra, "--out", str(tmp_path / "o")]) == 2
    assert words in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_steps_and_no_polish_reach_anneal_as_in_climb():
    # climb takes --steps and --no-polish for anneal; sweep refused them there (a review)
    import argparse

    from orthoclimb.cli import sweep_cmd

    parser = argparse.ArgumentParser()
    sweep_cmd.add_arguments(parser)
    base = ["--gammas", "3:1", "--n", "20,30", "--seeds", "0-1", "--out", "x"]
    args = parser.parse_args([*base, "--methods", "anneal,hessian", "--steps", "30", "--no-polish"])
    opts = {m.name: dict(m.options) for m in sweep_cmd._spec(args).methods}
    assert opts["anneal"]["steps"] == 30 and opts["anneal"]["polish"] is False
    assert opts["hessian"]["steps"] == 30 and opts["hessian"]["polish"] is False
    args = parser.parse_args([*base, "--methods", "anneal,gradient", "--steps", "30"])
    opts = {m.name: dict(m.options) for m in sweep_cmd._spec(args).methods}
    assert opts["anneal"]["steps"] == 30 and "steps" not in opts["gradient"]


def test_cli_bad_seeds_exit_2(tmp_path, capsys):
    code = main(
        [
            "sweep",
            "--gammas",
            "3:1",
            "--n",
            "20,30",
            "--seeds",
            "5-2",
            "--out",
            str(tmp_path / "o"),
            "--no-progress",
        ]
    )
    assert code == 2
    assert "reversed" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()  # refused before anything is written


def test_hessian_steps_default_to_auto_per_size():
    # the study default follows orthoclimb.hessian_ascent: K = auto_steps(n), chosen per task
    assert dict(MethodSpec.make("hessian").options)["steps"] == "auto"
    assert dict(MethodSpec.make("hessian", {"steps": 40}).options)["steps"] == 40
    with pytest.raises(ValueError, match=r"integer >= 1 or 'auto', got 'many'"):
        MethodSpec.make("hessian", {"steps": "many"})
    with pytest.raises(ValueError, match=r"integer >= 1, got 'auto'"):
        MethodSpec.make("gradient", {"max_iter": "auto"})


def test_the_toml_example_in_the_help_is_a_valid_study(tmp_path, capsys):
    path = tmp_path / "study.toml"
    path.write_text(TOML_EXAMPLE, encoding="utf-8")
    spec = spec_from_toml(path)
    assert spec.sizes == (100, 200, 400) and spec.seeds == tuple(range(20))
    assert [m.name for m in spec.mixtures] == ["rugged"] and spec.dtype == "float64"
    assert [(m.name, dict(m.options)["steps"]) for m in spec.methods] == [("hessian", 100)]
    with pytest.raises(SystemExit):
        main(["sweep", "--help"])
    assert TOML_EXAMPLE in capsys.readouterr().out


def test_the_same_mixture_twice_in_flags_names_the_flags():
    # gamma_3 = 1 and xi_3 = 1 are one mixture: the study would hold it twice under one name;
    # the error names the two flags instead of the clashing generated names
    with pytest.raises(ValueError, match=r"--gammas 3:1 and --xi 3:1 give the same mixture"):
        spec_from_flags(["3:1"], ["3:1"], "20,30", "0", "gradient")
    with pytest.raises(ValueError, match=r"--gammas 2:1 and --gammas 2:1.0 give the same"):
        spec_from_flags(["2:1", "3:1", "2:1.0"], None, "20,30", "0", "gradient")
    two = spec_from_flags(["3:1"], ["3:2"], "20,30", "0", "gradient")  # distinct: fine
    assert len(two.mixtures) == 2


def test_a_missing_toml_key_says_how_to_add_it(tmp_path):
    # a study file without [[method]] (the flags default to hessian,gradient; a file does not)
    # names the key and shows the table to add
    p = tmp_path / "s.toml"
    p.write_text("sizes=[20,30]\nseeds=[0,1]\n[[mixture]]\ngammas={3=1.0}\n")
    with pytest.raises(ValueError, match=r"missing key 'method'; add a table \[\[method\]\] with"):
        spec_from_toml(p)


def test_a_sweep_prints_why_its_tasks_failed(tmp_path, capsys, monkeypatch):
    # the reasons sat only inside failed/*.json (a review); the sweep prints each distinct
    # first line with its count, the most frequent first
    import orthoclimb.studies.engine as engine_module
    from orthoclimb.studies.store import Store

    def fake_run_study(spec, out, **kwargs):
        store = Store.open(out, spec)
        tasks = spec.tasks()
        for t in tasks[:2]:
            store.write_failure(t.task_id, t.config(), "MemoryError: could not allocate 8 bytes")
        store.write_failure(tasks[2].task_id, tasks[2].config(), "ValueError: bad\ntrace")
        return engine_module.SweepOutcome(len(tasks), 0, 0, 3, 0.1, None, None)

    monkeypatch.setattr(engine_module, "run_study", fake_run_study)
    args = ["sweep", "--gammas", "3:1", "--n", "20,30", "--seeds", "0-1", "--methods", "gradient"]
    main([*args, "--out", str(tmp_path / "s"), "--no-report"])
    out = capsys.readouterr().out
    first = out.index("  2 tasks: MemoryError: could not allocate 8 bytes")
    assert first < out.index("  1 task: ValueError: bad\n")


def test_cli_wording_found_by_a_new_user(tmp_path, capsys):
    # an unknown option is named by its subcommand with the closest option; --exponent takes
    # the fraction its help shows; report names a missing folder and a file as such;
    # --threads errors name the flag
    with pytest.raises(SystemExit) as stop:
        main(["theory", "--gammas", "3:1", "--jsn"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "orthoclimb theory: error: unrecognized arguments: --jsn (did you mean --json?)" in err
    from orthoclimb.cli import exponent_value

    assert exponent_value("2/3") == 2 / 3 and exponent_value("0.5") == 0.5
    for bad in ("abc", "-1/2", "1/0", "1e400", "1e999999999", "9" * 100, "inf"):
        with pytest.raises(argparse.ArgumentTypeError, match=repr(bad)):
            exponent_value(bad)
    assert main(["report", str(tmp_path / "nowhere")]) == 2
    assert "'" + str(tmp_path / "nowhere") + "' does not exist" in capsys.readouterr().err
    (tmp_path / "f.txt").write_text("x")
    assert main(["report", str(tmp_path / "f.txt")]) == 2
    assert "is a file, not a study folder" in capsys.readouterr().err
    assert main(["profile", "--gammas", "3:1", "--n", "10,20", "--threads", "0"]) == 2
    assert "error: --threads: " in capsys.readouterr().err


def test_sweep_takes_the_storage_type_as_a_flag():
    # climb's --start-seed help asks for "the same --dtype" as the sweep, which had no such
    # flag (only a TOML key)
    import argparse

    from orthoclimb.cli import sweep_cmd

    parser = argparse.ArgumentParser()
    sweep_cmd.add_arguments(parser)
    base = ["--gammas", "3:1", "--n", "20,30", "--seeds", "0-1", "--out", "x"]
    assert sweep_cmd._spec(parser.parse_args(base)).dtype == "float64"
    spec = sweep_cmd._spec(parser.parse_args([*base, "--dtype", "float32"]))
    assert spec.dtype == "float32" and {t.dtype for t in spec.tasks()} == {"float32"}


def test_sweep_plan_only_runs_nothing_and_leaves_the_folder_as_it_was(tmp_path, capsys):
    # a new study's folder is not left behind, and an extension is taken back
    args = ["sweep", "--gammas", "3:1", "--n", "20,30", "--methods", "gradient", "--no-report"]
    new = tmp_path / "new" / "study"
    assert main([*args, "--seeds", "0-1", "--out", str(new), "--plan-only"]) == 0
    out = capsys.readouterr().out
    assert "4 tasks (0 already done, 4 to run)" in out and "rough time estimate" in out
    assert "plan only: nothing was run" in out and not (tmp_path / "new").exists()
    old = tmp_path / "old"
    assert main([*args, "--seeds", "0-1", "--out", str(old), "--no-progress"]) == 0
    before = (old / "study.json").read_bytes()
    assert main([*args, "--seeds", "0-3", "--out", str(old), "--plan-only"]) == 0
    assert "(4 already done, 4 to run)" in capsys.readouterr().out
    assert (old / "study.json").read_bytes() == before


def test_plan_only_on_a_complete_study_writes_nothing(tmp_path, capsys):
    # with no pending task the sweep used to skip the plan and write the table and the report
    # (a review); it now says the study is complete and stops
    args = ["sweep", "--gammas", "2:1", "--n", "4", "--seeds", "0", "--methods", "gradient"]
    folder = tmp_path / "s"
    assert main([*args, "--out", str(folder), "--no-progress", "--no-report"]) == 0
    for name in ("results.csv", "results.parquet"):
        (folder / name).unlink()
    capsys.readouterr()
    assert main([*args, "--out", str(folder), "--plan-only"]) == 0
    out = capsys.readouterr().out
    assert "all done already" in out and "plan only: nothing was run" in out
    assert sorted(p.name for p in folder.iterdir()) == ["rows", "study.json"]


def test_a_thread_count_from_the_environment_above_the_cores_gets_a_note(monkeypatch):
    # --threads above the cores got a note and ORTHOCLIMB_NUM_THREADS did not (a review);
    # the pool reads the variable once, so the test sets both the pool and the variable
    import orthoclimb as oc
    from orthoclimb.cli import threads_from
    from orthoclimb.studies.engine import available_cores

    before, cores = oc.get_num_threads(), available_cores()
    monkeypatch.setenv("ORTHOCLIMB_NUM_THREADS", str(cores + 1))
    try:
        oc.set_num_threads(cores + 1)
        note = threads_from(argparse.Namespace(threads=None))
        assert note.startswith(f"note: ORTHOCLIMB_NUM_THREADS={cores + 1} is more than the")
        oc.set_num_threads(cores)
        assert threads_from(argparse.Namespace(threads=None)) is None
        monkeypatch.delenv("ORTHOCLIMB_NUM_THREADS")
        oc.set_num_threads(cores + 1)  # set in Python, not from the environment: no note
        assert threads_from(argparse.Namespace(threads=None)) is None
    finally:
        oc.set_num_threads(before)


def test_one_mixture_under_two_names_is_refused(tmp_path):
    # a task id hashes the gammas, not the name, so 'a' (gammas 3:1) and 'b' (xi 3:1) made
    # pairs of tasks with one id: the second name's rows were refused on every rerun and the
    # study could never finish (a review)
    path = tmp_path / "dup.toml"
    path.write_text(
        'sizes = [20, 30]\nseeds = "0-2"\n[[method]]\nname = "gradient"\n'
        '[[mixture]]\nname = "a"\ngammas = {3 = 1.0}\n'
        '[[mixture]]\nname = "b"\nxi = {3 = 1.0}\n'
    )
    with pytest.raises(ValueError, match="mixtures 'a' and 'b' are the same mixture"):
        spec_from_toml(path)


def test_one_mixture_under_two_names_at_distinct_sizes_is_a_valid_study(tmp_path):
    # the check above refused it too, and so made such a complete study unreadable by report
    # (a review): the task ids differ when the sizes do
    path = tmp_path / "split.toml"
    path.write_text(
        'sizes = [20]\nseeds = "0-2"\n[[method]]\nname = "gradient"\n'
        '[[mixture]]\nname = "small"\ngammas = {3 = 1.0}\nsizes = [10, 12]\n'
        '[[mixture]]\nname = "large"\ngammas = {3 = 1.0}\nsizes = [16, 20]\n'
    )
    tasks = spec_from_toml(path).tasks()
    assert len({t.task_id for t in tasks}) == len(tasks) == 12


def test_study_sizes_may_be_left_out_when_every_mixture_has_its_own(tmp_path):
    # a trial's wish: the top-level sizes were required even when no mixture used them
    path = tmp_path / "own.toml"
    text = (
        'seeds = "0-1"\n[[method]]\nname = "gradient"\n'
        '[[mixture]]\nname = "p3"\ngammas = {3 = 1.0}\nsizes = [10, 12]\n'
        '[[mixture]]\nname = "p4"\ngammas = {4 = 1.0}\nsizes = [8]\n'
    )
    path.write_text(text)
    spec = spec_from_toml(path)
    assert spec.sizes == ()
    assert sorted((t.mixture.name, t.n) for t in spec.tasks()) == sorted(
        [("p3", 10)] * 2 + [("p3", 12)] * 2 + [("p4", 8)] * 2
    )
    # study.json round trip keeps it (the store rereads its spec from there)
    again = StudySpec.from_dict(spec.to_dict())
    assert [t.task_id for t in again.tasks()] == [t.task_id for t in spec.tasks()]
    # a mixture without sizes of its own then has none: refused, naming it (it had no
    # tasks at all before, silently)
    path.write_text(text + '[[mixture]]\nname = "bare"\ngammas = {2 = 1.0}\n')
    with pytest.raises(ValueError, match="mixture 'bare' has no sizes of its own"):
        spec_from_toml(path)
    bare = MixtureSpec.make(Mixture({2: 1.0}), "bare")
    with pytest.raises(ValueError, match="'bare' has no sizes"):
        StudySpec((bare,), (), (0,), (MethodSpec.make("gradient"),))
    with pytest.raises(ValueError, match="size n must be in"):
        StudySpec((bare,), (1, 10), (0,), (MethodSpec.make("gradient"),))
    # given out of order, the sizes are sorted as parsed text is, so that study.json reads
    # back the same study (a review); an empty own list counts as none
    grid = StudySpec((bare,), (20, 10), (0,), (MethodSpec.make("gradient"),))
    assert grid.sizes == (10, 20) and StudySpec.from_dict(grid.to_dict()) == grid
    empty_own = MixtureSpec("e", ((2, 1.0),), ())
    with pytest.raises(ValueError, match="'e' has no sizes"):
        StudySpec((empty_own,), (), (0,), (MethodSpec.make("gradient"),))


@pytest.mark.parametrize(
    ("given", "missing"),
    [
        (["--n", "20"], "give --seeds too"),
        (["--seeds", "0-1"], "give --n too"),
        ([], "give --n and --seeds (and --gammas)"),
    ],
)
def test_sweep_names_the_grid_flags_that_are_missing(tmp_path, capsys, given, missing):
    # a trial: "give --n and --seeds" when only --seeds was missing
    args = ["sweep", "--gammas", "2:1", *given, "--out", str(tmp_path / "o")]
    assert main(args) == 2
    assert missing in capsys.readouterr().err


@pytest.mark.parametrize(
    ("flag", "text"), [("--tol", "1e-400"), ("--timeout", "0"), ("--tol", "x")]
)
def test_cli_positive_numbers_are_checked_on_the_text_given(tmp_path, capsys, flag, text):
    # "--tol 1e-400" underflows to 0.0, which the message used to quote instead of the text
    args = ["sweep", "--gammas", "3:1", "--n", "20,30", "--seeds", "0-1", flag, text]
    with pytest.raises(SystemExit) as info:
        main([*args, "--out", str(tmp_path / "o")])
    assert info.value.code == 2
    err = capsys.readouterr().err
    assert f"argument {flag}: expected a positive" in err and f"got {text!r}" in err, err
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize(
    ("mixture", "words"),
    [
        (
            "gammas = {3 = 1.0}\nname = 5",
            "entry 0: a mixture's name must be a non-empty text, got 5",
        ),
        ('gammas = {3 = 1.0}\nname = ""', "non-empty text, got ''"),
        ('gammas = {3 = 1.0, "03" = 0.5}', "a degree is given twice among \\['3', '03'\\]"),
        ("gammas = {1_0 = 1.0}", "degrees must be integers, got '1_0'"),
        ('xi = {3 = 1.0, "3 " = 0.5}', "degrees must be integers, got '3 '"),
        # control characters were printed raw into the table and the report (a review)
        (
            'gammas = {3 = 1.0}\nname = "a\\u0000b"',
            "entry 0: a mixture's name must not hold control characters or line breaks, got"
            " 'a\\\\x00b'",
        ),
        ('gammas = {3 = 1.0}\nname = "a\\tb"', "control characters.*got 'a\\\\tb'"),
        ('gammas = {3 = 1.0}\nname = "a\\u2028b"', "line breaks, got 'a\\\\u2028b'"),
    ],
)
def test_toml_mixture_names_and_degrees_are_checked(tmp_path, mixture, words):
    # name = 5 was stored in every row, which the table then refused, so the study could
    # never be reported; "03" silently replaced the gamma of 3 (a review)
    p = tmp_path / "s.toml"
    p.write_text(
        f'sizes=[20,30]\nseeds=[0,1]\n[[mixture]]\n{mixture}\n[[method]]\nname="gradient"\n'
    )
    with pytest.raises(ValueError, match=words):
        spec_from_toml(p)


def test_a_study_with_too_many_steps_is_refused():
    # the same bound as climb's and hessian_ascent's (10^20 steps were taken and ran)
    with pytest.raises(ValueError, match="option steps of anneal must be at most 10_000_000"):
        spec_from_flags(
            ["3:1"], None, "20,30", "0-1", "anneal", method_options={"anneal": {"steps": 10**8}}
        )
    with pytest.raises(ValueError, match="option max_iter of gradient must be at most 10_000_000"):
        spec_from_flags(
            ["3:1"],
            None,
            "20,30",
            "0-1",
            "gradient",
            method_options={"gradient": {"max_iter": 10**8}},
        )


def test_hessian_start_keeps_the_ids_and_configuration_of_runs_it_did_not_change():
    # Hessian ascent's start option came after studies were made without it (a random start).
    # Where the default, auto, still starts at random (no degree 2, or a field), a task keeps
    # the id it had (the sha256 of its configuration, rebuilt here as before the option) and a
    # study its configuration, so it resumes; where it now starts along the top eigenvector of
    # Hess H(0) (a degree-2 term), both change, and an old study.json (read as random) refuses
    # the new default instead of mixing two kinds of runs
    import hashlib
    import json

    from orthoclimb.studies.grid import StudySpec, spec_from_flags

    def old_id(task):
        config = {"gammas": [[p, g] for p, g in task.mixture.gammas], "n": task.n,
                  "seed": task.seed, "method": "hessian",
                  "options": {"polish": True, "steps": "auto", "tol": 0.001},
                  "dtype": "float64"}  # fmt: skip
        text = json.dumps(config, sort_keys=True, separators=(",", ":"))
        return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]

    new = spec_from_flags(["3:1", "1:0.5,2:1", "2:1,4:0.25"], None, "20", "0", "hessian")
    ids = {t.mixture.name: (t.task_id, old_id(t)) for t in new.tasks()}
    assert ids["3:1.0"][0] == ids["3:1.0"][1] and ids["1:0.5,2:1.0"][0] == ids["1:0.5,2:1.0"][1]
    assert ids["2:1.0,4:0.25"][0] != ids["2:1.0,4:0.25"][1]  # now from the top eigenvector
    stored = new.to_dict()
    stored["methods"] = [{"name": "hessian", "polish": True, "steps": "auto", "tol": 0.001}]
    old = StudySpec.from_dict(stored)
    assert [t.task_id for t in old.tasks()] == [ids[t.mixture.name][1] for t in old.tasks()]
    assert old.to_dict() != new.to_dict()
    cubic = spec_from_flags(["3:1"], None, "20", "0", "hessian")
    assert StudySpec.from_dict({**cubic.to_dict()}).to_dict() == cubic.to_dict()
    assert "start" not in cubic.to_dict()["methods"][0]
    # auto and top make the same runs on a degree-2 mixture: one id, one configuration
    gentle = [spec_from_flags(["2:1,4:0.25"], None, "20", "0", "hessian", {"hessian": {"start": s}})
              for s in ("auto", "top")]  # fmt: skip
    assert gentle[0].tasks()[0].task_id == gentle[1].tasks()[0].task_id
    assert gentle[0].to_dict() == gentle[1].to_dict()
    with pytest.raises(ValueError, match="hessian on '3:1.0': start='top' needs a degree-2"):
        spec_from_flags(["3:1"], None, "20", "0", "hessian", {"hessian": {"start": "top"}})
    # refused with a field too, in the library as in climb and sweep (a review: the library
    # took it, as the field's first stage sets the start)
    with pytest.raises(ValueError, match="start='top' needs a degree-2 term"):
        spec_from_flags(["1:0.5,3:1"], None, "20", "0", "hessian", {"hessian": {"start": "top"}})


def test_numpy_integers_are_integers_and_digits_are_ascii():
    # a user trial: parse_seeds(np.arange(3)) said "seeds must be integers, got np.int64(0)",
    # while "1_0" and other scripts' digits were read as numbers (Mixture.parse refuses them)
    assert parse_seeds(np.arange(3)) == (0, 1, 2)
    assert parse_sizes(np.array([30, 20], dtype=np.int32)) == (20, 30)
    with pytest.raises(TypeError, match="seeds must be integers, got 1.0"):
        parse_seeds([0, 1.0])
    with pytest.raises(TypeError, match="sizes must be integers, got np.True_"):
        parse_sizes(np.array([True]))
    for text in ("1_0", "٣", "+3", "3.0"):
        with pytest.raises(ValueError, match=re.escape(f"seed {text!r} in {text!r} is not an")):
            parse_seeds(text)
        with pytest.raises(ValueError, match=re.escape(f"size {text!r} in {text!r} is not an")):
            parse_sizes(text)
    # the exponent as text, as the command line reads it
    spec = spec_from_flags(["3:1"], None, "20", np.array([0, 1]), "hessian", exponent="2/3")
    assert spec.exponent == 2 / 3 and spec.seeds == (0, 1)


@pytest.mark.parametrize(
    ("parse", "value", "words"),
    [
        (parse_seeds, b"0-1", "seeds must be text like '0-19' or a list of integers, got b'0-1'"),
        (parse_seeds, bytearray(b"01"), "got bytearray\\(b'01'\\)"),
        (parse_seeds, None, "seeds must be text like '0-19' or a list of integers, got None"),
        (
            parse_sizes,
            None,
            "sizes must be text like '100,200,400' or a list of integers, got None",
        ),
        (parse_sizes, b"\x14\x1e", "sizes must be text .* got b'\\\\x14\\\\x1e'"),
        (parse_sizes, bytearray(b"20,30"), "sizes must be text .* got bytearray"),
    ],
)
def test_seeds_and_sizes_refuse_bytes_and_none_by_name(parse, value, words):
    # a review: parse_seeds(b"0-1") returned the byte values (48, 45, 49), parse_sizes
    # (b"\x14\x1e") the sizes (20, 30), and parse_sizes(None) "'NoneType' object is not
    # iterable"
    with pytest.raises(TypeError, match=words):
        parse(value)


@pytest.mark.parametrize(
    ("kwargs", "words"),
    [
        ({"methods": ["gradient"]}, "methods must be text like 'hessian,gradient', got \\['grad"),
        ({"gammas": "3:1"}, "gammas must be a list of mixture texts.* got '3:1'"),
        ({"gammas": None, "xi": "3:1"}, "xi must be a list of mixture texts.* got '3:1'"),
        ({"gammas": [3]}, "gammas must be a list of mixture texts.* got \\[3\\]"),
        ({"sizes": None}, "sizes must be text like .* got None"),
        ({"seeds": b"0-1"}, "seeds must be text like .* got b'0-1'"),
        ({"method_options": ["hessian"]}, "method_options must map .* got \\['hessian'\\]"),
        ({"exponent": True}, "exponent must be a number or text like '2/3', got True"),
    ],
)
def test_spec_from_flags_refuses_arguments_of_the_wrong_type_by_name(kwargs, words):
    # a review: methods=["gradient"] raised AttributeError ('list' object has no attribute
    # 'split'), and gammas="3:1" was walked character by character ("cannot read '3' in
    # mixture text '3'")
    given = {"gammas": ["3:1"], "xi": None, "sizes": "10,20", "seeds": "0-1"}
    with pytest.raises(TypeError, match=words):
        spec_from_flags(**{**given, "methods": "gradient", **kwargs})


def test_spec_from_flags_takes_an_exponent_as_fraction_or_decimal():
    # the type check above refused Fraction(2, 3) and Decimal("0.5"), which parse_exponent
    # had read through their text (a review)
    from decimal import Decimal
    from fractions import Fraction

    given = {"gammas": ["3:1"], "xi": None, "sizes": "10,20", "seeds": "0-1"}
    for exponent, want in ((Fraction(2, 3), 2 / 3), (Decimal("0.5"), 0.5), (np.float32(1), 1.0)):
        spec = spec_from_flags(**given, methods="gradient", exponent=exponent)
        assert spec.exponent == pytest.approx(want, rel=1e-15), exponent


def test_an_empty_method_item_is_refused_as_in_seeds_and_sizes(tmp_path, capsys):
    # a review: --methods "hessian,,gradient" dropped the empty item, while --n 10,,20 and
    # --seeds 0,,1 were refused
    from orthoclimb.studies.grid import parse_methods

    for text in ("hessian,,gradient", "gradient,", ",gradient"):
        with pytest.raises(ValueError, match=re.escape(f"empty item in methods {text!r}")):
            parse_methods(text)
    assert [m.name for m in parse_methods(" hessian , gradient ")] == ["hessian", "gradient"]
    args = ["sweep", "--gammas", "3:1", "--n", "10,20", "--seeds", "0-1", "--plan-only"]
    assert main([*args, "--methods", "hessian,,gradient", "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "orthoclimb sweep: error: empty item in methods 'hessian,,gradient'" in err
    assert not (tmp_path / "o").exists()


@pytest.mark.parametrize(
    ("table", "words"),
    [
        ("mixture = 5", "'mixture' must be an array of tables, one \\[\\[mixture\\]\\] block per"),
        ('mixture = "3:1"', "\\[\\[mixture\\]\\] block per mixture, got '3:1'"),
        ("[mixture]\ngammas = {3 = 1.0}", "got \\{'gammas': \\{'3': 1.0\\}\\} \\(a single table"),
    ],
)
def test_a_study_file_says_what_mixture_and_method_must_be(tmp_path, table, words):
    # a review: mixture = 5 gave "'int' object is not iterable"
    p = tmp_path / "s.toml"
    p.write_text(f'sizes=[20,30]\nseeds=[0,1]\n{table}\n[[method]]\nname="gradient"\n')
    with pytest.raises(ValueError, match=f"in study file .*{words}"):
        spec_from_toml(p)
    p.write_text("sizes=[20,30]\nseeds=[0,1]\nmethod = 5\n[[mixture]]\ngammas = {3 = 1.0}\n")
    with pytest.raises(ValueError, match="'method' must be an array of tables.* got 5"):
        spec_from_toml(p)
