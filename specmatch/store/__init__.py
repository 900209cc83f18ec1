"""Saved analyses with a tamper-evident audit trail, and resumable batches.

``open_store()`` opens the store (SQLite by default, any SQLAlchemy URL); every
analysis is saved whole and immutable, corrections and notes become new versions,
each a link of a hash chain checked on every read (``Store.verify()`` checks all).
``specmatch.store.batch`` runs a manifest of samples through the one batch runner
(:mod:`specmatch.executor`), saving each finished sample at once. The store only
persists: it runs no chemistry.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

_LAZY = {
    "open_store": "specmatch.store.store",
    "Store": "specmatch.store.store",
    "save_result": "specmatch.store.store",
    "save_run": "specmatch.store.store",
    "default_store_url": "specmatch.store.store",
    "resolve_store_url": "specmatch.store.store",
    "Viewer": "specmatch.store.store",
    "VerifyReport": "specmatch.store.store",
    "Problem": "specmatch.store.store",
    "AnalysisRecord": "specmatch.store.records",
    "input_key": "specmatch.store.records",
    "records_frame": "specmatch.store.records",
    "SCHEMA_VERSION": "specmatch.store.schema",
    "run_batch": "specmatch.store.batch",
    "run_sample": "specmatch.store.batch",
}

__all__ = list(_LAZY)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'specmatch.store' has no attribute {name!r}")
