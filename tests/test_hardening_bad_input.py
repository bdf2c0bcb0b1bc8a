"""The whole matrix of bad input, in one place: every public entry point and the CLI refuse it
with a clear exception (ValueError/TypeError or a subclass from orthoclimb.errors) or exit code
2, and the message names the bad value. Inputs that should be *converted* (integer arrays,
strided, Fortran-ordered or byte-swapped arrays) give results equal to the contiguous float64
ones.

Every case runs in a child process (``RUNNER`` below, all cases in as few children as
possible): a case that aborts the process (a signal, a Rust abort) or raises PanicException is a
failure of that case, and the remaining cases are rerun in a fresh child. The narrower files
(test_model_validation.py, test_*_cli.py, test_algorithms_result.py, test_studies_engine.py)
test single modules; this file shows the matrix across them.
"""

from __future__ import annotations

import json
import os
import re
import socket
import subprocess
import sys
import textwrap
from dataclasses import dataclass

import pytest

# --------------------------------------------------------------------------------------------
# The child: reads [{"name", "code"}] on stdin, prints one JSON line when a case starts and one
# with its verdict, flushed, so the parent can tell which case a crash belongs to.

RUNNER = textwrap.dedent(
    r"""
    import contextlib, io, json, math, os, shutil, sys, time, traceback
    import numpy as np
    import orthoclimb as oc
    from orthoclimb.cli import main as cli_main

    TMP = sys.argv[1]
    N = 6
    mix = oc.Mixture({2: 1.0, 3: 0.5})
    ham = oc.Hamiltonian.sample(mix, N, seed=1)
    x = np.linspace(-1.0, 1.0, N) + 0.1
    x /= np.linalg.norm(x)

    def fresh(name):
        path = os.path.join(TMP, name)
        shutil.rmtree(path, ignore_errors=True)
        os.makedirs(path)
        return path

    def cli(argv):
        # orthoclimb.cli.main in this process; argparse's own errors arrive as SystemExit
        err, out = io.StringIO(), io.StringIO()
        start = time.perf_counter()
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(out):
            try:
                code = cli_main([str(a) for a in argv])
            except SystemExit as exc:
                code = exc.code
        return {"exit": code, "stderr": err.getvalue(), "stdout": out.getvalue(),
                "seconds": time.perf_counter() - start}

    SWEEP = ["--gammas", "3:1", "--n", "8,10", "--seeds", "0-1", "--methods", "gradient"]
    _base = {}

    def base_study():
        # a complete study folder of SWEEP, written by the same Store and run_task the sweep
        # engine uses (the Dask round trip itself is covered by test_studies_engine.py)
        if "path" not in _base:
            from orthoclimb.studies.grid import spec_from_flags
            from orthoclimb.studies.store import Store
            from orthoclimb.studies.tasks import run_task
            spec = spec_from_flags(["3:1"], None, "8,10", "0-1", "gradient")
            path = fresh("base_study")
            store = Store.open(path, spec)
            for task in spec.tasks():
                store.write_row(run_task(task, threads=1))
            store.write_table()
            _base["path"] = path
        return _base["path"]

    def study_copy(name):
        dest = os.path.join(TMP, name)
        shutil.rmtree(dest, ignore_errors=True)
        shutil.copytree(base_study(), dest)
        return dest

    def a_row(folder):
        rows = os.path.join(folder, "rows")
        return os.path.join(rows, sorted(os.listdir(rows))[0])

    def edited_row(name, **changes):
        # a copy of the base study whose first row gets `changes`: inside its sealed file
        # (seal=True, the checksum no longer matches) or written back as a plain, older row
        seal = changes.pop("seal")
        folder = study_copy(name)
        path = a_row(folder)
        doc = json.load(open(path))
        row = doc["payload"]
        row.update({k: (v(row[k]) if callable(v) else v) for k, v in changes.items()})
        json.dump(doc if seal else row, open(path, "w"))
        return folder

    def truncate(path, keep=0.5):
        with open(path, "rb") as fh:
            data = fh.read()
        with open(path, "wb") as fh:
            fh.write(data[: int(len(data) * keep)])

    _saved = {}

    def saved_result(name):
        if "res" not in _saved:
            _saved["res"] = oc.gradient_ascent(ham, seed=0, max_iter=5, check=False)
        return _saved["res"].save(os.path.join(TMP, name))

    def report(folder):
        return cli(["report", folder, "--no-plots", "--bootstrap", "100"])

    def same(a, b):
        np.testing.assert_array_equal(np.asarray(a), np.asarray(b))

    def emit(obj):
        sys.stdout.write(json.dumps(obj) + "\n")
        sys.stdout.flush()

    for case in json.load(sys.stdin):
        emit({"start": case["name"]})
        scope = dict(globals())
        verdict = {"case": case["name"]}
        try:
            exec(case["code"], scope)
            verdict["result"] = scope.get("result")
        except BaseException as exc:  # PanicException derives from BaseException
            verdict["raised"] = type(exc).__name__
            verdict["mro"] = [c.__name__ for c in type(exc).__mro__]
            verdict["message"] = str(exc)
            verdict["traceback"] = traceback.format_exc()[-2000:]
        emit(verdict)
    """
)


