"""The analysis store: saved analyses with a tamper-evident audit trail, behind SQLAlchemy 2.

``open_store()`` picks the database from one setting: the ``url`` argument (the CLI's
``--store``), else the environment variable ``SPECMATCH_STORE``, else a SQLite file
in the user's data directory. Any SQLAlchemy URL works for a shared server
(PostgreSQL is tested: ``postgresql+psycopg://user@host/db``).

Nothing saved is ever changed: a note or a correction is a new version that points
at the one it amends. Every version is a link of a hash chain
(:mod:`specmatch.store.chain`) checked whenever it is read; :meth:`Store.verify`
checks the whole store. SQLite runs in WAL mode with a busy timeout, writes take the
write lock up front (``BEGIN IMMEDIATE``) and are retried when another process holds
it, so several processes can save into one file. A store opened ``read_only`` (what
``specmatch history`` does to look) works on a read-only file or file system.
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
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Mapping, Sequence

from sqlalchemy import and_, create_engine, event, func, or_, select
from sqlalchemy.engine import Connection, Engine, make_url
from sqlalchemy.exc import ArgumentError, DBAPIError, NoSuchModuleError, OperationalError

from ..errors import SpecmatchError
from . import migrations
from .chain import GENESIS, link_hash, row_content
from .schema import SCHEMA_VERSION, analyses, analysis_files, audit_chain, blobs
from .records import AnalysisRecord, canonical_json, sha256_hex, summarise

ENV_STORE = "SPECMATCH_STORE"
ENV_USER = "SPECMATCH_USER"
BUSY_TIMEOUT_S = 30.0
"""How long SQLite waits for another writer before giving up on one attempt."""
WRITE_ATTEMPTS = 8
"""Attempts of a write that found the database locked (after the busy timeout)."""
MAX_GROUPS = 50
"""Most sharing groups one analysis may name."""


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


@dataclass(frozen=True)
class Viewer:
    """Who is looking: they see their own analyses and those shared with their groups.

    ``name`` is matched against the user recorded with the first version of an
    analysis (with sign-in: the signed-in identity); ``everyone`` lifts the filter
    (a reviewer's or administrator's view).
    """

    name: str
    groups: tuple[str, ...] = ()
    everyone: bool = False


def _clean_groups(groups: Sequence[str] | str | None) -> tuple[str, ...]:
    if not groups:
        return ()
    if isinstance(groups, str):
        groups = [g for g in re.split(r"[,;]", groups)]
    out = []
    for g in groups:
        g = str(g).strip()
        if not g:
            continue
        if "|" in g or len(g) > 100:
            raise SpecmatchError(f"'{g[:40]}' is not a group name: at most 100 characters, no '|'")
        out.append(g)
    out = sorted(set(out))
    if len(out) > MAX_GROUPS:
        raise SpecmatchError(f"{len(out)} groups given; an analysis is shared with at most {MAX_GROUPS}")
    return tuple(out)


def _groups_text(groups: tuple[str, ...]) -> str | None:
    return "|" + "|".join(groups) + "|" if groups else None


def _groups_tuple(text: str | None) -> tuple[str, ...]:
    return tuple(g for g in (text or "").split("|") if g)


def _now() -> _dt.datetime:
    return _dt.datetime.now(_dt.timezone.utc)


def _lock_key(text: str) -> int:
    """A signed 64-bit key for PostgreSQL advisory locks."""
    return int.from_bytes(hashlib.sha256(text.encode()).digest()[:8], "big", signed=True)


def _is_locked(exc: BaseException) -> bool:
    msg = str(getattr(exc, "orig", exc)).lower()
    return "database is locked" in msg or "database is busy" in msg or "deadlock detected" in msg


def _first_line(exc: BaseException) -> str:
    text = str(getattr(exc, "orig", None) or exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def _canonical_smiles(text: str | None) -> str | None:
    if not text:
        return None
    from ..structures import parse_structure

    try:
        return parse_structure(text).canonical_smiles
    except SpecmatchError:  # an unparsable substrate is still saved and found by its text
        return text


_TABLES = r"(?:analyses|analysis_files|blobs|audit_chain|schema_version)"
_GUARDED = re.compile(
    r"^\s*(?:UPDATE\s+(?:OR\s+\w+\s+)?|DELETE\s+FROM\s+|DROP\s+TABLE\s+(?:IF\s+EXISTS\s+)?|"
    r"ALTER\s+TABLE\s+|TRUNCATE\s+(?:TABLE\s+)?|(?:INSERT\s+OR\s+REPLACE|REPLACE)\s+INTO\s+)"
    rf"(?:\w+\.)?\"?{_TABLES}\b|^\s*DROP\s+TRIGGER\b|^\s*PRAGMA\s+(?:\w+\.)?writable_schema",
    re.IGNORECASE)


def _guard_immutable(engine: Engine) -> None:
    """Refuse statements that would change saved analyses through this engine.

    The database triggers do the same on SQLite and PostgreSQL; this guard covers
    every other server and the statements triggers cannot see (REPLACE, DROP
    TRIGGER). Migrations pass ``specmatch_migration=True`` as an execution option.
    """

    @event.listens_for(engine, "before_cursor_execute")
    def _check(conn, cursor, statement, parameters, context, executemany):  # pragma: no cover
        if _GUARDED.match(statement) and not conn.get_execution_options().get("specmatch_migration"):
            raise SpecmatchError("saved analyses are immutable: add a note or a correction "
                                 "instead (the store refused: " + " ".join(statement.split()[:2]) + ")")


def _sqlite_path(parsed) -> Path | None:
    database = parsed.database
    if not database or database == ":memory:" or parsed.query.get("mode") == "memory":
        return None
    if database.startswith("file:"):
        database = database[5:].split("?")[0]
    return Path(database).expanduser()


def _make_engine(url: str, *, read_only: bool = False) -> Engine:
    try:
        parsed = make_url(url)
    except ArgumentError:
        raise SpecmatchError(
            f"'{url}' is not a database URL; give e.g. sqlite:////path/analyses.sqlite or "
            "postgresql+psycopg://user@host/dbname (option --store or SPECMATCH_STORE)") from None
    backend = parsed.get_backend_name()
    try:
        if backend == "sqlite":
            engine = _sqlite_engine(parsed, read_only=read_only)
        else:
            engine = create_engine(parsed, pool_pre_ping=True)
            if read_only and backend == "postgresql":
                @event.listens_for(engine, "connect")
                def _ro(dbapi_conn, _record):  # pragma: no cover - needs a server
                    cur = dbapi_conn.cursor()
                    cur.execute("SET SESSION CHARACTERISTICS AS TRANSACTION READ ONLY")
                    cur.close()
                    dbapi_conn.commit()
        _guard_immutable(engine)
        return engine
    except NoSuchModuleError:
        raise SpecmatchError(
            f"no database driver for '{parsed.drivername}'; for PostgreSQL install "
            "'specmatch[postgres]' and use postgresql+psycopg://...") from None
    except ImportError as exc:
        raise SpecmatchError(f"the database driver for '{parsed.drivername}' is not installed "
                             f"({exc}); for PostgreSQL install 'specmatch[postgres]'") from None


def _sqlite_engine(parsed, *, read_only: bool = False, immutable: bool = False) -> Engine:
    from sqlalchemy.pool import StaticPool

    path = _sqlite_path(parsed)
    memory = path is None
    if memory:
        engine = create_engine(parsed, poolclass=StaticPool,
                               connect_args={"check_same_thread": False})
    elif read_only:
        if not path.is_file():
            raise SpecmatchError(f"there is no analysis store at '{path}' yet; save an analysis "
                                 "first (identify --save, batch) or give its place with --store")
        # immutable=1: no -shm/-wal files needed, for a store on a read-only file system
        mode = "ro&immutable=1" if immutable else "ro"
        engine = create_engine(f"sqlite:///file:{path.resolve()}?mode={mode}&uri=true",
                               connect_args={"timeout": BUSY_TIMEOUT_S})
    else:
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise SpecmatchError(
                f"cannot create the folder '{path.parent}' for the analysis store: "
                f"{exc.strerror}; give a writable place with --store or SPECMATCH_STORE") from None
        engine = create_engine(parsed, connect_args={"timeout": BUSY_TIMEOUT_S})

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn, _record):  # pragma: no cover - exercised by every test
        # Transactions are begun by the "begin" hook below (pysqlite's own
        # handling would not put DDL in them, nor take the write lock up front).
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        cur.execute("PRAGMA foreign_keys = ON")
        # REPLACE then fires the delete triggers too (a second guard beside no_replace)
        cur.execute("PRAGMA recursive_triggers = ON")
        if not memory and not read_only:
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


@dataclass(frozen=True)
class Problem:
    """One break in the audit trail: which analysis version, and what is wrong."""

    analysis_id: str | None
    version: int | None
    text: str

    def __str__(self) -> str:
        where = (f"analysis {self.analysis_id[:12]} v{self.version}" if self.analysis_id
                 else "store")
        return f"{where}: {self.text}"


@dataclass(frozen=True)
class VerifyReport:
    """The outcome of :meth:`Store.verify`."""

    versions: int
    links: int
    head_hash: str
    problems: tuple[Problem, ...]
    migrated: int = 0

    @property
    def ok(self) -> bool:
        return not self.problems


class Store:
    """Saved analyses in one database. Create with :func:`open_store`."""

    def __init__(self, engine: Engine, url: str, *, read_only: bool = False):
        self.engine = engine
        self.url = url
        self.dialect = engine.dialect.name
        self.read_only = read_only

    # ----------------------------------------------------------------- plumbing
    @contextmanager
    def _begin_write(self, lock: str | None = "specmatch-store", *,
                     migration: bool = False) -> Iterator[Connection]:
        """One write transaction holding the database's write lock."""
        if self.read_only:
            raise SpecmatchError(f"the analysis store {self!r} is open read-only; open it "
                                 "without read_only to save")
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
                if not _is_locked(exc):
                    raise self._db_error(exc) from None
                if attempt == WRITE_ATTEMPTS - 1:
                    raise SpecmatchError(
                        f"the analysis store {self!r} stayed locked by another program for "
                        f"{WRITE_ATTEMPTS} attempts of {BUSY_TIMEOUT_S:.0f} s; nothing was saved: "
                        "try again when it has finished") from None
                time.sleep(min(2.0, 0.05 * 2 ** attempt) * (0.5 + random.random()))
        raise AssertionError("unreachable")

    def _db_error(self, exc: BaseException) -> SpecmatchError:
        """One clear line for a database failure (a damaged file, a refused permission)."""
        text = _first_line(exc)
        low = text.lower()
        if "malformed" in low or "not a database" in low or "corrupt" in low:
            return SpecmatchError(f"the analysis store {self!r} is damaged ({text}); restore it "
                                  "from a backup and check it with 'specmatch history verify'")
        if "readonly" in low or "read-only" in low or "read only" in low:
            return SpecmatchError(f"the analysis store {self!r} cannot be written ({text}); "
                                  "save into a writable store (--store or SPECMATCH_STORE)")
        if "permission denied" in low:
            return SpecmatchError(f"the database refused the store's request ({text}); the "
                                  "application role needs SELECT and INSERT on the store's tables")
        return SpecmatchError(f"the analysis store {self!r} failed: {text}")

    @contextmanager
    def _read(self) -> Iterator[Connection]:
        try:
            with self.engine.connect() as conn:
                with conn.begin():
                    yield conn
        except (OperationalError, DBAPIError) as exc:
            raise self._db_error(exc) from None

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

    def check_open(self) -> None:
        """Refuse a damaged SQLite file or a schema this release cannot read, clearly."""
        with self._read() as conn:
            if self.dialect == "sqlite":
                bad = [r[0] for r in conn.exec_driver_sql("PRAGMA quick_check(5)")]
                if bad != ["ok"]:
                    raise SpecmatchError(
                        f"the analysis store {self!r} is damaged (integrity check: {bad[0]}); "
                        "restore it from a backup")
            version = migrations.current_version(conn)
        if version != SCHEMA_VERSION:
            newer = version > SCHEMA_VERSION
            raise SpecmatchError(
                f"this analysis store has schema version {version}, "
                + (f"written by a newer specmatch; this release knows up to version "
                   f"{SCHEMA_VERSION}: upgrade specmatch to open it" if newer else
                   f"older than this release's {SCHEMA_VERSION}; open it once with write "
                   "access (any save, or 'specmatch history list' on a writable copy) to upgrade"))

    # --------------------------------------------------------------------- save
    def save(self, record: AnalysisRecord | Mapping[str, Any],
             files: Mapping[str, bytes] | None = None, *, sample_id: str | None = None,
             user: str | None = None, input_key: str | None = None,
             skip_if_done: bool = False, groups: Sequence[str] | str | None = None) -> str:
        """Save one analysis whole, with the files it was based on; return its id.

        Parameters
        ----------
        record
            ``Result.to_dict()`` (inputs, versions, candidates, verdict), or a new
            :class:`AnalysisRecord` carrying it with ``sample_id``/``user``/``input_key``.
            The store checks it: made by this release of specmatch, every input file it
            names given with the same bytes. Ids, times, the tool version and all hashes
            are the store's own, never taken from the caller.
        files
            The uploaded files by name; stored once per SHA-256 of their bytes.
        sample_id, user
            Lab sample id; who ran it (default: ``$SPECMATCH_USER`` or the OS user).
        input_key
            SHA-256 of the inputs (:func:`~specmatch.store.records.input_key`).
        skip_if_done
            With ``input_key``: if an analysis of this sample with this key exists,
            return its id instead of saving a second one (batches resume this way).
        groups
            Groups the analysis is shared with (see :class:`Viewer`).
        """
        pending = self._prepare(record, files, sample_id=sample_id, user=user,
                                input_key=input_key, skip_if_done=skip_if_done, groups=groups)
        return self._write(lambda conn: self._insert_many(conn, [pending])[0], lock=None)

    def save_many(self, items: Sequence[Mapping[str, Any]]) -> list[str]:
        """Save several analyses in one transaction; return their ids in order.

        Each item holds the keyword arguments of :meth:`save` (``record``, ``files``,
        ``sample_id``, ``user``, ``input_key``, ``skip_if_done``, ``groups``; and
        optionally ``data_json``, the record already as canonical JSON). All are saved
        or none: a batch uses this for results that finished together, paying for one
        commit (one fsync) instead of one per sample.
        """
        prepared = [self._prepare(**item) for item in items]
        if not prepared:
            return []
        return self._write(lambda conn: self._insert_many(conn, prepared), lock=None)

    def _lock_chain(self, conn: Connection, prepared: Sequence[_Pending] = ()) -> None:
        if self.dialect != "postgresql":
            return  # SQLite: BEGIN IMMEDIATE already holds the one write lock
        # sorted: two writers never wait on each other; the chain lock last, for everyone
        for key in sorted({p.row["input_key"] for p in prepared
                           if p.skip_if_done and p.row["input_key"]}):
            conn.exec_driver_sql("SELECT pg_advisory_xact_lock(%s)" % _lock_key(f"input:{key}"))
        conn.exec_driver_sql("SELECT pg_advisory_xact_lock(%s)" % _lock_key("specmatch-chain"))

    @staticmethod
    def _chain_head(conn: Connection) -> tuple[int, str, _dt.datetime | None]:
        """(last seq, its hash, the newest saved time) under the write lock."""
        last = conn.execute(select(audit_chain.c.seq, audit_chain.c.row_hash)
                            .order_by(audit_chain.c.seq.desc()).limit(1)).first()
        newest = conn.execute(select(func.max(analyses.c.created_at))).scalar()
        return (0, GENESIS, newest) if last is None else (int(last[0]), last[1], newest)

    def _link(self, conn: Connection, rows: list[dict[str, Any]],
              files: list[dict[str, str]]) -> None:
        """Stamp the rows' times and chain them after the current head (under the lock)."""
        seq, prev, newest = self._chain_head(conn)
        # times never go backwards along the chain, even if clocks of two savers differ
        now = _now()
        if newest is not None and newest > now:
            now = newest
        by_id: dict[str, list[tuple[str, str]]] = {}
        for f in files:
            by_id.setdefault(f["analysis_id"], []).append((f["name"], f["sha256"]))
        links = []
        for row in rows:
            row["created_at"] = now
            seq += 1
            h = link_hash(row_content(row, by_id.get(row["id"], [])), prev, seq, "saved")
            links.append({"seq": seq, "analysis_id": row["id"], "prev_hash": prev,
                          "row_hash": h, "origin": "saved"})
            prev = h
        conn.execute(analyses.insert(), rows)
        if files:
            conn.execute(analysis_files.insert(), files)
        conn.execute(audit_chain.insert(), links)

    def _insert_many(self, conn: Connection, prepared: list["_Pending"]) -> list[str]:
        self._lock_chain(conn, prepared)
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
            self._link(conn, rows, files)
        return ids

    def _prepare(self, record: AnalysisRecord | Mapping[str, Any],
                 files: Mapping[str, bytes] | None = None, *, sample_id: str | None = None,
                 user: str | None = None, input_key: str | None = None,
                 skip_if_done: bool = False, data_json: str | None = None,
                 groups: Sequence[str] | str | None = None) -> "_Pending":
        from .. import __version__

        if isinstance(record, AnalysisRecord):
            if (record.id or record.data_sha256 or record.created_at or record.tool_version
                    or record.files or record.version):
                raise SpecmatchError(
                    "this record was read from a store (it has an id, times and hashes); a "
                    "saved analysis is not saved again: add a note or a correction to it")
            data = record.data
            sample_id = sample_id or record.sample_id
            user = user or record.user
            input_key = input_key or record.input_key
            groups = groups or record.groups
        else:
            data = record
        if not isinstance(data, Mapping):
            raise SpecmatchError("the analysis cannot be saved: give Result.to_dict() "
                                 f"(a mapping), not {type(data).__name__}")
        if data_json is None:
            try:
                data_json = canonical_json(dict(data))
            except (TypeError, ValueError) as exc:
                raise SpecmatchError(
                    f"the analysis cannot be saved: it is not JSON data ({exc})") from None
            data = json.loads(data_json)
        content: dict[str, bytes] = {}
        for name, blob in (files or {}).items():
            if not isinstance(blob, (bytes, bytearray, memoryview)):
                raise SpecmatchError(f"the file '{name}' to save is {type(blob).__name__}, "
                                     "not bytes")
            content[str(name)] = bytes(blob)
        _check_record(data, {sha256_hex(b) for b in content.values()}, __version__)
        summary = summarise(data)
        blob_rows: dict[str, bytes] = {}
        file_rows = []
        analysis_id = uuid.uuid4().hex
        for name, blob in content.items():
            digest = sha256_hex(blob)
            blob_rows[digest] = blob
            file_rows.append({"analysis_id": analysis_id, "name": name, "sha256": digest})
        if input_key is not None and not re.fullmatch(r"[0-9a-f]{64}", str(input_key)):
            raise SpecmatchError("the input key must be a SHA-256 (64 hexadecimal characters)")
        row = {
            "id": analysis_id, "root_id": analysis_id, "parent_id": None, "version": 1,
            "kind": "analysis", "created_at": None, "user_name": current_user(user),
            "sample_id": sample_id, "substrate": summary.substrate,
            "substrate_key": _canonical_smiles(summary.substrate),
            "reagent": summary.reagent, "verdict": summary.verdict,
            # canonical, so a search finds it in any SMILES spelling (data keeps the original)
            "top_smiles": _canonical_smiles(summary.top_smiles),
            "top_probability": summary.top_probability,
            "tool_version": __version__,  # the running release, whatever the record says
            "tables_version": summary.tables_version, "note": None,
            "data_json": data_json, "data_sha256": sha256_hex(data_json.encode("utf-8")),
            "input_key": input_key, "groups": _groups_text(_clean_groups(groups)),
        }
        return _Pending(row, blob_rows, file_rows, skip_if_done)

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

    def brief(self, ids: Sequence[str]) -> dict[str, dict[str, Any]]:
        """Verdict, top candidate and its probability of these analyses (for summaries)."""
        out: dict[str, dict[str, Any]] = {}
        cols = (analyses.c.id, analyses.c.verdict, analyses.c.top_smiles,
                analyses.c.top_probability)
        with self._read() as conn:
            for k in range(0, len(ids), 500):
                for r in conn.execute(select(*cols).where(analyses.c.id.in_(list(ids[k:k + 500])))
                                      ).mappings():
                    out[r["id"]] = dict(r)
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
        if parent.problems:
            raise SpecmatchError(f"analysis {parent.short_id} fails its audit check "
                                 f"({parent.problems[0]}); nothing is added to a broken record: "
                                 "run 'specmatch history verify'")
        new_id = uuid.uuid4().hex
        parent_files = dict(parent.files)

        def work(conn: Connection) -> str:
            if self.dialect == "postgresql":
                conn.exec_driver_sql("SELECT pg_advisory_xact_lock(%s)"
                                     % _lock_key(f"root:{parent.root_id}"))
            self._lock_chain(conn)
            last = conn.execute(select(func.max(analyses.c.version))
                                .where(analyses.c.root_id == parent.root_id)).scalar()
            src = conn.execute(select(analyses).where(analyses.c.id == parent.id)).mappings().one()
            row = dict(src)
            row.update(id=new_id, parent_id=parent.id, version=int(last) + 1, kind=kind,
                       created_at=None, user_name=current_user(author), note=note,
                       input_key=None)
            if verdict is not None:
                row["verdict"] = verdict
            self._link(conn, [row], [{"analysis_id": new_id, "name": n, "sha256": h}
                                     for n, h in parent_files.items()])
            return new_id

        return self._write(work, lock=None)

    # --------------------------------------------------------------------- read
    def resolve_id(self, analysis_id: str, viewer: Viewer | None = None) -> str:
        """The full id for an id or a unique prefix of one (at least 4 characters)."""
        ident = (analysis_id or "").strip().lower()
        if len(ident) < 4 or any(c not in "0123456789abcdef" for c in ident):
            raise SpecmatchError(f"'{analysis_id}' is not an analysis id; ids are hexadecimal "
                                 "(see 'specmatch history list')")
        q = select(analyses.c.id).where(analyses.c.id.like(ident + "%"))
        if viewer is not None:
            root = analyses.alias("root")
            q = q.join(root, root.c.id == analyses.c.root_id).where(_visible(root, viewer))
        with self._read() as conn:
            found = list(conn.execute(q.limit(2)).scalars())
        if not found:
            raise SpecmatchError(f"no saved analysis with id '{analysis_id}' in {self!r}; "
                                 "list them with 'specmatch history list'")
        if len(found) > 1:
            raise SpecmatchError(f"'{analysis_id}' matches several analyses; give more characters")
        return found[0]

    def get(self, analysis_id: str, viewer: Viewer | None = None) -> AnalysisRecord:
        """The analysis version with this id (or unique id prefix), checked against the chain.

        A version that fails its check comes back with ``problems`` set (see
        :meth:`verify` for the whole store); nothing is hidden.
        """
        full = self.resolve_id(analysis_id, viewer)
        return self._load(select(analyses).where(analyses.c.id == full))[0]

    def _load(self, q) -> list[AnalysisRecord]:
        with self._read() as conn:
            rows = list(conn.execute(q).mappings())
            ids = [r["id"] for r in rows]
            files = self._files_of(conn, ids)
            links = self._links_of(conn, ids)
        return [self._record(r, files.get(r["id"], {}), links.get(r["id"])) for r in rows]

    @staticmethod
    def _files_of(conn: Connection, ids: list[str]) -> dict[str, dict[str, str]]:
        out: dict[str, dict[str, str]] = {}
        for k in range(0, len(ids), 500):  # stay below bound-parameter limits
            q = select(analysis_files).where(analysis_files.c.analysis_id.in_(ids[k:k + 500]))
            for r in conn.execute(q.order_by(analysis_files.c.name)).mappings():
                out.setdefault(r["analysis_id"], {})[r["name"]] = r["sha256"]
        return out

    @staticmethod
    def _links_of(conn: Connection, ids: list[str]) -> dict[str, dict[str, Any]]:
        """Each version's chain link, with the hash of the link before it."""
        out: dict[str, dict[str, Any]] = {}
        for k in range(0, len(ids), 500):
            q = select(audit_chain).where(audit_chain.c.analysis_id.in_(ids[k:k + 500]))
            for r in conn.execute(q).mappings():
                out[r["analysis_id"]] = dict(r)
        before = sorted({link["seq"] - 1 for link in out.values() if link["seq"] > 1})
        prev: dict[int, str] = {}
        for k in range(0, len(before), 500):
            q = select(audit_chain.c.seq, audit_chain.c.row_hash).where(
                audit_chain.c.seq.in_(before[k:k + 500]))
            prev.update({int(s): h for s, h in conn.execute(q)})
        for link in out.values():
            link["before"] = GENESIS if link["seq"] == 1 else prev.get(link["seq"] - 1)
        return out

    @staticmethod
    def _row_problems(row: Mapping[str, Any], files: Mapping[str, str],
                      link: Mapping[str, Any] | None) -> list[str]:
        problems = []
        if sha256_hex(row["data_json"].encode("utf-8")) != row["data_sha256"]:
            problems.append("the analysis data does not match its SHA-256 (changed after saving)")
        if link is None:
            problems.append("this version has no link in the audit chain (added outside specmatch)")
            return problems
        h = link_hash(row_content(row, files.items()), link["prev_hash"], link["seq"],
                      link["origin"])
        if h != link["row_hash"]:
            problems.append("the version or its files no longer match their audit hash "
                            "(rewritten in place)")
        if "before" in link and link["before"] != link["prev_hash"]:
            problems.append(f"the audit chain is broken before this version (link {link['seq']})")
        return problems

    def _record(self, row: Mapping[str, Any], files: dict[str, str],
                link: Mapping[str, Any] | None) -> AnalysisRecord:
        try:
            data = json.loads(row["data_json"])
        except ValueError:
            data = {}
        problems = self._row_problems(row, files, link)
        if not isinstance(data, dict):
            data = {}
        return AnalysisRecord(
            data=data, sample_id=row["sample_id"], user=row["user_name"],
            input_key=row["input_key"], id=row["id"], root_id=row["root_id"],
            parent_id=row["parent_id"], version=row["version"], kind=row["kind"],
            note=row["note"], created_at=row["created_at"], substrate=row["substrate"],
            reagent=row["reagent"], verdict=row["verdict"], top_smiles=row["top_smiles"],
            top_probability=row["top_probability"], tool_version=row["tool_version"],
            tables_version=row["tables_version"], data_sha256=row["data_sha256"], files=files,
            groups=_groups_tuple(row["groups"]), problems=tuple(problems),
            chain_hash=link["row_hash"] if link else None,
            chain_origin=link["origin"] if link else None)

    def get_many(self, ids: list[str]) -> list[AnalysisRecord]:
        """The analyses with these full ids, in the order given."""
        recs: dict[str, AnalysisRecord] = {}
        for k in range(0, len(ids), 500):  # stay below bound-parameter limits
            for rec in self._load(select(analyses).where(analyses.c.id.in_(ids[k:k + 500]))):
                recs[rec.id] = rec
        missing = [i for i in ids if i not in recs]
        if missing:
            raise SpecmatchError(f"no saved analysis with id '{missing[0]}'")
        return [recs[i] for i in ids]

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

    def files(self, analysis_id: str, viewer: Viewer | None = None) -> dict[str, bytes]:
        """The files an analysis was based on, by name."""
        return {name: self.file_bytes(h)
                for name, h in self.get(analysis_id, viewer).files.items()}

    def history(self, analysis_id: str, viewer: Viewer | None = None) -> list[AnalysisRecord]:
        """Every version of the analysis, oldest first (the first is the tool's own result)."""
        root = self.get(analysis_id, viewer).root_id
        return self._load(select(analyses).where(analyses.c.root_id == root)
                          .order_by(analyses.c.version))

    def search(self, *, substrate: str | None = None, reagent: str | None = None,
               verdict: str | None = None, since: _dt.datetime | _dt.date | str | None = None,
               until: _dt.datetime | _dt.date | str | None = None,
               sample_id: str | None = None, all_versions: bool = False,
               limit: int | None = 200, viewer: Viewer | None = None) -> list[AnalysisRecord]:
        """Saved analyses matching every filter given, newest first.

        ``substrate`` matches the same molecule in any SMILES spelling; ``reagent`` is
        case-insensitive; ``verdict`` matches the verdict words (substring) or the top
        candidate's SMILES; ``since``/``until`` are UTC (a date alone covers the whole
        day). Without ``all_versions`` only the latest version of each analysis is
        listed, and the date filters apply to the original run. With ``viewer``, only
        the analyses that viewer may see.
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
        root = a.alias("root")
        if not all_versions:
            last = (select(a.c.root_id, func.max(a.c.version).label("v"))
                    .group_by(a.c.root_id).subquery())
            q = (select(a).join(last, and_(a.c.root_id == last.c.root_id, a.c.version == last.c.v))
                 .join(root, root.c.id == a.c.root_id))
            when = root.c.created_at
        else:
            q = select(a).join(root, root.c.id == a.c.root_id)
            when = a.c.created_at
        if viewer is not None:
            conds.append(_visible(root, viewer))
        if lo:
            conds.append(when >= lo)
        if hi:
            conds.append(when < hi)
        q = q.where(*conds).order_by(when.desc(), a.c.version.desc())
        if limit:
            q = q.limit(limit)
        return self._load(q)

    def count(self) -> int:
        """Number of analysis versions saved (notes and corrections included)."""
        with self._read() as conn:
            return int(conn.execute(select(func.count()).select_from(analyses)).scalar())

    # ------------------------------------------------------------------- verify
    def missing_triggers(self) -> list[str]:
        """Guard triggers this store should have and has not (dropped by someone)."""
        expected = migrations.expected_triggers(self.dialect)
        if not expected:
            return []
        with self._read() as conn:
            if self.dialect == "sqlite":
                have = {r[0] for r in conn.exec_driver_sql(
                    "SELECT name FROM sqlite_master WHERE type = 'trigger'")}
            else:
                have = {r[0] for r in conn.exec_driver_sql(
                    "SELECT tgname FROM pg_trigger t JOIN pg_class c ON c.oid = t.tgrelid "
                    "WHERE c.relnamespace = current_schema()::regnamespace "
                    "AND NOT t.tgisinternal")}
        return [t for t in expected if t not in have]

    def verify(self) -> VerifyReport:
        """Check the whole audit trail: every version, link, file and guard trigger.

        Reports (never raises for) each version whose content, files or link do not
        match, a gap or fork in the chain, times going backwards along the chain or
        before a version's parent, versions without a link, files whose bytes do not
        match their SHA-256, and missing guard triggers.
        """
        problems: list[Problem] = [
            Problem(None, None, f"the guard trigger '{t}' is missing (dropped): the store "
                                "no longer refuses changes; restore it from a backup")
            for t in self.missing_triggers()]
        n_versions = self.count()
        seen_versions = 0
        migrated = 0
        prev_hash, prev_seq, prev_time = GENESIS, 0, None
        meta: dict[str, tuple[str, int, _dt.datetime]] = {}  # id -> (root, version, time)
        a, c = analyses, audit_chain
        with self._read() as conn:
            q = (select(a, c.c.seq, c.c.prev_hash, c.c.row_hash, c.c.origin)
                 .join(c, c.c.analysis_id == a.c.id).order_by(c.c.seq))
            result = conn.execute(q.execution_options(yield_per=200)).mappings()
            batch: list[Mapping[str, Any]] = []

            def flush() -> None:
                nonlocal prev_hash, prev_seq, prev_time, seen_versions, migrated
                files = self._files_of(conn, [r["id"] for r in batch])
                for r in batch:
                    seen_versions += 1
                    migrated += r["origin"] == "migration"
                    where = (r["id"], r["version"])
                    link = {"seq": r["seq"], "prev_hash": r["prev_hash"],
                            "row_hash": r["row_hash"], "origin": r["origin"]}
                    for text in self._row_problems(r, files.get(r["id"], {}), link):
                        problems.append(Problem(*where, text))
                    if r["seq"] != prev_seq + 1:
                        problems.append(Problem(*where, f"links {prev_seq + 1} to {r['seq'] - 1} "
                                                        "of the audit chain are missing"))
                    elif r["prev_hash"] != prev_hash:
                        problems.append(Problem(*where, f"link {r['seq']} does not follow link "
                                                        f"{prev_seq} (the chain was rewritten)"))
                    t = r["created_at"]
                    if prev_time is not None and t < prev_time:
                        problems.append(Problem(*where, f"saved at {t.isoformat()}, before the "
                                                        f"version linked ahead of it "
                                                        f"({prev_time.isoformat()}): back-dated"))
                    if r["parent_id"]:
                        parent = meta.get(r["parent_id"])
                        if parent is None:
                            problems.append(Problem(*where, "its parent version is not earlier "
                                                            "in the audit chain"))
                        elif (parent[0] != r["root_id"] or r["version"] <= parent[1]
                              or t < parent[2]):
                            problems.append(Problem(*where, "it does not follow its parent "
                                                            "version (root, number or time)"))
                    elif r["root_id"] != r["id"] or r["version"] != 1:
                        problems.append(Problem(*where, "a first version must be its own root "
                                                        "with number 1"))
                    meta[r["id"]] = (r["root_id"], r["version"], t)
                    prev_hash, prev_seq = r["row_hash"], r["seq"]
                    prev_time = t if prev_time is None or t > prev_time else prev_time
                batch.clear()

            for r in result:
                batch.append(r)
                if len(batch) >= 200:
                    flush()
            flush()
            unlinked = list(conn.execute(
                select(a.c.id, a.c.version).outerjoin(c, c.c.analysis_id == a.c.id)
                .where(c.c.seq.is_(None))))
            n_links = int(conn.execute(select(func.count()).select_from(c)).scalar())
            for aid, version in unlinked:
                problems.append(Problem(aid, version, "this version has no link in the audit "
                                                      "chain (added outside specmatch)"))
            bad_blobs = []
            for k, in conn.execute(select(blobs.c.sha256)):
                data = conn.execute(select(blobs.c.data).where(blobs.c.sha256 == k)).scalar()
                if sha256_hex(bytes(data)) != k:
                    bad_blobs.append(k)
            if bad_blobs:
                users = conn.execute(select(analysis_files.c.analysis_id, a.c.version)
                                     .join(a, a.c.id == analysis_files.c.analysis_id)
                                     .where(analysis_files.c.sha256.in_(bad_blobs))).all()
                for aid, version in users:
                    problems.append(Problem(aid, version, "one of its files no longer matches "
                                                          "its SHA-256 (bytes changed)"))
            missing_blobs = conn.execute(
                select(analysis_files.c.analysis_id, a.c.version)
                .join(a, a.c.id == analysis_files.c.analysis_id)
                .outerjoin(blobs, blobs.c.sha256 == analysis_files.c.sha256)
                .where(blobs.c.sha256.is_(None))).all()
            for aid, version in missing_blobs:
                problems.append(Problem(aid, version, "one of its files is missing from the store"))
        if seen_versions + len(unlinked) != n_versions:  # pragma: no cover - defensive
            problems.append(Problem(None, None, "the versions and their links do not add up"))
        return VerifyReport(versions=n_versions, links=n_links, head_hash=prev_hash,
                            problems=tuple(problems), migrated=migrated)

    # ------------------------------------------------------------------ exports
    def export_dict(self, analysis_id: str, viewer: Viewer | None = None) -> dict[str, Any]:
        rec = self.get(analysis_id, viewer)
        versions = self.history(rec.id, viewer)
        out = rec.to_dict()
        out["history"] = [{"id": r.id, "version": r.version, "kind": r.kind, "user": r.user,
                           "created_at": r.created_at.isoformat(), "note": r.note,
                           "verdict": r.verdict, "chain_hash": r.chain_hash,
                           "problems": list(r.problems)} for r in versions]
        out["files"] = [{"name": n, "sha256": h} for n, h in rec.files.items()]
        out["store_schema_version"] = SCHEMA_VERSION
        out["integrity"] = ("ok" if not any(r.problems for r in versions) else
                            "BROKEN: " + "; ".join(p for r in versions for p in r.problems))
        return out

    def export_json(self, analysis_id: str, *, include_files: bool = False,
                    viewer: Viewer | None = None) -> str:
        """The whole saved analysis as JSON (with its version history and file hashes).

        With ``include_files`` the file bytes are embedded in base64, so the export
        alone is enough to rerun or audit the analysis.
        """
        out = self.export_dict(analysis_id, viewer)
        if include_files:
            import base64

            for f in out["files"]:
                f["base64"] = base64.b64encode(self.file_bytes(f["sha256"])).decode("ascii")
        return json.dumps(out, indent=2, ensure_ascii=False, sort_keys=False)

    def export_html(self, analysis_id: str, viewer: Viewer | None = None) -> str:
        """A self-contained HTML page: the analysis report with the saved record's audit block.

        The one report renderer (``specmatch.reports.html``) draws it from the saved
        Result; old saved layouts are read through ``Result.from_dict``'s migration.
        """
        from ..identification.result import Result
        from ..reports.html import report_html

        out = self.export_dict(analysis_id, viewer)
        return report_html(Result.from_dict(out["data"]), audit=out)

    def compare(self, id_a: str, id_b: str, viewer: Viewer | None = None) -> dict[str, Any]:
        """Two analyses side by side: the fields, then each candidate's probability in both."""
        a, b = self.get(id_a, viewer), self.get(id_b, viewer)
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
        audit_a = "ok" if not a.problems else "BROKEN: " + "; ".join(a.problems)
        audit_b = "ok" if not b.problems else "BROKEN: " + "; ".join(b.problems)
        fields.append({"field": "audit check", "a": audit_a, "b": audit_b,
                       "same": audit_a == audit_b})
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


