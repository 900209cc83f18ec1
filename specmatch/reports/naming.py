"""Display names for candidate structures: a numbered code, a structural class, the pathway.

Pathway labels from the enumeration ("E1 alkene (after 1,2-hydride shift)") can be
shared by two different structures; a name on a screen or in a report must never
name two structures. Every candidate therefore gets a code (P1, P2, ... in the order
given, which is the enumeration's order, so the codes do not move when the ranking
changes) and, when its pathway label is shared or missing, the structural class read
from the structure itself ("tertiary alcohol", "trisubstituted alkene, in the ring").

The classes use the trade's words (primary/secondary/tertiary for the carbon that
carries the group, the number of carbon substituents on a C=C; common practice).
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from functools import lru_cache

__all__ = ["CandidateName", "candidate_names", "structure_class"]

_HALIDES = {9: "fluoride", 17: "chloride", 35: "bromide", 53: "iodide"}
_DEGREE = {0: "methyl", 1: "primary", 2: "secondary", 3: "tertiary"}
_ALKENE = {1: "monosubstituted", 2: "disubstituted", 3: "trisubstituted", 4: "tetrasubstituted"}


@dataclass(frozen=True)
class CandidateName:
    """How a candidate is called on screen and in reports.

    Attributes
    ----------
    code : str
        "P1", "P2", ... unique within one candidate set.
    short : str
        Code plus the structural class, e.g. "P2 tertiary alcohol".
    full : str
        Code, class and pathway label, e.g. "P2 tertiary alcohol (after 1,2-hydride shift)".
    """

    code: str
    short: str
    full: str


@lru_cache(maxsize=512)
def structure_class(smiles: str) -> str:
    """The structure's class in a chemist's words ("secondary bromide", "trisubstituted alkene").

    The principal group decides: alcohol, ether, halide, then C=C; "alkane" when
    there is none. Returns "" for text RDKit cannot read.
    """
    from rdkit import Chem

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return ""
    words: list[str] = []
    for atom in mol.GetAtoms():
        z = atom.GetAtomicNum()
        if z == 8 and not atom.GetIsAromatic():
            carbons = [n for n in atom.GetNeighbors() if n.GetAtomicNum() == 6]
            if atom.GetTotalNumHs() == 1 and len(carbons) == 1 and _sp3(carbons[0]):
                words.append(f"{_DEGREE[_carbon_degree(carbons[0])]} alcohol")
            elif len(carbons) == 2 and all(_sp3(c) for c in carbons):
                words.append("ether" if not atom.IsInRing() else "cyclic ether")
        elif z in _HALIDES:
            carbon = next((n for n in atom.GetNeighbors() if n.GetAtomicNum() == 6), None)
            if carbon is not None and _sp3(carbon):
                words.append(f"{_DEGREE[_carbon_degree(carbon)]} {_HALIDES[z]}")
            elif carbon is not None:
                words.append(f"vinyl or aryl {_HALIDES[z]}")
    for bond in mol.GetBonds():
        a, b = bond.GetBeginAtom(), bond.GetEndAtom()
        if bond.GetBondType() != Chem.BondType.DOUBLE or a.GetAtomicNum() != 6 or b.GetAtomicNum() != 6:
            continue
        subs = sum(1 for x, other in ((a, b), (b, a)) for n in x.GetNeighbors()
                   if n.GetIdx() != other.GetIdx() and n.GetAtomicNum() != 1)
        where = ""
        if bond.IsInRing():
            where = ", in the ring"
        elif a.IsInRing() or b.IsInRing():
            where = ", exocyclic"
        words.append(f"{_ALKENE.get(subs, 'unsubstituted')} alkene{where}")
    if not words:
        return "cycloalkane" if mol.GetRingInfo().NumRings() else "alkane"
    counts = Counter(words)
    return " and ".join(w if n == 1 else f"{n}x {w}" for w, n in counts.items())


def _sp3(atom) -> bool:
    from rdkit import Chem

    return atom.GetHybridization() == Chem.HybridizationType.SP3


def _carbon_degree(carbon) -> int:
    return min(3, sum(1 for n in carbon.GetNeighbors() if n.GetAtomicNum() == 6))


def candidate_names(candidates: Iterable[tuple[str, str]]) -> dict[str, CandidateName]:
    """Names for a candidate set, keyed by SMILES as given.

    Parameters
    ----------
    candidates : iterable of (smiles, pathway label)
        In the order the codes should follow (the enumeration's order).

    Returns
    -------
    dict
        SMILES -> CandidateName. Two different SMILES never share ``short`` or
        ``full`` (the code alone is unique).
    """
    items: list[tuple[str, str]] = []
    for smiles, label in candidates:
        if smiles not in {s for s, _ in items}:
            items.append((smiles, (label or "").strip()))
    out: dict[str, CandidateName] = {}
    for i, (smiles, label) in enumerate(items, 1):
        code = f"P{i}"
        cls = structure_class(smiles) or smiles
        full = f"{code} {cls}" + (f" ({label})" if label else "")
        out[smiles] = CandidateName(code, f"{code} {cls}", full)
    return out


def names_in_order(names: dict[str, CandidateName], smiles: Sequence[str]) -> list[str]:
    """The full names for ``smiles`` (SMILES itself when it has no name)."""
    return [names[s].full if s in names else s for s in smiles]
