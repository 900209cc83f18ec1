"""The audit chain: one hash per saved version, each covering the one before it.

Every version of every analysis gets a link in ``audit_chain``: its sequence number
(the order versions were saved in, store-wide), the hash of the link before it
(``prev_hash``; the first link points at :data:`GENESIS`), and its own ``row_hash``,
the SHA-256 of

* the version's columns (who, when, sample, reaction, verdict, note, parent, the
  SHA-256 of the analysis data as saved, the sharing groups),
* the names and SHA-256 of its files, and
* ``prev_hash``, the sequence number and the link's origin.

So a version rewritten in place, a file re-pointed, a link removed or a version
slipped in later (back-dated or not) no longer matches; and since each link covers
the previous one, mending one hash means rewriting every later link, which the
insert-only triggers forbid. Record the head hash that ``specmatch history verify``
prints (in a notebook or a second system) to detect a rewrite of the whole tail.

``origin`` is "saved" for versions linked when they were saved, "migration" for
versions saved before the chain existed (linked from their stored content when the
store was upgraded: the chain vouches for them from then on, not before).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from typing import Any, Iterable, Mapping

GENESIS = "0" * 64
"""``prev_hash`` of the first link."""

CHAIN_FIELDS = ("id", "root_id", "parent_id", "version", "kind", "created_at", "user_name",
                "sample_id", "substrate", "substrate_key", "reagent", "verdict", "top_smiles",
                "top_probability", "tool_version", "tables_version", "note", "data_sha256",
                "input_key", "groups")
"""Columns of ``analyses`` the hash covers (``data_json`` through ``data_sha256``)."""


def _iso(value: Any) -> Any:
    if isinstance(value, _dt.datetime):
        if value.tzinfo is None:
            value = value.replace(tzinfo=_dt.timezone.utc)
        return value.astimezone(_dt.timezone.utc).isoformat(timespec="microseconds")
    return value


def row_content(row: Mapping[str, Any], files: Iterable[tuple[str, str]]) -> dict[str, Any]:
    """What the hash of a version covers: its columns and its files (name, SHA-256)."""
    return {"row": {k: _iso(row.get(k)) for k in CHAIN_FIELDS},
            "files": sorted([str(n), str(h)] for n, h in files)}


def link_hash(content: Mapping[str, Any], prev_hash: str, seq: int, origin: str) -> str:
    """SHA-256 of a link: the version's content, the previous link's hash, seq, origin."""
    payload = {"content": content, "prev": prev_hash, "seq": int(seq), "origin": origin}
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
