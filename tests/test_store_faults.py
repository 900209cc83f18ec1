"""Fault tests of the store: killed writers, concurrent writers, a locked database."""

from __future__ import annotations

import hashlib
import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest
from sqlalchemy.exc import OperationalError
from test_store_support import result_dict, sqlite_url, store_url  # noqa: F401 (fixtures)

from specmatch.errors import SpecmatchError
from specmatch.store import open_store
from specmatch.store import store as store_mod

SAVE_LOOP = textwrap.dedent("""
    import hashlib, os, sys
    from specmatch.store import open_store
    from test_store_support import result_dict
    st = open_store(sys.argv[1])
    i = int(sys.argv[2])
    while True:
        payload = os.urandom(256 * 1024)   # a fresh blob every time: each save writes pages
        print("begin", i, flush=True)
        aid = st.save(dict(result_dict(), n=i, payload_sha256=hashlib.sha256(payload).hexdigest()),
                      {"spectrum_%d.bin" % i: payload}, sample_id="K%d" % i)
        print("saved", i, aid, flush=True)
        i += 1
""")

CONCURRENT = textwrap.dedent("""
    import sys, time
    from pathlib import Path
    url, tag, go, n = sys.argv[1], sys.argv[2], Path(sys.argv[3]), int(sys.argv[4])
    import sqlalchemy, specmatch.store.store  # imports before the start line
    (go.parent / ("ready-" + tag)).touch()
    while not go.exists():
        time.sleep(0.002)
    from specmatch.store import open_store
    from test_store_support import result_dict
    st = open_store(url)           # both may create the schema at the same moment
    shared = b"shared invented spectrum\\n" * 2000
    for i in range(n):
        st.save(dict(result_dict(), tag=tag, n=i),
                {"shared.jdx": shared, "%s-%d.txt" % (tag, i): ("%s %d" % (tag, i)).encode()},
                sample_id="%s-%d" % (tag, i))
    print("ok", n)
""")


def _env() -> dict[str, str]:
    env = dict(os.environ)
    root = str(Path(__file__).resolve().parents[1])
    env["PYTHONPATH"] = os.pathsep.join([root, str(Path(__file__).parent),
                                         env.get("PYTHONPATH", "")])
    return env


