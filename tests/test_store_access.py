"""Opening stores that are read-only, damaged, or behind a restricted database role.

The read-only file system cases run ``specmatch`` inside a private mount namespace
with a read-only bind mount (``unshare -m``, needs root or user namespaces); they
skip where that is not possible.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from sqlalchemy import create_engine
from sqlalchemy.engine import make_url
from test_store_support import PostgresSchema, in_ci, postgres_base_url, result_dict, sqlite_url  # noqa: F401

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.store import open_store

ROOT = Path(__file__).resolve().parents[1]


def _fill(url: str, n: int = 40) -> list[str]:
    with open_store(url) as st:
        return [st.save(result_dict(), {f"s{i}.jdx": os.urandom(3000)}, sample_id=f"S{i}")
                for i in range(n)]


def test_read_only_open_reads_and_refuses_writes(sqlite_url, tmp_path):
    ids = _fill(sqlite_url, 3)
    with open_store(sqlite_url, read_only=True) as st:
        assert len(st.search()) == 3 and st.get(ids[0]).problems == ()
        with pytest.raises(SpecmatchError, match="read-only"):
            st.save(result_dict(), {})
    with pytest.raises(SpecmatchError, match="no analysis store at"):
        open_store(f"sqlite:///{tmp_path / 'none' / 'x.sqlite'}", read_only=True)
    assert not (tmp_path / "none").exists()  # looking creates nothing


def _unshare_available() -> bool:
    if not shutil.which("unshare") or not sys.platform.startswith("linux"):
        return False
    probe = subprocess.run(["unshare", "-m", "true"], capture_output=True)
    return probe.returncode == 0


def _run_read_only(folder: Path, *cmd: str) -> subprocess.CompletedProcess:
    """Run ``specmatch cmd`` with ``folder`` mounted read-only (in a private namespace)."""
    script = (f"mount --bind {folder} {folder} && mount -o remount,bind,ro {folder} {folder} && "
              f"exec {sys.executable} -m specmatch " + " ".join(f"'{c}'" for c in cmd))
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run(["unshare", "-m", "sh", "-c", script], capture_output=True, text=True,
                          env=env, timeout=120)


@pytest.mark.skipif(not _unshare_available(), reason="needs unshare -m (root or user namespaces)")
def test_history_on_a_read_only_file_system(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    url = f"sqlite:///{folder / 'analyses.sqlite'}"
    ids = _fill(url, 3)
    probe = _run_read_only(folder, "--version")
    if probe.returncode != 0:
        pytest.skip(f"cannot make a read-only bind mount here: {probe.stderr.strip()[:200]}")
    for cmd in (["history", "list", "--store", url], ["history", "show", ids[0], "--store", url],
                ["history", "verify", "--store", url]):
        res = _run_read_only(folder, *cmd)
        assert res.returncode == 0, res.stderr
        assert "Traceback" not in res.stderr
    assert ids[0][:12] in _run_read_only(folder, "history", "list", "--store", url).stdout
    # writing there is a clear one-line refusal, not a traceback
    res = _run_read_only(folder, "history", "note", ids[0], "x", "--store", url)
    assert res.returncode == 2 and res.stderr.count("\n") == 1 and "specmatch:" in res.stderr
    # a store in a folder that does not exist, on a read-only file system
    missing = f"sqlite:///{folder / 'new' / 'analyses.sqlite'}"
    res = _run_read_only(folder, "history", "note", ids[0], "x", "--store", missing)
    assert res.returncode == 2 and "cannot create the folder" in res.stderr
    assert "Read-only file system" in res.stderr and res.stderr.count("\n") == 1


def test_identify_prints_its_verdict_before_a_save_that_fails(tmp_path, capsys):
    # the store cannot be created (its folder would sit under a regular file, as on a
    # read-only or full disk): the verdict is printed first, then one line on stderr, exit 2
    from specmatch.demo import demo_case

    case = demo_case("b")
    blocker = tmp_path / "not_a_folder"
    blocker.write_text("invented\n")
    url = f"sqlite:///{blocker / 'analyses.sqlite'}"
    code = main(["identify", "--substrate", case.substrate, "--reagent", case.reagent,
                 "--c13", str(case.c13), "--save", "--store", url])
    out, err = capsys.readouterr()
    assert code == 2
    assert out.startswith("Verdict: ") and "Data: 13C" in out  # the whole verdict, first
    assert err.startswith("specmatch: cannot create the folder") and err.count("\n") == 1


def test_damaged_database_is_detected_on_open(sqlite_url, tmp_path, capsys):
    _fill(sqlite_url, 40)
    db = Path(sqlite_url.removeprefix("sqlite:///"))
    con = __import__("sqlite3").connect(db)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")  # everything in the main file
    con.close()
    size = db.stat().st_size
    assert size > 100_000
    with open(db, "r+b") as fh:  # scribble over a stretch in the middle of the file
        fh.seek(size // 2)
        fh.write(b"\x5a" * 8192)
    with pytest.raises(SpecmatchError, match="damaged"):
        open_store(sqlite_url)
    for cmd in (["history", "list"], ["history", "export", "00000000"]):
        assert main([*cmd, "--store", sqlite_url]) == 2
        err = capsys.readouterr().err
        assert "damaged" in err and err.count("\n") == 1
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database, only invented text\n" * 200)
    assert main(["history", "list", "--store", f"sqlite:///{junk}"]) == 2
    err = capsys.readouterr().err
    assert "damaged" in err and err.count("\n") == 1


APP_ROLE_ENV = "SPECMATCH_TEST_POSTGRES_APP_ROLE"


@pytest.mark.postgres
def test_postgres_application_role_may_only_insert_and_select():
    """The deployment DEVELOPERS.md describes: the owner migrates, the application role
    gets SELECT and INSERT only; saving and listing work, changing anything is refused
    by the server's permissions (not only by triggers)."""
    base = postgres_base_url()
    role = os.environ.get(APP_ROLE_ENV)
    if not role:
        if in_ci():
            pytest.fail(f"CI is set but {APP_ROLE_ENV} is not: .ci/run must create the role")
        pytest.skip(f"needs {APP_ROLE_ENV} (the role .ci/run creates)")
    schema = PostgresSchema(base)
    try:
        with open_store(schema.url) as st:  # the owner creates and migrates the store
            first = st.save(result_dict(), {"a.jdx": b"invented"}, sample_id="OWNER-1")
        with schema.admin.begin() as conn:
            conn.exec_driver_sql(f"GRANT USAGE ON SCHEMA {schema.name} TO {role}")
            conn.exec_driver_sql(f"GRANT SELECT, INSERT ON ALL TABLES IN SCHEMA {schema.name} TO {role}")
        app_url = make_url(schema.url).set(username=role).render_as_string(hide_password=False)
        with open_store(app_url) as st:
            aid = st.save(result_dict(), {"b.jdx": b"invented too"}, sample_id="APP-1")
            st.add_note(aid, "checked", author="qa")
            assert {r.sample_id for r in st.search()} == {"OWNER-1", "APP-1"}
            assert st.verify().ok and st.get(first).problems == ()
        raw = create_engine(app_url)
        for sql in ("UPDATE analyses SET verdict = 'x'", "DELETE FROM analyses",
                    "DELETE FROM audit_chain", "TRUNCATE blobs", "DROP TABLE analysis_files",
                    "DROP TRIGGER analyses_immutable ON analyses", "ALTER TABLE analyses DROP COLUMN note"):
            with pytest.raises(Exception, match="permission denied|must be owner|must be the owner"):
                with raw.begin() as conn:
                    conn.exec_driver_sql(sql)
        raw.dispose()
    finally:
        schema.drop()
