"""Batch prediction: the row of one input line (run by the shared executor for ``predict --batch``)."""

from __future__ import annotations

from typing import Any

from ..errors import SpecmatchError


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
