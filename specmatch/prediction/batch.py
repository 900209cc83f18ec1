"""Batch prediction: the row of one input line (run by the shared executor for ``predict --batch``)."""

from __future__ import annotations

import json
from typing import Any

from ..errors import SpecmatchError

#: ``json.dumps`` with its defaults (same text) minus the circular-reference walk: a row
#: is a fresh tree of dicts, lists and numbers
_encode = json.JSONEncoder(check_circular=False).encode


def predict_row(line: str, geometry: bool = False) -> dict[str, Any]:
    """The output row of one input line: the prediction, or ``ok: false`` with the reason.

    ``geometry`` turns on the 3D stereo layer (``--stereo-3d``).

    Blank lines and ``#`` comments give ``skipped: true`` rows (kept so output line
    n belongs to input line n); they are not failures.
    """
    from . import predict

    smi = line.strip()
    if not smi or smi.startswith("#"):
        return {"smiles": line, "ok": False, "skipped": True, "error": "empty line or comment"}
    smi = smi.split()[0]
    try:
        row = predict(smi, geometry=geometry).to_dict()
        row["smiles"] = smi
        return row
    except SpecmatchError as exc:
        return {"smiles": smi, "ok": False, "error": str(exc)}


def predict_line(line: str, geometry: bool = False) -> tuple[str, str, str]:
    """The row of one input line already written as JSON, with its status.

    Returns ``(status, json_text, error)``; status is ``"ok"``, ``"skipped"`` or
    ``"failed"``. Workers encode the row themselves, so the parent only writes text
    (encoding is a sizeable share of a prediction's time).
    """
    row = predict_row(line, geometry)
    status = "ok" if row["ok"] else ("skipped" if row.get("skipped") else "failed")
    return status, _encode(row), row.get("error", "")


def warm() -> None:
    """Load the predictor's modules and tables once (before workers are forked, so they
    inherit them, or in a worker that starts alone)."""
    from . import predict
    from .h1.tables import load_tables
    from .hose import load_table

    load_table("13C")
    load_table("1H")
    load_tables()
    predict("CC=CCO", geometry=False)  # first call initialises RDKit's lazy parts
