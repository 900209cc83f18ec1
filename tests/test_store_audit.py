"""The audit trail: every way of rewriting a saved analysis that was once possible is
now refused or reported (history verify, history show, on every read).

Electronic records kept for laboratories are expected to be tamper-evident (US 21 CFR
Part 11, section 11.10(e): secure, computer-generated, time-stamped audit trails that
do not obscure earlier entries). Each case here was accepted silently before the
hash chain (schema v4). SQLite cases use a plain sqlite3 connection, as any other
program on the machine could; PostgreSQL cases use the owner role.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import sqlite3

import pytest
from sqlalchemy import create_engine, text
from test_store_support import result_dict, sqlite_url, store_url  # noqa: F401 (fixtures)

from specmatch import __version__
from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.store import AnalysisRecord, open_store
from specmatch.store import migrations
from specmatch.store.chain import link_hash, row_content

FILES = {"crude_13C.jdx": b"##TITLE=invented test spectrum\n##END=\n"}
OTHER = b"##TITLE=another invented spectrum\n##END=\n"


def _db(url: str) -> str:
    return url.removeprefix("sqlite:///")


def _raw(url: str) -> sqlite3.Connection:
    con = sqlite3.connect(_db(url), isolation_level=None)
    return con


def _verify(url: str, capsys) -> tuple[int, str]:
    code = main(["history", "verify", "--store", url])
    return code, capsys.readouterr().out


def test_intact_store_verifies(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        a = st.save(result_dict(), FILES, sample_id="A")
        st.add_note(a, "checked by GC", author="qa")
        st.correct(a, verdict="CC(Br)C(C)C", reason="X-ray", author="qa")
        st.save(result_dict(), {}, sample_id="B")
        report = st.verify()
        assert report.ok and report.versions == 4 and report.links == 4
        assert all(not r.problems for r in st.search(all_versions=True))
        assert len(report.head_hash) == 64
    code, out = _verify(sqlite_url, capsys)
    assert code == 0 and "audit trail intact: 4 versions" in out and report.head_hash in out


def test_insert_or_replace_is_refused_and_reported_if_forced(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        aid = st.save(result_dict(), FILES, sample_id="S1", user="ana")
        # through the store's own engine: refused before it reaches SQLite
        with pytest.raises(SpecmatchError, match="immutable"):
            with st.engine.begin() as conn:
                conn.exec_driver_sql("INSERT OR REPLACE INTO analyses SELECT * FROM analyses")
    con = _raw(sqlite_url)
    rewrite = ("INSERT OR REPLACE INTO analyses (id, root_id, parent_id, version, kind, created_at, "
               "user_name, sample_id, substrate, substrate_key, reagent, verdict, top_smiles, "
               "top_probability, tool_version, tables_version, note, data_json, data_sha256, "
               "input_key, groups) SELECT id, root_id, parent_id, version, kind, created_at, "
               "'mallory', sample_id, substrate, substrate_key, reagent, 'decisive', top_smiles, "
               "0.99, tool_version, tables_version, note, :d, :h, input_key, groups "
               "FROM analyses WHERE id = :id")
    forged = json.dumps(dict(result_dict(word="decisive", p_top=0.99)))
    params = {"d": forged, "h": hashlib.sha256(forged.encode()).hexdigest(), "id": aid}
    with pytest.raises(sqlite3.DatabaseError, match="immutable"):  # the no_replace trigger
        con.execute(rewrite, params)
    # a determined editor drops the triggers first: the chain still tells
    con.execute("DROP TRIGGER analyses_no_replace")
    con.execute(rewrite, params)
    con.close()
    with open_store(sqlite_url, read_only=True) as st:
        rec = st.get(aid)
        assert rec.verdict == "decisive" and rec.user == "mallory"  # shown as it is, but:
        assert any("rewritten in place" in p for p in rec.problems)
    code, out = _verify(sqlite_url, capsys)
    assert code == 1 and "AUDIT TRAIL BROKEN" in out
    assert f"analysis {aid[:12]} v1" in out and "rewritten in place" in out
    assert "analyses_no_replace" in out  # the dropped trigger is named
    assert main(["history", "show", aid[:12], "--store", sqlite_url]) == 0
    shown = capsys.readouterr()
    assert shown.out.startswith("WARNING: the audit check of this analysis failed")
    assert "fails its audit check" in shown.err
    assert main(["history", "list", "--store", sqlite_url]) == 0
    listed = capsys.readouterr()
    assert aid[:12] + "!" in listed.out and "guard trigger" in listed.err
    with open_store(sqlite_url, read_only=True) as st:
        assert json.loads(st.export_json(aid))["integrity"].startswith("BROKEN")
        assert "Audit check failed" in st.export_html(aid)


def test_replace_into_analysis_files_is_refused_and_reported_if_forced(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        aid = st.save(result_dict(), FILES)
        other = st.save(result_dict(), {"other.jdx": OTHER})
        other_sha = st.get(other).files["other.jdx"]
    con = _raw(sqlite_url)
    repoint = "REPLACE INTO analysis_files (analysis_id, name, sha256) VALUES (?, 'crude_13C.jdx', ?)"
    with pytest.raises(sqlite3.DatabaseError, match="immutable"):
        con.execute(repoint, (aid, other_sha))
    con.execute("DROP TRIGGER analysis_files_no_replace")
    con.execute("PRAGMA recursive_triggers = OFF")
    con.execute(repoint, (aid, other_sha))
    con.close()
    with open_store(sqlite_url) as st:
        assert st.files(aid) == {"crude_13C.jdx": OTHER}  # re-pointed ...
        assert st.get(aid).problems  # ... and reported on read
    code, out = _verify(sqlite_url, capsys)
    assert code == 1 and f"analysis {aid[:12]} v1" in out and "its files" in out


def test_drop_trigger_is_refused_by_the_store_and_found_by_verify(store_url, capsys):
    with open_store(store_url) as st:
        st.save(result_dict(), FILES)
        with pytest.raises(SpecmatchError, match="immutable"):
            with st.engine.begin() as conn:
                conn.exec_driver_sql("DROP TRIGGER analyses_no_update" if st.dialect == "sqlite"
                                     else "DROP TRIGGER analyses_immutable ON analyses")
        dialect = st.dialect
        assert st.missing_triggers() == []
    raw = create_engine(store_url)
    with raw.begin() as conn:
        conn.exec_driver_sql("DROP TRIGGER analyses_no_update" if dialect == "sqlite"
                             else "DROP TRIGGER analyses_immutable ON analyses")
    raw.dispose()
    code, out = _verify(store_url, capsys)
    assert code == 1 and "guard trigger" in out and "missing" in out


def _forge_correction(url: str, aid: str, *, when: dt.datetime, with_link: bool) -> str:
    """Insert a correction by an invented reviewer as another program could, optionally
    with a correctly computed chain link (the hash scheme is public)."""
    eng = create_engine(url)
    with eng.begin() as conn:
        src = dict(conn.execute(text("SELECT * FROM analyses WHERE id = :i"), {"i": aid})
                   .mappings().one())
        head = conn.execute(text("SELECT seq, row_hash FROM audit_chain ORDER BY seq DESC LIMIT 1")).one()
        src.update(id="f" * 32, parent_id=aid, version=2, kind="correction", created_at=when,
                   user_name="Dr. Invented", verdict="CC(Br)C(C)C", note="re-examined")
        if isinstance(src["created_at"], dt.datetime) and src["created_at"].tzinfo:
            src["created_at"] = src["created_at"].astimezone(dt.timezone.utc).replace(tzinfo=None)
        cols = ", ".join(src)
        conn.execute(text(f"INSERT INTO analyses ({cols}) VALUES ({', '.join(':' + c for c in src)})"), src)
        files = conn.execute(text("SELECT name, sha256 FROM analysis_files WHERE analysis_id = :i"),
                             {"i": aid}).all()
        for n, h in files:
            conn.execute(text("INSERT INTO analysis_files VALUES (:a, :n, :h)"), {"a": src["id"], "n": n, "h": h})
        if with_link:
            row = dict(src, created_at=when)
            h = link_hash(row_content(row, files), head[1], head[0] + 1, "saved")
            conn.execute(text("INSERT INTO audit_chain VALUES (:s, :a, :p, :h, 'saved')"),
                         {"s": head[0] + 1, "a": src["id"], "p": head[1], "h": h})
    eng.dispose()
    return src["id"]


def test_back_dated_correction_is_reported(store_url, capsys):
    with open_store(store_url) as st:
        aid = st.save(result_dict(), FILES, sample_id="S1")
        saved_at = st.get(aid).created_at
    fake = _forge_correction(store_url, aid, when=saved_at - dt.timedelta(days=3), with_link=True)
    with open_store(store_url) as st:
        assert st.get(fake).problems == ()  # its own hash is right: only the order betrays it
        report = st.verify()
    assert not report.ok
    assert any(p.analysis_id == fake and "back-dated" in p.text for p in report.problems)
    code, out = _verify(store_url, capsys)
    assert code == 1 and f"analysis {fake[:12]} v2" in out and "back-dated" in out


def test_version_slipped_in_without_a_link_is_reported(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        aid = st.save(result_dict(), FILES)
        now = dt.datetime.now(dt.timezone.utc) + dt.timedelta(seconds=1)
    fake = _forge_correction(sqlite_url, aid, when=now, with_link=False)
    with open_store(sqlite_url) as st:
        assert any("no link" in p for p in st.get(fake).problems)
        assert any("no link" in p for v in st.history(aid) for p in v.problems)
        with pytest.raises(SpecmatchError, match="audit check"):
            st.add_note(fake, "building on a forged version")
    code, out = _verify(sqlite_url, capsys)
    assert code == 1 and "no link in the audit chain" in out


def test_stale_data_checksum_is_caught_on_read(sqlite_url, capsys):
    with open_store(sqlite_url) as st:
        aid = st.save(result_dict(), FILES)
    con = _raw(sqlite_url)
    for t in ("analyses_no_update",):
        con.execute(f"DROP TRIGGER {t}")
    # the data changed, its checksum left as it was
    con.execute("UPDATE analyses SET data_json = replace(data_json, '0.8', '0.9')")
    con.close()
    with open_store(sqlite_url) as st:
        rec = st.get(aid)
        assert any("does not match its SHA-256" in p for p in rec.problems)
        assert any("does not match its SHA-256" in p for p in st.search()[0].problems)
    code, out = _verify(sqlite_url, capsys)
    assert code == 1 and "does not match its SHA-256" in out


def test_save_validates_what_it_is_given(sqlite_url):
    with open_store(sqlite_url) as st:
        made_up = result_dict()
        made_up["versions"]["specmatch"] = "9.9.9"
        with pytest.raises(SpecmatchError, match="9.9.9"):
            st.save(made_up, FILES)
        fake_file = result_dict()
        fake_file["inputs"]["files"] = {"c13": {"name": "crude_13C.jdx", "sha256": "0" * 64}}
        with pytest.raises(SpecmatchError, match="not given with the same bytes"):
            st.save(fake_file, FILES)
        named = result_dict()
        named["inputs"]["files"] = {"c13": {"name": "crude_13C.jdx",
                                            "sha256": hashlib.sha256(FILES["crude_13C.jdx"]).hexdigest()}}
        ok = st.save(named, FILES)
        with pytest.raises(SpecmatchError, match="not an analysis result"):
            st.save({"verdict": "decisive"}, {})
        with pytest.raises(SpecmatchError, match="read from a store"):
            st.save(st.get(ok), FILES)
        forged = AnalysisRecord(data=result_dict(), tool_version="9.9.9")
        with pytest.raises(SpecmatchError, match="read from a store"):
            st.save(forged, FILES)
        with pytest.raises(SpecmatchError, match="not bytes"):
            st.save(result_dict(), {"x.jdx": "text, not bytes"})
        assert st.count() == 1
        rec = st.get(ok)
        assert rec.tool_version == __version__  # the running release, computed by the store
        assert rec.files == {"crude_13C.jdx": hashlib.sha256(FILES["crude_13C.jdx"]).hexdigest()}


def _make_v3_store(url: str) -> str:
    """A store as schema v3 left it (triggers, no chain), with an analysis and a note."""
    from specmatch.store.store import Store, _make_engine

    st = Store(_make_engine(url), url)
    migrations.upgrade(st.engine, lambda: st._begin_write("m", migration=True), target=3,
                       tool_version="0.0.9")
    data = json.dumps({"inputs": {"substrate": "C=CC"}, "verdict": {"word": "likely"}})
    digest = hashlib.sha256(data.encode()).hexdigest()
    blob = b"old invented spectrum"
    bsha = hashlib.sha256(blob).hexdigest()
    with st.engine.begin() as conn:
        for i, (kind, v, when, parent) in enumerate([("analysis", 1, dt.datetime(2026, 1, 5, 9, 30), None),
                                                     ("note", 2, dt.datetime(2026, 1, 6, 8, 0), "a" * 32)]):
            conn.execute(text(
                "INSERT INTO analyses (id, root_id, parent_id, version, kind, created_at, user_name, "
                "sample_id, substrate, reagent, verdict, tool_version, note, data_json, data_sha256) "
                "VALUES (:id, :root, :parent, :v, :kind, :t, 'old user', 'OLD-1', 'C=CC', 'HBr', "
                "'likely', '0.0.9', :note, :d, :h)"),
                {"id": ("a", "b")[i] * 32, "root": "a" * 32, "parent": parent, "v": v, "kind": kind,
                 "t": when, "note": "old note" if parent else None, "d": data, "h": digest})
        conn.execute(text("INSERT INTO blobs VALUES (:s, :n, :d, :t)"),
                     {"s": bsha, "n": len(blob), "d": blob, "t": dt.datetime(2026, 1, 5)})
        for aid in ("a" * 32, "b" * 32):
            conn.execute(text("INSERT INTO analysis_files VALUES (:a, 'old.jdx', :s)"), {"a": aid, "s": bsha})
    st.close()
    return "a" * 32


def test_upgrade_links_older_analyses_and_marks_them(store_url, capsys):
    old = _make_v3_store(store_url)
    with open_store(store_url) as st:
        rec = st.get(old)
        assert rec.problems == () and rec.chain_origin == "migration" and rec.chain_hash
        assert [v.version for v in st.history(old)] == [1, 2]
        new = st.add_note(old, "re-read in 2026")  # the chain goes on from the migrated links
        assert st.get(new).chain_origin == "saved"
        report = st.verify()
        assert report.ok and report.migrated == 2 and report.versions == 3
    assert main(["history", "show", old[:8], "--store", store_url]) == 0
    assert "linked at upgrade" in capsys.readouterr().out
    code, out = _verify(store_url, capsys)
    assert code == 0 and "2 versions were saved before the chain existed" in out


def test_viewer_sees_own_and_group_analyses(store_url):
    from specmatch.store import Viewer

    with open_store(store_url) as st:
        mine = st.save(result_dict(), {}, user="ana@lab.example", groups=["synthesis"])
        shared = st.save(result_dict(), {}, user="ben@lab.example", groups=["synthesis", "qa"])
        private = st.save(result_dict(), {}, user="cem@lab.example")
        note = st.add_note(private, "cem's own note", author="cem@lab.example")
        ana = Viewer("ana@lab.example", groups=("synthesis",))
        assert {r.id for r in st.search(viewer=ana)} == {mine, shared}
        assert {r.id for r in st.search(viewer=Viewer("dee@lab.example", ("qa",)))} == {shared}
        assert {r.id for r in st.search(viewer=Viewer("cem@lab.example"))} == {note}
        assert len(st.search(viewer=Viewer("x", everyone=True))) == 3
        with pytest.raises(SpecmatchError, match="no saved analysis"):
            st.get(private, viewer=ana)  # not even its existence is told
        assert st.get(shared, viewer=ana).groups == ("qa", "synthesis")
        with pytest.raises(SpecmatchError, match="group name"):
            st.save(result_dict(), {}, groups=["a|b"])
