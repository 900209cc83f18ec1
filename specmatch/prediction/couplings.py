"""The H-H coupling network of a predicted molecule, for exact spin simulation.

:func:`coupling_network` turns a :class:`~specmatch.prediction.types.Prediction`
into individual proton spins (one per H; each spin belongs to one proton group)
and signed couplings between them, from the constitution:

* geminal: sp3 CH2 (negative), =CH2;
* vicinal sp3-sp3: ``base - slope * sum(chi_X - chi_H)`` over the substituents of the
  two carbons (Pauling electronegativities), and in X-CH2-CH2-Y with two heteroatom
  ends the rotamer-averaged pair J / J' (the AA'BB' case: the two protons of one
  CH2 couple differently to the two of the other);
* vicinal to alkene/aldehyde/aromatic carbons, alkene cis/trans, diene single bond;
* long range: allylic 4J, alkyne 4J, aromatic meta 4J and para 5J;
* 19F couplings (2J, 3J, aromatic) as heteronuclear partners (always weak: first order).

Every number is a row of ``tables/h1_coupling.csv`` with its source. A topological
vicinal value can be replaced by a geometric one (3D conformers, Karplus-type
relation) through ``geometric`` (``geometric=True``: from the 3D layer, Haasnoot-de
Leeuw-Altona 3J over the conformers, where the molecule has one). Couplings through
O/N/S-H are left out (exchange averages them away; common practice). The network is cached per structure.
"""

from __future__ import annotations

import csv
from collections.abc import Mapping
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from ..errors import SpecmatchError
from .types import Prediction

__all__ = ["SpinNetwork", "coupling_network", "coupling_table", "geometric_from_3d"]

_TABLE = Path(__file__).resolve().parent / "tables" / "h1_coupling.csv"

#: Pauling electronegativities (common knowledge, e.g. the CRC Handbook table) for
#: the vicinal-coupling correction; elements not listed count as carbon
PAULING = {1: 2.20, 5: 2.04, 6: 2.55, 7: 3.04, 8: 3.44, 9: 3.98, 14: 1.90, 15: 2.19, 16: 2.58,
           17: 3.16, 35: 2.96, 53: 2.66}
_HETERO = {7, 8, 9, 16, 17, 35, 53}


@lru_cache(maxsize=1)
def coupling_table() -> dict[str, float]:
    """Coupling constants by name (``tables/h1_coupling.csv``)."""
    with open(_TABLE, encoding="utf-8") as fh:
        return {r["coupling"]: float(r["j_hz"]) for r in csv.DictReader(fh)}


@dataclass(frozen=True)
class SpinNetwork:
    """Proton spins of a molecule and their couplings.

    Attributes
    ----------
    group_of_spin : tuple of int
        Per spin, the index of its group in ``prediction.protons`` (exchangeable
        groups have no spins).
    couplings : tuple of (int, int, float)
        H-H couplings between spins (Hz, signed).
    hetero : tuple of (int, int, float)
        Heteronuclear partners: (spin, number of equivalent 19F, J in Hz).
    """

    group_of_spin: tuple[int, ...]
    couplings: tuple[tuple[int, int, float], ...]
    hetero: tuple[tuple[int, int, float], ...] = ()

    @property
    def n_spins(self) -> int:
        return len(self.group_of_spin)

    def shifts(self, group_shifts) -> np.ndarray:
        """Per-spin shifts (ppm) from one shift per proton group."""
        g = np.asarray(group_shifts, float)
        return g[np.asarray(self.group_of_spin, int)] if self.group_of_spin else np.zeros(0)

    def j_matrix(self, scale: float = 1.0) -> np.ndarray:
        n = self.n_spins
        J = np.zeros((n, n))
        for i, j, v in self.couplings:
            J[i, j] = J[j, i] = v * scale
        return J


