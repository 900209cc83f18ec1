"""Diastereomer-sensitive layer on top of the increment prediction.

The additive tables know the constitution only, so cis/trans and meso/dl isomers would get
identical spectra. For a molecule whose relative configuration is specified and matters
(:func:`needs_stereo_layer`), this module builds a 3D conformer ensemble (RDKit ETKDG
embedding, MMFF94 minimisation, Boltzmann weights at 298 K; cached per canonical isomeric
SMILES) and derives from it:

* 13C: gamma-gauche steric shifts (every heavy atom three bonds away that sits gauche or syn)
  and the axial-substituent alpha/beta effects of six-membered rings;
* 1H: axial ring C-H upfield of equatorial;
* vicinal 3J(H,H) from the Haasnoot-de Leeuw-Altona equation (Tetrahedron 1980, 36, 2783)
  with Huggins electronegativities and the beta-substituent correction, averaged over the
  ensemble, so multiplicities and widths follow the geometry (an axial methine shows its
  large axial-axial couplings).

The increment tables were fitted on molecules of every configuration, so the shift
corrections are applied *relative to the mean over the diastereomers* of the same
constitution: for a cis/trans pair the two corrections are equal and opposite and the table
value stays the centre. Every number is a row of ``tables/stereo.csv`` with its source.
"""

from __future__ import annotations

import csv
import itertools
import math
from dataclasses import dataclass, replace
from functools import lru_cache
from pathlib import Path

import numpy as np
from rdkit import Chem

from ..structures import Structure, enantiomer_key, mirror_image, mol_smiles
from .types import Prediction, ProtonGroup
from .multiplicity import multiplicity

_TABLE = Path(__file__).with_name("tables") / "stereo.csv"
_XI = -1.0  # HLA orientation sign: with this sign trans-4-tert-butylcyclohexanol gets 11.1/4.7 Hz, lit. 11.0/4.3 (from memory)
#: diastereomers averaged for the reference (the molecule itself first); more centres than
#: this are rare in the alkene-addition products the tool is for
MAX_DIASTEREOMERS = 4
_X_SYMBOLS = {"F", "Cl", "Br", "I", "N", "S"}


@lru_cache(maxsize=1)
def parameters() -> dict[str, float]:
    """The stereo-layer parameters (``tables/stereo.csv``), by name."""
    with open(_TABLE, newline="", encoding="utf-8") as fh:
        return {row["parameter"]: float(row["value"]) for row in csv.DictReader(fh)}


def needs_stereo_layer(structure: Structure) -> bool:
    """True if the relative configuration is specified and can change the spectrum.

    Two or more specified tetrahedral stereocentres, with at least one on a ring or two of
    them bonded to each other (1,2-relation), in a molecule without fused or bridged rings (the
    corrections are parametrised on simple rings and chains; polycyclic skeletons are rigid in
    ways the increment tables already reflect). Everything else (the bulk of a batch) keeps the
    pure increment prediction, so the 3D layer costs nothing there.
    """
    spec = structure.specified_stereo
    if len(spec) < 2 or structure.n_heavy > parameters()["ensemble:max_heavy_atoms"]:
        return False
    mol = structure.mol
    ri = mol.GetRingInfo()
    if any(ri.NumAtomRings(i) > 1 for i in range(mol.GetNumAtoms())):
        return False
    if any(mol.GetAtomWithIdx(i).IsInRing() for i in spec):
        return True
    return any(mol.GetBondBetweenAtoms(a, b) is not None for a, b in itertools.combinations(spec, 2))


# ------------------------------------------------------------------ the ensemble
@dataclass(frozen=True)
class Ensemble:
    """Boltzmann-weighted MMFF94 conformers of one stereoisomer (atoms in SMILES order).

    Attributes
    ----------
    smiles : str
        Canonical isomeric SMILES it was built from.
    coords : numpy.ndarray
        (n_conformers, n_atoms, 3), hydrogens explicit and after the heavy atoms.
    weights : numpy.ndarray
        Boltzmann weights, summing to 1.
    energies : numpy.ndarray
        MMFF94 energies relative to the lowest, kcal/mol.
    """

    smiles: str
    mol: Chem.Mol
    coords: np.ndarray
    weights: np.ndarray
    energies: np.ndarray


