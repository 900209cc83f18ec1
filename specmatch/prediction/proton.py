"""1H prediction (placeholder until the increment tables land)."""

from __future__ import annotations

from ..structures import Structure
from .model import ProtonGroup

TABLES_VERSION = "placeholder"


def predict_protons(structure: Structure) -> tuple[list[ProtonGroup], list[str]]:
    out = []
    for atoms in structure.equivalence_sets():
        a = structure.mol.GetAtomWithIdx(atoms[0])
        n = a.GetTotalNumHs()
        if n:
            out.append(ProtonGroup(atoms, 1.5, 1.0, n * len(atoms), "m", exchangeable=a.GetSymbol() == "O"))
    return out, ["placeholder 1H predictor"]
