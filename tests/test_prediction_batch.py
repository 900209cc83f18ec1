"""``specmatch predict --batch``: one row per line in order, a summary, exit 1 on failures, workers."""

from __future__ import annotations

import json
import subprocess
import sys



def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "specmatch", "predict", *args], capture_output=True, text=True)


def test_failed_molecule_gives_exit_1_after_every_row_and_a_summary(tmp_path):
    src, out = tmp_path / "in.smi", tmp_path / "out.jsonl"
    src.write_text("CCO\n\n# a comment\nC1CC\n[CH3]\nCCBr\n", encoding="utf-8")
    p = run("--batch", str(src), "--out", str(out))
    assert p.returncode == 1
    rows = [json.loads(x) for x in out.read_text(encoding="utf-8").splitlines()]
    assert len(rows) == 6
    assert [r["ok"] for r in rows] == [True, False, False, False, False, True]
    assert rows[1]["skipped"] and rows[2]["skipped"]
    assert "ring bond" in rows[3]["error"] and "radical" in rows[4]["error"]
    summary = p.stderr.strip().splitlines()
    assert len(summary) == 1 and "2 predicted, 2 failed" in summary[0] and "line 4" in summary[0]


def test_clean_batch_exits_0(tmp_path):
    src, out = tmp_path / "in.smi", tmp_path / "out.jsonl"
    src.write_text("CCO\nCC(C)Br\n", encoding="utf-8")
    p = run("--batch", str(src), "--out", str(out))
    assert p.returncode == 0 and "2 predicted, 0 failed" in p.stderr


def test_workers_give_the_same_rows_in_the_same_order(tmp_path):
    src = tmp_path / "in.smi"
    src.write_text("CCO\nCC(C)Br\nbad(\nC=CC\nOC1CCCCC1\nCC#N\n" * 5, encoding="utf-8")
    outs = []
    for workers in ("0", "2"):
        out = tmp_path / f"out{workers}.jsonl"
        p = run("--batch", str(src), "--out", str(out), "--workers", workers)
        assert p.returncode == 1  # the bad lines
        outs.append(out.read_text(encoding="utf-8").splitlines())
    assert outs[0] == outs[1] and len(outs[0]) == 30


def test_bad_workers_option_is_a_usage_error(tmp_path):
    src = tmp_path / "in.smi"
    src.write_text("CCO\n", encoding="utf-8")
    p = run("--batch", str(src), "--out", str(tmp_path / "o.jsonl"), "--workers", "many")
    assert p.returncode == 2 and "Traceback" not in p.stderr


def test_batch_command_ends_without_teardown_but_runs_exit_functions(tmp_path):
    # console_main skips the interpreter's teardown after a batch (its output closed) but
    # still flushes the streams and runs the atexit functions; main() itself returns
    src, out = tmp_path / "in.smi", tmp_path / "out.jsonl"
    src.write_text("CCO\nC1CC\n", encoding="utf-8")
    code = ("import atexit, sys; atexit.register(lambda: print('exit functions ran', file=sys.stderr)); "
            f"sys.argv = ['specmatch', 'predict', '--batch', {str(src)!r}, '--out', {str(out)!r}]; "
            "from specmatch.cli import console_main; print('stdout kept', end=''); console_main()")
    p = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert p.returncode == 1 and p.stdout == "stdout kept"
    assert "exit functions ran" in p.stderr and "1 predicted, 1 failed" in p.stderr
    assert len(out.read_text(encoding="utf-8").splitlines()) == 2
    from specmatch.cli import main

    assert main(["predict", "--batch", str(src), "--out", str(out)]) == 1  # returns in-process
