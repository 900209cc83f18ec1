"""The analysis store: saved analyses with an audit trail, behind SQLAlchemy 2.

``open_store()`` picks the database from one setting: the ``url`` argument (the CLI's
``--store``), else the environment variable ``SPECMATCH_STORE``, else a SQLite file
in the user's data directory. Any SQLAlchemy URL works for a shared server
(PostgreSQL is tested: ``postgresql+psycopg://user@host/db``).

Nothing saved is ever changed: a note or a correction is a new version that points
at the one it amends. SQLite runs in WAL mode with a busy timeout, writes take the
write lock up front (``BEGIN IMMEDIATE``) and are retried when another process
holds it, so several processes can save into one file.
"""

from __future__ import annotations

import datetime as _dt
import functools
import getpass
import hashlib
import json
import os
import random
import re
import time
import uuid
from contextlib import contextmanager
from pathlib import Path
from dataclasses import dataclass
from typing import Any, Iterator, Mapping, Sequence

from sqlalchemy import and_, create_engine, event, func, or_, select
from sqlalchemy.engine import Connection, Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError, OperationalError

from ..errors import SpecmatchError
from . import migrations
from .models import SCHEMA_VERSION, analyses, analysis_files, blobs
from .records import AnalysisRecord, canonical_json, sha256_hex, summarise

ENV_STORE = "SPECMATCH_STORE"
ENV_USER = "SPECMATCH_USER"
BUSY_TIMEOUT_S = 30.0
"""How long SQLite waits for another writer before giving up on one attempt."""
WRITE_ATTEMPTS = 8
"""Attempts of a write that found the database locked (after the busy timeout)."""


def default_store_url() -> str:
    """The store used when nothing is configured: ``analyses.sqlite`` in the user data dir."""
    from platformdirs import user_data_dir

    return "sqlite:///" + str(Path(user_data_dir("specmatch", appauthor=False)) / "analyses.sqlite")


def resolve_store_url(url: str | None = None) -> str:
    """``url`` if given, else ``$SPECMATCH_STORE``, else :func:`default_store_url`."""
    if url:
        return url
    return os.environ.get(ENV_STORE) or default_store_url()


@functools.lru_cache(maxsize=1)
def _os_user() -> str:
    try:
        return getpass.getuser()
    except Exception:  # no user database entry (containers): still record something
        return "unknown"


def current_user(name: str | None = None) -> str:
    """The name recorded as who ran an analysis: the one entered, else the OS user."""
    if name and name.strip():
        return name.strip()
    env = os.environ.get(ENV_USER)
    if env and env.strip():
        return env.strip()
    return _os_user()


def _now() -> _dt.datetime:
    return _dt.datetime.now(_dt.timezone.utc)


def _lock_key(text: str) -> int:
    """A signed 64-bit key for PostgreSQL advisory locks."""
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:8], "big", signed=True)


def _is_locked(exc: BaseException) -> bool:
    msg = str(getattr(exc, "orig", exc)).lower()
    return "database is locked" in msg or "database is busy" in msg or "deadlock detected" in msg


def _canonical_smiles(text: str | None) -> str | None:
    if not text:
        return None
    try:
        from ..structures import parse_structure

        return parse_structure(text).canonical_smiles
    except Exception:  # an unparsable substrate is still saved and found by its text
        return text


_GUARDED = re.compile(r"^\s*(UPDATE|DELETE\s+FROM|DROP\s+TABLE|ALTER\s+TABLE|TRUNCATE)\s+"
                      r"(?:\w+\.)?\"?(analyses|analysis_files|blobs)\b", re.IGNORECASE)


def _guard_immutable(engine: Engine) -> None:
    """Refuse statements that would change saved analyses through this engine.

    The database triggers (schema v3) do the same on SQLite and PostgreSQL; this
    guard covers every other server. Migrations may alter tables and pass
    ``specmatch_migration=True`` as an execution option.
    """

    @event.listens_for(engine, "before_cursor_execute")
    def _check(conn, cursor, statement, parameters, context, executemany):  # pragma: no cover
        if _GUARDED.match(statement) and not conn.get_execution_options().get("specmatch_migration"):
            raise SpecmatchError("saved analyses are immutable: add a note or a correction "
                                 "instead (the store refused: " + statement.split()[0] + ")")


