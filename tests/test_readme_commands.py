"""The README's two set-up commands stay true: the test command is what CI runs, and
the main command's specmatch call works on the shipped demo data."""

from __future__ import annotations

import re
import shlex
from pathlib import Path

import pytest

from specmatch.cli import main

ROOT = Path(__file__).resolve().parents[1]


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    setup = text.split("## Set up", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```bash\n(.*?)\n```", setup, flags=re.S)


def test_readme_has_exactly_two_setup_commands():
    cmds = _readme_commands()
    assert len(cmds) == 2
    assert all("\n" not in c for c in cmds)


def test_ci_runs_exactly_the_readme_test_command():
    test_cmd = _readme_commands()[1]
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert test_cmd in ci.splitlines()


@pytest.mark.slow
def test_readme_main_command_gives_the_verdict_and_a_report(tmp_path, monkeypatch, capsys):
    main_cmd = _readme_commands()[0]
    call = main_cmd.split(".venv/bin/specmatch ", 1)[1]
    args = shlex.split(call)
    report = tmp_path / "report.html"
    args[args.index("--report") + 1] = str(report)
    monkeypatch.chdir(ROOT)
    assert main(args) == 0
    out = capsys.readouterr().out
    # the demo's truth (sample_spectra/README.md, invented): tertiary alcohol from a hydride shift
    assert "Verdict" in out and "CCC1(O)CCCCC1" in out.split("\n", 1)[0]
    assert "Product ratio" in out
    assert report.stat().st_size > 10_000