def _visible(root, viewer: Viewer):
    """SQL condition: the analysis (judged by its first version) is visible to ``viewer``."""
    from sqlalchemy import true

    if viewer.everyone:
        return true()
    conds = [root.c.user_name == viewer.name]
    conds += [root.c.groups.contains(f"|{g}|", autoescape=True) for g in _clean_groups(viewer.groups)]
    return or_(*conds)


def _check_record(data: Mapping[str, Any], file_hashes: set[str], version: str) -> None:
    """Refuse what is not an analysis made by this release from the files given."""
    missing = [k for k in ("inputs", "versions", "candidates", "verdict") if k not in data]
    if missing:
        raise SpecmatchError(
            f"this is not an analysis result (no {', '.join(missing)}); save what "
            "specmatch.identify() returned (Result.to_dict())")
    verdict, cands = data["verdict"], data["candidates"]
    if (not isinstance(data["inputs"], Mapping) or not isinstance(data["versions"], Mapping)
            or not isinstance(verdict, Mapping) or not isinstance(verdict.get("word"), str)
            or not isinstance(cands, list)
            or not all(isinstance(c, Mapping) and isinstance(c.get("smiles"), str) for c in cands)):
        raise SpecmatchError("this is not an analysis result (inputs and versions mappings, a "
                             "verdict with its word, candidates with their SMILES); save "
                             "Result.to_dict()")
    p_top = verdict.get("p_top")
    if p_top is not None and not isinstance(p_top, (int, float)):
        raise SpecmatchError("this is not an analysis result: the verdict's p_top is not a number")
    made_by = data["versions"].get("specmatch")
    if made_by != version:
        raise SpecmatchError(
            f"the record says it was made by specmatch {made_by!r}, but this is specmatch "
            f"{version}; the store keeps only analyses made by the running release "
            "(rerun the analysis)")
    named = data["inputs"].get("files") or {}
    if not isinstance(named, Mapping):
        raise SpecmatchError("the record's input files must be a mapping (role -> file)")
    for role, f in named.items():
        digest = f.get("sha256") if isinstance(f, Mapping) else None
        if digest not in file_hashes:
            name = f.get("name") if isinstance(f, Mapping) else f
            raise SpecmatchError(
                f"the record names the input file '{name}' ({role}) but it was not given with "
                "the same bytes; save the analysis with the files it was made from")


