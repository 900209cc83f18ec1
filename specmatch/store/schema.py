"""Tables of the analysis store (SQLAlchemy Core) at the current schema version.

The tables are created and upgraded by :mod:`specmatch.store.migrations`, never by
``metadata.create_all``: the migrations are the one source of the schema, these
objects only describe it for queries. Keep both in step when adding a migration.

Layout
------
``schema_version``
    One row per applied migration (version, description, when, by which tool).
``blobs``
    Uploaded files, content-addressed: the key is the SHA-256 of the bytes, so a
    file used by many analyses is stored once and can be verified on export.
``analyses``
    One row per *version* of an analysis. A correction or a note is a new row
    whose ``parent_id`` points at the version it amends and whose ``root_id`` is
    the first version; rows are never updated or deleted (triggers forbid it on
    SQLite and PostgreSQL). ``data_json`` holds the analysis exactly as the
    identification stage returned it (``Result.to_dict()``); the other columns are
    copies of a few fields for searching.
``analysis_files``
    Which blobs an analysis version was based on, under the names they were given.
``audit_chain``
    One link per analysis version, in the order they were saved: the hash of the
    version's content and files and of the link before it (see
    :mod:`specmatch.store.chain`). Insert-only, like the tables above.
"""

from __future__ import annotations

import datetime as _dt

from sqlalchemy import (Column, Float, ForeignKey, Integer, LargeBinary, MetaData, String,
                        Table, Text)
from sqlalchemy.types import DateTime, TypeDecorator

SCHEMA_VERSION = 4
"""Schema version this release writes (the last entry of ``migrations.MIGRATIONS``)."""


class UTCDateTime(TypeDecorator):
    """A timestamp kept as naive UTC in the database and returned timezone-aware.

    SQLite has no time zones and PostgreSQL ``timestamp with time zone`` converts to
    the session zone; storing naive UTC everywhere makes both back ends agree.
    """

    impl = DateTime(timezone=False)
    cache_ok = True

    def process_bind_param(self, value, dialect):  # type: ignore[override]
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given to the store; use UTC-aware datetimes")
        return value.astimezone(_dt.timezone.utc).replace(tzinfo=None)

    def process_result_value(self, value, dialect):  # type: ignore[override]
        if value is None:
            return None
        return value.replace(tzinfo=_dt.timezone.utc)


metadata = MetaData()

schema_version = Table(
    "schema_version", metadata,
    Column("version", Integer, primary_key=True, autoincrement=False),
    Column("description", Text, nullable=False),
    Column("applied_at", UTCDateTime, nullable=False),
    Column("tool_version", String(40), nullable=False),
)

blobs = Table(
    "blobs", metadata,
    Column("sha256", String(64), primary_key=True),
    Column("size_bytes", Integer, nullable=False),
    Column("data", LargeBinary, nullable=False),
    Column("created_at", UTCDateTime, nullable=False),
)

analyses = Table(
    "analyses", metadata,
    Column("id", String(32), primary_key=True),
    Column("root_id", String(32), nullable=False, index=True),
    Column("parent_id", String(32), ForeignKey("analyses.id"), nullable=True),
    Column("version", Integer, nullable=False),
    Column("kind", String(16), nullable=False),  # analysis | note | correction
    Column("created_at", UTCDateTime, nullable=False, index=True),
    Column("user_name", String(200), nullable=False),
    Column("sample_id", String(200), nullable=True, index=True),
    Column("substrate", Text, nullable=True),
    Column("substrate_key", Text, nullable=True, index=True),  # canonical SMILES when it parses
    Column("reagent", String(200), nullable=True),
    Column("verdict", Text, nullable=True),
    Column("top_smiles", Text, nullable=True),
    Column("top_probability", Float, nullable=True),
    Column("tool_version", String(40), nullable=False),
    Column("tables_version", Text, nullable=True),
    Column("note", Text, nullable=True),
    Column("data_json", Text, nullable=False),
    Column("data_sha256", String(64), nullable=False),
    # added in schema v2: SHA-256 of the inputs, the key batches resume by
    Column("input_key", String(64), nullable=True),
    # added in schema v4: groups the analysis is shared with, as "|group a|group b|"
    Column("groups", Text, nullable=True),
)

analysis_files = Table(
    "analysis_files", metadata,
    Column("analysis_id", String(32), ForeignKey("analyses.id"), primary_key=True),
    Column("name", String(500), primary_key=True),
    Column("sha256", String(64), ForeignKey("blobs.sha256"), nullable=False),
)

audit_chain = Table(
    "audit_chain", metadata,
    Column("seq", Integer, primary_key=True, autoincrement=False),
    Column("analysis_id", String(32), ForeignKey("analyses.id"), nullable=False, unique=True),
    Column("prev_hash", String(64), nullable=False),
    Column("row_hash", String(64), nullable=False),
    Column("origin", String(16), nullable=False),  # saved | migration
)
