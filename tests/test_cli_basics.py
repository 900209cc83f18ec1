"""The command line: help, version, and one-line errors without tracebacks."""

from __future__ import annotations

import subprocess
import sys

from specmatch import __version__
from specmatch.cli import main


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "specmatch", *args], capture_output=True, text=True)


def test_help_lists_the_commands():
    p = run("--help")
    assert p.returncode == 0
    for cmd in ("predict", "enumerate", "peaks", "rank", "identify", "mixture", "history", "batch"):
        assert cmd in p.stdout


def test_version():
    p = run("--version")
    assert p.returncode == 0 and __version__ in p.stdout


def test_bad_smiles_is_one_line_on_stderr(capsys):
    rc = main(["predict", "C1CC"])
    err = capsys.readouterr().err
    assert rc != 0
    assert err.startswith("specmatch: ") and "ring bond" in err
    assert "Traceback" not in err and err.count("\n") == 1


def test_missing_batch_file(capsys, tmp_path):
    rc = main(["predict", "--batch", str(tmp_path / "nope.smi"), "--out", str(tmp_path / "o.jsonl")])
    assert rc != 0
    assert "cannot read" in capsys.readouterr().err