@lru_cache(maxsize=1024)
def conformer_ensemble(smiles: str) -> Ensemble | None:
    """ETKDG + MMFF94 ensemble of a stereoisomer; None if it cannot be embedded or typed.

    Cached per canonical isomeric SMILES: every candidate list that contains the same
    diastereomer builds it once.
    """
    from rdkit.Chem import AllChem, rdMolDescriptors

    par = parameters()
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return None
    mol = Chem.AddHs(mol)
    n_rot = rdMolDescriptors.CalcNumRotatableBonds(mol)
    n_conf = int(min(par["ensemble:max_conformers"], par["ensemble:base_conformers"] + par["ensemble:per_rotor"] * n_rot))
    ps = AllChem.ETKDGv3()
    ps.randomSeed = 0x5EED  # reproducible predictions
    ps.pruneRmsThresh = 0.25
    ps.numThreads = 1       # the machine is shared; one thread is fast enough here
    ids = list(AllChem.EmbedMultipleConfs(mol, numConfs=n_conf, params=ps))
    if not ids:
        return None
    if not AllChem.MMFFHasAllMoleculeParams(mol):
        return None
    res = AllChem.MMFFOptimizeMoleculeConfs(mol, numThreads=1, maxIters=int(par["ensemble:max_iterations"]))
    energies = np.array([e for _, e in res], dtype=float)
    coords = np.array([mol.GetConformer(i).GetPositions() for i in ids])
    _label_methylene_h(mol, coords)
    # the same minimum found twice would count twice: keep one per energy level
    order = np.argsort(energies)
    keep: list[int] = []
    for i in order:
        if not keep or all(abs(energies[i] - energies[k]) > 0.02 for k in keep):
            keep.append(int(i))
    energies = energies[keep] - energies[keep].min()
    sel = energies <= par["ensemble:window"]
    energies, coords = energies[sel], coords[keep][sel]
    w = np.exp(-energies / par["ensemble:rt"])
    return Ensemble(smiles, mol, coords, w / w.sum(), energies)


def _label_methylene_h(mol: Chem.Mol, coords: np.ndarray) -> None:
    """Give the two H of every CH2 the same stereo role in every conformer (in place).

    The embedding treats a CH2's hydrogens as interchangeable, so "H 18" may be pro-R in one
    conformer and pro-S in the next; averaging per label would then mix the two. The H whose
    signed volume with the two heavy neighbours (in index order) is positive comes first.
    """
    for atom in mol.GetAtoms():
        hs = [n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() == 1]
        heavy = sorted(n.GetIdx() for n in atom.GetNeighbors() if n.GetAtomicNum() > 1)
        if len(hs) != 2 or len(heavy) != 2:
            continue
        c = atom.GetIdx()
        a, b = coords[:, heavy[0]] - coords[:, c], coords[:, heavy[1]] - coords[:, c]
        vol = (np.cross(a, b) * (coords[:, hs[0]] - coords[:, c])).sum(1)
        swap = vol < 0
        if swap.any():
            tmp = coords[swap, hs[0]].copy()
            coords[swap, hs[0]] = coords[swap, hs[1]]
            coords[swap, hs[1]] = tmp


def _dihedral(p: np.ndarray, a: int, b: int, c: int, d: int) -> np.ndarray:
    """Dihedral angles a-b-c-d in radians for every conformer (p: n_conf x n_atoms x 3)."""
    b0 = p[:, a] - p[:, b]
    b1 = p[:, c] - p[:, b]
    b2 = p[:, d] - p[:, c]
    b1n = b1 / np.linalg.norm(b1, axis=1)[:, None]
    v = b0 - (b0 * b1n).sum(1)[:, None] * b1n
    w = b2 - (b2 * b1n).sum(1)[:, None] * b1n
    x = (v * w).sum(1)
    y = (np.cross(b1n, v) * w).sum(1)
    return np.arctan2(y, x)


