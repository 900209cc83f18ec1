"""One molecular graph view, read once from RDKit, shared by the 13C and 1H predictors.

Both predictors walk the molecule atom by atom many times; an RDKit call per step costs
far more than a Python list lookup, so everything they ask about atoms and bonds is read
here once per :class:`~specmatch.structures.Structure` into plain lists (and cached on
the structure: :func:`graph_of` builds it at most once).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from rdkit import Chem

from .molecule import DEUTERIUM_PROP

if TYPE_CHECKING:
    from .molecule import Structure

_BT = Chem.BondType
#: bond order by type (aromatic 1.5); other types (dative, ...) count as single
ORDER = {_BT.SINGLE: 1.0, _BT.DOUBLE: 2.0, _BT.TRIPLE: 3.0, _BT.AROMATIC: 1.5}


class MolGraph:
    """Per-molecule arrays (index = heavy-atom index).

    Attributes
    ----------
    n : int
        Number of heavy atoms.
    z, sym, arom : list
        Atomic number, element symbol, aromatic flag.
    nh_total : list of int
        Attached hydrogens, D included (what decides an increment class).
    nh : list of int
        Attached protons seen in 1H (D excluded).
    bonds : list of list of (int, float)
        Per atom, (neighbour, bond order) with 1.5 for aromatic bonds, in RDKit bond order.
    nbrs, deg : list
        Neighbour indices (same order as ``bonds``) and their number.
    double_bonds : dict
        ``(i, j)`` -> RDKit bond for every double bond, both directions (E/Z lookup).
    rings : list of tuple of int
        RDKit's smallest set of smallest rings (atom indices).
    atom_rings : list of list of int
        Per atom, the indices into ``rings`` of the rings holding it.
    min_ring_size, n_rings : list of int
        Smallest ring size holding the atom (0: none) and how many rings hold it.
    ring_info : rdkit RingInfo
    dist : list of list of int
        Topological distance matrix (built on first use).
    """

    __slots__ = ("mol", "n", "z", "sym", "arom", "nh_total", "nh", "bonds", "nbrs", "deg", "double_bonds",
                 "rings", "atom_rings", "min_ring_size", "n_rings", "ring_info", "_dist")

    def __init__(self, mol: Chem.Mol) -> None:
        self.mol = mol
        n = self.n = mol.GetNumAtoms()
        # index access: RDKit's sequence wrappers are slow for small molecules
        atoms = [mol.GetAtomWithIdx(i) for i in range(n)]
        self.z = [a.GetAtomicNum() for a in atoms]
        self.sym = [a.GetSymbol() for a in atoms]
        self.arom = [a.GetIsAromatic() for a in atoms]
        self.nh_total = [a.GetTotalNumHs() for a in atoms]
        self.nh = self.nh_total if not mol.HasProp(DEUTERIUM_PROP) else [
            h - (a.GetIntProp(DEUTERIUM_PROP) if a.HasProp(DEUTERIUM_PROP) else 0)
            for h, a in zip(self.nh_total, atoms)]
        bonds: list[list[tuple[int, float]]] = [[] for _ in range(n)]
        double: dict[tuple[int, int], Chem.Bond] = {}
        order = ORDER
        for k in range(mol.GetNumBonds()):
            b = mol.GetBondWithIdx(k)
            i, j = b.GetBeginAtomIdx(), b.GetEndAtomIdx()
            o = order.get(b.GetBondType(), 1.0)
            bonds[i].append((j, o))
            bonds[j].append((i, o))
            if o == 2.0:
                double[(i, j)] = double[(j, i)] = b
        self.bonds = bonds
        self.double_bonds = double
        self.nbrs = [[j for j, _ in bl] for bl in bonds]
        self.deg = [len(v) for v in self.nbrs]
        ri = self.ring_info = mol.GetRingInfo()
        self.rings = [tuple(r) for r in ri.AtomRings()]
        atom_rings: list[list[int]] = [[] for _ in range(n)]
        for k, r in enumerate(self.rings):
            for x in r:
                atom_rings[x].append(k)
        self.atom_rings = atom_rings
        min_size = [0] * n
        for r in self.rings:
            size = len(r)
            for x in r:
                if not min_size[x] or size < min_size[x]:
                    min_size[x] = size
        self.min_ring_size = min_size
        self.n_rings = [len(ar) for ar in atom_rings]
        self._dist: list[list[int]] | None = None

    @property
    def dist(self) -> list[list[int]]:
        if self._dist is None:
            self._dist = _distances(self.nbrs)
        return self._dist

    def same_ring(self, i: int, j: int) -> bool:
        """True if some ring (of the smallest set) holds both atoms."""
        rings = self.rings
        return any(j in rings[k] for k in self.atom_rings[i])


#: distance of atoms in different fragments (as RDKit's distance matrix)
UNREACHABLE = 100_000_000


def _distances(nbrs: list[list[int]]) -> list[list[int]]:
    """Topological distance matrix by breadth-first search from every atom.

    The same numbers as ``Chem.GetDistanceMatrix`` (as integers) without loading numpy,
    which the batch commands otherwise never need; for molecules of the size specmatch
    handles it is as fast.
    """
    n = len(nbrs)
    out = []
    for start in range(n):
        d = [UNREACHABLE] * n
        d[start] = 0
        frontier = [start]
        k = 0
        while frontier:
            k += 1
            nxt = []
            for x in frontier:
                for y in nbrs[x]:
                    if d[y] == UNREACHABLE:
                        d[y] = k
                        nxt.append(y)
            frontier = nxt
        out.append(d)
    return out


def graph_of(structure: Structure) -> MolGraph:
    """The graph view of a structure, built on first use and kept with it."""
    memo = structure._memo
    g = memo.get("graph")
    if g is None:
        g = memo["graph"] = MolGraph(structure.mol)
    return g