def coupling_network(prediction: Prediction, *,
                     geometric: Mapping[tuple[int, int], float] | bool | None = None) -> SpinNetwork:
    """The coupling network of a prediction (cached unless ``geometric`` is given).

    Parameters
    ----------
    prediction : Prediction
    geometric : mapping of (group_i, group_j) -> J_hz, or True, optional
        Vicinal couplings from geometry (pairs of indices into
        ``prediction.protons``), replacing the topological value for every spin
        pair between the two groups. ``True`` takes them from the 3D layer
        (:func:`geometric_from_3d`: Haasnoot-de Leeuw-Altona 3J over the conformer
        ensemble) where it applies, else the topological values stay.
    """
    key = (prediction.smiles, tuple((p.atoms, p.count, p.exchangeable, p.couplings) for p in prediction.protons))
    base = _cached_network(key)
    if geometric is True:
        geometric = geometric_from_3d(prediction)
    if not geometric:
        return base
    over = {}
    for (a, b), v in geometric.items():
        over[(a, b)] = over[(b, a)] = float(v)
    g = base.group_of_spin
    cp = tuple((i, j, over.get((g[i], g[j]), v)) for i, j, v in base.couplings)
    return SpinNetwork(base.group_of_spin, cp, base.hetero)


def geometric_from_3d(prediction: Prediction) -> dict[tuple[int, int], float] | None:
    """Vicinal 3J between the prediction's proton groups from the 3D layer, or None.

    The layer (``prediction/stereo.py``) embeds conformers of molecules whose
    diastereomers differ (ring CH-CH of substituted cyclohexanes and the like) and
    averages the Haasnoot-de Leeuw-Altona 3J over them; elsewhere there is no geometry
    and the topological couplings stay.
    """
    from ..structures import parse_structure
    from .stereo import geometric_couplings

    return geometric_couplings(parse_structure(prediction.smiles), prediction.protons) or None


@lru_cache(maxsize=4096)
def _cached_network(key) -> SpinNetwork:
    from ..structures import parse_structure

    smiles, groups = key
    return _build(parse_structure(smiles), groups)


class _Mol:
    """Per-molecule arrays read once from RDKit."""

    def __init__(self, mol) -> None:
        from rdkit import Chem

        n = mol.GetNumAtoms()
        atoms = [mol.GetAtomWithIdx(i) for i in range(n)]
        self.z = [a.GetAtomicNum() for a in atoms]
        self.nh = [a.GetTotalNumHs() for a in atoms]
        self.arom = [a.GetIsAromatic() for a in atoms]
        self.nbrs: list[dict[int, float]] = [{} for _ in range(n)]
        for k in range(mol.GetNumBonds()):
            b = mol.GetBondWithIdx(k)
            i, j, o = b.GetBeginAtomIdx(), b.GetEndAtomIdx(), b.GetBondTypeAsDouble()
            self.nbrs[i][j] = o
            self.nbrs[j][i] = o
        self.dist = Chem.GetDistanceMatrix(mol) if n else np.zeros((0, 0))
        self.mol = mol

    def sp3(self, i: int) -> bool:
        return self.z[i] == 6 and not self.arom[i] and all(o == 1.0 for o in self.nbrs[i].values())

    def double_partner(self, i: int) -> int | None:
        return next((j for j, o in self.nbrs[i].items() if o == 2.0), None)

    def path(self, a: int, b: int) -> list[int]:
        from rdkit import Chem

        return list(Chem.GetShortestPath(self.mol, a, b))