def _make_engine(url: str) -> Engine:
    try:
        parsed = make_url(url)
    except ArgumentError:
        raise SpecmatchError(
            f"'{url}' is not a database URL; give e.g. sqlite:////path/analyses.sqlite or "
            "postgresql+psycopg://user@host/dbname (option --store or SPECMATCH_STORE)") from None
    backend = parsed.get_backend_name()
    try:
        if backend == "sqlite":
            engine = _sqlite_engine(parsed)
        else:
            engine = create_engine(parsed, pool_pre_ping=True)
        _guard_immutable(engine)
        return engine
    except NoSuchModuleError:
        raise SpecmatchError(
            f"no database driver for '{parsed.drivername}'; for PostgreSQL install "
            "'specmatch[postgres]' and use postgresql+psycopg://...") from None
    except ImportError as exc:
        raise SpecmatchError(f"the database driver for '{parsed.drivername}' is not installed "
                             f"({exc}); for PostgreSQL install 'specmatch[postgres]'") from None


def _sqlite_engine(parsed) -> Engine:
    from sqlalchemy.pool import StaticPool

    database = parsed.database
    memory = not database or database == ":memory:"
    if memory:
        engine = create_engine(parsed, poolclass=StaticPool,
                               connect_args={"check_same_thread": False})
    else:
        Path(database).expanduser().parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(parsed, connect_args={"timeout": BUSY_TIMEOUT_S})

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn, _record):  # pragma: no cover - exercised by every test
        # Transactions are begun by the "begin" hook below (pysqlite's own
        # handling would not put DDL in them, nor take the write lock up front).
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        cur.execute("PRAGMA foreign_keys = ON")
        if not memory:
            cur.execute("PRAGMA journal_mode = WAL")
            # FULL: a committed analysis survives a power cut, not only a killed process
            cur.execute("PRAGMA synchronous = FULL")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn):  # pragma: no cover
        write = conn.get_execution_options().get("specmatch_write", False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


@dataclass
class _Pending:
    """An analysis ready to insert: its row, its new blobs, its file links."""

    row: dict[str, Any]
    blobs: dict[str, bytes]
    files: list[dict[str, str]]
    skip_if_done: bool


class Store:
    """Saved analyses in one database. Create with :func:`open_store`."""

    def __init__(self, engine: Engine, url: str):
        self.engine = engine
        self.url = url
        self.dialect = engine.dialect.name

    # ----------------------------------------------------------------- plumbing
    @contextmanager
    def _begin_write(self, lock: str | None = "specmatch-store", *,
                     migration: bool = False) -> Iterator[Connection]:
        """One write transaction holding the database's write lock."""
        with self.engine.connect() as conn:
            conn.execution_options(specmatch_write=True, specmatch_migration=migration)
            with conn.begin():
                if self.dialect == "postgresql" and lock:
                    conn.exec_driver_sql("SELECT pg_advisory_xact_lock(%s)" % _lock_key(lock))
                yield conn

    def _write(self, fn, lock: str | None = "specmatch-store"):
        """Run ``fn(conn)`` in a write transaction, retrying while the database is locked."""
        for attempt in range(WRITE_ATTEMPTS):
            try:
                with self._begin_write(lock) as conn:
                    return fn(conn)
            except (OperationalError, DBAPIError) as exc:
                if not _is_locked(exc) or attempt == WRITE_ATTEMPTS - 1:
                    raise
                time.sleep(min(2.0, 0.05 * 2 ** attempt) * (0.5 + random.random()))
        raise AssertionError("unreachable")

    @contextmanager
    def _read(self) -> Iterator[Connection]:
        with self.engine.connect() as conn:
            with conn.begin():
                yield conn

    def close(self) -> None:
        self.engine.dispose()

    def __enter__(self) -> "Store":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def display_url(self) -> str:
        """The URL with any password masked, for messages and summaries."""
        return self.engine.url.render_as_string(hide_password=True)

    def __repr__(self) -> str:
        return f"Store({self.display_url!r})"

    @property
    def schema_version(self) -> int:
        with self._read() as conn:
            return migrations.current_version(conn)

    def upgrade(self) -> int:
        """Bring the schema to this release's version (done by :func:`open_store`)."""
        from .. import __version__

        return migrations.upgrade(self.engine,
                                  lambda: self._begin_write("specmatch-migrate", migration=True),
                                  tool_version=__version__)

    # --------------------------------------------------------------------- save
    def save(self, record: AnalysisRecord | Mapping[str, Any],
             files: Mapping[str, bytes] | None = None, *, sample_id: str | None = None,
             user: str | None = None, input_key: str | None = None,
             skip_if_done: bool = False) -> str:
        """Save one analysis whole, with the files it was based on; return its id.

        Parameters
        ----------
        record
            ``Result.to_dict()`` (inputs, versions, candidates, verdict) or an
            :class:`AnalysisRecord` carrying it with ``sample_id``/``user``/``input_key``.
        files
            The uploaded files by name; stored once per SHA-256 of their bytes.
        sample_id, user
            Lab sample id; who ran it (default: ``$SPECMATCH_USER`` or the OS user).
        input_key
            SHA-256 of the inputs (:func:`~specmatch.store.records.input_key`).
        skip_if_done
            With ``input_key``: if an analysis of this sample with this key exists,
            return its id instead of saving a second one (batches resume this way).
        """
        pending = self._prepare(record, files, sample_id=sample_id, user=user,
                                input_key=input_key, skip_if_done=skip_if_done)
        key = pending.row["input_key"]
        # lock per input key on PostgreSQL, so two batches on one manifest cannot both save
        return self._write(lambda conn: self._insert(conn, pending),
                           lock=f"input:{key}" if skip_if_done and key else None)

    def save_many(self, items: Sequence[Mapping[str, Any]]) -> list[str]:
        """Save several analyses in one transaction; return their ids in order.

        Each item holds the keyword arguments of :meth:`save` (``record``, ``files``,
        ``sample_id``, ``user``, ``input_key``, ``skip_if_done``; and optionally
        ``data_json``, the record already as canonical JSON). All are saved or
        none: a batch uses this for results that finished together, paying for one
        commit (one fsync) instead of one per sample.
        """
        prepared = [self._prepare(**item) for item in items]
        if not prepared:
            return []

        def work(conn: Connection) -> list[str]:
            if self.dialect == "postgresql":  # sorted: two writers never wait on each other
                for key in sorted({p.row["input_key"] for p in prepared
                                   if p.skip_if_done and p.row["input_key"]}):
                    conn.exec_driver_sql("SELECT pg_advisory_xact_lock(%s)" % _lock_key(f"input:{key}"))
            return self._insert_many(conn, prepared)

        return self._write(work, lock=None)

    def _insert_many(self, conn: Connection, prepared: list["_Pending"]) -> list[str]:
        # one statement per table for the whole group: the batch parent's cost per sample
        keys = [p.row["input_key"] for p in prepared if p.skip_if_done and p.row["input_key"]]
        done: dict[tuple[str | None, str], str] = {}
        if keys:
            q = (select(analyses.c.sample_id, analyses.c.input_key, analyses.c.id)
                 .where(analyses.c.input_key.in_(sorted(set(keys))), analyses.c.kind == "analysis")
                 .order_by(analyses.c.created_at.desc()))
            done = {(sid, k): i for sid, k, i in conn.execute(q)}
        ids, rows, files, new_blobs = [], [], [], {}
        for p in prepared:
            key = (p.row["sample_id"], p.row["input_key"])
            if p.skip_if_done and key[1] and key in done:
                ids.append(done[key])
                continue
            if p.skip_if_done and key[1]:
                done[key] = p.row["id"]  # the same sample twice in one group: saved once
            ids.append(p.row["id"])
            rows.append(p.row)
            files.extend(p.files)
            new_blobs.update(p.blobs)
        self._put_blobs(conn, new_blobs)
        if rows:
            conn.execute(analyses.insert(), rows)
        if files:
            conn.execute(analysis_files.insert(), files)
        return ids

    def _prepare(self, record: AnalysisRecord | Mapping[str, Any],
                 files: Mapping[str, bytes] | None = None, *, sample_id: str | None = None,
                 user: str | None = None, input_key: str | None = None,
                 skip_if_done: bool = False, data_json: str | None = None) -> "_Pending":
        if isinstance(record, AnalysisRecord):
            data = record.data
            sample_id = sample_id or record.sample_id
            user = user or record.user
            input_key = input_key or record.input_key
        else:
            data = record
        if data_json is not None:  # already canonical JSON of `data` (a batch worker made it)
            summary = summarise(data)
        else:
            try:
                data_json = canonical_json(dict(data))
            except (TypeError, ValueError) as exc:
                raise SpecmatchError(
                    f"the analysis cannot be saved: it is not JSON data ({exc})") from None
            summary = summarise(json.loads(data_json))
        from .. import __version__

        blob_rows: dict[str, bytes] = {}
        file_rows = []
        analysis_id = uuid.uuid4().hex
        for name, content in (files or {}).items():
            digest = sha256_hex(content)
            blob_rows[digest] = content
            file_rows.append({"analysis_id": analysis_id, "name": str(name), "sha256": digest})
        row = {
            "id": analysis_id, "root_id": analysis_id, "parent_id": None, "version": 1,
            "kind": "analysis", "created_at": _now(), "user_name": current_user(user),
            "sample_id": sample_id, "substrate": summary.substrate,
            "substrate_key": _canonical_smiles(summary.substrate),
            "reagent": summary.reagent, "verdict": summary.verdict,
            # canonical, so a search finds it in any SMILES spelling (data keeps the original)
            "top_smiles": _canonical_smiles(summary.top_smiles),
            "top_probability": summary.top_probability,
            "tool_version": summary.tool_version or __version__,
            "tables_version": summary.tables_version, "note": None,
            "data_json": data_json, "data_sha256": sha256_hex(data_json.encode("utf-8")),
            "input_key": input_key,
        }
        return _Pending(row, blob_rows, file_rows, skip_if_done)

    def _insert(self, conn: Connection, p: "_Pending") -> str:
        key = p.row["input_key"]
        if p.skip_if_done and key:
            done = self._find_done(conn, p.row["sample_id"], key)
            if done:
                return done
        self._put_blobs(conn, p.blobs)
        conn.execute(analyses.insert(), [p.row])
        if p.files:
            conn.execute(analysis_files.insert(), p.files)
        return p.row["id"]

    def _put_blobs(self, conn: Connection, blob_rows: Mapping[str, bytes]) -> None:
        if not blob_rows:
            return
        rows = [{"sha256": k, "size_bytes": len(v), "data": v, "created_at": _now()}
                for k, v in blob_rows.items()]
        if self.dialect in ("sqlite", "postgresql"):
            if self.dialect == "sqlite":
                from sqlalchemy.dialects.sqlite import insert
            else:
                from sqlalchemy.dialects.postgresql import insert
            conn.execute(insert(blobs).on_conflict_do_nothing(index_elements=["sha256"]), rows)
            return
        have = set(conn.execute(select(blobs.c.sha256).where(
            blobs.c.sha256.in_(list(blob_rows)))).scalars())
        new = [r for r in rows if r["sha256"] not in have]
        if new:
            conn.execute(blobs.insert(), new)

    @staticmethod
    def _find_done(conn: Connection, sample_id: str | None, key: str) -> str | None:
        q = select(analyses.c.id).where(analyses.c.input_key == key,
                                        analyses.c.kind == "analysis")
        q = q.where(analyses.c.sample_id == sample_id) if sample_id is not None else q
        return conn.execute(q.order_by(analyses.c.created_at).limit(1)).scalar()

    def find_done(self, sample_id: str | None, key: str) -> str | None:
        """Id of an analysis of ``sample_id`` saved with input key ``key``, if any."""
        with self._read() as conn:
            return self._find_done(conn, sample_id, key)

    def done_keys(self, keys: Sequence[str] | None = None) -> dict[tuple[str | None, str], str]:
        """(sample_id, input_key) pairs already saved, with the (first) analysis id.

        With ``keys``, only those input keys are looked up (a batch asks for its own).
        """
        base = (select(analyses.c.sample_id, analyses.c.input_key, analyses.c.id)
                .where(analyses.c.input_key.is_not(None), analyses.c.kind == "analysis")
                .order_by(analyses.c.created_at.desc()))  # the oldest wins: it is written last
        out: dict[tuple[str | None, str], str] = {}
        with self._read() as conn:
            if keys is None:
                chunks = [base]
            else:
                wanted = sorted(set(keys))
                chunks = [base.where(analyses.c.input_key.in_(wanted[k:k + 500]))
                          for k in range(0, len(wanted), 500)]
            for q in chunks:
                out.update({(s, k): i for s, k, i in conn.execute(q)})
        return out

    # ------------------------------------------------------------- new versions
    def add_note(self, analysis_id: str, text: str, author: str | None = None) -> str:
        """Attach a note as a new version of the analysis; return the new version's id."""
        if not text or not text.strip():
            raise SpecmatchError("the note is empty; write what should be recorded")
        return self._new_version(analysis_id, kind="note", note=text.strip(), author=author)

    def correct(self, analysis_id: str, *, verdict: str, reason: str,
                author: str | None = None) -> str:
        """Record a corrected verdict (with the reason) as a new version; return its id.

        The tool's own result in the data stays as it was; the new version carries
        the corrected verdict in its ``verdict`` field and the reason as its note.
        """
        if not reason or not reason.strip():
            raise SpecmatchError("a correction needs a reason (what evidence shows the verdict is wrong)")
        if not verdict or not verdict.strip():
            raise SpecmatchError("give the corrected verdict")
        return self._new_version(analysis_id, kind="correction", note=reason.strip(),
                                 author=author, verdict=verdict.strip())

    def _new_version(self, analysis_id: str, *, kind: str, note: str, author: str | None,
                     verdict: str | None = None) -> str:
        parent = self.get(analysis_id)
        new_id = uuid.uuid4().hex
        parent_files = dict(parent.files)

        def work(conn: Connection) -> str:
            last = conn.execute(select(func.max(analyses.c.version))
                                .where(analyses.c.root_id == parent.root_id)).scalar()
            src = conn.execute(select(analyses).where(analyses.c.id == parent.id)).mappings().one()
            row = dict(src)
            row.update(id=new_id, parent_id=parent.id, version=int(last) + 1, kind=kind,
                       created_at=_now(), user_name=current_user(author), note=note,
                       input_key=None)
            if verdict is not None:
                row["verdict"] = verdict
            conn.execute(analyses.insert().values(**row))
            if parent_files:
                conn.execute(analysis_files.insert(),
                             [{"analysis_id": new_id, "name": n, "sha256": h}
                              for n, h in parent_files.items()])
            return new_id

        return self._write(work, lock=f"root:{parent.root_id}")

    # --------------------------------------------------------------------- read
    def resolve_id(self, analysis_id: str) -> str:
        """The full id for an id or a unique prefix of one (at least 4 characters)."""
        ident = (analysis_id or "").strip().lower()
        if len(ident) < 4 or any(c not in "0123456789abcdef" for c in ident):
            raise SpecmatchError(f"'{analysis_id}' is not an analysis id; ids are hexadecimal "
                                 "(see 'specmatch history list')")
        with self._read() as conn:
            found = list(conn.execute(select(analyses.c.id)
                                      .where(analyses.c.id.like(ident + "%")).limit(2)).scalars())
        if not found:
            raise SpecmatchError(f"no saved analysis with id '{analysis_id}' in {self!r}; "
                                 "list them with 'specmatch history list'")
        if len(found) > 1:
            raise SpecmatchError(f"'{analysis_id}' matches several analyses; give more characters")
        return found[0]

    def get(self, analysis_id: str) -> AnalysisRecord:
        """The analysis version with this id (or unique id prefix)."""
        full = self.resolve_id(analysis_id)
        with self._read() as conn:
            row = conn.execute(select(analyses).where(analyses.c.id == full)).mappings().one()
            files = self._files_of(conn, [full])
        return self._record(row, files.get(full, {}))

    @staticmethod
    def _files_of(conn: Connection, ids: list[str]) -> dict[str, dict[str, str]]:
        out: dict[str, dict[str, str]] = {}
        if not ids:
            return out
        q = select(analysis_files).where(analysis_files.c.analysis_id.in_(ids))
        for r in conn.execute(q.order_by(analysis_files.c.name)).mappings():
            out.setdefault(r["analysis_id"], {})[r["name"]] = r["sha256"]
        return out

    @staticmethod
    def _record(row: Mapping[str, Any], files: dict[str, str]) -> AnalysisRecord:
        return AnalysisRecord(
            data=json.loads(row["data_json"]), sample_id=row["sample_id"], user=row["user_name"],
            input_key=row["input_key"], id=row["id"], root_id=row["root_id"],
            parent_id=row["parent_id"], version=row["version"], kind=row["kind"],
            note=row["note"], created_at=row["created_at"], substrate=row["substrate"],
            reagent=row["reagent"], verdict=row["verdict"], top_smiles=row["top_smiles"],
            top_probability=row["top_probability"], tool_version=row["tool_version"],
            tables_version=row["tables_version"], data_sha256=row["data_sha256"], files=files)

    def get_many(self, ids: list[str]) -> list[AnalysisRecord]:
        """The analyses with these full ids, in the order given."""
        rows: dict[str, Any] = {}
        files: dict[str, dict[str, str]] = {}
        with self._read() as conn:
            for k in range(0, len(ids), 500):  # stay below bound-parameter limits
                chunk = ids[k:k + 500]
                for r in conn.execute(select(analyses).where(analyses.c.id.in_(chunk))).mappings():
                    rows[r["id"]] = r
                files.update(self._files_of(conn, chunk))
        missing = [i for i in ids if i not in rows]
        if missing:
            raise SpecmatchError(f"no saved analysis with id '{missing[0]}'")
        return [self._record(rows[i], files.get(i, {})) for i in ids]

    def file_bytes(self, sha256: str) -> bytes:
        """The bytes of a saved file, checked against its SHA-256."""
        with self._read() as conn:
            data = conn.execute(select(blobs.c.data).where(blobs.c.sha256 == sha256)).scalar()
        if data is None:
            raise SpecmatchError(f"no saved file with SHA-256 {sha256}")
        data = bytes(data)
        if sha256_hex(data) != sha256:
            raise SpecmatchError(f"saved file {sha256[:12]} does not match its checksum: "
                                 "the store is damaged; restore it from a backup")
        return data

    def files(self, analysis_id: str) -> dict[str, bytes]:
        """The files an analysis was based on, by name."""
        return {name: self.file_bytes(h) for name, h in self.get(analysis_id).files.items()}

    def history(self, analysis_id: str) -> list[AnalysisRecord]:
        """Every version of the analysis, oldest first (the first is the tool's own result)."""
        root = self.get(analysis_id).root_id
        with self._read() as conn:
            rows = list(conn.execute(select(analyses).where(analyses.c.root_id == root)
                                     .order_by(analyses.c.version)).mappings())
            files = self._files_of(conn, [r["id"] for r in rows])
        return [self._record(r, files.get(r["id"], {})) for r in rows]

    def search(self, *, substrate: str | None = None, reagent: str | None = None,
               verdict: str | None = None, since: _dt.datetime | _dt.date | str | None = None,
               until: _dt.datetime | _dt.date | str | None = None,
               sample_id: str | None = None, all_versions: bool = False,
               limit: int | None = 200) -> list[AnalysisRecord]:
        """Saved analyses matching every filter given, newest first.

        ``substrate`` matches the same molecule in any SMILES spelling; ``reagent`` is
        case-insensitive; ``verdict`` matches the verdict words (substring) or the top
        candidate's SMILES; ``since``/``until`` are UTC (a date alone covers the whole
        day). Without ``all_versions`` only the latest version of each analysis is
        listed, and the date filters apply to the original run.
        """
        a = analyses
        conds = []
        if substrate:
            key = _canonical_smiles(substrate)
            conds.append(or_(a.c.substrate_key == key, a.c.substrate == substrate))
        if reagent:
            conds.append(func.lower(a.c.reagent) == reagent.strip().lower())
        if verdict:
            v = verdict.strip()
            key = _canonical_smiles(v) if not any(ch.isspace() for ch in v) else v
            conds.append(or_(func.lower(a.c.verdict).contains(v.lower(), autoescape=True),
                             a.c.top_smiles == key))
        if sample_id:
            conds.append(a.c.sample_id == sample_id)
        lo = _as_utc(since, end=False) if since else None
        hi = _as_utc(until, end=True) if until else None
        if not all_versions:
            last = (select(a.c.root_id, func.max(a.c.version).label("v"))
                    .group_by(a.c.root_id).subquery())
            root = a.alias("root")
            q = (select(a).join(last, and_(a.c.root_id == last.c.root_id, a.c.version == last.c.v))
                 .join(root, root.c.id == a.c.root_id))
            when = root.c.created_at
        else:
            q = select(a)
            when = a.c.created_at
        if lo:
            conds.append(when >= lo)
        if hi:
            conds.append(when < hi)
        q = q.where(*conds).order_by(when.desc(), a.c.version.desc())
        if limit:
            q = q.limit(limit)
        with self._read() as conn:
            rows = list(conn.execute(q).mappings())
            files = self._files_of(conn, [r["id"] for r in rows])
        return [self._record(r, files.get(r["id"], {})) for r in rows]

    def count(self) -> int:
        """Number of analysis versions saved (notes and corrections included)."""
        with self._read() as conn:
            return int(conn.execute(select(func.count()).select_from(analyses)).scalar())

    # ------------------------------------------------------------------ exports
    def export_dict(self, analysis_id: str) -> dict[str, Any]:
        rec = self.get(analysis_id)
        out = rec.to_dict()
        out["history"] = [{"id": r.id, "version": r.version, "kind": r.kind, "user": r.user,
                           "created_at": r.created_at.isoformat(), "note": r.note,
                           "verdict": r.verdict} for r in self.history(rec.id)]
        out["files"] = [{"name": n, "sha256": h} for n, h in rec.files.items()]
        out["store_schema_version"] = SCHEMA_VERSION
        return out

    def export_json(self, analysis_id: str, *, include_files: bool = False) -> str:
        """The whole saved analysis as JSON (with its version history and file hashes).

        With ``include_files`` the file bytes are embedded in base64, so the export
        alone is enough to rerun or audit the analysis.
        """
        out = self.export_dict(analysis_id)
        if include_files:
            import base64

            for f in out["files"]:
                f["base64"] = base64.b64encode(self.file_bytes(f["sha256"])).decode("ascii")
        return json.dumps(out, indent=2, ensure_ascii=False, sort_keys=False)

    def export_html(self, analysis_id: str) -> str:
        """A self-contained HTML page: the analysis report with the saved record's audit block.

        The one report renderer (``specmatch.reports.html``) draws it from the saved
        Result; old saved layouts are read through ``Result.from_dict``'s migration.
        """
        from ..identification.result import Result
        from ..reports.html import report_html

        out = self.export_dict(analysis_id)
        return report_html(Result.from_dict(out["data"]), audit=out)

    # ------------------------------------------------------------------ compare
    def compare(self, id_a: str, id_b: str) -> dict[str, Any]:
        """Two analyses side by side: the fields, then each candidate's probability in both."""
        a, b = self.get(id_a), self.get(id_b)
        fields = []
        names = ["sample_id", "substrate", "reagent", "verdict", "top_smiles", "top_probability",
                 "user", "created_at", "tool_version", "tables_version", "version", "kind", "note"]
        for name in names:
            va, vb = getattr(a, name), getattr(b, name)
            if isinstance(va, _dt.datetime):
                va = va.isoformat()
            if isinstance(vb, _dt.datetime):
                vb = vb.isoformat()
            fields.append({"field": name, "a": va, "b": vb, "same": va == vb})
        inputs_a = a.data.get("inputs") if isinstance(a.data.get("inputs"), dict) else {}
        inputs_b = b.data.get("inputs") if isinstance(b.data.get("inputs"), dict) else {}
        for key in sorted(set(inputs_a) | set(inputs_b)):
            va, vb = inputs_a.get(key), inputs_b.get(key)
            fields.append({"field": f"inputs.{key}", "a": va, "b": vb, "same": va == vb})
        files_a, files_b = set(a.files.values()), set(b.files.values())
        probs_a, probs_b = _candidate_probs(a.data), _candidate_probs(b.data)
        cands = [{"smiles": s, "a": probs_a.get(s), "b": probs_b.get(s)}
                 for s in dict.fromkeys([*probs_a, *probs_b])]
        cands.sort(key=lambda c: -max(c["a"] or 0.0, c["b"] or 0.0))
        return {"a": a.id, "b": b.id, "fields": fields, "candidates": cands,
                "same_files": files_a == files_b,
                "shared_files": sorted(files_a & files_b)}


def _candidate_probs(data: Mapping[str, Any]) -> dict[str, float | None]:
    from .records import _first, _probability

    out: dict[str, float | None] = {}
    for c in data.get("candidates") or data.get("ranking") or []:
        if isinstance(c, Mapping):
            smi = _first(c, "canonical_smiles", "smiles")
            if smi:
                out[str(smi)] = _probability(c)
    return out


def _as_utc(value: _dt.datetime | _dt.date | str, *, end: bool) -> _dt.datetime:
    """A filter bound in UTC; a bare date means its start (``since``) or its end (``until``)."""
    if isinstance(value, str):
        text = value.strip()
        try:
            if len(text) == 10:
                value = _dt.date.fromisoformat(text)
            else:
                value = _dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
        except ValueError:
            raise SpecmatchError(f"'{text}' is not a date; write it as YYYY-MM-DD or "
                                 "YYYY-MM-DDTHH:MM (UTC)") from None
    if not isinstance(value, _dt.datetime):
        day = _dt.datetime(value.year, value.month, value.day, tzinfo=_dt.timezone.utc)
        return day + _dt.timedelta(days=1) if end else day
    if value.tzinfo is None:
        value = value.replace(tzinfo=_dt.timezone.utc)
    return value.astimezone(_dt.timezone.utc)


def open_store(url: str | None = None, *, upgrade: bool = True) -> Store:
    """Open (and create or upgrade) the analysis store.

    Parameters
    ----------
    url
        SQLAlchemy URL; default ``$SPECMATCH_STORE`` or a SQLite file in the user's
        data directory (:func:`default_store_url`).
    upgrade
        Apply missing schema migrations (the default).
    """
    resolved = resolve_store_url(url)
    store = Store(_make_engine(resolved), resolved)
    try:
        if upgrade:
            store.upgrade()
    except SpecmatchError:
        store.close()
        raise
    except (OperationalError, DBAPIError) as exc:
        store.close()
        raise SpecmatchError(
            f"cannot open the analysis store {store!r}: {getattr(exc, 'orig', exc)}; "
            "check the URL (option --store or SPECMATCH_STORE) and that the server is running"
        ) from None
    return store


def save_result(store: Store, result: Any, files: Mapping[str, bytes] | None = None, *,
                sample_id: str | None = None, user: str | None = None,
                input_key: str | None = None) -> str:
    """Save an identification ``Result`` (its ``to_dict()`` form); return the analysis id."""
    data = result.to_dict() if hasattr(result, "to_dict") else result
    return store.save(data, files or {}, sample_id=sample_id, user=user, input_key=input_key)


def save_run(result: Any, paths: Mapping[str, str | os.PathLike | None], *,
             store: "Store | str | None" = None, sample_id: str | None = None,
             user: str | None = None) -> str:
    """Save an identify run together with the spectrum files it read; return the id.

    For the ``identify`` command and scripts: ``paths`` maps roles (``c13``, ``h1``,
    ``dept135``) to the files given (None for absent ones); each file is saved
    under its base name. ``store`` is a Store, a URL or None (the configured store).
    """
    files: dict[str, bytes] = {}
    for role, path in paths.items():
        if not path:
            continue
        p = Path(path)
        try:
            content = p.read_bytes()
        except OSError as exc:
            raise SpecmatchError(f"cannot read '{p}' to save it with the analysis: "
                                 f"{exc.strerror}") from None
        name = p.name if p.name not in files else f"{role}/{p.name}"
        files[name] = content
    if isinstance(store, Store):
        return save_result(store, result, files, sample_id=sample_id, user=user)
    with open_store(store) as st:
        return save_result(st, result, files, sample_id=sample_id, user=user)
