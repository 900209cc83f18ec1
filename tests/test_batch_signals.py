"""Batches and signals: the workers end with their parent whatever stops it, the
summary says exactly what the store holds, and no copy of a spectrum is left behind.

Each test runs a real batch in a child process (the echo runner, slowed down), sends
a real signal, and waits a bounded time. Worker processes are found through /proc
(Linux only).
"""

from __future__ import annotations

import csv
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import pytest

pytestmark = pytest.mark.skipif(not Path("/proc/self/stat").exists(), reason="needs Linux /proc")

HEADER = "sample_id,substrate,reagent,c13,h1,dept135,solvent,alcohol,candidates\n"
BATCH = textwrap.dedent("""
    import sys
    from specmatch.cli import main
    if __name__ == "__main__":
        import specmatch.store.batch as b
        from test_batch_runners import echo_runner
        b.run_sample = echo_runner
        sys.exit(main(["batch", sys.argv[1], "--out", sys.argv[2], "--store", sys.argv[3],
                       "--workers", "2"]))
""")


def _manifest(tmp: Path, n: int) -> Path:
    (tmp / "spectra").mkdir()
    lines = [HEADER]
    for i in range(n):
        (tmp / "spectra" / f"s{i:03d}.jdx").write_text(f"##TITLE=invented test file {i}\n##END=\n")
        lines.append(f"S{i:03d},C=CC(C)C,HBr,spectra/s{i:03d}.jdx,,,CDCl3,,\n")
    m = tmp / "plate.csv"
    m.write_text("".join(lines))
    return m


def _children(pid: int) -> set[int]:
    out = set()
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                fields = (d / "stat").read_text().rsplit(")", 1)[1].split()
            except OSError:
                continue
            if int(fields[1]) == pid:
                out.add(int(d.name))
    return out


def _alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


def _saved(db: Path) -> set[str]:
    if not db.exists():
        return set()
    try:
        con = sqlite3.connect(db)
        try:
            return {r[0] for r in con.execute("SELECT sample_id FROM analyses")}
        finally:
            con.close()
    except sqlite3.OperationalError:
        return set()


def _summary(path: Path) -> dict[str, str]:
    with open(path, newline="", encoding="utf-8") as fh:
        return {r["sample_id"]: r["status"] for r in csv.DictReader(fh)}


def _start(tmp: Path, n: int):
    m = _manifest(tmp, n)
    db = tmp / "store.sqlite"
    script = tmp / "batch.py"
    script.write_text(BATCH)
    scratch = tmp / "tmp"
    scratch.mkdir()
    env = dict(os.environ, SPECMATCH_TEST_SAMPLE_DELAY_S="0.2", TMPDIR=str(scratch),
               PYTHONPATH=os.pathsep.join([str(Path(__file__).parent),
                                           str(Path(__file__).resolve().parents[1])]))
    proc = subprocess.Popen([sys.executable, str(script), str(m), str(tmp / "out"),
                             f"sqlite:///{db}"], env=env, start_new_session=True,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            # a shell that starts pytest in the background (`cmd &` without job
                            # control) leaves SIGINT ignored, which the child inherits and Python
                            # then never turns into KeyboardInterrupt: Ctrl-C as a terminal sends it
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    deadline = time.monotonic() + 90
    workers: set[int] = set()
    while time.monotonic() < deadline and proc.poll() is None:
        workers |= {c for c in _children(proc.pid)}
        if len(_saved(db)) >= 4 and len(workers) >= 2:
            break
        time.sleep(0.05)
    assert proc.poll() is None, proc.communicate()[1][-2000:]
    workers |= _children(proc.pid)
    return proc, db, scratch, workers, m


def _gone_within(pids: set[int], seconds: float) -> set[int]:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        left = {p for p in pids if _alive(p)}
        if not left:
            return set()
        time.sleep(0.05)
    return {p for p in pids if _alive(p)}


def _cleanup(proc: subprocess.Popen, workers: set[int]) -> None:
    for p in [proc.pid, *workers]:
        if _alive(p):
            try:
                os.kill(p, signal.SIGKILL)
            except ProcessLookupError:
                pass
    try:
        proc.communicate(timeout=10)
    except subprocess.TimeoutExpired:
        pass


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
def test_stopping_the_batch_stops_its_workers_and_writes_a_true_summary(tmp_path, sig):
    proc, db, scratch, workers, _ = _start(tmp_path, 40)
    try:
        os.kill(proc.pid, sig)  # the parent alone, as a service manager or Ctrl-C would
        _, err = proc.communicate(timeout=30)
        assert proc.returncode == (128 + sig if sig == signal.SIGTERM else 130), err
        assert "Traceback" not in err
        assert _gone_within(workers, 10) == set()
        saved = _saved(db)
        summary = _summary(tmp_path / "out" / "summary.csv")
        assert len(summary) == 40
        assert {s for s, v in summary.items() if v == "done"} == saved  # exactly the store
        assert set(summary.values()) <= {"done", "not-run"} and 4 <= len(saved) < 40
        assert list(scratch.iterdir()) == []  # no copies of the spectra left
    finally:
        _cleanup(proc, workers)


def test_sigkill_of_the_parent_takes_the_workers_and_the_next_run_cleans_up(tmp_path):
    proc, db, scratch, workers, m = _start(tmp_path, 40)
    try:
        os.kill(proc.pid, signal.SIGKILL)
        proc.communicate(timeout=30)
        assert _gone_within(workers, 10) == set()  # PR_SET_PDEATHSIG
        before = _saved(db)
        summary = _summary(tmp_path / "out" / "summary.csv")  # the last one written
        assert {s for s, v in summary.items() if v == "done"} <= before
        # the next run finishes the plate and removes what the killed run left
        env = dict(os.environ, TMPDIR=str(scratch), PYTHONPATH=os.pathsep.join(
            [str(Path(__file__).parent), str(Path(__file__).resolve().parents[1])]))
        rerun = subprocess.run([sys.executable, str(tmp_path / "batch.py"), str(m),
                                str(tmp_path / "out"), f"sqlite:///{db}"], env=env,
                               capture_output=True, text=True, timeout=120)
        assert rerun.returncode == 0, rerun.stderr
        assert _saved(db) == {f"S{i:03d}" for i in range(40)}
        assert list(scratch.iterdir()) == []
    finally:
        _cleanup(proc, workers)