def _kill_during_save(script: Path, url: str, start: int, after: int) -> list[tuple[int, str]]:
    """Run the save loop, SIGKILL it just after it starts save number ``start + after``."""
    proc = subprocess.Popen([sys.executable, str(script), url, str(start)], stdout=subprocess.PIPE,
                            text=True, env=_env())
    saved: list[tuple[int, str]] = []
    try:
        for line in proc.stdout:
            parts = line.split()
            if parts[0] == "saved":
                saved.append((int(parts[1]), parts[2]))
            elif parts[0] == "begin" and int(parts[1]) >= start + after:
                time.sleep(random.uniform(0.0, 0.004))  # somewhere inside the save
                proc.send_signal(signal.SIGKILL)
                break
        rest, _ = proc.communicate(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    for line in rest.splitlines():  # lines already written before the kill
        parts = line.split()
        if parts and parts[0] == "saved":
            saved.append((int(parts[1]), parts[2]))
    assert proc.returncode == -signal.SIGKILL
    return saved


def test_sigkill_while_saving_leaves_earlier_analyses_intact(tmp_path):
    db = tmp_path / "killed.sqlite"
    url = f"sqlite:///{db}"
    script = tmp_path / "save_loop.py"
    script.write_text(SAVE_LOOP)
    confirmed: list[tuple[int, str]] = []
    for round_no in range(2):  # kill, reopen, kill again: recovery happens on reopen
        confirmed += _kill_during_save(script, url, start=1000 * round_no, after=5)
        con = sqlite3.connect(db)
        assert con.execute("PRAGMA integrity_check").fetchall() == [("ok",)]
        assert con.execute("PRAGMA foreign_key_check").fetchall() == []
        con.close()
    assert len(confirmed) >= 10
    with open_store(url) as st:
        for n, aid in confirmed:  # every analysis confirmed before the kill is there, whole
            rec = st.get(aid)
            assert rec.data["n"] == n and rec.sample_id == f"K{n}"
            (content,) = st.files(aid).values()
            assert hashlib.sha256(content).hexdigest() == rec.data["payload_sha256"]
        # and nothing half-saved: every row that exists has its file and a matching hash
        for rec in st.search(limit=None):
            (content,) = st.files(rec.id).values()
            assert hashlib.sha256(content).hexdigest() == rec.data["payload_sha256"]
        assert st.count() - len(confirmed) <= 2  # at most the one in flight per kill
        assert st.get(st.save(result_dict(), {})).verdict == "likely"  # still writable


def test_two_processes_saving_at_once_both_succeed(store_url, tmp_path):
    script = tmp_path / "save_concurrently.py"
    script.write_text(CONCURRENT)
    go = tmp_path / "go"
    n = 15
    procs = [subprocess.Popen([sys.executable, str(script), store_url, tag, str(go), str(n)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=_env())
             for tag in ("left", "right")]
    deadline = time.monotonic() + 30
    while not all((tmp_path / f"ready-{t}").exists() for t in ("left", "right")):
        assert time.monotonic() < deadline and all(p.poll() is None for p in procs)
        time.sleep(0.01)
    go.touch()  # both start saving (and creating the store) at the same moment
    outs = [p.communicate(timeout=60) for p in procs]
    for p, (out, err) in zip(procs, outs):
        assert p.returncode == 0, err[-2000:]
        assert out.strip() == f"ok {n}"
    with open_store(store_url) as st:
        recs = st.search(limit=None)
        assert sorted(r.sample_id for r in recs) == sorted(
            f"{t}-{i}" for t in ("left", "right") for i in range(n))
        with st.engine.connect() as conn:
            n_blobs = conn.exec_driver_sql("SELECT count(*) FROM blobs").scalar()
        assert n_blobs == 2 * n + 1  # the shared file once


def test_save_waits_for_a_writer_holding_the_lock(sqlite_url, tmp_path):
    with open_store(sqlite_url) as st:
        st.save(result_dict(), {})
        other = sqlite3.connect(tmp_path / "analyses.sqlite", isolation_level=None,
                                check_same_thread=False)
        other.execute("BEGIN IMMEDIATE")  # another program holds the write lock
        threading.Timer(0.7, other.rollback).start()
        t0 = time.monotonic()
        aid = st.save(result_dict(), {}, sample_id="after-wait")
        waited = time.monotonic() - t0
        other.close()
        assert st.get(aid).sample_id == "after-wait"
        assert waited >= 0.5  # it waited for the lock instead of failing


def test_locked_database_is_retried(sqlite_url, monkeypatch):
    with open_store(sqlite_url) as st:
        real = st._begin_write
        calls = {"n": 0}

        def flaky(lock=None):
            calls["n"] += 1
            if calls["n"] <= 2:
                raise OperationalError("BEGIN IMMEDIATE", {}, sqlite3.OperationalError("database is locked"))
            return real(lock)

        monkeypatch.setattr(st, "_begin_write", flaky)
        monkeypatch.setattr(store_mod.time, "sleep", lambda s: None)
        aid = st.save(result_dict(), {})
        assert calls["n"] == 3 and st.get(aid).verdict == "likely"

        calls["n"] = -100  # a lock that never goes away ends in a clear error, after the attempts
        with pytest.raises(SpecmatchError, match="stayed locked"):
            st.save(result_dict(), {})
        assert calls["n"] == -100 + store_mod.WRITE_ATTEMPTS

        def broken(lock=None):
            calls["n"] += 1
            raise OperationalError("INSERT", {}, sqlite3.OperationalError("disk I/O error"))

        calls["n"] = 0
        monkeypatch.setattr(st, "_begin_write", broken)
        with pytest.raises(SpecmatchError, match="disk I/O"):
            st.save(result_dict(), {})
        assert calls["n"] == 1  # other errors are not retried