# ------------------------------------------------------------------ geometric features
@dataclass(frozen=True)
class Features:
    """What the ensemble says, per atom of the structure (input order)."""

    c13: dict[int, float]                   # carbon -> steric/axial shift term, ppm (absolute, not relative)
    h1: dict[int, float]                    # carbon -> axial-H term of its single H, ppm
    j3: dict[tuple[int, int], list[float]]  # (carbon, carbon) -> 3J of each H pair (own H x partner H)
    partner_h: dict[tuple[int, int], list[tuple[int, int]]]  # same keys: (own H, partner H) indices
    axial_h: dict[int, float]               # explicit H index -> axial fraction
    n_conformers: int


def _chi(sym: str) -> float:
    par = parameters()
    return par.get(f"chi:{sym}", par["chi:other"])


def _six_ring_axial(mol: Chem.Mol, p: np.ndarray) -> dict[tuple[int, int], np.ndarray]:
    """(ring atom, exocyclic neighbour) -> per-conformer axial indicator on six-membered rings.

    A bond is axial when it is nearly parallel to the ring's mean-plane normal
    (|cos| > 0.75; equatorial bonds sit near 0.3).
    """
    out: dict[tuple[int, int], np.ndarray] = {}
    for ring in mol.GetRingInfo().AtomRings():
        if len(ring) != 6:
            continue
        idx = list(ring)
        centre = p[:, idx].mean(axis=1)
        # normal of the mean plane: smallest singular vector per conformer
        normals = []
        for k in range(p.shape[0]):
            _, _, vt = np.linalg.svd(p[k, idx] - centre[k])
            normals.append(vt[-1])
        normal = np.array(normals)
        rset = set(idx)
        for a in idx:
            for nb in mol.GetAtomWithIdx(a).GetNeighbors():
                j = nb.GetIdx()
                if j in rset:
                    continue
                v = p[:, j] - p[:, a]
                cos = np.abs((v * normal).sum(1)) / np.linalg.norm(v, axis=1)
                out[(a, j)] = (cos > 0.75).astype(float)
    return out


def _hla(phi: np.ndarray, subs: list[tuple[float, np.ndarray]], n_subst: int) -> np.ndarray:
    par = parameters()
    n = min(max(n_subst, 2), 4)
    p1, p2, p3 = par[f"hla:P1:{n}"], par[f"hla:P2:{n}"], par[f"hla:P3:{n}"]
    p4, p5, p6 = par[f"hla:P4:{n}"], par[f"hla:P5:{n}"], math.radians(par[f"hla:P6:{n}"])
    j = p1 * np.cos(phi) ** 2 + p2 * np.cos(phi) + p3
    for dchi, xi in subs:
        j = j + dchi * (p4 + p5 * np.cos(xi * phi + p6 * abs(dchi)) ** 2)
    return j


