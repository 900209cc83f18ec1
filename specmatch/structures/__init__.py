"""Structures stage: parse SMILES/molfiles and perceive symmetry and stereotopicity once."""

from .molecule import (
    MAX_HEAVY_ATOMS,
    Structure,
    canonical_smiles,
    enantiomer_key,
    isomeric_smiles,
    mirror_image,
    mol_from_text,
    mol_smiles,
    parse_structure,
    perceive,
    stereocentres_created,
)

__all__ = [
    "MAX_HEAVY_ATOMS",
    "Structure",
    "canonical_smiles",
    "enantiomer_key",
    "isomeric_smiles",
    "mirror_image",
    "mol_from_text",
    "mol_smiles",
    "parse_structure",
    "perceive",
    "stereocentres_created",
]
