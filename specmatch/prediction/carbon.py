"""13C prediction (placeholder until the increment tables land)."""

from __future__ import annotations

from ..structures import Structure
from .model import CarbonShift

TABLES_VERSION = "placeholder"


def predict_carbons(structure: Structure) -> tuple[list[CarbonShift], list[str]]:
    out = []
    for atoms in structure.equivalence_sets("C"):
        a = structure.mol.GetAtomWithIdx(atoms[0])
        out.append(CarbonShift(atoms, 30.0, 20.0, a.GetTotalNumHs(), "placeholder", True))
    return out, ["placeholder 13C predictor"]