def _features(mol3d: Chem.Mol, ens: Ensemble, to_input: list[int]) -> Features:
    """Ensemble averages, with atom numbers translated to the input structure."""
    par = parameters()
    p, w = ens.coords, ens.weights
    n_heavy = len(to_input)
    chi_h = _chi("H")
    c13: dict[int, float] = {}
    h1: dict[int, float] = {}
    axial = _six_ring_axial(mol3d, p)
    atoms = [mol3d.GetAtomWithIdx(i) for i in range(mol3d.GetNumAtoms())]
    heavy_nbrs = [[n.GetIdx() for n in a.GetNeighbors() if n.GetAtomicNum() > 1] for a in atoms]
    h_nbrs = [[n.GetIdx() for n in a.GetNeighbors() if n.GetAtomicNum() == 1] for a in atoms]

    def kind(sym: str) -> str:
        return "C" if sym == "C" else "O" if sym == "O" else "X"

    # gamma-gauche: heavy atoms three bonds away, gauche or syn
    for i in range(n_heavy):
        a = atoms[i]
        if a.GetAtomicNum() != 6 or a.GetIsAromatic():
            continue
        nh = a.GetTotalNumHs()
        key = {3: "CH3", 2: "CH2", 1: "CH", 0: "C"}.get(nh, "CH3")
        k_gauche = par[f"c13:gamma_gauche:{key}"]
        total = 0.0
        seen: set[int] = set()
        for x in heavy_nbrs[i]:
            for y in heavy_nbrs[x]:
                if y == i:
                    continue
                bond = mol3d.GetBondBetweenAtoms(x, y)
                if bond.GetBondType() != Chem.BondType.SINGLE or bond.GetIsAromatic():
                    continue
                for z in heavy_nbrs[y]:
                    if z in (x, i) or z in heavy_nbrs[i] or z in seen:
                        continue
                    seen.add(z)
                    phi = _dihedral(p, i, x, y, z)
                    gauche = (np.abs(phi) < math.radians(120.0)).astype(float)
                    total += k_gauche * float((w * gauche).sum())
        c13[i] = total
    # axial substituents on six-membered rings (alpha on the ring carbon, beta on its ring neighbours)
    for (ra, x), ind in axial.items():
        sym = atoms[x].GetSymbol()
        frac = float((w * ind).sum())
        if sym == "H":
            if len(h_nbrs[ra]) == 1:
                h1[ra] = par["h1:axial_ring_h"] * frac
            continue
        if atoms[ra].GetAtomicNum() != 6:
            continue
        k = kind(sym)
        c13[ra] = c13.get(ra, 0.0) + par[f"c13:alpha_axial:{k}"] * frac
        for nb in heavy_nbrs[ra]:
            if nb != x and atoms[nb].IsInRing() and atoms[nb].GetAtomicNum() == 6 and nb < n_heavy:
                c13[nb] = c13.get(nb, 0.0) + par[f"c13:beta_axial:{k}"] * frac
    axial_h = {h: float((w * ind).sum()) for (ra, h), ind in axial.items() if atoms[h].GetAtomicNum() == 1}

    # vicinal 3J(H,H) over sp3-sp3 C-C bonds (HLA with beta-substituent correction)
    beta_f = par["hla:beta_factor"]

    def dchi(s: int, frm: int) -> float:
        d = _chi(atoms[s].GetSymbol()) - chi_h
        beta = sum(_chi(atoms[t].GetSymbol()) - chi_h for t in [n.GetIdx() for n in atoms[s].GetNeighbors()]
                   if t != frm)
        return d - beta_f * beta

    j3: dict[tuple[int, int], list[float]] = {}
    pairs: dict[tuple[int, int], list[tuple[int, int]]] = {}
    for bond in mol3d.GetBonds():
        c1, c2 = bond.GetBeginAtomIdx(), bond.GetEndAtomIdx()
        if c1 >= n_heavy or c2 >= n_heavy or bond.GetBondType() != Chem.BondType.SINGLE:
            continue
        if atoms[c1].GetAtomicNum() != 6 or atoms[c2].GetAtomicNum() != 6:
            continue
        if atoms[c1].GetHybridization() != Chem.HybridizationType.SP3 or \
                atoms[c2].GetHybridization() != Chem.HybridizationType.SP3:
            continue
        if not h_nbrs[c1] or not h_nbrs[c2]:
            continue
        s1 = [s for s in heavy_nbrs[c1] if s != c2]
        s2 = [s for s in heavy_nbrs[c2] if s != c1]
        n_subst = len(s1) + len(s2)
        for h1i in h_nbrs[c1]:
            for h2i in h_nbrs[c2]:
                phi = _dihedral(p, h1i, c1, c2, h2i)
                subs = []
                for s in s1:
                    xi = _XI * np.sign(np.sin(_dihedral(p, s, c1, c2, h2i) - phi))
                    subs.append((dchi(s, c1), xi))
                for s in s2:
                    xi = _XI * np.sign(np.sin(_dihedral(p, h1i, c1, c2, s) - phi))
                    subs.append((dchi(s, c2), xi))
                jv = float((w * _hla(phi, subs, n_subst)).sum())
                for (a, b, ha, hb) in ((c1, c2, h1i, h2i), (c2, c1, h2i, h1i)):
                    key = (to_input[a], to_input[b])
                    j3.setdefault(key, []).append(jv)
                    pairs.setdefault(key, []).append((ha, hb))
        # a methyl rotates freely: its three H share one averaged coupling
        for a, b in ((c1, c2), (c2, c1)):
            if len(h_nbrs[b]) == 3 or len(h_nbrs[a]) == 3:
                key = (to_input[a], to_input[b])
                vals = j3[key]
                j3[key] = [float(np.mean(vals))] * len(vals)
    return Features({to_input[i]: v for i, v in c13.items()}, {to_input[i]: v for i, v in h1.items()},
                    j3, pairs, axial_h, len(w))


