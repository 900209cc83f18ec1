"""Batches: local pool and Dask, one bad row fails alone, interrupted batches resume.

The per-sample work here is tests/test_batch_runners.py's echo runner (the batch
machinery is under test, not the chemistry); it reports which file bytes it saw.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest
from test_batch_runners import echo_runner
from test_store_support import sqlite_url, store_url  # noqa: F401 (fixtures)

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.store import open_store
from specmatch.store import batch as batch_mod
from specmatch.store.batch import SUMMARY_COLUMNS, read_manifest, run_batch

HEADER = "sample_id,substrate,reagent,c13,h1,dept135,solvent,alcohol,candidates\n"


def _spectrum(tmp: Path, name: str) -> str:
    p = tmp / "spectra" / name
    p.parent.mkdir(exist_ok=True)
    p.write_text(f"##TITLE=invented test file {name}\n##END=\n")
    return f"spectra/{name}"


def _manifest(tmp: Path, n_good: int, extra: str = "") -> Path:
    lines = [HEADER]
    for i in range(n_good):
        c13 = _spectrum(tmp, f"s{i:03d}_13C.jdx")
        lines.append(f"S{i:03d},C=CC(C)C,HBr,{c13},,,CDCl3,,CC(Br)C(C)C;CC(C)(Br)CC\n")
    lines.append(extra)
    m = tmp / "plate.csv"
    m.write_text("".join(lines))
    return m


def _summary(path: Path) -> dict[str, dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert list(rows[0]) == list(SUMMARY_COLUMNS)
    out: dict[str, dict[str, str]] = {}
    for r in rows:  # first row of an id (a repeated id has its own failed row after it)
        out.setdefault(r["sample_id"], r)
    return out


def _per_sample_counts(db: Path) -> dict[str, int]:
    con = sqlite3.connect(db)
    rows = con.execute("SELECT sample_id, count(*) FROM analyses WHERE kind = 'analysis' "
                       "GROUP BY sample_id").fetchall()
    con.close()
    return dict(rows)


BAD_ROWS = (
    "B-FAIL,FAIL,HBr,{f},,,,,\n"              # the work raises a SpecmatchError
    "B-CRASH,CRASH,HBr,{f},,,,,\n"            # the work raises something else
    "B-NOFILE,C=CC,HBr,spectra/missing_13C.jdx,,,,,\n"
    "B-NOSPEC,C=CC,HBr,,,,,,\n"
    "S000,C=CC,HBr,{f},,,,,\n"                # a sample id used twice
)


def test_local_pool_bad_rows_fail_alone(tmp_path, store_url):
    f = _spectrum(tmp_path, "bad_13C.jdx")
    m = _manifest(tmp_path, 4, BAD_ROWS.format(f=f))
    res = run_batch(m, tmp_path / "out", workers=2, store=store_url, runner=echo_runner)
    rows = _summary(tmp_path / "out" / "summary.csv")
    assert res.summary_path == tmp_path / "out" / "summary.csv"
    assert [rows[f"S{i:03d}"]["status"] for i in range(4)] == ["done"] * 4
    assert "not a valid SMILES" in rows["B-FAIL"]["error"]
    assert "RuntimeError: worker blew up" in rows["B-CRASH"]["error"]
    assert "missing_13C.jdx' not found" in rows["B-NOFILE"]["error"]
    assert "no spectrum file" in rows["B-NOSPEC"]["error"]
    assert {r["status"] for k, r in rows.items() if k.startswith("B-")} == {"failed"}
    assert res.count("failed") == 5  # the repeated S000 row too
    assert res.rows[-1]["status"] == "failed" and "appears again" in res.rows[-1]["error"]
    with open_store(store_url) as st:
        assert st.count() == 4
        for i in range(4):
            rec = st.get(rows[f"S{i:03d}"]["analysis_id"])
            assert rec.sample_id == f"S{i:03d}" and rec.input_key
            # the saved file is the manifest's file, and the worker analysed those bytes
            content = (tmp_path / "spectra" / f"s{i:03d}_13C.jdx").read_bytes()
            assert st.files(rec.id) == {f"spectra/s{i:03d}_13C.jdx": content}
            assert rec.data["files_seen"] == hashlib.sha256(content).hexdigest()[:8]
            assert rec.data["worker_pid"] != os.getpid()  # ran in a worker process
            assert rows[f"S{i:03d}"]["probability"] == "0.3333"


def test_rerun_skips_done_and_retries_failed(tmp_path, sqlite_url):
    m = _manifest(tmp_path, 3, "B-NOFILE,C=CC,HBr,spectra/late_13C.jdx,,,,,\n")
    first = run_batch(m, tmp_path / "out", workers=0, store=sqlite_url, runner=echo_runner)
    assert first.count("done") == 3 and first.count("failed") == 1
    _spectrum(tmp_path, "late_13C.jdx")  # the missing file turns up
    second = run_batch(m, tmp_path / "out", workers=0, store=sqlite_url, runner=echo_runner)
    rows = _summary(tmp_path / "out" / "summary.csv")
    assert [rows[f"S{i:03d}"]["status"] for i in range(3)] == ["done-earlier"] * 3
    assert rows["B-NOFILE"]["status"] == "done"
    assert {k: r["analysis_id"] for k, r in rows.items() if k != "B-NOFILE"} == {
        r["sample_id"]: r["analysis_id"] for r in first.rows if r["status"] == "done"}
    assert second.count("done") == 1
    db = Path(sqlite_url.removeprefix("sqlite:///"))
    assert _per_sample_counts(db) == {"S000": 1, "S001": 1, "S002": 1, "B-NOFILE": 1}
    # changed data is a new analysis, not a skip: the input key covers the file bytes
    (tmp_path / "spectra" / "s001_13C.jdx").write_text("##TITLE=reprocessed\n##END=\n")
    third = run_batch(m, tmp_path / "out", workers=0, store=sqlite_url, runner=echo_runner)
    assert {r["sample_id"]: r["status"] for r in third.rows}["S001"] == "done"
    assert _per_sample_counts(db)["S001"] == 2


def test_stop_right_after_a_commit_still_counts_the_sample_as_done(tmp_path, sqlite_url,
                                                                   monkeypatch):
    # a signal that lands after the store committed a result but before the runner noted
    # it: the summary, taken from the store, must still call it done by this run (it said
    # "done-earlier", one fewer "done" than the store held)
    from specmatch.store.store import Store

    real = Store.save_many
    calls = []

    def save_then_stop(self, items):
        ids = real(self, items)
        calls.append(ids)
        if len(calls) == 2:
            raise KeyboardInterrupt  # as Ctrl-C between the commit and the bookkeeping
        return ids

    monkeypatch.setattr(Store, "save_many", save_then_stop)
    m = _manifest(tmp_path, 4)
    with pytest.raises(KeyboardInterrupt):
        run_batch(m, tmp_path / "out", workers=0, store=sqlite_url, runner=echo_runner)
    rows = _summary(tmp_path / "out" / "summary.csv")
    db = Path(sqlite_url.removeprefix("sqlite:///"))
    assert {k for k, r in rows.items() if r["status"] == "done"} == set(_per_sample_counts(db))
    assert [rows[f"S{i:03d}"]["status"] for i in range(4)] == ["done", "done", "not-run", "not-run"]


def test_worker_process_death_fails_its_samples_and_the_batch_goes_on(tmp_path, sqlite_url):
    m = _manifest(tmp_path, 8, "B-DIE,DIE,HBr,{f},,,,,\n".format(f=_spectrum(tmp_path, "d.jdx")))
    first = run_batch(m, tmp_path / "out", workers=2, store=sqlite_url, runner=echo_runner)
    status = {r["sample_id"]: r for r in first.rows}
    assert status["B-DIE"]["status"] == "failed" and "worker process died" in status["B-DIE"]["error"]
    for r in first.rows:  # samples queued with it may fail too, with the same reason
        assert r["status"] == "done" or "worker process died" in r["error"]
    assert first.count("done") >= 1
    # the chemist takes the bad row out; the rerun finishes the rest, redoing nothing
    m.write_text("".join(ln for ln in m.read_text().splitlines(True) if not ln.startswith("B-DIE")))
    second = run_batch(m, tmp_path / "out", workers=2, store=sqlite_url, runner=echo_runner)
    again = {r["sample_id"]: r["status"] for r in second.rows}
    assert {s for s, v in again.items() if v == "done-earlier"} == {
        r["sample_id"] for r in first.rows if r["status"] == "done"}
    assert set(again.values()) <= {"done", "done-earlier"} and len(again) == 8
    db = Path(sqlite_url.removeprefix("sqlite:///"))
    assert _per_sample_counts(db) == {f"S{i:03d}": 1 for i in range(8)}


def test_dask_local_cluster(tmp_path, sqlite_url):
    distributed = pytest.importorskip("distributed", reason="Dask distributed is not installed")
    m = _manifest(tmp_path, 6, "B-FAIL,FAIL,HBr,{f},,,,,\n".format(f=_spectrum(tmp_path, "x.jdx")))
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        res = run_batch(m, tmp_path / "out", scheduler=cluster.scheduler_address,
                        store=sqlite_url, runner=echo_runner)
        worker_pids = {w["pid"] for w in cluster.scheduler_info["workers"].values()} \
            if "pid" in next(iter(cluster.scheduler_info["workers"].values())) else None
    rows = _summary(tmp_path / "out" / "summary.csv")
    assert [rows[f"S{i:03d}"]["status"] for i in range(6)] == ["done"] * 6
    assert rows["B-FAIL"]["status"] == "failed" and "not a valid SMILES" in rows["B-FAIL"]["error"]
    with open_store(sqlite_url) as st:
        pids = {st.get(r["analysis_id"]).data["worker_pid"] for r in res.rows if r["analysis_id"]}
    assert os.getpid() not in pids
    if worker_pids:
        assert pids <= worker_pids


KILLED_BATCH = textwrap.dedent("""
    import sys
    from specmatch.store.batch import run_batch
    from test_batch_runners import echo_runner
    if __name__ == "__main__":
        run_batch(sys.argv[1], sys.argv[2], workers=2, store=sys.argv[3], runner=echo_runner)