def _candidate_probs(data: Mapping[str, Any]) -> dict[str, float | None]:
    from .records import _probability

    return {str(c["smiles"]): _probability(c) for c in data["candidates"]}


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


def open_store(url: str | None = None, *, upgrade: bool = True, read_only: bool = False) -> Store:
    """Open (and create or upgrade) the analysis store.

    Parameters
    ----------
    url
        SQLAlchemy URL; default ``$SPECMATCH_STORE`` or a SQLite file in the user's
        data directory (:func:`default_store_url`).
    upgrade
        Apply missing schema migrations (the default; not with ``read_only``).
    read_only
        Open for reading only (nothing is created, upgraded or written): works on a
        read-only file or file system. The store must exist at this release's schema.

    Raises
    ------
    SpecmatchError
        For a bad URL, a missing driver or server, a damaged file (SQLite's integrity
        check runs on every open) or a schema this release cannot use.
    """
    resolved = resolve_store_url(url)
    # SQLite answers "database is locked" without waiting in a few cases the busy
    # timeout does not cover (two processes switching a new file to WAL at once, a
    # reader meeting WAL recovery); those pass, so the whole open is retried.
    deadline = time.monotonic() + BUSY_TIMEOUT_S
    while True:
        try:
            return _open_once(resolved, upgrade=upgrade, read_only=read_only)
        except _TransientLock:
            if time.monotonic() > deadline:
                raise SpecmatchError(
                    f"cannot open the analysis store {resolved!r}: the database stayed locked "
                    f"for {BUSY_TIMEOUT_S:.0f} s; another program is holding it; try again "
                    "later") from None
            time.sleep(0.02 + 0.08 * random.random())