def _order_map(mol: Chem.Mol) -> tuple[str, list[int]]:
    """Canonical isomeric SMILES of `mol` and, per SMILES atom, the atom index in `mol`."""
    m = Chem.Mol(mol)
    smi = mol_smiles(m)  # also sets the output-order property read below
    order = [int(t) for t in m.GetProp("_smilesAtomOutputOrder").strip("[]").split(",") if t.strip()]
    return smi, order


@lru_cache(maxsize=1024)
def _features_for(smiles: str, to_input: tuple[int, ...]) -> Features | None:
    ens = conformer_ensemble(smiles)
    if ens is None or len(ens.weights) == 0:
        return None
    return _features(ens.mol, ens, list(to_input))


def _diastereomers(structure: Structure) -> list[Chem.Mol]:
    """The structure and every other diastereomer of its specified centres (enantiomers once)."""
    base = structure.mol
    # centres in canonical order, so the first MAX_DIASTEREOMERS are the same set however
    # the SMILES was written
    rank = list(Chem.CanonicalRankAtoms(base, breakTies=True, includeChirality=True))
    spec = sorted(structure.specified_stereo, key=lambda a: rank[a])
    seen: set[str] = set()
    out = []
    for flips in itertools.product((False, True), repeat=len(spec) - 1):
        m = Chem.Mol(base)
        for at, flip in zip(spec[1:], flips):
            if flip:
                m.GetAtomWithIdx(at).InvertChirality()
        m.ClearComputedProps()  # RDKit caches stereo perception: recompute after the flips
        key = enantiomer_key(m)
        if key in seen:
            continue
        seen.add(key)
        out.append(m)
    return out


def stereo_features(structure: Structure) -> tuple[Features, Features | None] | None:
    """Features of this stereoisomer and their mean over its diastereomers (None if no 3D)."""
    if not needs_stereo_layer(structure):
        return None
    own: Features | None = None
    others: list[Features] = []
    for k, m in enumerate(_diastereomers(structure)[:MAX_DIASTEREOMERS]):
        mirror = mirror_image(m)
        if mol_smiles(mirror) < mol_smiles(m):
            # one ensemble per enantiomer pair: the embedding is seeded, and the mirror
            # image must not get other conformers (shifts and couplings are achiral)
            m = mirror
        smi, order = _order_map(m)
        f = _features_for(smi, tuple(order))
        if f is None:
            if k == 0:
                return None
            continue
        if k == 0:
            own = f
        others.append(f)
    if own is None:
        return None
    if len(others) < 2:
        return own, None
    mean_c = {a: float(np.mean([f.c13.get(a, 0.0) for f in others])) for a in own.c13}
    mean_h = {a: float(np.mean([f.h1.get(a, 0.0) for f in others])) for a in set().union(*(f.h1 for f in others))}
    return own, Features(mean_c, mean_h, {}, {}, {}, 0)


def geometric_couplings(structure: Structure, groups: tuple[ProtonGroup, ...] | list[ProtonGroup]
                        ) -> dict[tuple[int, int], float] | None:
    """Vicinal 3J between proton groups from the conformer ensemble, or None without 3D.

    Returns
    -------
    dict
        (index of group i, index of group j) -> 3J in Hz, for i < j, averaged over the H pairs
        of the two groups' carbons. Diastereotopic CH2 halves share their carbon's average.
        This is the ``geometric`` mapping the spin simulation accepts.
    """
    got = stereo_features(structure)
    if got is None:
        return None
    own = got[0]
    out: dict[tuple[int, int], float] = {}
    for i, gi in enumerate(groups):
        for j in range(i + 1, len(groups)):
            gj = groups[j]
            vals = [v for a in gi.atoms for b in gj.atoms for v in own.j3.get((a, b), [])]
            if vals:
                out[(i, j)] = float(np.mean(vals))
    return out


