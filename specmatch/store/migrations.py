"""Schema migrations of the analysis store, applied in order.

Each migration moves the schema from version ``n - 1`` to ``n`` and runs in its own
transaction together with the row that records it in ``schema_version``, so a store
is always at a whole version. Opening a store upgrades it to
:data:`~specmatch.store.models.SCHEMA_VERSION`; a store written by a newer release is
refused rather than guessed at.

To change the schema: append a :class:`Migration` (never edit a released one), bump
``SCHEMA_VERSION`` in ``models.py`` and update the table objects there to match.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass
from typing import Callable

from sqlalchemy import (Column, Float, ForeignKey, Index, Integer, LargeBinary, MetaData, String,
                        Table, Text, func, inspect, select, text)
from sqlalchemy.engine import Connection, Engine

from .models import SCHEMA_VERSION, UTCDateTime, schema_version


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


MIGRATIONS: tuple[Migration, ...] = (
    Migration(1, "analyses, blobs, files, schema version", _v1_base_tables),
    Migration(2, "input key for resumable batches", _v2_input_key),
    Migration(3, "immutability triggers", _v3_immutability_triggers),
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