class _TransientLock(Exception):
    """A lock conflict SQLite reported without waiting; the open is tried again."""


def _open_once(resolved: str, *, upgrade: bool, read_only: bool) -> Store:
    store = Store(_make_engine(resolved, read_only=read_only), resolved, read_only=read_only)
    try:
        try:
            if upgrade and not read_only:
                store.upgrade()
            store.check_open()
        except SpecmatchError as exc:
            # a read-only file system: the -shm file of a WAL store cannot be made
            if not (read_only and store.dialect == "sqlite" and "unable to open" in str(exc)):
                raise
            store.close()
            store = Store(_sqlite_engine(make_url(resolved), read_only=True, immutable=True),
                          resolved, read_only=True)
            _guard_immutable(store.engine)
            store.check_open()
    except SpecmatchError:
        store.close()
        raise
    except (OperationalError, DBAPIError) as exc:
        store.close()
        text = _first_line(exc)
        if store.dialect == "sqlite" and _is_locked(exc):
            raise _TransientLock(text) from None
        if any(w in text.lower() for w in ("malformed", "not a database", "corrupt")):
            raise SpecmatchError(f"the analysis store {store!r} is damaged ({text}); restore it "
                                 "from a backup") from None
        raise SpecmatchError(
            f"cannot open the analysis store {store!r}: {text}; check the URL (option --store "
            "or SPECMATCH_STORE), that the server is running and that the place is writable"
        ) from None
    return store


