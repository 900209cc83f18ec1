"""Intermediates, bond edits and the kinetic network that turns them into product weights.

Molecules are edited as RDKit ``RWMol`` with explicit hydrogen counts on every atom, so an
edit (protonate, shift, capture, eliminate) is a few atom/bond changes followed by one
sanitisation. Atom indices of the substrate survive every edit (new atoms are appended), which
lets the pathway text name substrate atoms ("C2") throughout.

The network model
-----------------
Each cation (or radical) is a node. From a node the channels are, with rates relative to
nucleophile capture:

* capture by each nucleophile ``nu`` at each resonance terminus ``t``:
  ``w_nu * s * f_t`` where ``f_t`` is the kinetic terminus share (``capture.alpha_termini``)
  and ``s`` is ``capture.primary_capture_scale`` for primary/methyl cations, else 1;
* E1 elimination: ``w_E1`` split over the alkenes by Zaitsev weights (``elimination.alpha``);
* each 1,2-shift to a cation ``dE`` away: ``aptitude(group) * exp(-shift.alpha * dE / RT)``,
  taken if ``dE <= shift.isoenergetic_kcal_mol`` (downhill or isoenergetic).

Entry weights (protonation of each alkene carbon, ionisation of each C-OH) feed the nodes;
the product weights are the absorption probabilities of this Markov chain, solved exactly
(cycles of isoenergetic shifts included) with one linear solve.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from rdkit import Chem

from ..errors import SpecmatchError
from ..structures import mol_smiles
from .scales import (
    alkene_dh,
    is_small_bridgehead,
    cation_centre_score,
    cation_terms,
    migratory_aptitudes,
    prior_parameters,
    radical_centre_score,
    radical_terms,
    ring_strain,
)

SINGLE, DOUBLE = Chem.BondType.SINGLE, Chem.BondType.DOUBLE


# ------------------------------------------------------------------ molecule edits
def prepare(mol: Chem.Mol) -> Chem.Mol:
    """Copy with explicit H counts on every atom (so edits control hydrogens exactly)."""
    rw = Chem.RWMol(mol)
    for a in rw.GetAtoms():
        n = a.GetTotalNumHs()
        a.SetNoImplicit(True)
        a.SetNumExplicitHs(n)
        a.SetIntProp("n", a.GetIdx() + 1)  # substrate numbering, survives every edit
    Chem.SanitizeMol(rw)
    return rw.GetMol()


def lab(mol: Chem.Mol, idx: int) -> str:
    """Atom label in substrate numbering, e.g. 'C3' (atoms from the reagent: element only)."""
    a = mol.GetAtomWithIdx(idx)
    return f"{a.GetSymbol()}{a.GetIntProp('n')}" if a.HasProp("n") else a.GetSymbol()


def _finish(rw: Chem.RWMol) -> Chem.Mol | None:
    try:
        Chem.SanitizeMol(rw)
    except Exception:  # an edit that makes no valid molecule is simply not a pathway
        return None
    return rw.GetMol()


def _add_h(atom: Chem.Atom, n: int) -> None:
    atom.SetNumExplicitHs(atom.GetNumExplicitHs() + n)


def is_alkene_bond(bond: Chem.Bond) -> bool:
    return (bond.GetBondType() == DOUBLE and not bond.GetIsAromatic()
            and bond.GetBeginAtom().GetAtomicNum() == 6 and bond.GetEndAtom().GetAtomicNum() == 6)


def alkene_bonds(mol: Chem.Mol) -> list[tuple[int, int]]:
    return [(b.GetBeginAtomIdx(), b.GetEndAtomIdx()) for b in mol.GetBonds() if is_alkene_bond(b)]


def add_across(mol: Chem.Mol, a: int, b: int, electrophile: str, *, radical: bool = False) -> Chem.Mol | None:
    """Electrophile (``"H"`` or an element symbol) onto carbon a; b becomes the cation (or radical)."""
    rw = Chem.RWMol(mol)
    rw.GetBondBetweenAtoms(a, b).SetBondType(SINGLE)
    if electrophile == "H":
        _add_h(rw.GetAtomWithIdx(a), 1)
    else:
        new = Chem.Atom(electrophile)
        new.SetNoImplicit(True)
        rw.AddBond(a, rw.AddAtom(new), SINGLE)
    if radical:
        rw.GetAtomWithIdx(b).SetNumRadicalElectrons(1)
    else:
        rw.GetAtomWithIdx(b).SetFormalCharge(1)
    return _finish(rw)


def ionise(mol: Chem.Mol, carbon: int, oxygen: int) -> Chem.Mol | None:
    """Loss of water from the protonated C-OH: the carbon becomes a cation (O atom removed)."""
    rw = Chem.RWMol(mol)
    rw.RemoveBond(carbon, oxygen)
    rw.GetAtomWithIdx(carbon).SetFormalCharge(1)
    rw.RemoveAtom(oxygen)  # later indices shift by one; labels use the "n" property (see lab)
    return _finish(rw)


@dataclass(frozen=True)
class Nucleophile:
    """A nucleophile present in the flask and how fast it captures (relative weight)."""

    name: str                  # "Cl-", "H2O", "MeOH", "H (from HBr)"
    kind: str                  # "halide" | "water" | "alcohol" | "solvent" | "hydrogen"
    weight: float
    symbol: str = ""           # halide element
    mol: Chem.Mol | None = None  # prepared alcohol
    oxygen: int = -1           # OH oxygen of the alcohol


def capture(mol: Chem.Mol, c: int, nu: Nucleophile) -> Chem.Mol | None:
    """Bond the nucleophile to carbon c and neutralise it."""
    if nu.kind in ("alcohol", "solvent"):
        rw = Chem.RWMol(Chem.CombineMols(mol, nu.mol))
        o = mol.GetNumAtoms() + nu.oxygen
        rw.AddBond(c, o, SINGLE)
        _add_h(rw.GetAtomWithIdx(o), -1)
    else:
        rw = Chem.RWMol(mol)
        if nu.kind == "hydrogen":
            _add_h(rw.GetAtomWithIdx(c), 1)
        else:
            new = Chem.Atom(nu.symbol if nu.kind == "halide" else "O")
            new.SetNoImplicit(True)
            new.SetNumExplicitHs(1 if nu.kind == "water" else 0)
            rw.AddBond(c, rw.AddAtom(new), SINGLE)
    atom = rw.GetAtomWithIdx(c)
    atom.SetFormalCharge(0)
    atom.SetNumRadicalElectrons(0)
    return _finish(rw)


def _lose_proton_beside(mol: Chem.Mol, c: int, x: int) -> Chem.Mol | None:
    """Loss of H+ from atom `x` bonded to the cation carbon `c`: a C=X bond, no charge."""
    rw = Chem.RWMol(mol)
    _add_h(rw.GetAtomWithIdx(x), -1)
    rw.GetBondBetweenAtoms(c, x).SetBondType(DOUBLE)
    rw.GetAtomWithIdx(c).SetFormalCharge(0)
    return _finish(rw)


def to_carbonyl(mol: Chem.Mol, c: int, oxygen: int) -> Chem.Mol | None:
    """Oxocarbenium ion with an O-H: loss of H+ from O gives the C=O compound (pinacol-type end)."""
    return _lose_proton_beside(mol, c, oxygen)


def eliminate(mol: Chem.Mol, c: int, beta: int) -> Chem.Mol | None:
    """E1: lose H+ from the beta carbon, C=C between c and beta."""
    return _lose_proton_beside(mol, c, beta)


def shift(mol: Chem.Mol, c: int, beta: int, group: int) -> Chem.Mol | None:
    """1,2-shift of H (group = -1) or of the atom `group` from `beta` to the cation carbon `c`."""
    rw = Chem.RWMol(mol)
    if group < 0:
        _add_h(rw.GetAtomWithIdx(beta), -1)
        _add_h(rw.GetAtomWithIdx(c), 1)
    else:
        rw.RemoveBond(beta, group)
        rw.AddBond(c, group, SINGLE)
    rw.GetAtomWithIdx(c).SetFormalCharge(0)
    rw.GetAtomWithIdx(beta).SetFormalCharge(1)
    return _finish(rw)


# ------------------------------------------------------------------ intermediates
@dataclass
class Intermediate:
    """A cation or radical: its resonance contributors and its energy on the empirical scale."""

    key: str
    forms: list[tuple[Chem.Mol, int]]    # (contributor, centre atom)
    energy: float
    cls: str
    substitution: str
    radical: bool
    local: list[float]                    # local energy of each contributor (terminus capture)
    depth: int = 0
    expand: bool = True
    xtb_energy: float | None = None

    @property
    def mol(self) -> Chem.Mol:
        return self.forms[0][0]

    @property
    def centres(self) -> list[int]:
        return [c for _, c in self.forms]


def _resonance_forms(mol: Chem.Mol, centre: int, radical: bool, limit: int = 6) -> list[tuple[Chem.Mol, int]]:
    forms = {centre: mol}
    queue = [centre]
    while queue and len(forms) < limit:
        c = queue.pop(0)
        m = forms[c]
        atom = m.GetAtomWithIdx(c)
        for bond in atom.GetBonds():
            nb = bond.GetOtherAtom(atom)
            if bond.GetBondType() != SINGLE or nb.GetIsAromatic():
                continue
            for b2 in nb.GetBonds():
                d = b2.GetOtherAtom(nb)
                if d.GetIdx() == c or not is_alkene_bond(b2) or d.GetIdx() in forms:
                    continue
                rw = Chem.RWMol(m)
                rw.GetBondBetweenAtoms(c, nb.GetIdx()).SetBondType(DOUBLE)
                rw.GetBondBetweenAtoms(nb.GetIdx(), d.GetIdx()).SetBondType(SINGLE)
                if radical:
                    rw.GetAtomWithIdx(c).SetNumRadicalElectrons(0)
                    rw.GetAtomWithIdx(d.GetIdx()).SetNumRadicalElectrons(1)
                else:
                    rw.GetAtomWithIdx(c).SetFormalCharge(0)
                    rw.GetAtomWithIdx(d.GetIdx()).SetFormalCharge(1)
                new = _finish(rw)
                if new is not None:
                    forms[d.GetIdx()] = new
                    queue.append(d.GetIdx())
    return [(m, c) for c, m in forms.items()]


def make_intermediate(mol: Chem.Mol, centre: int, *, radical: bool = False) -> Intermediate:
    forms = _resonance_forms(mol, centre, radical)
    score = radical_centre_score if radical else cation_centre_score
    scores = [score(m, c) for m, c in forms]
    local = [s.energy for s in scores]
    best = int(np.argmin(local))
    energy = local[best]
    cls = scores[best].cls
    if len(forms) > 1:
        if radical:
            energy += radical_terms()["allylic_resonance"]
        else:
            t = cation_terms()
            energy += t["allylic_resonance"] + t["extra_conjugation"] * (len(forms) - 2)
        cls = cls.replace(" radical", "") + (" allylic radical" if radical else " allylic")
    if not radical:
        energy += ring_strain(mol)
        cls += " cation"
    key = min(mol_smiles(m, isomeric=False) for m, _ in forms)
    return Intermediate(key=key, forms=forms, energy=energy, cls=cls, substitution=scores[best].substitution,
                        radical=radical, local=local)


# ------------------------------------------------------------------ shifts
@dataclass(frozen=True)
class Shift:
    source: str
    target: str
    kind: str          # migratory-aptitude group: hydride, methyl, ..., ring_bond
    text: str          # "1,2-hydride shift C3 -> C2"
    label: str         # "1,2-hydride shift" | "ring expansion (4 -> 5)" | ...
    d_energy: float = 0.0


def _group_kind(mol: Chem.Mol, beta: int, group: int) -> str:
    if group < 0:
        return "hydride"
    bond = mol.GetBondBetweenAtoms(beta, group)
    if bond.IsInRing():
        ri = mol.GetRingInfo()
        small = ri.IsBondInRingOfSize(bond.GetIdx(), 3) or ri.IsBondInRingOfSize(bond.GetIdx(), 4)
        return "ring_bond_small" if small else "ring_bond"
    g = mol.GetAtomWithIdx(group)
    if g.GetIsAromatic():
        return "aryl"
    if any(b.GetBondType() == DOUBLE for b in g.GetBonds()):
        return "vinyl"
    n = sum(1 for x in g.GetNeighbors() if x.GetIdx() != beta and x.GetAtomicNum() == 6)
    return ("methyl", "primary_alkyl", "secondary_alkyl", "tertiary_alkyl")[min(n, 3)]


_KIND_WORDS = {"hydride": "hydride", "methyl": "methyl", "primary_alkyl": "alkyl", "secondary_alkyl": "alkyl",
               "tertiary_alkyl": "alkyl", "aryl": "aryl", "vinyl": "vinyl"}


def _smallest_ring_with_bond(mol: Chem.Mol, a: int, b: int) -> int:
    bond = mol.GetBondBetweenAtoms(a, b)
    for k in range(3, 30):
        if mol.GetRingInfo().IsBondInRingOfSize(bond.GetIdx(), k):
            return k
    return 0


def candidate_shifts(inter: Intermediate) -> list[tuple[Chem.Mol, int, int, str, str]]:
    """All 1,2-shifts from every contributor centre: (new mol, new centre, group, kind, "label|text")."""
    out = []
    for mol, c in inter.forms:
        catom = mol.GetAtomWithIdx(c)
        cn = {n.GetIdx() for n in catom.GetNeighbors()}
        for beta_atom in catom.GetNeighbors():
            beta = beta_atom.GetIdx()
            if beta_atom.GetAtomicNum() != 6 or beta_atom.GetIsAromatic() or beta_atom.GetFormalCharge() != 0:
                continue
            if any(b.GetBondType() != SINGLE for b in beta_atom.GetBonds()):
                continue
            groups = [-1] if beta_atom.GetTotalNumHs() > 0 else []
            groups += [g.GetIdx() for g in beta_atom.GetNeighbors()
                       if g.GetIdx() != c and g.GetAtomicNum() == 6 and g.GetIdx() not in cn]
            for g in groups:
                kind = _group_kind(mol, beta, g)
                new = shift(mol, c, beta, g)
                if new is None:
                    continue
                if kind.startswith("ring_bond"):
                    before = _smallest_ring_with_bond(mol, beta, g)
                    after = _smallest_ring_with_bond(new, c, g)
                    word = "expansion" if after > before else "contraction" if after < before else "bond shift"
                    if after == before:  # bicyclic Wagner-Meerwein: skeleton changes, ring size does not
                        label = "ring bond shift (Wagner-Meerwein)"
                    else:
                        label = f"ring {word} ({before} -> {after})"
                    text = (f"1,2-shift of ring bond {lab(mol, beta)}-{lab(mol, g)} to {lab(mol, c)}: "
                            f"ring {word} {before} -> {after}")
                else:
                    label = f"1,2-{_KIND_WORDS[kind]} shift"
                    src = f" ({lab(mol, g)})" if g >= 0 else ""
                    text = f"1,2-{_KIND_WORDS[kind]} shift{src} from {lab(mol, beta)} to {lab(mol, c)}"
                out.append((new, beta, g, kind, label + "|" + text))
    return out


# ------------------------------------------------------------------ network
@dataclass
class Entry:
    key: str
    weight: float
    text: str
    info: dict = field(default_factory=dict)


@dataclass
class Channel:
    """An absorbing exit of a node: a product."""

    product: Chem.Mol
    rate: float
    kind: str          # "capture" | "E1"
    text: str
    info: dict = field(default_factory=dict)


class Network:
    """Cations (or radicals) reachable from the entries by up to `max_shifts` 1,2-shifts."""

    def __init__(self, *, max_shifts: int, explore_window: float, max_nodes: int) -> None:
        self.max_shifts = max_shifts
        self.window = explore_window
        self.max_nodes = max_nodes
        self.nodes: dict[str, Intermediate] = {}
        self.shifts: dict[str, list[Shift]] = {}
        self.entries: list[Entry] = []

    def add_entry(self, inter: Intermediate, weight: float, text: str, *, expand: bool = True, **info) -> None:
        is_new = inter.key not in self.nodes
        key = self._add(inter, 0)
        node = self.nodes[key]
        node.expand = expand if is_new else (node.expand or expand)
        self.entries.append(Entry(key, weight, text, info))

    def _add(self, inter: Intermediate, depth: int) -> str:
        old = self.nodes.get(inter.key)
        if old is None:
            if len(self.nodes) >= self.max_nodes:
                raise SpecmatchError(
                    f"the enumeration exceeds {self.max_nodes} intermediates (explosion cap); "
                    "use a smaller --max-shifts or a smaller substrate")
            inter.depth = depth
            self.nodes[inter.key] = inter
            return inter.key
        old.depth = min(old.depth, depth)
        return old.key

    def expand(self) -> None:
        """Breadth-first 1,2-shifts up to max_shifts, within the exploration window."""
        frontier = [k for k, n in self.nodes.items() if n.expand]
        done: set[str] = set()
        while frontier:
            nxt = []
            for key in frontier:
                node = self.nodes[key]
                if key in done or node.radical or node.depth >= self.max_shifts or not node.expand:
                    continue
                done.add(key)
                seen: set[str] = set()
                for new, beta, _g, kind, labtext in candidate_shifts(node):
                    target = make_intermediate(new, beta)
                    if target.key == key or target.key in seen:
                        continue  # degenerate shift (same constitution) or already found
                    d_e = target.energy - node.energy
                    if d_e > self.window:
                        continue
                    seen.add(target.key)
                    tkey = self._add(target, node.depth + 1)
                    label, text = labtext.split("|")
                    self.shifts.setdefault(key, []).append(Shift(key, tkey, kind, text, label))
                    if tkey not in done:
                        nxt.append(tkey)
            frontier = nxt

    # -------------------------------------------------------------- solve
    def solve(self, channels_for, *, iso: float, alpha: float, rt: float) -> "Solution":
        """Absorption probabilities of the chain; `channels_for(node)` gives its product channels."""
        keys = list(self.nodes)
        index = {k: i for i, k in enumerate(keys)}
        n = len(keys)
        apt = migratory_aptitudes()
        rates = np.zeros((n, n))
        shift_info: dict[tuple[int, int], Shift] = {}
        exits: list[list[Channel]] = []
        for k in keys:
            exits.append(channels_for(self.nodes[k]))
        for k, lst in self.shifts.items():
            i = index[k]
            ei = self._energy(self.nodes[k])
            for s in lst:
                j = index[s.target]
                d_e = self._energy(self.nodes[s.target]) - ei
                if d_e > iso:
                    continue  # uphill after refinement: not taken
                r = apt[s.kind] * math.exp(-alpha * d_e / rt)
                if r > rates[i, j]:
                    rates[i, j] = r
                    shift_info[(i, j)] = Shift(s.source, s.target, s.kind, s.text, s.label, d_e)
        out_total = rates.sum(axis=1) + np.array([sum(c.rate for c in ex) for ex in exits])
        out_total[out_total == 0] = 1.0
        p = rates / out_total[:, None]
        x0 = np.zeros(n)
        for e in self.entries:
            x0[index[e.key]] += e.weight
        visits = np.linalg.solve(np.eye(n) - p.T, x0)
        return Solution(keys, index, visits, p, exits, out_total, shift_info, self)

    @staticmethod
    def _energy(node: Intermediate) -> float:
        return node.energy if node.xtb_energy is None else node.xtb_energy


@dataclass
class Solution:
    keys: list[str]
    index: dict[str, int]
    visits: np.ndarray
    p: np.ndarray
    exits: list[list[Channel]]
    out_total: np.ndarray
    shift_info: dict[tuple[int, int], Shift]
    net: Network

    def products(self) -> list[tuple[Channel, float, int]]:
        """(channel, absolute weight, node index) for every exit with non-zero flux."""
        out = []
        for i, ex in enumerate(self.exits):
            for ch in ex:
                w = self.visits[i] * ch.rate / self.out_total[i]
                out.append((ch, float(w), i))
        return out

    def path_to(self, i: int) -> tuple[Entry | None, list[Shift]]:
        """Dominant route to node i: the entry and the shifts taken (greedy back-tracking)."""
        chain: list[Shift] = []
        seen = {i}
        entry_flux = {}
        for e in self.net.entries:
            entry_flux[self.index[e.key]] = entry_flux.get(self.index[e.key], 0.0) + e.weight
        while True:
            best_j, best_f = None, entry_flux.get(i, 0.0)
            for (a, b), s in self.shift_info.items():
                if b == i and a not in seen:
                    f = self.visits[a] * self.p[a, b]
                    if f > best_f:
                        best_j, best_f = a, f
            if best_j is None:
                break
            chain.append(self.shift_info[(best_j, i)])
            i = best_j
            seen.add(i)
        chain.reverse()
        entry = max((e for e in self.net.entries if self.index[e.key] == i), key=lambda e: e.weight, default=None)
        return entry, chain


def terminus_shares(node: Intermediate) -> list[float]:
    """Kinetic capture share of each resonance terminus (more stable contributor captured faster)."""
    if len(node.forms) == 1:
        return [1.0]
    par = prior_parameters()
    a, rt = par["capture"]["alpha_termini"], par["thermal"]["rt_kcal_mol"]
    lo = min(node.local)
    w = [math.exp(-a * (e - lo) / rt) for e in node.local]
    s = sum(w)
    return [x / s for x in w]


def e1_alkenes(node: Intermediate, rt: float, alpha: float | None = None) -> list[tuple[Chem.Mol, float, str]]:
    """Alkenes from loss of a beta proton, each with its Zaitsev share and a description.

    Weight of an alkene: exp(-alpha * dH_hydrogenation / RT), alpha from ``elimination.alpha``
    or, under heat (dehydration), ``elimination.alpha_heat``.
    """
    par = prior_parameters()["elimination"]
    found: dict[str, list] = {}
    for mol, c in node.forms:
        catom = mol.GetAtomWithIdx(c)
        for beta in catom.GetNeighbors():
            if beta.GetAtomicNum() != 6 or beta.GetIsAromatic() or beta.GetTotalNumHs() == 0:
                continue
            if any(b.GetBondType() != SINGLE for b in beta.GetBonds()):
                continue
            bond = mol.GetBondBetweenAtoms(c, beta.GetIdx())
            if mol.GetRingInfo().IsBondInRingOfSize(bond.GetIdx(), 3) or _bredt(mol, c, beta.GetIdx()):
                continue
            new = eliminate(mol, c, beta.GetIdx())
            if new is None:
                continue
            key = mol_smiles(new, isomeric=False)
            if key not in found:
                dh = alkene_dh(new, c, beta.GetIdx())
                found[key] = [new, dh, f"loss of H+ from {lab(mol, beta.GetIdx())}: "
                                       f"{lab(mol, c)}={lab(mol, beta.GetIdx())}"]
    if not found:
        return []
    lo = min(v[1] for v in found.values())
    a = par["alpha"] if alpha is None else alpha
    w = {k: math.exp(-a * (v[1] - lo) / rt) for k, v in found.items()}
    s = sum(w.values())
    return [(v[0], w[k] / s, v[2] + (" (most substituted, Zaitsev)" if v[1] == lo and len(found) > 1 else ""))
            for k, v in found.items()]


def _bredt(mol: Chem.Mol, a: int, b: int) -> bool:
    """Bredt's rule: no C=C at a bridgehead of a small bridged bicycle (rings of < 8 atoms)."""
    return is_small_bridgehead(mol, a) or is_small_bridgehead(mol, b)
