"""The README's examples run as written, and the numbers quoted in their comments are what
they print (the README is the first thing a user copies from)."""

from __future__ import annotations

import pickle
import re
import shlex
from pathlib import Path

import pytest

from orthoclimb.cli import build_parser

README = Path(__file__).resolve().parents[1] / "README.md"


def _block(heading: str, language: str) -> str:
    """The first fenced ``language`` block after the line ``heading``."""
    text = README.read_text(encoding="utf-8")
    found = re.search(rf"^{re.escape(heading)}\n.*?```{language}\n(.*?)```", text, re.S | re.M)
    assert found, f"no {language} block after {heading!r} in the README"
    return found.group(1)


def _quoted(block: str, pattern: str) -> int:
    found = re.search(pattern, block)
    assert found, f"the README no longer says {pattern!r}"
    return int(found.group(1))


def test_quick_start_runs_and_its_quoted_numbers_hold(tmp_path, monkeypatch):
    # executes the Python quick start in a scratch folder (it saves runs/b and instances/...)
    block = _block("## Quick start", "python")
    monkeypatch.chdir(tmp_path)
    scope: dict = {}
    exec(compile(block, str(README), "exec"), scope)
    ham = scope["ham"]
    assert scope["oc"].estimate_memory(scope["mix"], 150) == _quoted(
        block, r"# (\d+) bytes, known before allocating"
    )
    assert ham.nbytes == scope["oc"].estimate_memory(scope["mix"], 150)
    assert len(pickle.dumps(ham)) == _quoted(block, r"# (\d+) bytes: pickles")
    recipe = tmp_path / "instances" / "gentle-150.json"
    assert recipe.stat().st_size < 2048  # "a 1 kB recipe"
    assert (tmp_path / "runs" / "b.json").exists() and (tmp_path / "runs" / "b.npz").exists()
    same = scope["same"]
    x = scope["x"]
    assert same.energy(x) == ham.energy(x)  # "checked on load" and regenerated bit for bit
    assert abs(scope["top"][0] / ham.n - 3.3) < 0.05  # "about 3.3"


def test_ci_runs_the_readme_test_command_as_written():
    # the README's second command is what a fresh machine's CI runs, so the README stays true
    text = README.read_text(encoding="utf-8")
    second = re.search(r"```bash\n[^\n]*\n([^#\n]*?)\s*#", text).group(1).strip()
    assert second.endswith("pytest -q") and "'.[test]'" in second
    ci = (README.parent / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert second in ci, f"{second!r} is not a line of .ci/run"


def _commands() -> list[list[str]]:
    lines = []
    for line in _block("## Quick start", "bash").splitlines():
        code = line.split("#", 1)[0].strip()
        if code:
            lines.append(shlex.split(code))
    return lines


@pytest.mark.parametrize("argv", _commands(), ids=lambda a: " ".join(a[:3]))
def test_quick_start_commands_parse(argv):
    # every command line of the README is accepted by the command-line parser as written
    # (running them takes minutes; test_*_cli.py run each command on small inputs)
    assert argv[0] == "orthoclimb"
    args = build_parser().parse_args(argv[1:])
    assert args.command == argv[1]
