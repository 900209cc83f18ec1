"""Empirical energy scales: carbocations, radicals, alkenes, ring strain (all kcal/mol).

The numbers live in ``data/*.csv`` (one ``source`` column per row) and ``data/prior_parameters.toml``;
this module reads them once and scores RDKit molecules with them.

Cation scale: 0 = tert-alkyl cation; larger = less stable. The energy of a cation is the
energy of its best resonance contributor (class + alpha/beta substituent terms), plus the
allylic resonance term when it is delocalised, plus the ring strain of the whole molecule
(so isomeric cations, e.g. before and after a ring expansion, compare on one scale).
"""

from __future__ import annotations

import csv
import tomllib
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

from rdkit import Chem

DATA_DIR = Path(__file__).parent / "data"


def _read_csv(name: str) -> list[dict[str, str]]:
    with open(DATA_DIR / name, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@lru_cache(maxsize=1)
def cation_terms() -> dict[str, float]:
    return {r["term"]: float(r["value_kcal_mol"]) for r in _read_csv("cation_scale.csv")}


@lru_cache(maxsize=1)
def radical_terms() -> dict[str, float]:
    return {r["term"]: float(r["value_kcal_mol"]) for r in _read_csv("radical_scale.csv")}


@lru_cache(maxsize=1)
def ring_strain_table() -> dict[int, float]:
    return {int(r["ring_size"]): float(r["strain_kcal_mol"]) for r in _read_csv("ring_strain.csv")}


@lru_cache(maxsize=1)
def migratory_aptitudes() -> dict[str, float]:
    return {r["group"]: float(r["aptitude"]) for r in _read_csv("migratory_aptitude.csv")}


@lru_cache(maxsize=1)
def alkene_terms() -> dict[str, float]:
    return {r["pattern"]: float(r["dh_hydrogenation_kcal_mol"]) for r in _read_csv("alkene_stability.csv")}


@lru_cache(maxsize=1)
def prior_parameters() -> dict:
    with open(DATA_DIR / "prior_parameters.toml", "rb") as fh:
        return tomllib.load(fh)


def ring_strain(mol: Chem.Mol) -> float:
    """Sum of ring strain over the non-aromatic SSSR rings (fused/bridged: an approximation)."""
    table = ring_strain_table()
    total = 0.0
    ri = mol.GetRingInfo()
    for ring in ri.AtomRings():
        if all(mol.GetAtomWithIdx(i).GetIsAromatic() for i in ring):
            continue
        n = len(ring)
        total += table.get(n, table[12] if n > 12 else 0.0)
    return total


_HALOGENS = {9, 17, 35, 53}


def _is_acceptor_carbon(atom: Chem.Atom) -> bool:
    """C=O, C#N carbon or CF3: groups that destabilise an adjacent cation."""
    if atom.GetAtomicNum() != 6:
        return False
    for b in atom.GetBonds():
        other = b.GetOtherAtom(atom)
        if other.GetAtomicNum() in (7, 8) and b.GetBondType() in (Chem.BondType.DOUBLE, Chem.BondType.TRIPLE):
            return True
    return sum(1 for n in atom.GetNeighbors() if n.GetAtomicNum() == 9) >= 3


def is_small_bridgehead(mol: Chem.Mol, atom: int) -> bool:
    """Bridgehead of a bridged bicycle whose rings have < 8 atoms (cannot planarise; Bredt)."""
    ri = mol.GetRingInfo()
    if ri.NumAtomRings(atom) < 2:
        return False
    rings = [set(r) for r in ri.AtomRings() if atom in r]
    return any(len(rings[i] & rings[j]) > 2 and len(rings[i]) < 8 and len(rings[j]) < 8
               for i in range(len(rings)) for j in range(i + 1, len(rings)))


@dataclass(frozen=True)
class CentreScore:
    """Energy of one resonance contributor with the charge (or radical) on `centre`."""

    energy: float
    cls: str           # "secondary", "tertiary benzylic", "oxocarbenium", ...
    substitution: str  # "methyl" | "primary" | "secondary" | "tertiary"


def _substitution(n: int) -> str:
    return ("methyl", "primary", "secondary", "tertiary")[min(n, 3)]


def cation_centre_score(mol: Chem.Mol, centre: int) -> CentreScore:
    """Local energy of a cation contributor (no resonance, no ring strain)."""
    t = cation_terms()
    atom = mol.GetAtomWithIdx(centre)
    nbrs = list(atom.GetNeighbors())
    n_sub = sum(1 for n in nbrs if n.GetAtomicNum() != 1)
    sub = _substitution(n_sub)
    e = {"methyl": t["methyl"], "primary": t["primary_alkyl"], "secondary": t["secondary_alkyl"],
         "tertiary": t["tertiary_alkyl"]}[sub]
    words = [sub]
    n_aryl = sum(1 for n in nbrs if n.GetIsAromatic())
    if n_aryl:
        e += t["benzylic_first_aryl"] + t["benzylic_next_aryl"] * (n_aryl - 1)
        words.append("benzylic")
    n_o = sum(1 for n in nbrs if n.GetAtomicNum() in (8, 16))
    n_n = sum(1 for n in nbrs if n.GetAtomicNum() == 7)
    if n_n:
        e += t["alpha_nitrogen"]
        words = ["iminium"]
    elif n_o:
        e += t["alpha_oxygen"]
        words = ["oxocarbenium (alpha-oxygen)"]
    for n in nbrs:
        z = n.GetAtomicNum()
        if z == 9:
            e += t["alpha_fluorine"]
        elif z in _HALOGENS:
            e += t["alpha_halogen"]
            words.append("alpha-halo")
        elif _is_acceptor_carbon(n):
            e += t["alpha_carbonyl"]
            words.append("alpha-carbonyl (destabilised)")
    n_bhal = n_bo = 0
    for n in nbrs:
        if n.GetAtomicNum() != 6 or n.GetIsAromatic():
            continue
        for nn in n.GetNeighbors():
            if nn.GetIdx() == centre:
                continue
            if nn.GetAtomicNum() in _HALOGENS:
                n_bhal += 1
            elif nn.GetAtomicNum() == 8 and n.GetTotalDegree() == 4:
                n_bo += 1
    if n_bhal:
        e += t["beta_halogen"] * min(n_bhal, 2)
        words.append("beta-halo (destabilised)")
    if n_bo and not n_o:
        e += t["beta_oxygen"] * min(n_bo, 2)
    ri = mol.GetRingInfo()
    if not ri.IsAtomInRingOfSize(centre, 3) and any(
            n.GetAtomicNum() == 6 and ri.IsAtomInRingOfSize(n.GetIdx(), 3) for n in nbrs):
        e += t["cyclopropylcarbinyl"]
        words.append("cyclopropylcarbinyl")
    if is_small_bridgehead(mol, centre):
        e += t["cation_at_bridgehead"]
        words.append("bridgehead")
    if ri.IsAtomInRingOfSize(centre, 3):
        e += t["cation_in_3_ring"]
    elif ri.IsAtomInRingOfSize(centre, 4):
        e += t["cation_in_4_ring"]
    return CentreScore(e, " ".join(words), sub)


def radical_centre_score(mol: Chem.Mol, centre: int) -> CentreScore:
    """Local energy of a carbon radical contributor on the C-H BDE scale (0 = primary)."""
    t = radical_terms()
    atom = mol.GetAtomWithIdx(centre)
    n_sub = sum(1 for n in atom.GetNeighbors())
    sub = _substitution(n_sub)
    e = t[sub]
    words = [sub]
    if any(n.GetIsAromatic() for n in atom.GetNeighbors()):
        e += t["benzylic"]
        words.append("benzylic")
    return CentreScore(e, " ".join(words) + " radical", sub)


def alkene_dh(mol: Chem.Mol, a: int, b: int) -> float:
    """Heat of hydrogenation (kcal/mol) estimated for the C=C between atoms a and b.

    Lower = more stable alkene (Zaitsev). Open-chain 1,2-disubstituted alkenes get the E value
    (the constitution stands for the E/Z pair; E dominates); ring alkenes of up to 7 atoms the cis value.
    """
    t = alkene_terms()
    A, B = mol.GetAtomWithIdx(a), mol.GetAtomWithIdx(b)
    na = [n for n in A.GetNeighbors() if n.GetIdx() != b]
    nb = [n for n in B.GetNeighbors() if n.GetIdx() != a]
    n = len(na) + len(nb)
    if n == 0:
        e = t["unsubstituted"]
    elif n == 1:
        e = t["mono"]
    elif n == 2:
        if not na or not nb:
            e = t["gem_di"]
        else:
            ring = mol.GetRingInfo()
            bond = mol.GetBondBetweenAtoms(a, b)
            small = any(ring.IsBondInRingOfSize(bond.GetIdx(), k) for k in range(3, 8))
            e = t["cis_di"] if small else t["trans_di"]
    elif n == 3:
        e = t["tri"]
    else:
        e = t["tetra"]
    for n_atom in na + nb:
        if n_atom.GetIsAromatic():
            e += t["conjugated_aryl"]
        elif any(bd.GetBondType() == Chem.BondType.DOUBLE and bd.GetOtherAtom(n_atom).GetAtomicNum() == 6
                 for bd in n_atom.GetBonds()):
            e += t["conjugated_diene"]
    bond = mol.GetBondBetweenAtoms(a, b)
    ri = mol.GetRingInfo()
    if ri.IsBondInRingOfSize(bond.GetIdx(), 4):
        e += t["endocyclic_4_ring"]
    if not bond.IsInRing() and (ri.NumAtomRings(a) or ri.NumAtomRings(b)):
        e += t["exocyclic"]
    return e
