"""The README's command-line tour runs as written, on the shipped files.

Every command of the tour's ``bash`` block (and the Python snippet after it) is taken
from README.md and run in a temporary copy of the clone's ``sample_spectra/`` folder,
so the relative paths are the README's and the outputs land in ``tmp_path``. Each must
exit 0 and print what the tour promises; a new tour command needs a key phrase in
``EXPECT`` (the test fails until it has one). The store is a temporary SQLite file
(``SPECMATCH_STORE``), so ``batch`` and ``history`` never touch the user's store.
"""

from __future__ import annotations

import json
import re
import shlex
import shutil
from pathlib import Path

import pytest

from specmatch.cli import main

ROOT = Path(__file__).resolve().parents[1]

#: what each tour command must print (or write), keyed by subcommand and its first option
EXPECT: dict[str, str] = {
    "enumerate": "CCC(C)(Br)CC",            # the rearranged bromide heads the list
    "predict": "13C NMR (",                 # the journal-style peak text
    "peaks --json": '"peaks"',
    "peaks --formula": "integrals scaled to 13 H",
    "identify --substrate": "Verdict",
    "identify --candidates": "3-bromo-3-methylpentane",  # the names in the candidate file
    "mixture": "Product ratio",
    "rank": '"ok": true',                   # checked in the result file
    "batch": "6 samples",
    "history": "LFP-0422-B",
}


def _section(text: str, title: str) -> str:
    return text.split(f"## {title}", 1)[1].split("\n## ", 1)[0]


def tour_commands() -> list[list[str]]:
    """The tour's commands as argument lists (continuation lines joined, comments dropped)."""
    tour = _section((ROOT / "README.md").read_text(encoding="utf-8"), "A short tour of the command line")
    block = re.search(r"```bash\n(.*?)\n```", tour, flags=re.S).group(1)
    commands = []
    for line in block.replace("\\\n", " ").splitlines():
        args = shlex.split(line, comments=True)
        if args:
            commands.append(args)
    return commands


def tour_python() -> str:
    tour = _section((ROOT / "README.md").read_text(encoding="utf-8"), "A short tour of the command line")
    return re.search(r"```python\n(.*?)\n```", tour, flags=re.S).group(1)


def _key(args: list[str]) -> str:
    sub = args[1]
    options = [a for a in args[2:] if a.startswith("--")]
    for key in (f"{sub} {options[0]}" if options else "", sub):
        if key in EXPECT:
            return key
    raise AssertionError(f"README tour command {' '.join(args)!r} has no key phrase in EXPECT")


@pytest.fixture(scope="module")
def clone_copy(tmp_path_factory) -> Path:
    here = tmp_path_factory.mktemp("tour")
    shutil.copytree(ROOT / "sample_spectra", here / "sample_spectra")
    return here


def test_the_tour_names_only_shipped_files():
    for args in tour_commands():
        for a in args:
            if a.startswith("sample_spectra/"):
                assert (ROOT / a).is_file(), f"the README tour names {a}, which is not shipped"


def test_the_tour_example_files_say_they_are_invented():
    # the hand-written tour files beside the generated demo (sample_spectra/README.md)
    first = (ROOT / "sample_spectra" / "b_candidates.smi").read_text(encoding="utf-8").splitlines()[0]
    assert first.startswith("# INVENTED DEMO DATA")
    tasks = (ROOT / "sample_spectra" / "rank_tasks.jsonl").read_text(encoding="utf-8").splitlines()
    assert tasks and all(json.loads(x)["note"].startswith("INVENTED DEMO DATA") for x in tasks)


def test_the_tour_covers_the_commands_users_need():
    subs = {args[1] for args in tour_commands()}
    assert {"enumerate", "predict", "peaks", "identify", "mixture", "rank", "batch", "history"} <= subs
    assert all(args[0] == "specmatch" for args in tour_commands())


@pytest.mark.slow
def test_every_tour_command_runs_as_written(clone_copy, monkeypatch, capsys):
    monkeypatch.chdir(clone_copy)
    monkeypatch.setenv("SPECMATCH_STORE", f"sqlite:///{clone_copy / 'store.db'}")
    for args in tour_commands():
        key = _key(args)
        code = main(args[1:])
        out, err = capsys.readouterr()
        assert code == 0, f"{' '.join(args)} exited {code}: {err.strip()[-500:]}"
        if key == "rank":
            out_file = clone_copy / args[args.index("--out") + 1]
            lines = [json.loads(x) for x in out_file.read_text(encoding="utf-8").splitlines()]
            assert lines and all(x["ok"] for x in lines)
            assert "0 failed" in err
        elif key == "peaks --json":
            assert json.loads(out)["peaks"]
        else:
            assert EXPECT[key] in out, f"{' '.join(args)} did not print {EXPECT[key]!r}"
        if "--report" in args:
            assert (clone_copy / args[args.index("--report") + 1]).stat().st_size > 10_000


@pytest.mark.slow
def test_the_tour_python_snippet_runs(clone_copy, monkeypatch):
    monkeypatch.chdir(clone_copy)
    space: dict = {}
    exec(compile(tour_python(), "README.md (python)", "exec"), space)
    result = space["result"]
    assert result.ranking.candidates[0].smiles
    assert len(result.to_frame()) == len(result.ranking.candidates)
    assert "CCC(C)(Br)CC" in result._repr_html_()
