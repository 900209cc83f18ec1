"""Relative configuration of products: syn/anti additions, capture from both faces, meso/racemic.

Products are built by bond edits that keep the substrate's atom indices (see
:mod:`specmatch.reactions.network`), so the two carbons of the reacting C=C are known in the
product. For a stereospecific addition (anti for halonium and halohydrin openings, syn for
hydroboration) the faces are placed on a small 3D model of the alkene (substituents in the
plane, the two new groups above or below it) and RDKit reads the chiral tags from it. Where
the mechanism does not fix a configuration (a planar cation captured from either face), the
unassigned centres are enumerated with statistical weights.

Naming: a relative configuration formed from achiral starting materials is *racemic*; its
canonical SMILES is the lexically smaller of the two enantiomers' SMILES, so the same
diastereomer always gets the same text. An achiral product with stereocentres is *meso*.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

from rdkit import Chem
from rdkit.Geometry import Point3D

from ..structures import enantiomer_key, mirror_image, mol_smiles

_TET = Chem.StereoType.Atom_Tetrahedral
_CW, _CCW = Chem.ChiralType.CHI_TETRAHEDRAL_CW, Chem.ChiralType.CHI_TETRAHEDRAL_CCW
_CIS = {Chem.BondStereo.STEREOZ, Chem.BondStereo.STEREOCIS}
_TRANS = {Chem.BondStereo.STEREOE, Chem.BondStereo.STEREOTRANS}

#: unassigned stereocentres enumerated at most (2**4 = 16 combinations)
MAX_ENUMERATED_CENTRES = 4


def _fresh(mol: Chem.Mol) -> Chem.Mol:
    m = Chem.Mol(mol)
    m.ClearComputedProps()  # RDKit caches stereo perception; recompute after tag edits
    Chem.GetSSSR(m)
    return m


def stereo_info(mol: Chem.Mol) -> tuple[list[int], list[int], int]:
    """(specified tetrahedral centres, unspecified ones, number of stereogenic C=C)."""
    info = Chem.FindPotentialStereo(_fresh(mol), cleanIt=True, flagPossible=True)
    spec = [s.centeredOn for s in info if s.type == _TET and s.specified == Chem.StereoSpecified.Specified]
    unspec = [s.centeredOn for s in info if s.type == _TET and s.specified != Chem.StereoSpecified.Specified]
    dbl = sum(1 for s in info if s.type == Chem.StereoType.Bond_Double)
    return spec, unspec, dbl


@dataclass(frozen=True)
class Configuration:
    """A stereo-defined product: its key SMILES and how to describe it."""

    smiles: str       # canonical isomeric SMILES (enantiomer representative if racemic)
    racemic: bool     # chiral, formed with its mirror image in equal amounts
    meso: bool        # achiral although it has two or more stereocentres
    words: str        # "meso", "racemic (C2 R*, C3 R*)", ...


def describe(mol: Chem.Mol, *, substrate_chiral: bool) -> Configuration:
    """Key SMILES and words for a product whose configuration is (partly) specified."""
    m = _fresh(mol)
    smi = mol_smiles(m)
    spec, _unspec, _ = stereo_info(m)
    if substrate_chiral or not spec:
        return Configuration(smi, False, False, "")
    mir = mol_smiles(mirror_image(m))
    if mir == smi:
        return Configuration(smi, False, len(spec) >= 2, "meso" if len(spec) >= 2 else "")
    rep = min(smi, mir)
    # CIP labels on the representative, named by substrate atom labels where known
    labels = _cip(m if smi == rep else mirror_image(m))
    words = "racemic" + (f" ({', '.join(labels)})" if labels else "")
    return Configuration(rep, True, False, words)


def _cip(mol: Chem.Mol) -> list[str]:
    from rdkit.Chem import rdCIPLabeler

    m = Chem.Mol(mol)
    try:
        rdCIPLabeler.AssignCIPLabels(m)
    except Exception:  # the new labeler refuses rare cases; the words are optional
        return []
    out = []
    for a in m.GetAtoms():
        if a.HasProp("_CIPCode"):
            name = f"{a.GetSymbol()}{a.GetIntProp('n')}" if a.HasProp("n") else f"{a.GetSymbol()}{a.GetIdx() + 1}"
            out.append(f"{name} {a.GetProp('_CIPCode')}*")
    return out


def cis_pairs(sub: Chem.Mol, a: int, b: int) -> list[tuple[int, int]] | None:
    """Heavy substituents (on a, on b) that are cis across the C=C a-b; None if not defined.

    Defined by an E/Z (or cis/trans) specification, or by a ring of up to 7 atoms that
    contains the bond (ring neighbours are cis). An empty list means no heavy pair is cis.
    """
    bond = sub.GetBondBetweenAtoms(a, b)
    sa = [n.GetIdx() for n in sub.GetAtomWithIdx(a).GetNeighbors() if n.GetIdx() != b]
    sb = [n.GetIdx() for n in sub.GetAtomWithIdx(b).GetNeighbors() if n.GetIdx() != a]
    st = bond.GetStereo()
    if st in _CIS | _TRANS:
        x, y = list(bond.GetStereoAtoms())
        if bond.GetBeginAtomIdx() != a:
            x, y = y, x
        cis = st in _CIS
        pairs = []
        for p in sa:
            for q in sb:
                if ((p == x) == (q == y)) == cis:
                    pairs.append((p, q))
        return pairs
    ri = sub.GetRingInfo()
    if bond.IsInRing() and min(len(r) for r in ri.AtomRings() if a in r and b in r) <= 7:
        ring = min((r for r in ri.AtomRings() if a in r and b in r), key=len)
        return [(p, q) for p in sa for q in sb if p in ring and q in ring]
    return None


def alkene_is_stereogenic(sub: Chem.Mol, a: int, b: int) -> bool:
    info = Chem.FindPotentialStereo(_fresh(sub), cleanIt=True, flagPossible=True)
    bond = sub.GetBondBetweenAtoms(a, b).GetIdx()
    return any(s.type == Chem.StereoType.Bond_Double and s.centeredOn == bond for s in info)


def add_faces(product: Chem.Mol, sub: Chem.Mol, a: int, b: int, new_a: int | None, new_b: int | None,
              *, syn: bool, cis: list[tuple[int, int]]) -> Chem.Mol:
    """Chiral tags on a and b for an addition from given faces (syn or anti).

    `new_a`/`new_b` are the product atoms added to a/b (None when the new group is H).
    `cis` lists the substituent pairs cis across the former C=C (see :func:`cis_pairs`).
    """
    sa = [n.GetIdx() for n in sub.GetAtomWithIdx(a).GetNeighbors() if n.GetIdx() != b]
    sb = [n.GetIdx() for n in sub.GetAtomWithIdx(b).GetNeighbors() if n.GetIdx() != a]
    # in-plane slots: the first substituent of a is "up" (y > 0); b's substituent cis to it too
    side: dict[int, float] = {}
    if sa:
        side[sa[0]] = 1.0
        if len(sa) > 1:
            side[sa[1]] = -1.0
    for q in sb:
        if sa and (sa[0], q) in cis:
            side[q] = 1.0
        elif len(sa) > 1 and (sa[1], q) in cis:
            side[q] = -1.0
        else:
            side[q] = -1.0
    if not sa or len({side[q] for q in sb}) < len(sb):
        for k, q in enumerate(sb):  # no reference on a's side: either labelling is equivalent
            side[q] = 1.0 if k == 0 else -1.0
    fa, fb = 1.0, (1.0 if syn else -1.0)
    conf = Chem.Conformer(product.GetNumAtoms())
    for i in range(product.GetNumAtoms()):
        conf.SetAtomPosition(i, Point3D(10.0 + 1.7 * i, 7.0 + 0.3 * i * i % 5, 3.0 * (i % 3)))
    conf.SetAtomPosition(a, Point3D(0.0, 0.0, 0.0))
    conf.SetAtomPosition(b, Point3D(1.5, 0.0, 0.0))
    for p in sa:
        conf.SetAtomPosition(p, Point3D(-0.75, 1.3 * side[p], -0.5 * fa))
    for q in sb:
        conf.SetAtomPosition(q, Point3D(2.25, 1.3 * side[q], -0.5 * fb))
    if new_a is not None:
        conf.SetAtomPosition(new_a, Point3D(0.0, 0.0, 1.5 * fa))
    if new_b is not None:
        conf.SetAtomPosition(new_b, Point3D(1.5, 0.0, 1.5 * fb))
    m3 = Chem.Mol(product)
    m3.RemoveAllConformers()
    m3.AddConformer(conf, assignId=True)
    Chem.AssignStereochemistryFrom3D(m3)
    out = Chem.Mol(product)
    for i in (a, b):
        out.GetAtomWithIdx(i).SetChiralTag(m3.GetAtomWithIdx(i).GetChiralTag())
    return _fresh(out)


def enumerate_unassigned(mol: Chem.Mol, *, substrate_chiral: bool) -> list[tuple[Chem.Mol, float]] | None:
    """Diastereomers of a product whose new centres formed without face control.

    Every unassigned tetrahedral centre is set both ways (planar cation captured from either
    face, equally: common practice without a directing group); combinations that give the
    same stereoisomer (or, from achiral starting materials, its mirror image) are merged, so
    the weights are statistical (a meso form counts once, a racemic pair twice).
    Returns None when there is nothing to enumerate or too much.
    """
    spec, unspec, _ = stereo_info(mol)
    if not unspec or len(spec) + len(unspec) < 2 or len(unspec) > MAX_ENUMERATED_CENTRES:
        return None
    groups: dict[str, list] = {}
    for tags in itertools.product((_CW, _CCW), repeat=len(unspec)):
        m = Chem.Mol(mol)
        for at, t in zip(unspec, tags):
            m.GetAtomWithIdx(at).SetChiralTag(t)
        m = _fresh(m)
        key = mol_smiles(m) if substrate_chiral else enantiomer_key(m)
        groups.setdefault(key, [m, 0])[1] += 1
    total = sum(n for _, n in groups.values())
    if len(groups) < 2:
        return None
    return [(m, n / total) for m, n in groups.values()]


def relation_matters(mol: Chem.Mol) -> bool:
    """True when diastereomers from capture on either face are listed separately: two or more
    stereocentres, at least one on a ring (cis/trans isomers, whose spectra differ clearly).

    Open-chain diastereomer pairs from a free cation (erythro/threo) stay one candidate with a
    note: their spectra differ little and a planar cation gives both. Stereospecific additions
    (anti/syn) still define open-chain configurations such as meso/dl.
    """
    spec, unspec, _ = stereo_info(mol)
    centres = spec + unspec
    mol = Chem.Mol(mol)
    Chem.GetSSSR(mol)  # ring perception may have been cleared with the cached stereo
    ri = mol.GetRingInfo()
    if any(ri.NumAtomRings(i) > 1 for i in centres):
        # bridged/fused centres: most tag combinations are impossible rings (an inverted
        # bridgehead); exo/endo preferences need geometry, so leave the constitution
        return False
    return len(centres) >= 2 and any(mol.GetAtomWithIdx(i).IsInRing() for i in centres)