def _build(structure, groups) -> SpinNetwork:
    from rdkit import Chem

    m = _Mol(structure.mol)
    tab = coupling_table()
    # spins: H on atom a, numbered per atom across the groups that share the atom
    spin_atom: list[int] = []
    spin_slot: list[int] = []
    group_of: list[int] = []
    used: dict[int, int] = {}
    for gi, (atoms, count, exch, _) in enumerate(groups):
        if exch or not atoms:
            continue
        per = max(1, count // len(atoms))
        for a in atoms:
            if not 0 <= a < len(m.nh):
                raise SpecmatchError(f"proton group {gi} names atom {a}, which the structure does not have")
            for _ in range(per):
                spin_atom.append(a)
                spin_slot.append(used.get(a, 0))
                used[a] = used.get(a, 0) + 1
                group_of.append(gi)
    bad = [a for a, k in used.items() if not (0 <= a < len(m.nh)) or k > m.nh[a]]
    if bad or any(not exch and atoms and count % len(atoms) for atoms, count, exch, _ in groups):
        raise SpecmatchError(
            "the proton groups do not match the structure (more H on an atom than it carries); "
            "predict the molecule with specmatch.prediction.predict to simulate it exactly")
    n = len(spin_atom)
    cp: list[tuple[int, int, float]] = []
    cache: dict[tuple[int, int, int, int], float] = {}
    for s in range(n):
        for t in range(s + 1, n):
            a, b = spin_atom[s], spin_atom[t]
            key = (a, b, spin_slot[s], spin_slot[t], group_of[s], group_of[t])
            if key not in cache:
                cache[key] = _pair_j(m, tab, a, b, spin_slot[s], spin_slot[t],
                                     (groups[group_of[s]][3], groups[group_of[t]][3]))
            v = cache[key]
            if v != 0.0:
                cp.append((s, t, v))
    hetero = []
    for s in range(n):
        nf, jf = _fluorine(m, tab, spin_atom[s])
        hetero.extend((s, k, j) for k, j in zip(nf, jf))
    del Chem
    return SpinNetwork(tuple(group_of), tuple(cp), tuple(hetero))


def _chi_sum(m: _Mol, c: int, other: int) -> float:
    """Sum of (chi_X - chi_H) over the non-H substituents of carbon c other than ``other``."""
    return sum(PAULING.get(m.z[x], 2.55) - PAULING[1] for x in m.nbrs[c] if x != other)


def _hetero_end(m: _Mol, c: int, other: int) -> bool:
    return any(m.z[x] in _HETERO for x in m.nbrs[c] if x != other)


def _pair_j(m: _Mol, tab: dict[str, float], a: int, b: int, slot_a: int, slot_b: int,
            first_order: tuple = ((), ())) -> float:
    if a == b:
        if m.sp3(a):
            return tab["2J_sp3_gem_signed"]
        if m.double_partner(a) is not None and m.z[a] == 6:
            return tab["2J_vinyl_gem_signed"]
        return 0.0
    if m.z[a] != 6 or m.z[b] != 6:
        return 0.0  # X-H protons: exchange removes the coupling (common practice)
    d = int(m.dist[a, b])
    if d == 1:
        o = m.nbrs[a][b]
        if m.arom[a] and m.arom[b]:
            ring5 = m.mol.GetRingInfo().MinAtomRingSize(a) == 5
            return tab["3J_arom5"] if ring5 else tab["3J_aromatic_ortho"]
        if o == 2.0:
            return _alkene_vicinal(m, tab, a, b, first_order)
        if m.sp3(a) and m.sp3(b):
            j = tab["3J_sp3_sp3_base"] - tab["3J_sp3_sp3_electronegativity_slope"] * (
                _chi_sum(m, a, b) + _chi_sum(m, b, a))
            if m.nh[a] == 2 and m.nh[b] == 2 and _hetero_end(m, a, b) and _hetero_end(m, b, a):
                # X-CH2-CH2-Y: rotamer-averaged J (slots alike) and J' (slots crossed)
                half = tab["3J_CH2CH2_anti_excess"] / 2.0
                j += half if slot_a == slot_b else -half
            return j
        sa, sb = (a, b) if m.sp3(a) else (b, a)
        other = sb
        if m.sp3(sa):
            if any(o2 == 2.0 and m.z[x] == 8 for x, o2 in m.nbrs[other].items()):
                return tab["3J_sp3_aldehyde"]
            return tab["3J_sp3_vinyl"]
        # sp2-sp2 single bond (diene, enal)
        if any(o2 == 2.0 and m.z[x] == 8 for x, o2 in list(m.nbrs[a].items()) + list(m.nbrs[b].items())):
            return tab["3J_sp2_aldehyde"]
        return tab["3J_sp2_sp2_single"]
    if d == 2:
        p = m.path(a, b)
        mid = p[1]
        if m.arom[a] and m.arom[b] and m.arom[mid]:
            return tab["4J_aromatic_meta"]
        if m.nbrs[a].get(mid) == 3.0 or m.nbrs[b].get(mid) == 3.0:
            return tab["4J_alkyne"]
        return 0.0
    if d == 3:
        p = m.path(a, b)
        if all(m.arom[x] for x in p) and m.mol.GetRingInfo().NumAtomRings(p[1]) and \
                m.mol.GetRingInfo().MinAtomRingSize(a) == 6:
            # para if a and b sit in one six-membered ring
            ri = m.mol.GetRingInfo()
            if any(a in r and b in r and len(r) == 6 for r in ri.AtomRings()):
                return tab["5J_aromatic_para"]
            return 0.0
        # allylic: H-C(sp3 or sp2)-C=C-H
        o1, o2, o3 = m.nbrs[p[0]][p[1]], m.nbrs[p[1]][p[2]], m.nbrs[p[2]][p[3]]
        if (o2 == 2.0 and o1 == 1.0 and o3 == 1.0) and not (m.arom[p[1]] or m.arom[p[2]]):
            return tab["4J_allylic"] if (m.sp3(p[0]) != m.sp3(p[3])) else 0.0
        if o1 == 3.0 or o2 == 3.0 or o3 == 3.0:
            return 0.0
        return 0.0
    return 0.0


def _alkene_vicinal(m: _Mol, tab: dict[str, float], a: int, b: int, first_order: tuple) -> float:
    """cis or trans across a C=C.

    The 1H perception has already decided which proton of a =CH2 is cis to which
    (its first-order partner lists carry one vinyl 3J each); that choice is used, so
    exact and first-order spectra put the same J on the same pair. Otherwise the
    bond stereo decides, else the cis/trans mean.
    """
    from rdkit import Chem

    vic = (tab["3J_vinyl_cis"], tab["3J_vinyl_trans"])
    for lst in first_order:
        found = [j for n, j in lst if n == 1 and any(abs(j - v) < 1e-9 for v in vic)]
        if len(found) == 1:
            return found[0]
    bond = m.mol.GetBondBetweenAtoms(a, b)
    stereo = bond.GetStereo()
    cis = {Chem.BondStereo.STEREOZ, Chem.BondStereo.STEREOCIS}
    trans = {Chem.BondStereo.STEREOE, Chem.BondStereo.STEREOTRANS}
    # terminal =CH2 or a CH=CH with one H each: which H is cis follows from the stereo atoms
    if m.nh[a] == 1 and m.nh[b] == 1:
        sub_a = [x for x in m.nbrs[a] if x != b]
        sub_b = [x for x in m.nbrs[b] if x != a]
        if sub_a and sub_b and stereo in cis | trans:
            # stereo refers to the substituents: H's cis when substituents are cis
            return tab["3J_vinyl_cis"] if stereo in cis else tab["3J_vinyl_trans"]
        if m.mol.GetRingInfo().NumBondRings(bond.GetIdx()):
            return tab["3J_vinyl_cis"]  # ring alkenes are cis
        return (tab["3J_vinyl_cis"] + tab["3J_vinyl_trans"]) / 2.0
    vic = (tab["3J_vinyl_cis"], tab["3J_vinyl_trans"])
    for lst in first_order:
        found = [j for n, j in lst if n == 1 and any(abs(j - v) < 1e-9 for v in vic)]
        if len(found) == 1:
            return found[0]
    return (tab["3J_vinyl_cis"] + tab["3J_vinyl_trans"]) / 2.0


def _fluorine(m: _Mol, tab: dict[str, float], a: int) -> tuple[list[int], list[float]]:
    """(number of equivalent F, J) per fluorine set coupled to the H on atom a."""
    if m.z[a] != 6:
        return [], []
    out_n, out_j = [], []
    nf = sum(1 for x in m.nbrs[a] if m.z[x] == 9)
    if nf:
        out_n.append(nf)
        out_j.append(tab["2J_HF"])
    for y in m.nbrs[a]:
        if m.z[y] != 6:
            continue
        k = sum(1 for x in m.nbrs[y] if m.z[x] == 9)
        if k:
            if m.arom[a] and m.arom[y]:
                out_n.append(k)
                out_j.append(tab["3J_HF_aromatic_ortho"])
            else:
                out_n.append(k)
                out_j.append(tab["3J_HF"] if k == 1 else tab["3J_HF_CF2"])
    return out_n, out_j