""")


def test_batch_killed_halfway_then_resumed_does_each_sample_once(tmp_path):
    n = 24
    m = _manifest(tmp_path, n)
    db = tmp_path / "batch.sqlite"
    url = f"sqlite:///{db}"
    script = tmp_path / "killed_batch.py"
    script.write_text(KILLED_BATCH)
    env = dict(os.environ, SPECMATCH_TEST_SAMPLE_DELAY_S="0.15",
               PYTHONPATH=os.pathsep.join([str(Path(__file__).parent),
                                           str(Path(__file__).resolve().parents[1])]))
    proc = subprocess.Popen([sys.executable, str(script), str(m), str(tmp_path / "out"), url],
                            env=env, start_new_session=True,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        saved = 0
        while time.monotonic() < deadline and proc.poll() is None:
            if db.exists():
                try:
                    saved = sum(_per_sample_counts(db).values())
                except sqlite3.OperationalError:  # schema not made yet
                    saved = 0
            if saved >= 6:
                break
            time.sleep(0.05)
        assert proc.poll() is None, proc.stderr.read().decode()[-2000:]
        os.killpg(proc.pid, signal.SIGKILL)  # the batch and its workers, mid-flight
        proc.wait(timeout=10)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
        proc.stderr.close()
    before = _per_sample_counts(db)
    assert 6 <= sum(before.values()) < n  # really stopped halfway
    # the summary written while it ran claims nothing the store does not hold
    partial = _summary(tmp_path / "out" / "summary.csv")
    assert {k for k, r in partial.items() if r["status"] == "done"} <= set(before)

    res = run_batch(m, tmp_path / "out", workers=2, store=url, runner=echo_runner)
    after = _per_sample_counts(db)
    assert after == {f"S{i:03d}": 1 for i in range(n)}  # every sample exactly once
    status = {r["sample_id"]: r["status"] for r in res.rows}
    assert {s for s, v in status.items() if v == "done-earlier"} == set(before)
    assert res.count("done") == n - len(before)


def test_manifest_problems_are_reported(tmp_path):
    bad = tmp_path / "m.csv"
    bad.write_text("sample,substrate,reagent,c13\nS1,C=CC,HBr,x.jdx\n")
    with pytest.raises(SpecmatchError, match="no column 'sample_id'"):
        read_manifest(bad)
    bad.write_text("sample_id,substrate,reagent\nS1,C=CC,HBr\n")
    with pytest.raises(SpecmatchError, match="no spectrum column"):
        read_manifest(bad)
    bad.write_bytes(b"sample_id,substrate\n\xff\xfe\n")
    with pytest.raises(SpecmatchError, match="not UTF-8"):
        read_manifest(bad)
    with pytest.raises(SpecmatchError, match="cannot read .*nope.csv.: no such file"):
        read_manifest(tmp_path / "nope.csv")
    # a spreadsheet export: BOM, upper-case header, blank lines, spaces around cells
    (tmp_path / "a.jdx").write_text("x")
    bad.write_text("\ufeffSample_ID,Substrate,Reagent,C13,Candidates\n\n S1 , C=CC ,HBr, a.jdx ,CC(C)Br; CCCBr\n")
    (s,) = read_manifest(bad)
    assert s.error is None and s.sample_id == "S1" and s.fields["candidates"] == ["CC(C)Br", "CCCBr"]
    assert s.files == {"c13": ("a.jdx", hashlib.sha256(b"x").hexdigest())}
    assert s.load() == {"c13": ("a.jdx", b"x")}
    (tmp_path / "a.jdx").write_text("y")  # changed after the manifest was read
    with pytest.raises(SpecmatchError, match="changed while the batch ran"):
        s.load()


def test_input_key_ignores_blank_cells_but_not_content(tmp_path):
    (tmp_path / "a.jdx").write_text("x")
    m = tmp_path / "m.csv"
    m.write_text("sample_id,substrate,reagent,c13\nS1,C=CC,HBr,a.jdx\n")
    (k1,) = [s.key for s in read_manifest(m)]
    m.write_text(HEADER + "S1,C=CC,HBr,a.jdx,,,,,\n")
    (k2,) = [s.key for s in read_manifest(m)]
    m.write_text(HEADER + "S1,C=CC,HBr,a.jdx,,,C6D6,,\n")
    (k3,) = [s.key for s in read_manifest(m)]
    assert k1 == k2 != k3


def test_batch_cli(tmp_path, sqlite_url, monkeypatch, capsys):
    monkeypatch.setattr(batch_mod, "run_sample", echo_runner)  # the CLI's default runner
    m = _manifest(tmp_path, 2, "B-FAIL,FAIL,HBr,{f},,,,,\n".format(f=_spectrum(tmp_path, "x.jdx")))
    code = main(["batch", str(m), "--workers", "0", "--store", sqlite_url, "--out", str(tmp_path / "o")])
    out = capsys.readouterr().out
    assert code == 1  # a failed row is reported in the exit status
    assert "3 samples: 2 done now, 0 done in an earlier run (skipped), 1 failed" in out
    assert "B-FAIL" in out and "not a valid SMILES" in out
    assert main(["batch", str(m), "--workers", "0", "--store", sqlite_url, "--json"]) == 1
    out = json.loads(capsys.readouterr().out)
    assert [r["status"] for r in out["samples"]] == ["done-earlier", "done-earlier", "failed"]
    assert Path(out["summary"]) == tmp_path / "plate_results" / "summary.csv"
    assert main(["batch", str(tmp_path / "none.csv"), "--store", sqlite_url]) == 2
    assert "none.csv': no such file" in capsys.readouterr().err


def test_default_runner_runs_the_identify_pipeline(tmp_path, sqlite_url):
    # An invented 13C peak list; the lines are rough values for 2-bromo-2-methylbutane
    # (from memory). Only the plumbing is checked here, not the chemistry.
    peaks = "shift_ppm\n68.0\n39.5\n34.0\n10.5\n"
    (tmp_path / "p_13C.csv").write_text(peaks)
    m = tmp_path / "real.csv"
    m.write_text(HEADER + "R1,C=CC(C)C,HBr,p_13C.csv,,,CDCl3,,CCCC(C)Br\n"
                 "R2,C=CC(C)C,HBr,p_13C.csv,,,CDCl3,,not-a-smiles((\n")
    res = run_batch(m, tmp_path / "out", workers=0, store=sqlite_url)  # default runner
    (r1, r2) = res.rows
    assert r1["status"] == "done", r1["error"]
    assert r2["status"] == "failed" and r2["error"]  # a bad extra candidate fails its row alone
    with open_store(sqlite_url) as st:
        rec = st.get(r1["analysis_id"])
    assert rec.substrate == "C=CC(C)C" and rec.reagent == "HBr" and rec.verdict
    sent = hashlib.sha256(peaks.encode()).hexdigest()
    assert rec.files == {"p_13C.csv": sent}
    assert sent in json.dumps(rec.data["inputs"])  # identify read the very bytes saved
    smiles = {c.get("canonical_smiles") or c.get("smiles") for c in rec.data["candidates"]}
    assert "CCCC(C)Br" in smiles  # the manifest's extra candidate was ranked too
