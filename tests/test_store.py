"""The analysis store: whole, immutable analyses with versions, search, export, upgrade.

Runs on SQLite always and on PostgreSQL when SPECMATCH_TEST_POSTGRES_URL is set
(see test_store_support.py).
"""

from __future__ import annotations

import base64
import datetime as dt
import hashlib
import json
import sqlite3

import pytest
from sqlalchemy import create_engine, text
from test_store_support import result_dict, sqlite_url, store_url  # noqa: F401 (fixtures)

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.store import SCHEMA_VERSION, open_store, save_result
from specmatch.store import migrations

FILES = {"crude_13C.jdx": b"##TITLE=invented test spectrum\n##END=\n", "crude_1H.csv": b"1.02,6\n"}


def test_save_get_roundtrip_keeps_everything(store_url):
    before = dt.datetime.now(dt.timezone.utc)
    with open_store(store_url) as st:
        data = result_dict()
        aid = st.save(data, FILES, sample_id="NB-17-042", user="A. Chemist")
        rec = st.get(aid[:8])  # a unique prefix is enough
        assert rec.id == aid and rec.version == 1 and rec.kind == "analysis"
        assert rec.data == data
        assert rec.sample_id == "NB-17-042" and rec.user == "A. Chemist"
        assert rec.substrate == "C=CC(C)C" and rec.reagent == "HBr"
        assert rec.verdict == "likely" and rec.top_probability == pytest.approx(0.8)
        assert rec.tool_version == "0.1.0" and rec.tables_version == "13C test-1; 1H test-1; error model test"
        assert before <= rec.created_at <= dt.datetime.now(dt.timezone.utc)
        assert rec.created_at.utcoffset() == dt.timedelta(0)
        # files are content-addressed by SHA-256 and come back byte for byte
        assert rec.files == {n: hashlib.sha256(b).hexdigest() for n, b in FILES.items()}
        assert st.files(aid) == FILES
        assert rec.data_sha256 == hashlib.sha256(
            json.dumps(data, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


def test_user_defaults_to_env_then_os_user(sqlite_url, monkeypatch):
    monkeypatch.setenv("SPECMATCH_USER", "night shift")
    with open_store(sqlite_url) as st:
        assert st.get(st.save(result_dict(), {})).user == "night shift"
        monkeypatch.delenv("SPECMATCH_USER")
        import getpass

        assert st.get(st.save(result_dict(), {})).user == getpass.getuser()


def test_identical_files_stored_once(store_url):
    with open_store(store_url) as st:
        a = st.save(result_dict(), FILES, sample_id="A")
        b = st.save(result_dict(), {"other_name.jdx": FILES["crude_13C.jdx"]}, sample_id="B")
        with st.engine.connect() as conn:
            n_blobs = conn.execute(text("SELECT count(*) FROM blobs")).scalar()
        assert n_blobs == 2
        assert st.get(a).files["crude_13C.jdx"] == st.get(b).files["other_name.jdx"]


def test_note_is_a_new_version_and_the_old_one_is_unchanged(store_url):
    with open_store(store_url) as st:
        aid = st.save(result_dict(), FILES, sample_id="S1", user="ana")
        original = st.get(aid)
        nid = st.add_note(aid, "GC-MS agrees", author="ben")
        note = st.get(nid)
        assert nid != aid and note.parent_id == aid and note.root_id == aid
        assert note.version == 2 and note.kind == "note" and note.note == "GC-MS agrees"
        assert note.user == "ben" and note.data == original.data and note.files == original.files
        assert st.get(aid) == original  # nothing overwritten
        assert [r.id for r in st.history(aid)] == [aid, nid] == [r.id for r in st.history(nid)]
        # the list shows the latest version of each analysis, every version on request
        assert [r.id for r in st.search()] == [nid]
        assert {r.id for r in st.search(all_versions=True)} == {aid, nid}


def test_correction_records_new_verdict_with_reason(store_url):
    with open_store(store_url) as st:
        aid = st.save(result_dict(), {}, sample_id="S1")
        cid = st.correct(aid, verdict="CC(Br)C(C)C", reason="X-ray of the crystal", author="qa")
        c = st.get(cid)
        assert c.kind == "correction" and c.verdict == "CC(Br)C(C)C"
        assert c.note == "X-ray of the crystal" and c.parent_id == aid
        assert st.get(aid).verdict == "likely"          # the tool's verdict stays on record
        assert c.data == st.get(aid).data
        with pytest.raises(SpecmatchError, match="reason"):
            st.correct(aid, verdict="x", reason=" ")
        with pytest.raises(SpecmatchError, match="empty"):
            st.add_note(aid, "  ")


CHANGES = ("UPDATE analyses SET verdict = 'decisive'", "DELETE FROM analyses",
           "UPDATE blobs SET size_bytes = 0", "DELETE FROM analysis_files")


def test_database_refuses_update_and_delete(store_url):
    with open_store(store_url) as st:
        aid = st.save(result_dict(), FILES)
        # the store's own engine refuses before the statement reaches the server ...
        for sql in CHANGES:
            with pytest.raises(SpecmatchError, match="immutable"):
                with st.engine.begin() as conn:
                    conn.exec_driver_sql(sql)
        # ... and the server's triggers refuse any other client
        raw = create_engine(store_url)
        for sql in CHANGES:
            with pytest.raises(Exception, match="immutable"):
                with raw.begin() as conn:
                    conn.exec_driver_sql(sql)
        raw.dispose()
        assert st.get(aid).verdict == "likely" and st.files(aid) == FILES
        assert not any(hasattr(st, name) for name in ("update", "delete", "overwrite"))


def test_search_filters(store_url):
    with open_store(store_url) as st:
        a = st.save(result_dict("C=CC(C)C", "HBr"), {}, sample_id="P1-A01")
        b = st.save(result_dict("C=CC(C)C", "H2O/H2SO4", top="CC(C)(O)CC", word="decisive",
                                p_top=0.97), {}, sample_id="P1-A02")
        c = st.save(result_dict("C=C1CCCC1", "HCl", top="CC1(Cl)CCCC1", word="cannot tell apart",
                                p_top=0.55), {}, sample_id="P1-A03")
        ids = lambda recs: {r.id for r in recs}  # noqa: E731
        # the same substrate written another way (3-methylbut-1-ene)
        assert ids(st.search(substrate="CC(C)C=C")) == {a, b}
        assert ids(st.search(reagent="hbr")) == {a}
        assert ids(st.search(verdict="cannot tell")) == {c}
        assert ids(st.search(verdict="CCC(C)(C)O")) == {b}  # top candidate, any spelling
        assert ids(st.search(sample_id="P1-A02")) == {b}
        assert ids(st.search(substrate="CC(C)C=C", reagent="HBr")) == {a}
        today = dt.datetime.now(dt.timezone.utc).date()
        assert ids(st.search(since=today.isoformat())) == {a, b, c}
        assert ids(st.search(until=today.isoformat())) == {a, b, c}  # a date covers its whole day
        assert st.search(since=(today + dt.timedelta(days=1)).isoformat()) == []
        assert st.search(until=(today - dt.timedelta(days=1)).isoformat()) == []
        assert [r.id for r in st.search(limit=2)] == [c, b]  # newest first
        from specmatch.store import records_frame

        frame = records_frame(st.search(reagent="HCl"))
        assert list(frame["id"]) == [c] and frame.loc[0, "top_smiles"] == "CC1(Cl)CCCC1"
        with pytest.raises(SpecmatchError, match="YYYY-MM-DD"):
            st.search(since="last tuesday")


def test_compare_side_by_side(store_url):
    with open_store(store_url) as st:
        a = st.save(result_dict(p_top=0.8), FILES, sample_id="A")
        b = st.save(result_dict(p_top=0.6, word="tentative"), FILES, sample_id="B")
        cmp = st.compare(a, b)
        by = {f["field"]: f for f in cmp["fields"]}
        assert by["sample_id"] == {"field": "sample_id", "a": "A", "b": "B", "same": False}
        assert by["verdict"]["a"] == "likely" and by["verdict"]["b"] == "tentative"
        assert by["substrate"]["same"] and by["inputs.solvent"]["same"]
        assert cmp["same_files"] is True
        probs = {c["smiles"]: (c["a"], c["b"]) for c in cmp["candidates"]}
        assert probs["CC(C)(Br)CC"] == (0.8, 0.6)
        assert probs["CC(Br)C(C)C"] == (pytest.approx(0.2), pytest.approx(0.4))


def test_exports_json_and_html(store_url):
    with open_store(store_url) as st:
        data = result_dict()
        data["inputs"]["substrate"] = "C=CC(C)C"
        aid = st.save(data, FILES, sample_id="<script>x</script>")
        st.add_note(aid, "checked", author="qa")
        out = json.loads(st.export_json(aid, include_files=True))
        assert out["id"] == aid and out["data"] == data
        assert [h["kind"] for h in out["history"]] == ["analysis", "note"]
        got = {f["name"]: base64.b64decode(f["base64"]) for f in out["files"]}
        assert got == FILES
        assert all(hashlib.sha256(got[f["name"]]).hexdigest() == f["sha256"] for f in out["files"])
        page = st.export_html(aid)
        assert page.lstrip().lower().startswith("<!doctype html") or "<html" in page.lower()
        assert aid in page and hashlib.sha256(FILES["crude_1H.csv"]).hexdigest() in page
        assert "<script>x" not in page and "&lt;script&gt;" in page  # escaped
        assert "advisory" in page


def test_save_result_uses_to_dict(sqlite_url):
    class FakeResult:  # stands in for specmatch.identification's Result
        def to_dict(self):
            return result_dict(word="decisive", p_top=0.99)

    with open_store(sqlite_url) as st:
        aid = save_result(st, FakeResult(), FILES, sample_id="S9", user="u")
        rec = st.get(aid)
        assert rec.verdict == "decisive" and rec.sample_id == "S9" and st.files(aid) == FILES


def test_save_refuses_data_that_is_not_json(sqlite_url):
    with open_store(sqlite_url) as st:
        with pytest.raises(SpecmatchError, match="not JSON"):
            st.save({"inputs": {"x": object()}}, {})
        with pytest.raises(SpecmatchError, match="not JSON"):
            st.save({"score": float("nan")}, {})
        assert st.count() == 0


OLD_DATA = json.dumps({"inputs": {"substrate": "C=CC"}})


def _make_v1_store(url: str) -> str:
    """A store as the first schema version left it, with one analysis in it."""
    from specmatch.store.store import Store, _make_engine

    st = Store(_make_engine(url), url)
    migrations.upgrade(st.engine, lambda: st._begin_write("m"), target=1, tool_version="0.0.9")
    with st.engine.begin() as conn:
        conn.execute(text(
            "INSERT INTO analyses (id, root_id, parent_id, version, kind, created_at, user_name, "
            "sample_id, substrate, substrate_key, reagent, verdict, top_smiles, top_probability, "
            "tool_version, tables_version, note, data_json, data_sha256) VALUES "
            "('00000000000000000000000000000001', '00000000000000000000000000000001', NULL, 1, "
            "'analysis', :t, 'old user', 'OLD-1', 'C=CC', 'C=CC', 'HBr', 'likely', 'CC(C)Br', "
            "0.9, '0.0.9', 'v0', NULL, :d, :h)"),
            {"t": dt.datetime(2026, 1, 5, 9, 30), "d": OLD_DATA,
             "h": hashlib.sha256(OLD_DATA.encode()).hexdigest()})
    with st.engine.connect() as conn:
        assert migrations.current_version(conn) == 1
        cols = [r[0] for r in conn.execute(text("SELECT * FROM analyses")).cursor.description]
        assert "input_key" not in cols
    st.close()
    return "00000000000000000000000000000001"


def test_upgrade_from_v1_keeps_old_analyses(store_url):
    old = _make_v1_store(store_url)
    with open_store(store_url) as st:
        assert st.schema_version == SCHEMA_VERSION
        rec = st.get(old)
        assert rec.sample_id == "OLD-1" and rec.user == "old user" and rec.input_key is None
        assert rec.created_at == dt.datetime(2026, 1, 5, 9, 30, tzinfo=dt.timezone.utc)
        with st.engine.connect() as conn:
            applied = [r[0] for r in conn.execute(text("SELECT version FROM schema_version ORDER BY version"))]
        assert applied == list(range(1, SCHEMA_VERSION + 1))
        raw = create_engine(store_url)
        with pytest.raises(Exception, match="immutable"):  # v3 triggers now guard old rows too
            with raw.begin() as conn:
                conn.exec_driver_sql("UPDATE analyses SET verdict = 'x'")
        raw.dispose()
        new = st.save(result_dict(), FILES, input_key="c" * 64, sample_id="NEW")
        assert st.find_done("NEW", "c" * 64) == new
    with open_store(store_url) as st:  # opening again is a no-op
        assert st.schema_version == SCHEMA_VERSION and st.count() == 2


def test_store_from_newer_release_is_refused(sqlite_url):
    open_store(sqlite_url).close()
    eng = create_engine(sqlite_url)
    with eng.begin() as conn:
        conn.execute(text("INSERT INTO schema_version VALUES (99, 'future', '2030-01-01', '9.0')"))
    eng.dispose()
    with pytest.raises(SpecmatchError, match="newer specmatch"):
        open_store(sqlite_url)


def test_store_setting_default_env_and_option(tmp_path, monkeypatch):
    from specmatch.store import default_store_url, resolve_store_url

    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "xdg"))
    monkeypatch.delenv("SPECMATCH_STORE", raising=False)
    assert default_store_url() == f"sqlite:///{tmp_path / 'xdg' / 'specmatch' / 'analyses.sqlite'}"
    with open_store() as st:
        st.save(result_dict(), {})
    db = tmp_path / "xdg" / "specmatch" / "analyses.sqlite"
    con = sqlite3.connect(db)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert con.execute("SELECT count(*) FROM analyses").fetchone()[0] == 1
    con.close()
    monkeypatch.setenv("SPECMATCH_STORE", f"sqlite:///{tmp_path / 'env.sqlite'}")
    assert resolve_store_url() == f"sqlite:///{tmp_path / 'env.sqlite'}"
    assert resolve_store_url("sqlite:///x.sqlite") == "sqlite:///x.sqlite"  # the option wins