# ------------------------------------------------------------------ the layer
def apply_stereo_layer(structure: Structure, prediction: Prediction) -> Prediction:
    """The prediction with diastereomer-specific 13C/1H shifts and 3J, or unchanged.

    Only methine (CH) proton groups get geometric couplings and multiplicities: their H is
    one explicit atom in 3D, so the partners are unambiguous.
    """
    got = stereo_features(structure)
    if got is None:
        return prediction
    own, mean = got
    ref_c = mean.c13 if mean is not None else {a: 0.0 for a in own.c13}
    ref_h = mean.h1 if mean is not None else {}
    # corrections are averaged over the whole symmetry class: a finite ensemble can break
    # the symmetry between equivalent atoms, and which split entry (diastereotopic halves)
    # meets which atom depends on atom order, so per-entry values would not be reproducible
    cls = structure.symmetry_classes
    members: dict[int, list[int]] = {}
    for a, k in enumerate(cls):
        members.setdefault(k, []).append(a)

    def class_mean(table: dict[int, float], ref: dict[int, float], atom: int) -> float:
        atoms = members[cls[atom]]
        return math.fsum(table.get(a, 0.0) - ref.get(a, 0.0) for a in atoms) / len(atoms)

    carbons = []
    for c in prediction.carbons:
        d = class_mean(own.c13, ref_c, c.atoms[0])
        carbons.append(replace(c, shift=c.shift + d) if abs(d) > 1e-6 else c)
    mol = structure.mol
    has_f = any(a.GetAtomicNum() == 9 for a in mol.GetAtoms())
    protons = []
    for g in prediction.protons:
        a0 = g.atoms[0]
        atom = mol.GetAtomWithIdx(a0)
        if atom.GetAtomicNum() != 6 or atom.GetTotalNumHs() != 1 or g.exchangeable:
            protons.append(g)
            continue
        dh = class_mean(own.h1, ref_h, a0)
        new = replace(g, shift=g.shift + dh) if abs(dh) > 1e-6 else g
        if not has_f:
            coup = _methine_couplings(structure, a0, own)
            if coup is not None:
                mult, js = multiplicity(coup)
                new = replace(new, couplings=coup, multiplicity=mult, j_hz=js)
        protons.append(new)
    extra = dict(prediction.extra)
    extra["stereo_layer"] = {"conformers": own.n_conformers,
                             "reference": "diastereomer mean" if mean is not None else "none"}
    return replace(prediction, carbons=tuple(carbons), protons=tuple(protons), extra=extra)


def _methine_couplings(structure: Structure, c: int, own: Features) -> tuple[tuple[int, float], ...] | None:
    """Couplings of a CH: geometric 3J to each sp3 partner H, table values kept for the rest."""
    from .h1.tables import load_tables

    j_hz = load_tables().j_hz
    mol = structure.mol
    cls = structure.symmetry_classes
    out: list[tuple[int, float]] = []
    for nb in mol.GetAtomWithIdx(c).GetNeighbors():
        b = nb.GetIdx()
        if nb.GetAtomicNum() != 6 or not nb.GetTotalNumHs() or cls[b] == cls[c]:
            continue
        vals = own.j3.get((c, b))
        if vals:
            out.extend((1, round(v, 1)) for v in vals)
        elif nb.GetHybridization() == Chem.HybridizationType.SP3:
            return None  # geometry missing for an sp3 partner: keep the table couplings
        elif any(bd.GetBondType() == Chem.BondType.DOUBLE and bd.GetOtherAtom(nb).GetAtomicNum() == 8
                 for bd in nb.GetBonds()):
            out.append((nb.GetTotalNumHs(), j_hz["3J_sp3_aldehyde"]))
        elif not nb.GetIsAromatic():
            out.append((nb.GetTotalNumHs(), j_hz["3J_sp3_vinyl"]))
    return tuple(out)


__all__ = ["Ensemble", "Features", "apply_stereo_layer", "conformer_ensemble", "geometric_couplings",
           "needs_stereo_layer", "parameters", "stereo_features"]
