"""Schema migrations of the analysis store, applied in order.

Each migration moves the schema from version ``n - 1`` to ``n`` and runs in its own
transaction together with the row that records it in ``schema_version``, so a store
is always at a whole version. Opening a store upgrades it to
:data:`~specmatch.store.schema.SCHEMA_VERSION`; a store written by a newer release is
refused rather than guessed at.

To change the schema: append a :class:`Migration` (never edit a released one), bump
``SCHEMA_VERSION`` in ``schema.py`` and update the table objects there to match.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import Callable

from sqlalchemy import (Column, Float, ForeignKey, Index, Integer, LargeBinary, MetaData, String,
                        Table, Text, func, inspect, select, text)
from sqlalchemy.engine import Connection, Engine

from .schema import SCHEMA_VERSION, UTCDateTime, schema_version


@dataclass(frozen=True)
class Migration:
    version: int
    description: str
    apply: Callable[[Connection], None]


# ------------------------------------------------------------------------------ v1
def _v1_base_tables(conn: Connection) -> None:
    # Frozen copy of the first release's tables: later migrations change them.
    md = MetaData()
    Table("schema_version", md,
          Column("version", Integer, primary_key=True, autoincrement=False),
          Column("description", Text, nullable=False),
          Column("applied_at", UTCDateTime, nullable=False),
          Column("tool_version", String(40), nullable=False))
    Table("blobs", md,
          Column("sha256", String(64), primary_key=True),
          Column("size_bytes", Integer, nullable=False),
          Column("data", LargeBinary, nullable=False),
          Column("created_at", UTCDateTime, nullable=False))
    an = Table("analyses", md,
               Column("id", String(32), primary_key=True),
               Column("root_id", String(32), nullable=False, index=True),
               Column("parent_id", String(32), ForeignKey("analyses.id"), nullable=True),
               Column("version", Integer, nullable=False),
               Column("kind", String(16), nullable=False),
               Column("created_at", UTCDateTime, nullable=False, index=True),
               Column("user_name", String(200), nullable=False),
               Column("sample_id", String(200), nullable=True, index=True),
               Column("substrate", Text, nullable=True),
               Column("substrate_key", Text, nullable=True, index=True),
               Column("reagent", String(200), nullable=True),
               Column("verdict", Text, nullable=True),
               Column("top_smiles", Text, nullable=True),
               Column("top_probability", Float, nullable=True),
               Column("tool_version", String(40), nullable=False),
               Column("tables_version", Text, nullable=True),
               Column("note", Text, nullable=True),
               Column("data_json", Text, nullable=False),
               Column("data_sha256", String(64), nullable=False))
    # one version number per chain: two concurrent notes cannot both become "v2"
    Index("ux_analyses_root_version", an.c.root_id, an.c.version, unique=True)
    Table("analysis_files", md,
          Column("analysis_id", String(32), ForeignKey("analyses.id"), primary_key=True),
          Column("name", String(500), primary_key=True),
          Column("sha256", String(64), ForeignKey("blobs.sha256"), nullable=False))
    md.create_all(conn)


# ------------------------------------------------------------------------------ v2
def _v2_input_key(conn: Connection) -> None:
    # Older rows keep NULL: their inputs were never hashed the way batches hash them,
    # and inventing a key afterwards could make a batch skip a sample it never ran.
    conn.execute(text("ALTER TABLE analyses ADD COLUMN input_key VARCHAR(64)"))
    conn.execute(text("CREATE INDEX ix_analyses_sample_input ON analyses (sample_id, input_key)"))


# ------------------------------------------------------------------------------ v3
_IMMUTABLE_TABLES = ("analyses", "analysis_files", "blobs")
_MESSAGE = "saved analyses are immutable: add a note or a correction instead"


def _v3_immutability_triggers(conn: Connection) -> None:
    # The code never updates or deletes; the triggers also stop a stray SQL client.
    dialect = conn.dialect.name
    if dialect == "sqlite":
        for table in _IMMUTABLE_TABLES:
            for event in ("UPDATE", "DELETE"):
                conn.exec_driver_sql(
                    f"CREATE TRIGGER {table}_no_{event.lower()} BEFORE {event} ON {table} "
                    f"BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END")
    elif dialect == "postgresql":
        conn.exec_driver_sql(
            "CREATE OR REPLACE FUNCTION specmatch_immutable() RETURNS trigger "
            "LANGUAGE plpgsql AS $$ BEGIN "
            f"RAISE EXCEPTION '{_MESSAGE} (table %%)', TG_TABLE_NAME; END $$")
        for table in _IMMUTABLE_TABLES:
            conn.exec_driver_sql(
                f"CREATE TRIGGER {table}_immutable BEFORE UPDATE OR DELETE ON {table} "
                "FOR EACH ROW EXECUTE FUNCTION specmatch_immutable()")
    # other servers: immutability is enforced by the store code alone


# ------------------------------------------------------------------------------ v4
def _v4_audit_chain(conn: Connection) -> None:
    """The hash chain over every version, sharing groups, and triggers against REPLACE.

    The chain lives in a table of its own (insert-only like the others), so the rows
    saved before it need no update: each gets its link here, computed from its stored
    content, in the order it was saved, with ``origin = 'migration'``.
    """
    from .chain import GENESIS, link_hash, row_content

    dialect = conn.dialect.name
    conn.execute(text("ALTER TABLE analyses ADD COLUMN groups TEXT"))
    conn.execute(text(
        "CREATE TABLE audit_chain (seq INTEGER PRIMARY KEY, "
        "analysis_id VARCHAR(32) NOT NULL UNIQUE REFERENCES analyses (id), "
        "prev_hash VARCHAR(64) NOT NULL, row_hash VARCHAR(64) NOT NULL, "
        "origin VARCHAR(16) NOT NULL)"))
    # link what is there, oldest first (versions of one analysis in version order)
    rows = list(conn.execute(text("SELECT * FROM analyses ORDER BY created_at, root_id, version, id"))
                .mappings())
    files: dict[str, list[tuple[str, str]]] = {}
    for r in conn.execute(text("SELECT analysis_id, name, sha256 FROM analysis_files")).mappings():
        files.setdefault(r["analysis_id"], []).append((r["name"], r["sha256"]))
    prev = GENESIS
    links = []
    for seq, r in enumerate(rows, start=1):
        row = dict(r)
        row["groups"] = None
        if isinstance(row["created_at"], str):  # SQLite hands back text outside the ORM types
            row["created_at"] = UTCDateTime().process_result_value(
                _dt.datetime.fromisoformat(row["created_at"]), conn.dialect)
        elif row["created_at"].tzinfo is None:
            row["created_at"] = row["created_at"].replace(tzinfo=_dt.timezone.utc)
        h = link_hash(row_content(row, files.get(row["id"], [])), prev, seq, "migration")
        links.append({"seq": seq, "analysis_id": row["id"], "prev_hash": prev, "row_hash": h,
                      "origin": "migration"})
        prev = h
    if links:
        conn.execute(text("INSERT INTO audit_chain (seq, analysis_id, prev_hash, row_hash, origin) "
                          "VALUES (:seq, :analysis_id, :prev_hash, :row_hash, :origin)"), links)
    if dialect == "sqlite":
        for event in ("UPDATE", "DELETE"):
            conn.exec_driver_sql(
                f"CREATE TRIGGER audit_chain_no_{event.lower()} BEFORE {event} ON audit_chain "
                f"BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END")
        # INSERT OR REPLACE deletes the old row without firing delete triggers (unless
        # a connection turns recursive_triggers on): refuse a second row under a key
        for table, key in (("analyses", "id = NEW.id"),
                           ("analysis_files", "analysis_id = NEW.analysis_id AND name = NEW.name"),
                           ("audit_chain", "seq = NEW.seq OR analysis_id = NEW.analysis_id")):
            conn.exec_driver_sql(
                f"CREATE TRIGGER {table}_no_replace BEFORE INSERT ON {table} "
                f"WHEN EXISTS (SELECT 1 FROM {table} WHERE {key}) "
                f"BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END")
        # a blob is its hash: a second insert of the same key is skipped, never replaces
        conn.exec_driver_sql(
            "CREATE TRIGGER blobs_keep_first BEFORE INSERT ON blobs "
            "WHEN EXISTS (SELECT 1 FROM blobs WHERE sha256 = NEW.sha256) "
            "BEGIN SELECT RAISE(IGNORE); END")
    elif dialect == "postgresql":
        conn.exec_driver_sql(
            "CREATE TRIGGER audit_chain_immutable BEFORE UPDATE OR DELETE ON audit_chain "
            "FOR EACH ROW EXECUTE FUNCTION specmatch_immutable()")
        # TRUNCATE skips row triggers
        for table in (*_IMMUTABLE_TABLES, "audit_chain"):
            conn.exec_driver_sql(
                f"CREATE TRIGGER {table}_no_truncate BEFORE TRUNCATE ON {table} "
                "FOR EACH STATEMENT EXECUTE FUNCTION specmatch_immutable()")


def expected_triggers(dialect: str) -> tuple[str, ...]:
    """Names of the guard triggers a store at the current version must have."""
    if dialect == "sqlite":
        names = [f"{t}_no_{e}" for t in (*_IMMUTABLE_TABLES, "audit_chain") for e in ("update", "delete")]
        names += [f"{t}_no_replace" for t in ("analyses", "analysis_files", "audit_chain")]
        return (*names, "blobs_keep_first")
    if dialect == "postgresql":
        tables = (*_IMMUTABLE_TABLES, "audit_chain")
        return (*(f"{t}_immutable" for t in tables), *(f"{t}_no_truncate" for t in tables))
    return ()


MIGRATIONS: tuple[Migration, ...] = (
    Migration(1, "analyses, blobs, files, schema version", _v1_base_tables),
    Migration(2, "input key for resumable batches", _v2_input_key),
    Migration(3, "immutability triggers", _v3_immutability_triggers),
    Migration(4, "audit hash chain, sharing groups, no-replace triggers", _v4_audit_chain),
)
assert [m.version for m in MIGRATIONS] == list(range(1, SCHEMA_VERSION + 1))


def current_version(conn: Connection) -> int:
    """Schema version of the store behind ``conn`` (0 for an empty database)."""
    if not inspect(conn).has_table("schema_version"):
        return 0
    return int(conn.execute(select(func.max(schema_version.c.version))).scalar() or 0)


def upgrade(engine: Engine, begin_write: Callable[[], object], *,
            target: int = SCHEMA_VERSION, tool_version: str = "") -> int:
    """Apply the missing migrations up to ``target``; return the version reached.

    ``begin_write`` opens a write transaction that excludes other writers (SQLite
    ``BEGIN IMMEDIATE``; a PostgreSQL advisory lock), so two processes opening a new
    store at once do not both create it.
    """
    from ..errors import SpecmatchError

    with engine.connect() as conn:
        version = current_version(conn)
    if version > SCHEMA_VERSION:
        raise SpecmatchError(
            f"this analysis store has schema version {version}, written by a newer specmatch; "
            f"this release knows up to version {SCHEMA_VERSION}: upgrade specmatch to open it")
    while version < target:
        with begin_write() as conn:  # type: ignore[attr-defined]
            version = current_version(conn)  # another process may have moved it on
            if version >= target:
                break
            migration = MIGRATIONS[version]
            migration.apply(conn)
            conn.execute(schema_version.insert().values(
                version=migration.version, description=migration.description,
                applied_at=_dt.datetime.now(_dt.timezone.utc), tool_version=tool_version))
            version = migration.version
    return version
