"""`specmatch rank --batch`: formats kept exactly, bad tasks fail alone, end to end via subprocess.

Observed shifts: nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582),
record 10007822 (2-bromobutane) and 10005623 (2-iodopropane), copied in
tests/data/nmrshiftdb2_identification_subset.json.
"""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from specmatch.identification.batch import rank_batch, rank_task

GOOD = {"id": "a", "candidates": ["CCCCBr", "CCC(C)Br"], "c13": [12.1, 26.0, 34.3, 53.0], "solvent": "CDCl3",
        "truth": "ignored", "extra_key": [1, 2]}
GOOD_DICT_C13 = {"id": "b", "candidates": ["BrC(C)CC", "BrCCCC"],
                 "c13": [{"shift": 53.0, "hydrogens": 1}, {"shift": 34.3}, {"shift": 26.0}, {"shift": 12.1}]}
GOOD_H1 = {"id": "c", "candidates": ["CCCI", "CC(C)I"], "c13": [],
           "h1": [{"shift": 4.30, "integral": 1}, {"shift": 1.78, "integral": 6, "multiplicity": "d", "j_hz": [6.8]}]}
BAD = [
    {"id": "no-cands", "c13": [10.0]},
    {"id": "bad-smiles", "candidates": ["C1CC", "CCC"], "c13": [10.0]},
    {"id": "bad-shift", "candidates": ["CCC"], "c13": ["x"]},
    {"id": "h1-in-c13", "candidates": ["CCC"], "h1": [{"shift": 77.0, "integral": 1}]},
    {"id": "cands-not-list", "candidates": "CCC", "c13": [1.0]},
]


def _check_ranking(row, task):
    assert row["ok"] is True and row["id"] == task["id"]
    smiles = [c["smiles"] for c in row["ranking"]]
    assert sorted(smiles) == sorted(task["candidates"])  # every candidate, spelt as given
    ps = [c["probability"] for c in row["ranking"]]
    assert ps == sorted(ps, reverse=True)
    assert sum(ps) == pytest.approx(1.0)


def test_rank_task_formats_and_winner():
    row = rank_task(GOOD)
    _check_ranking(row, GOOD)
    assert row["ranking"][0]["smiles"] == "CCC(C)Br"
    row = rank_task(GOOD_DICT_C13)
    _check_ranking(row, GOOD_DICT_C13)
    assert row["ranking"][0]["smiles"] == "BrC(C)CC"
    row = rank_task(GOOD_H1)
    _check_ranking(row, GOOD_H1)
    assert row["ranking"][0]["smiles"] == "CC(C)I"


def test_batch_bad_tasks_fail_alone(tmp_path):
    tasks = [GOOD, *BAD, GOOD_H1]
    src = tmp_path / "tasks.jsonl"
    src.write_text("\n".join(json.dumps(t) for t in tasks) + "\nnot json at all\n", encoding="utf-8")
    out = tmp_path / "out.jsonl"
    failed = rank_batch(str(src), str(out))
    rows = [json.loads(l) for l in out.read_text().splitlines()]
    assert len(rows) == len(tasks) + 1
    assert failed == len(BAD) + 1
    _check_ranking(rows[0], GOOD)
    _check_ranking(rows[-2], GOOD_H1)
    for row, task in zip(rows[1:1 + len(BAD)], BAD):
        assert row["ok"] is False and row["id"] == task["id"]
        assert row["error"] and "internal error" not in row["error"]
    assert rows[-1]["ok"] is False and "not valid JSON" in rows[-1]["error"]


def test_cli_rank_batch_end_to_end(tmp_path):
    tasks = [GOOD, BAD[1], GOOD_DICT_C13]
    src = tmp_path / "tasks.jsonl"
    src.write_text("\n".join(json.dumps(t) for t in tasks) + "\n", encoding="utf-8")
    out = tmp_path / "res.jsonl"
    p = subprocess.run([sys.executable, "-m", "specmatch", "rank", "--batch", str(src), "--out", str(out)],
                       capture_output=True, text=True, timeout=300)
    # one task failed: every line is written, a one-line summary on stderr, exit 1
    assert p.returncode == 1, p.stderr
    assert p.stderr.strip().splitlines() == [p.stderr.strip()] and "1 failed" in p.stderr
    assert "Traceback" not in p.stderr
    rows = [json.loads(l) for l in out.read_text().splitlines()]
    assert [r["id"] for r in rows] == ["a", "bad-smiles", "b"]
    _check_ranking(rows[0], GOOD)
    assert rows[1]["ok"] is False and "SMILES" in rows[1]["error"]
    _check_ranking(rows[2], GOOD_DICT_C13)


def test_cli_rank_missing_file_is_a_one_line_error(tmp_path):
    p = subprocess.run([sys.executable, "-m", "specmatch", "rank", "--batch", str(tmp_path / "nope.jsonl"),
                        "--out", str(tmp_path / "o.jsonl")], capture_output=True, text=True, timeout=300)
    assert p.returncode == 2
    assert p.stderr.startswith("specmatch: cannot read") and "Traceback" not in p.stderr


def test_worker_processes_keep_task_order_and_results(tmp_path):
    tasks = [GOOD, BAD[1], GOOD_DICT_C13, GOOD_H1] * 3
    src = tmp_path / "tasks.jsonl"
    src.write_text("\n".join(json.dumps(t) for t in tasks) + "\n", encoding="utf-8")
    one, two = tmp_path / "one.jsonl", tmp_path / "two.jsonl"
    assert rank_batch(str(src), str(one), workers=1) == rank_batch(str(src), str(two), workers=2) == 3
    assert one.read_text() == two.read_text()


def test_cli_rank_workers_option_gives_the_same_lines(tmp_path):
    tasks = [GOOD, GOOD_DICT_C13, GOOD_H1] * 2
    src = tmp_path / "tasks.jsonl"
    src.write_text("\n".join(json.dumps(t) for t in tasks) + "\n", encoding="utf-8")
    outs = []
    for n in ("0", "2"):
        out = tmp_path / f"res{n}.jsonl"
        p = subprocess.run([sys.executable, "-m", "specmatch", "rank", "--batch", str(src), "--out", str(out),
                            "--workers", n], capture_output=True, text=True, timeout=300)
        assert p.returncode == 0, p.stderr
        outs.append(out.read_text())
    assert outs[0] == outs[1]