def test_busy_timeout_is_set(sqlite_url):
    with open_store(sqlite_url) as st:
        with st.engine.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 30000
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1


def test_bad_store_urls_say_what_to_do(tmp_path):
    with pytest.raises(SpecmatchError, match="not a database URL"):
        open_store("my analyses")
    with pytest.raises(SpecmatchError, match="driver"):
        open_store("postgresql+nosuchdriver://u@localhost/x")
    with pytest.raises(SpecmatchError, match="server is running"):
        open_store("postgresql+psycopg://nobody@127.0.0.1:1/nothing?connect_timeout=2")
    with open_store(f"sqlite:///{tmp_path / 's.sqlite'}") as st:
        with pytest.raises(SpecmatchError, match="no saved analysis"):
            st.get("abcdef12")
        with pytest.raises(SpecmatchError, match="hexadecimal"):
            st.get("S-001")


def test_history_cli(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        a = st.save(result_dict(), FILES, sample_id="CLI-1")
        b = st.save(result_dict(word="tentative", p_top=0.6), FILES, sample_id="CLI-2")
    assert main(["history", "--store", sqlite_url, "list"]) == 0
    out = capsys.readouterr().out
    assert a[:12] in out and b[:12] in out and "CLI-2" in out
    assert main(["history", "search", "--store", sqlite_url, "--verdict", "tentative", "--json"]) == 0
    assert [r["id"] for r in json.loads(capsys.readouterr().out)] == [b]
    assert main(["history", "--store", sqlite_url, "note", a[:10], "GC agrees", "--author", "qa"]) == 0
    assert "version 2" in capsys.readouterr().out
    assert main(["history", "--store", sqlite_url, "show", a]) == 0
    out = capsys.readouterr().out
    assert "CLI-1" in out and "GC agrees" in out and hashlib.sha256(FILES["crude_1H.csv"]).hexdigest() in out
    assert main(["history", "--store", sqlite_url, "compare", a, b]) == 0
    out = capsys.readouterr().out
    assert "≠" in out and "tentative" in out
    target = sqlite_url.replace("sqlite:///", "").replace("analyses.sqlite", "r.html")
    assert main(["history", "--store", sqlite_url, "export", a, "--format", "html", "--out", target]) == 0
    assert a in open(target, encoding="utf-8").read()
    assert main(["history", "--store", sqlite_url, "show", "0000ffff"]) == 2
    assert "no saved analysis" in capsys.readouterr().err


def test_save_many_is_all_or_nothing_and_deduplicates(store_url):
    with open_store(store_url) as st:
        ids = st.save_many([
            {"record": result_dict(), "files": FILES, "sample_id": "G1", "input_key": "a" * 64,
             "skip_if_done": True},
            {"record": result_dict(), "files": FILES, "sample_id": "G2", "input_key": "b" * 64,
             "skip_if_done": True},
            # the same sample and key again: the first analysis is returned, not a copy
            {"record": result_dict(), "files": FILES, "sample_id": "G1", "input_key": "a" * 64,
             "skip_if_done": True},
        ])
        assert ids[0] == ids[2] != ids[1] and st.count() == 2
        assert st.save(result_dict(), {}, sample_id="G2", input_key="b" * 64,
                       skip_if_done=True) == ids[1]
        with pytest.raises(SpecmatchError, match="not JSON"):
            st.save_many([{"record": result_dict(), "sample_id": "G3"},
                           {"record": {"bad": object()}, "sample_id": "G4"}])
        assert st.count() == 2 and st.search(sample_id="G3") == []


def test_save_run_reads_and_keeps_the_files(tmp_path, sqlite_url):
    from specmatch.store import save_run

    class FakeResult:
        def to_dict(self):
            return result_dict()

    (tmp_path / "a").mkdir()
    (tmp_path / "a" / "x_13C.jdx").write_bytes(b"13C bytes")
    (tmp_path / "x_1H.csv").write_bytes(b"1H bytes")
    aid = save_run(FakeResult(), {"c13": tmp_path / "a" / "x_13C.jdx", "h1": str(tmp_path / "x_1H.csv"),
                                  "dept135": None}, store=sqlite_url, sample_id="R-7")
    with open_store(sqlite_url) as st:
        assert st.files(aid) == {"x_13C.jdx": b"13C bytes", "x_1H.csv": b"1H bytes"}
        assert st.get(aid).sample_id == "R-7"
    with pytest.raises(SpecmatchError, match="cannot read"):
        save_run(FakeResult(), {"c13": tmp_path / "gone.jdx"}, store=sqlite_url)
