"""Batch prediction: the row of one input line (run by the shared executor for ``predict --batch``)."""

from __future__ import annotations

import json
from json.encoder import encode_basestring_ascii as _text
from typing import TYPE_CHECKING, Any

from ..errors import SpecmatchError

if TYPE_CHECKING:
    from .types import Prediction

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


def _bool(x: bool) -> str:
    return "true" if x else "false"


def _plain(pred: Prediction) -> bool:
    """Every number of the row a finite built-in float or int and every flag a bool (what
    :func:`row_json` writes as the json module would); else the json module writes it."""
    for c in pred.carbons:
        if not (type(c.shift) is float and type(c.sigma) is float and c.shift - c.shift == 0.0
                and c.sigma - c.sigma == 0.0 and type(c.hydrogens) is int):
            return False
    for h in pred.protons:
        if not (type(h.shift) is float and type(h.sigma) is float and h.shift - h.shift == 0.0
                and h.sigma - h.sigma == 0.0 and type(h.count) is int and type(h.exchangeable) is bool
                and type(h.diastereotopic) is bool
                and all(type(j) is float and j - j == 0.0 for j in h.j_hz)):
            return False
    return True


def row_json(pred: Prediction, smiles: str) -> str:
    """``json.dumps`` of the row of a prediction (``pred.to_dict()`` with ``smiles`` set),
    the same text, written directly.

    Building the dictionaries and walking them costs more than the text itself (some
    50 us of a 1.3 ms prediction; this takes about 30). Every value the row holds is a
    built-in float (written as ``repr``, as the json module does), int or bool, a string
    or a list of these; any other value (a non-finite number, a numpy scalar: none is
    predicted) is left to the json module.
    ``tests/test_prediction_speed_paths.py`` compares both on the test molecules: a key
    added to :meth:`Prediction.to_dict` must be added here.
    """
    if not _plain(pred):
        row = pred.to_dict()
        row["smiles"] = smiles
        return _encode(row)  # the json module's own text (NaN, Infinity) or its error
    rnd = round
    carbons = ", ".join([
        f'{{"atoms": [{", ".join([str(a + 1) for a in c.atoms])}], "shift": {rnd(c.shift, 2)!r}, '
        f'"sigma": {rnd(c.sigma, 2)!r}, "hydrogens": {c.hydrogens!r}, "environment": {_text(c.environment)}}}'
        for c in pred.carbons])
    protons = ", ".join([
        f'{{"atoms": [{", ".join([str(a + 1) for a in h.atoms])}], "shift": {rnd(h.shift, 3)!r}, '
        f'"sigma": {rnd(h.sigma, 3)!r}, "count": {h.count!r}, "multiplicity": {_text(h.multiplicity)}, '
        f'"j_hz": [{", ".join([repr(rnd(j, 1)) for j in h.j_hz])}], "exchangeable": {_bool(h.exchangeable)}, '
        f'"diastereotopic": {_bool(h.diastereotopic)}}}'
        for h in pred.protons])
    return (f'{{"smiles": {_text(smiles)}, "ok": true, "canonical_smiles": {_text(pred.canonical_smiles)}, '
            f'"carbons": [{carbons}], "protons": [{protons}], '
            f'"warnings": [{", ".join([_text(w) for w in pred.warnings])}]}}')


def predict_line(line: str, geometry: bool = False) -> tuple[str, str, str]:
    """The row of one input line already written as JSON, with its status.

    Returns ``(status, json_text, error)``; status is ``"ok"``, ``"skipped"`` or
    ``"failed"``. Workers encode the row themselves, so the parent only writes text
    (encoding is a sizeable share of a prediction's time); a prediction's row is
    written by :func:`row_json`, the same text as ``json.dumps`` of :func:`predict_row`.
    """
    from . import predict

    smi = line.strip()
    if smi and not smi.startswith("#"):
        smi = smi.split()[0]
        try:
            pred = predict(smi, geometry=geometry)
        except SpecmatchError as exc:
            return "failed", _encode({"smiles": smi, "ok": False, "error": str(exc)}), str(exc)
        return "ok", row_json(pred, smi), ""
    row = predict_row(line, geometry)
    return "skipped", _encode(row), row.get("error", "")


def worker_setup() -> None:
    """Run once in each worker process of ``predict --batch``: switch off the cyclic
    garbage collector.

    A prediction leaves no reference cycles behind (``gc.collect()`` finds nothing after
    3,000 wide dev molecules), so the collector's passes over the young objects, about
    1 % of a worker's time, free nothing; the worker ends with the batch. The parent
    keeps its collector (tests call the command in their own process).
    """
    import gc

    gc.disable()


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