def save_result(store: Store, result: Any, files: Mapping[str, bytes] | None = None, *,
                sample_id: str | None = None, user: str | None = None,
                input_key: str | None = None, groups: Sequence[str] | str | None = None) -> str:
    """Save an identification ``Result`` (or its ``to_dict()`` form); return the analysis id."""
    data = result if isinstance(result, Mapping) else result.to_dict()
    return store.save(data, files or {}, sample_id=sample_id, user=user, input_key=input_key,
                      groups=groups)


def save_run(result: Any, paths: Mapping[str, str | os.PathLike | None], *,
             store: "Store | str | None" = None, sample_id: str | None = None,
             user: str | None = None, groups: Sequence[str] | str | None = None) -> str:
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
        content = _read_input(p)  # an instrument folder is kept as a zip of its files
        from ..spectra.reader import input_name

        base = input_name(p)
        name = base if base not in files else f"{role}/{base}"
        files[name] = content
    if isinstance(store, Store):
        return save_result(store, result, files, sample_id=sample_id, user=user, groups=groups)
    with open_store(store) as st:
        return save_result(st, result, files, sample_id=sample_id, user=user, groups=groups)


def _read_input(path: Path) -> bytes:
    """An input file's bytes to keep with the analysis (the guarded reader's checks and
    limits, as when the file was read for the analysis)."""
    from ..spectra.reader import read_input_bytes

    return read_input_bytes(path)