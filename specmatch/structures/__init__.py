"""Structures stage: parse SMILES/molfiles and perceive symmetry and stereotopicity once."""

from .molecule import (
    MAX_HEAVY_ATOMS,
    Structure,
    canonical_smiles,
    isomeric_smiles,
    mol_from_text,
    parse_structure,
    perceive,
    stereocentres_created,
)

__all__ = [
    "MAX_HEAVY_ATOMS",
    "Structure",
    "canonical_smiles",
    "isomeric_smiles",
    "mol_from_text",
    "parse_structure",
    "perceive",
    "stereocentres_created",
]
