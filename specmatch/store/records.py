"""The record of one saved analysis, and how its searchable fields are read.

The identification stage hands over ``Result.to_dict()``: a JSON-able dict with the
inputs, versions, candidates with probabilities and the verdict. The store keeps
that dict whole and copies a few fields, read by their exact keys, into columns for
searching.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
from dataclasses import dataclass, field
from typing import Any, Mapping


def canonical_json(obj: Any) -> str:
    """JSON text with sorted keys and no spaces: equal data gives equal bytes (and hash)."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), ensure_ascii=False,
                      allow_nan=False, default=_json_default)


def _json_default(obj: Any) -> Any:
    # numpy scalars/arrays, paths, datetimes and sets turn up in result dicts
    if hasattr(obj, "tolist"):
        return obj.tolist()
    if isinstance(obj, (_dt.datetime, _dt.date)):
        return obj.isoformat()
    if isinstance(obj, (set, frozenset, tuple)):
        return sorted(obj) if isinstance(obj, (set, frozenset)) else list(obj)
    if hasattr(obj, "__fspath__"):
        return str(obj)
    raise TypeError(f"{type(obj).__name__} is not JSON-serialisable")


def sha256_hex(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def input_key(sample_id: str | None, inputs: Mapping[str, Any],
              file_sha256: Mapping[str, str]) -> str:
    """SHA-256 over a sample's id, its input fields and the hashes of its files.

    Two runs with the same key analysed the same thing, so a resumed batch may skip
    a sample whose key is already in the store. Empty fields are dropped so that a
    blank CSV cell and a missing column give the same key.
    """
    clean = {k: v for k, v in sorted(inputs.items()) if v not in (None, "", [], {})}
    payload = {"sample_id": sample_id, "inputs": clean, "files": dict(sorted(file_sha256.items()))}
    return sha256_hex(canonical_json(payload).encode("utf-8"))


def _probability(cand: Mapping[str, Any]) -> float | None:
    """A candidate's probability (``candidates[i]["probability"]`` of ``Result.to_dict()``)."""
    p = cand.get("probability")
    return None if p is None else float(p)


@dataclass(frozen=True)
class Summary:
    """The searchable fields of an analysis dict."""

    substrate: str | None
    reagent: str | None
    verdict: str | None
    top_smiles: str | None
    top_probability: float | None
    tool_version: str | None
    tables_version: str | None


def summarise(data: Mapping[str, Any]) -> Summary:
    """The searchable fields of ``Result.to_dict()``, read by their exact keys.

    ``inputs.substrate``/``inputs.reagent`` (None when only candidates were scored),
    ``verdict.word``/``verdict.top``/``verdict.p_top``, ``versions.specmatch`` and
    ``versions.prediction_tables`` with ``versions.error_model``. The store checks the
    layout before it saves (``store._check_record``), so the keys are there.
    """
    inputs, verdict, versions = data["inputs"], data["verdict"], data["versions"]
    tables = versions.get("prediction_tables")
    if versions.get("error_model"):
        tables = f"{tables or '-'}; error model {versions['error_model']}"
    p_top = verdict.get("p_top")
    return Summary(
        substrate=inputs.get("substrate"), reagent=inputs.get("reagent"),
        verdict=verdict["word"], top_smiles=verdict.get("top") or None,
        top_probability=None if p_top is None else float(p_top),
        tool_version=versions["specmatch"], tables_version=tables)


@dataclass(frozen=True)
class AnalysisRecord:
    """One version of a saved analysis.

    To save, give at least ``data`` (the ``Result.to_dict()`` form); the store fills
    the rest. Read back, every field is set: ``files`` maps each file name to the
    SHA-256 of its bytes (fetch the bytes with ``Store.file_bytes``).
    """

    data: dict[str, Any]
    sample_id: str | None = None
    user: str | None = None
    input_key: str | None = None
    id: str | None = None
    root_id: str | None = None
    parent_id: str | None = None
    version: int | None = None
    kind: str = "analysis"
    note: str | None = None
    created_at: _dt.datetime | None = None
    substrate: str | None = None
    reagent: str | None = None
    verdict: str | None = None
    top_smiles: str | None = None
    top_probability: float | None = None
    tool_version: str | None = None
    tables_version: str | None = None
    data_sha256: str | None = None
    files: dict[str, str] = field(default_factory=dict)
    groups: tuple[str, ...] = ()
    problems: tuple[str, ...] = ()
    """What the audit check found wrong with this version when it was read (empty: sound)."""
    chain_hash: str | None = None
    chain_origin: str | None = None
    """"saved" (linked when saved) or "migration" (saved before the chain, linked at upgrade)."""

    @property
    def short_id(self) -> str:
        return (self.id or "")[:12]

    def to_dict(self) -> dict[str, Any]:
        """JSON-able form: the audit fields, the file hashes and the analysis itself."""
        return {
            "id": self.id, "root_id": self.root_id, "parent_id": self.parent_id,
            "version": self.version, "kind": self.kind, "note": self.note,
            "created_at": self.created_at.isoformat() if self.created_at else None,
            "user": self.user, "sample_id": self.sample_id,
            "substrate": self.substrate, "reagent": self.reagent,
            "verdict": self.verdict, "top_smiles": self.top_smiles,
            "top_probability": self.top_probability,
            "tool_version": self.tool_version, "tables_version": self.tables_version,
            "input_key": self.input_key, "data_sha256": self.data_sha256,
            "groups": list(self.groups), "chain_hash": self.chain_hash,
            "chain_origin": self.chain_origin, "problems": list(self.problems),
            "files": dict(self.files), "data": self.data,
        }


LIST_COLUMNS = ("id", "created_at", "version", "kind", "sample_id", "substrate", "reagent",
                "verdict", "top_smiles", "top_probability", "user")


def records_frame(records: "list[AnalysisRecord]"):
    """Saved analyses as a pandas DataFrame, one row each (for the app's list and notebooks)."""
    import pandas as pd

    return pd.DataFrame([{c: getattr(r, c) for c in LIST_COLUMNS} for r in records],
                        columns=list(LIST_COLUMNS))