@dataclass(frozen=True)
class Case:
    name: str
    code: str
    exc: str | None  # expected exception class (matched against the MRO); None: no exception
    fragment: str = ""  # regex that must occur in the message (or the CLI's stderr)
    cli: bool = False  # the code sets `result = cli([...])`; exit code 2 expected


def _closed_port() -> int:
    """A loopback port with nothing listening (bound, then released)."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


PORT = _closed_port()

CASES = [
    # ---- points and directions: shape, ndim, emptiness --------------------------------------
    Case("x_wrong_length", "ham.energy(np.ones(N - 1))", "ShapeError", r"got \(5,\)"),
    Case("x_three_dims", "ham.gradient(np.ones((1, 2, N)))", "ShapeError", r"got \(1, 2, 6\)"),
    Case("x_scalar", "ham.energy_and_gradient(3.0)", "ShapeError", r"got \(\)"),
    # a user trial: 0 returned the random start as a result; a dict gave an AttributeError
    Case(
        "gradient_no_steps",
        "oc.gradient_ascent(ham, max_iter=0)",
        "ValueError",
        "max_iter must be >= 1, got 0",
    ),  # fmt: skip
    Case(
        "study_mixture_dict",
        "from orthoclimb.studies.grid import MixtureSpec; MixtureSpec.make({3: 1.0})",
        "TypeError",
        r"MixtureSpec\.make\(\) takes an orthoclimb\.Mixture, got dict",
    ),
    Case("x_empty", "ham.energy(np.array([]))", "ShapeError", r"got \(0,\)"),
    Case("batch_empty", "ham.gradient(np.zeros((0, N)))", "ShapeError", r"got \(0, 6\)"),
    Case(
        "x_ragged_list",
        "ham.energy([[1.0, 2.0], [3.0]])",
        "ShapeError",
        r"x is not a rectangular numeric array: \[\[1\.0, 2\.0\], \[3\.0\]\]",
    ),
    Case("hessian_of_batch", "ham.hessian(np.ones((2, N)))", "ShapeError", r"got \(2, 6\)"),
    Case("hvp_wrong_rows", "ham.hvp(x, np.ones((N + 1, 2)))", "ShapeError", r"got \(7, 2\)"),
    Case("hvp_no_directions", "ham.hvp(x, np.ones((N, 0)))", "ShapeError", r"got \(6, 0\)"),
    # ---- NaN and infinity: the message gives the value and where it is ----------------------
    Case(
        "x_nan",
        "y = x.copy(); y[2] = np.nan; ham.energy_and_gradient(y)",
        "NonFiniteError",
        r"nan at index \(2,\)",
    ),
    Case(
        "batch_inf",
        "y = np.ones((3, N)); y[1, 3] = np.inf; ham.energy(y)",
        "NonFiniteError",
        r"inf at index \(1, 3\)",
    ),
    Case(
        "hessian_minus_inf",
        "y = x.copy(); y[4] = -np.inf; ham.hessian(y)",
        "NonFiniteError",
        r"-inf at index \(4,\)",
    ),
    Case(
        "hvp_direction_nan",
        "v = np.ones((N, 2)); v[5, 1] = np.nan; ham.hvp(x, v)",
        "NonFiniteError",
        r"v holds a non-finite value nan at index \(5, 1\)",
    ),
    Case(
        "polish_start_nan",
        "y = x.copy(); y[1] = np.nan; oc.polish(ham, y)",
        "NonFiniteError",
        "nan at index",
    ),
    # ---- dtypes: booleans and complex refused, integers converted ---------------------------
    Case("x_boolean", "ham.energy(np.ones(N, dtype=bool))", "TypeError", "boolean"),
    Case("x_complex", "ham.gradient(np.ones(N, dtype=complex))", "TypeError", "complex128"),
    Case("v_complex64", "ham.hvp(x, np.ones(N, dtype=np.complex64))", "TypeError", "complex64"),
    Case("x_strings", "ham.energy(np.array(['a'] * N))", "TypeError", "<U1"),
    Case("polish_start_complex", "oc.polish(ham, x + 0j)", "TypeError", "complex128"),
    Case(
        "integers_are_converted",
        textwrap.dedent(
            """
            xi = np.arange(N) - 2
            xf = xi.astype(np.float64)
            same(ham.energy(xi), ham.energy(xf))
            same(ham.gradient(xi.astype(np.int32)), ham.gradient(xf))
            same(ham.hessian(np.arange(N, dtype=np.uint8)), ham.hessian(np.arange(N, dtype=float)))
            vi = np.arange(2 * N, dtype=np.int16).reshape(N, 2)
            same(ham.hvp(xi, vi), ham.hvp(xf, vi.astype(float)))
            same(ham.hvp(xi, vi[:, 0]), ham.hvp(xf, vi[:, 0].astype(float)))
            bi = np.stack([xi, 2 * xi])
            same(ham.energy(bi), ham.energy(bi.astype(float)))
            same(ham.energy([1, 2, 3, 4, 5, 6]), ham.energy(np.arange(1.0, 7.0)))
            result = "converted"
            """
        ),
        None,
    ),
    Case(
        "strided_fortran_byteswapped_are_converted",
        textwrap.dedent(
            """
            wide = np.zeros(3 * N); wide[::3] = x
            same(ham.energy(wide[::3]), ham.energy(x))
            same(ham.gradient(x[::-1].copy()[::-1]), ham.gradient(x))
            same(ham.hessian(wide[::3]), ham.hessian(x))
            b = np.asfortranarray(np.stack([x, -x, 2 * x]))
            assert not b.flags.c_contiguous
            same(ham.energy(b), ham.energy(np.ascontiguousarray(b)))
            eg, gg = ham.energy_and_gradient(b)
            ec, gc = ham.energy_and_gradient(np.ascontiguousarray(b))
            same(eg, ec); same(gg, gc)
            v = np.asfortranarray(np.arange(3.0 * N).reshape(N, 3))
            same(ham.hvp(x, v), ham.hvp(x, np.ascontiguousarray(v)))
            same(ham.hvp(x, v[:, 1]), ham.hvp(x, np.ascontiguousarray(v[:, 1])))
            same(ham.energy(x.astype('>f8')), ham.energy(x))
            x32 = x.astype(np.float32)
            same(ham.gradient(x32), ham.gradient(x32.astype(np.float64)))
            ro = x.copy(); ro.flags.writeable = False
            same(ham.hessian(ro), ham.hessian(x))
            result = "converted"
            """
        ),
        None,
    ),
    # ---- sizes, degrees, weights, mixtures --------------------------------------------------
    Case("n_zero", "oc.Hamiltonian.sample(mix, 0, seed=0)", "ValueError", "n must be >= 1, got 0"),
    Case("n_negative", "oc.Hamiltonian.sample(mix, -3, seed=0)", "ValueError", "got -3"),
    Case("n_not_integer", "oc.Hamiltonian.sample(mix, 2.5, seed=0)", "TypeError", "2.5"),
    Case("n_zero_estimate", "oc.estimate_memory(mix, 0)", "ValueError", "got 0"),
    Case("degree_zero", "oc.Mixture({0: 1.0})", "MixtureError", "p = 0"),
    Case("degree_nine", "oc.Mixture({2: 1.0, 9: 1.0})", "MixtureError", "p = 9"),
    Case("degree_nine_coefficients", "ham.coefficients(9)", "MixtureError", "p = 9"),
    Case("gamma_negative", "oc.Mixture({2: -0.5})", "MixtureError", "p = 2.*-0.5"),
    Case("gamma_nan", "oc.Mixture({3: float('nan')})", "MixtureError", "p = 3.*nan"),
    Case("gamma_inf", "oc.Mixture.from_xi({4: float('inf')})", "MixtureError", "p = 4.*inf"),
    Case("mixture_empty", "oc.Mixture({})", "MixtureError", "empty mixture"),
    Case("mixture_all_zero", "oc.Mixture({2: 0.0})", "MixtureError", r"\{2: 0\.0\}"),
    Case(
        "storage_dtype",
        "oc.Hamiltonian.sample(mix, 4, 0, dtype='float16')",
        "ValueError",
        "'float16'",
    ),
    Case("seed_negative", "oc.Hamiltonian.sample(mix, 4, seed=-1)", "ValueError", "got -1"),
    # ---- given coefficients and dense tensors -----------------------------------------------
    Case(
        "coefficients_too_few",
        "oc.Hamiltonian.from_coefficients(4, {2: np.ones(9)})",
        "ShapeError",
        r"coefficients\[2\] for n = 4 must hold C\(n\+p-1, p\) = C\(5, 2\) values: "
        "expected length 10, got 9",
    ),
    Case(
        "coefficients_too_many",
        "oc.Hamiltonian.from_coefficients(4, {1: np.ones(4), 3: np.ones(21)})",
        "ShapeError",
        r"coefficients\[3\] for n = 4 .*expected length 20, got 21",
    ),
    Case(
        "coefficients_empty_array",
        "oc.Hamiltonian.from_coefficients(3, {1: np.ones(0)})",
        "ShapeError",
        r"coefficients\[1\] for n = 3 .*expected length 3, got 0",
    ),
    Case(
        "coefficients_two_dims",
        "oc.Hamiltonian.from_coefficients(3, {1: np.ones((3, 1))})",
        "ShapeError",
        r"1-D, got shape \(3, 1\)",
    ),
    Case(
        "coefficients_boolean",
        "oc.Hamiltonian.from_coefficients(2, {1: np.ones(2, dtype=bool)})",
        "TypeError",
        r"coefficients\[1\].*boolean",
    ),
    Case(
        "coefficients_integers_converted",
        textwrap.dedent(
            """
            a = oc.Hamiltonian.from_coefficients(3, {1: np.array([1, -2, 3]), 2: np.arange(6)})
            b = oc.Hamiltonian.from_coefficients(3, {1: [1.0, -2.0, 3.0], 2: np.arange(6.0)})
            same(a.gradient(x[:3]), b.gradient(x[:3]))
            result = "converted"
            """
        ),
        None,
    ),
    Case(
        "coefficients_empty_mapping",
        "oc.Hamiltonian.from_coefficients(3, {})",
        "ValueError",
        r"non-empty mapping.*\{\}",
    ),
    Case(
        "dense_not_symmetric",
        "oc.Hamiltonian.from_dense({2: np.array([[0.0, 1.0], [0.0, 0.0]])})",
        "ValueError",
        r"degree-2 tensor is not symmetric \(largest difference under an exchange of two"
        r" adjacent axes 1,",
    ),
    Case(
        "dense_wrong_shape",
        "oc.Hamiltonian.from_dense({3: np.ones((2, 2, 3))})",
        "ShapeError",
        r"\(n,\)\*3, got \(2, 2, 3\)",
    ),
    Case(
        "dense_symmetrize_accepts",
        textwrap.dedent(
            """
            t = np.array([[0.0, 1.0], [0.0, 0.0]])
            h = oc.Hamiltonian.from_dense({2: t}, symmetrize=True)
            y = np.array([0.6, 0.8])
            assert abs(h.energy(y) - y @ t @ y) < 1e-15, h.energy(y)
            result = "accepted"
            """
        ),
        None,
    ),
    # ---- correlated instances ---------------------------------------------------------------
    Case(
        "rho_above_one",
        "oc.Hamiltonian.sample(mix, 4, 0, correlated_with=(1, 1.5))",
        "ValueError",
        r"\[-1, 1\], got 1\.5",
    ),
    Case(
        "rho_below_minus_one",
        "oc.Hamiltonian.sample(mix, 4, 0, correlated_with=(1, -1.01))",
        "ValueError",
        "got -1.01",
    ),
    Case(
        "rho_nan",
        "oc.Hamiltonian.sample(mix, 4, 0, correlated_with=(1, float('nan')))",
        "ValueError",
        "got nan",
    ),
    Case(
        "rho_text",
        "oc.Hamiltonian.sample(mix, 4, 0, correlated_with=(1, '0.5'))",
        "TypeError",
        "rho .*'0.5'",
    ),
    # ---- Hessian ascent ---------------------------------------------------------------------
    Case(
        "ascent_steps_zero",
        "oc.hessian_ascent(ham, steps=0)",
        "ValueError",
        "steps must be >= 1, got 0",
    ),
    Case("ascent_steps_negative", "oc.hessian_ascent(ham, steps=-5)", "ValueError", "got -5"),
    Case("ascent_tol_zero", "oc.hessian_ascent(ham, tol=0.0)", "ValueError", "tol .*got 0.0"),
    Case(
        "ascent_tol_negative", "oc.hessian_ascent(ham, tol=-1e-3)", "ValueError", "tol .*got -0.001"
    ),
    Case(
        "ascent_tol_nan", "oc.hessian_ascent(ham, tol=float('nan'))", "ValueError", "tol .*got nan"
    ),
    # ---- result files -----------------------------------------------------------------------
    Case(
        "result_missing",
        "oc.load_result(os.path.join(TMP, 'nothing'))",
        "ValueError",
        r"nothing\.json': file not found",
    ),
    Case(
        "result_json_truncated",
        "j, z = saved_result('rt'); truncate(j); oc.load_result(j)",
        "ValueError",
        r"rt\.json': not valid JSON \(truncated",
    ),
    Case(
        "result_npz_truncated",
        "j, z = saved_result('rz'); truncate(z); oc.load_result(j)",
        "ValueError",
        r"rz\.npz': unreadable \(truncated",
    ),
    Case(
        "result_json_unreadable",
        "j, z = saved_result('ru'); os.remove(j); os.mkdir(j); oc.load_result(z)",
        "ValueError",
        r"ru\.json': unreadable",
    ),
    Case(
        "result_json_binary",
        "j, z = saved_result('rb'); open(j, 'wb').write(bytes(range(128, 256))); oc.load_result(j)",
        "ValueError",
        r"rb\.json': not UTF-8",
    ),
    Case(
        "result_edited_with_new_checksum",
        textwrap.dedent(
            """
            from orthoclimb.fileio import json_digest
            j, z = saved_result('re')
            doc = json.load(open(j))
            del doc['payload']['config']
            doc["sha256"] = json_digest(doc["payload"])
            json.dump(doc, open(j, 'w'))
            oc.load_result(j)
            """
        ),
        "ValueError",
        r"re\.json': the payload lacks the field 'config'",
    ),
    # ---- command line -----------------------------------------------------------------------
    Case(
        "cli_gammas_letter",
        "result = cli(['theory', '--gammas', '2:x'])",
        None,
        "weight 'x'",
        cli=True,
    ),
    Case(
        "cli_gammas_dangling",
        "result = cli(['climb', '--gammas', '3:', '--n', '8'])",
        None,
        "'3:'",
        cli=True,
    ),
    Case(
        "cli_gammas_empty_pair",
        "result = cli(['sweep', '--gammas', '3:1,,2:1', '--n', '8', '--seeds', '0', "
        "'--out', os.path.join(TMP, 'never')])",
        None,
        "'3:1,,2:1'",
        cli=True,
    ),
    Case(
        "cli_gammas_degree_nine",
        "result = cli(['theory', '--gammas', '9:1'])",
        None,
        "p = 9",
        cli=True,
    ),
    Case(
        "cli_gammas_overflow",
        "result = cli(['theory', '--gammas', '2:1e400'])",
        None,
        "'1e400'",
        cli=True,
    ),
    Case(
        "cli_gammas_semicolon",
        "result = cli(['profile', '--gammas', '3:1;2:1', '--n', '8'])",
        None,
        "'1;2:1'",
        cli=True,
    ),
    Case(
        "cli_climb_steps_zero",
        "result = cli(['climb', '--gammas', '3:1', '--n', '8', '--steps', '0', '--out', "
        "os.path.join(TMP, 'never')])",
        None,
        "got 0",
        cli=True,
    ),
    Case(
        "cli_sweep_sizes",
        "result = cli(['sweep', *SWEEP[:2], '--n', '8,x', '--seeds', '0', '--out', "
        "os.path.join(TMP, 'never')])",
        None,
        "size 'x'",
        cli=True,
    ),
    Case(
        "cli_sweep_seeds_reversed",
        "result = cli(['sweep', *SWEEP[:2], '--n', '8', '--seeds', '5-2', '--out', "
        "os.path.join(TMP, 'never')])",
        None,
        "'5-2'",
        cli=True,
    ),
    # ---- study folders ----------------------------------------------------------------------
    Case(
        "study_config_truncated",
        "f = study_copy('s1'); truncate(os.path.join(f, 'study.json')); result = report(f)",
        None,
        r"s1/study\.json'",
        cli=True,
    ),
    Case(
        "study_row_truncated",
        "f = study_copy('s2'); r = a_row(f); truncate(r); result = report(f)",
        None,
        r"cannot read the row file '.*s2/rows/[0-9a-f]{16}\.json' \(truncated",
        cli=True,
    ),
    Case(
        "study_row_empty",
        "f = study_copy('s3'); open(a_row(f), 'w').close(); result = report(f)",
        None,
        r"s3/rows/[0-9a-f]{16}\.json'",
        cli=True,
    ),
    Case(
        "study_row_bad_energy",  # a plain (unsealed, older) row object with a bad field
        "result = report(edited_row('s4', energy='abc', seal=False))",
        None,
        r"s4/rows/[0-9a-f]{16}\.json' has energy = 'abc'",
        cli=True,
    ),
    Case(
        "study_row_edited",  # one digit changed in a sealed row: the checksum catches it
        "result = report(edited_row('s4b', energy=lambda e: e + 1.0, seal=True))",
        None,
        r"s4b/rows/[0-9a-f]{16}\.json' fails: checksum mismatch",
        cli=True,
    ),
    Case(
        "study_row_of_another_mixture",  # a plain row renamed to another task's file name
        "result = report(edited_row('s4c', mixture='3:2.0', seal=False))",
        None,
        r"s4c/rows/[0-9a-f]{16}\.json' has mixture = '3:2.0', but its task has '3:1.0'",
        cli=True,
    ),
    Case(
        "study_config_not_utf8",
        "f = study_copy('s5'); open(os.path.join(f, 'study.json'), 'wb').write(b'\\xff\\xfe');"
        " result = report(f)",
        None,
        r"s5/study\.json'",
        cli=True,
    ),
    Case(
        "study_not_a_study",
        "result = report(fresh('s6'))",
        None,
        r"s6' is not a study folder",
        cli=True,
    ),
    Case(
        "sweep_into_truncated_study",
        "f = study_copy('s7'); truncate(os.path.join(f, 'study.json'));"
        " result = cli(['sweep', *SWEEP, '--out', f, '--no-progress'])",
        None,
        r"s7/study\.json' is not a readable study configuration",
        cli=True,
    ),
    Case(
        "sweep_other_sizes",
        "f = study_copy('s8');"
        " result = cli(['sweep', '--gammas', '3:1', '--n', '8,12', '--seeds', '0-1',"
        " '--methods', 'gradient', '--out', f, '--no-progress'])",
        None,
        r"s8' holds a study with a different configuration \(differs in: sizes: \[10\] only in"
        r" the folder, \[12\] only now\)",
        cli=True,
    ),
    Case(
        "sweep_other_method_options",
        "f = study_copy('s9');"
        " result = cli(['sweep', *SWEEP, '--max-iter', '7', '--out', f, '--no-progress'])",
        None,
        r"s9' holds a study with a different configuration \(differs in: methods: .*"
        r"\"max_iter\":7.* now\)",
        cli=True,
    ),
    Case(
        "sweep_unreachable_scheduler",
        f"result = cli(['sweep', *SWEEP, '--out', os.path.join(TMP, 'sx'), '--no-progress',"
        f" '--scheduler', 'tcp://127.0.0.1:{PORT}'])",
        None,
        rf"cannot reach the Dask scheduler at tcp://127\.0\.0\.1:{PORT} \(Connection refused\)",
        cli=True,
    ),
    Case(
        "sweep_malformed_scheduler",
        "result = cli(['sweep', *SWEEP, '--out', os.path.join(TMP, 'sy'), '--no-progress',"
        " '--scheduler', 'tcp://127.0.0.1:notaport'])",
        None,
        r"'tcp://127\.0\.0\.1:notaport'",
        cli=True,
    ),
]

assert len({c.name for c in CASES}) == len(CASES), "case names must be unique"


def _run_all(tmp: str) -> tuple[dict[str, dict], list[str], str]:
    """Run every case in as few children as possible; a crash is attributed to the case that
    had started and not finished, and the remaining cases go to a fresh child."""
    todo = [{"name": c.name, "code": c.code} for c in CASES]
    verdicts: dict[str, dict] = {}
    stderrs = []
    while todo:
        proc = subprocess.run(
            [sys.executable, "-c", RUNNER, tmp],
            input=json.dumps(todo),
            capture_output=True,
            text=True,
            timeout=300,
        )
        stderrs.append(proc.stderr)
        started = None
        for line in proc.stdout.splitlines():
            try:
                msg = json.loads(line)
            except json.JSONDecodeError:
                continue  # stray output of a case
            if "start" in msg:
                started = msg["start"]
            elif "case" in msg:
                verdicts[msg["case"]] = msg
                started = None
        if proc.returncode != 0 or started is not None:
            victim = started or todo[0]["name"]
            verdicts[victim] = {
                "case": victim,
                "died": proc.returncode,
                "stderr": proc.stderr[-3000:],
            }
        todo = [c for c in todo if c["name"] not in verdicts]
    return verdicts, stderrs, tmp


@pytest.fixture(scope="module")
def verdicts(tmp_path_factory):
    return _run_all(str(tmp_path_factory.mktemp("bad_input")))


def test_the_matrix_is_large():
    assert len(CASES) >= 30
    assert sum(c.cli for c in CASES) >= 10


def test_no_child_printed_a_panic(verdicts):
    _, stderrs, _ = verdicts
    for err in stderrs:
        assert "PanicException" not in err and "panicked at" not in err, err[-3000:]


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.name)
def test_bad_input(verdicts, case):
    got = verdicts[0][case.name]
    assert "died" not in got, f"the process died (exit {got['died']}):\n{got['stderr']}"
    assert "PanicException" not in json.dumps(got)
    if case.cli:
        assert "raised" not in got, got.get("traceback")
        res = got["result"]
        assert res["exit"] == 2, res
        err = res["stderr"]
        assert re.search(r"orthoclimb \w+: error: ", err), err
        assert re.search(case.fragment, err), f"{case.fragment!r} not in {err!r}"
        assert "Traceback" not in err
        if case.name == "sweep_unreachable_scheduler":
            # the connection is refused at once; Dask's default would wait the whole --timeout
            # (20 s) before giving up
            assert res["seconds"] < 10, res
    elif case.exc is None:
        assert "raised" not in got, got.get("traceback")
        assert got["result"] in ("converted", "accepted")
    else:
        assert "raised" in got, f"no exception; result {got.get('result')!r}"
        assert case.exc in got["mro"], f"{got['raised']} is not a {case.exc}: {got['message']}"
        assert "ValueError" in got["mro"] or "TypeError" in got["mro"], got["mro"]
        assert re.search(case.fragment, got["message"]), (
            f"{case.fragment!r} not in {got['message']!r}"
        )


def test_malformed_scheduler_creates_no_folder(verdicts):
    # refused before the study folder is created (nothing to clean up afterwards)
    got, _, tmp = verdicts
    assert got["sweep_malformed_scheduler"]["result"]["exit"] == 2
    assert not os.path.exists(os.path.join(tmp, "sy"))
    assert os.path.exists(os.path.join(tmp, "s8", "study.json"))  # the path join is right
