"""13C shifts from additive increment tables.

Every carbon's shift is the sum of the increments that
:func:`specmatch.prediction.c13.environment.carbon_environments` names for it
(Grant-Paul alkane terms, substituent, ring and interaction corrections for sp3
carbons; 123.3 ppm plus alpha/beta/gamma increments for alkene carbons; 128.5 ppm
plus ipso/ortho/meta/para increments for benzene carbons; class values and
substituent increments for alkyne, nitrile and carbonyl carbons).

The numbers are read once, at import, by :mod:`specmatch.prediction.c13.tables`.
"""

from __future__ import annotations

import math
from dataclasses import replace

from ...structures import Structure
from ...structures.graph import MolGraph, graph_of
from ...structures.molecule import DEUTERIUM_PROP, deuterium_counts
from ..hose import (MolCodes, configuration_features, fold_of_mol, hex_codes, load_layer, load_table,
                    rank_tags)
from ..types import CarbonShift
from .environment import carbon_environments, is_correction, nearest_term
from .tables import SIGMA as _SIGMA, SUPPORT as _SUPPORT, TABLES_VERSION, VALUE as _VALUE

#: Sigma added (in quadrature) for every term the tables have no row for, ppm.
MISSING_TERM_SIGMA_PPM = 8.0
#: Sigma added for every interaction correction never seen in the fitting data, ppm.
UNSEEN_CORRECTION_SIGMA_PPM = 2.0
#: Sigma of a carbon whose class has no table at all (nearest class used), ppm.
NO_CLASS_SIGMA_PPM = 20.0
#: One-bond deuterium isotope shift on 13C per D, ppm: upfield, typically 0.2-0.4 ppm
#: (CDCl3 77.16 vs CHCl3 77.36 ppm; from memory).
D_ISOTOPE_SHIFT_PPM = -0.3
#: 1J(13C, 2H), Hz: about 1J(C,H) / 6.5, i.e. 19-23 Hz for sp3 carbons (from memory).
J_CD_HZ = 20.0
#: Coverage buckets: a carbon's rarest term seen on >= 100 / >= 10 / fewer carbons.
WELL_COVERED, THIN = 100, 10

_DIASTEREOTOPIC_SPLIT_PPM = _VALUE.get("split:diastereotopic", 0.0)


def _coverage(min_support: int) -> str:
    return "well" if min_support >= WELL_COVERED else ("thin" if min_support >= THIN else "rare")


def _class_sigma(kind: str, hydrogens: int, coverage: str) -> float:
    got = _CLASS_SIGMA.get((kind, hydrogens, coverage))
    if got is None:
        got = NO_CLASS_SIGMA_PPM
        for key in (f"{kind}:H{hydrogens}:{coverage}", f"{kind}:*:{coverage}", f"*:*:{coverage}"):
            if key in _SIGMA:
                got = _SIGMA[key]
                break
        _CLASS_SIGMA[(kind, hydrogens, coverage)] = got
    return got


#: (class, H count, coverage) -> sigma, filled on first use (a few dozen keys)
_CLASS_SIGMA: dict[tuple[str, int, str], float] = {}


#: term -> (value added, support counted or None, missing main term?, unseen correction?),
#: filled on first use: the same few thousand names recur in every molecule
_TERM_INFO: dict[str, tuple[float, int | None, bool, bool]] = {}


def _term_info(t: str) -> tuple[float, int | None, bool, bool]:
    v = _VALUE.get(t)
    corr = is_correction(t)
    if v is not None:
        info = (v, None if corr else _SUPPORT[t], False, False)
    elif corr:
        info = (0.0, None, False, True)
    else:
        alt = nearest_term(t)
        info = (_VALUE.get(alt, 0.0) if alt else 0.0, 0, True, False)
    _TERM_INFO[t] = info
    return info


def shift_of_terms(terms: tuple[str, ...]) -> tuple[float, int, list[str], int]:
    """Sum of the increments.

    Returns
    -------
    shift_ppm, min_support, missing, n_unseen_corrections
        The smallest number of fitting carbons behind any main term; main terms
        without a row (after trying the nearest atom type); the number of
        interaction corrections never seen (counted as 0, widening sigma).
    """
    values = []
    min_support = 1 << 30
    missing = []
    unseen = 0
    get = _TERM_INFO.get
    for t in terms:
        info = get(t) or _term_info(t)
        values.append(info[0])
        s = info[1]
        if s is not None and s < min_support:
            min_support = s
        if info[2]:
            missing.append(t)
        elif info[3]:
            unseen += 1
    # exactly rounded sum: the same molecule written from another atom meets the
    # terms in another order and must give the same shift to the last bit
    return math.fsum(values), min_support, missing, unseen


def _on_alkene(g: MolGraph, atom: int) -> bool:
    """True if the atom is bonded to a non-aromatic carbon that carries a C=C."""
    z, arom = g.z, g.arom
    for nb in g.nbrs[atom]:
        if z[nb] == 6 and not arom[nb]:
            for other, order in g.bonds[nb]:
                if order == 2.0 and z[other] == 6:
                    return True
    return False


def _equivalent_carbons(structure: Structure, g: MolGraph) -> list[tuple[int, ...]]:
    """Sets of equivalent carbons in order of first atom (``Structure.equivalence_sets("C")``)."""
    groups: dict[int, list[int]] = {}
    cls = structure.symmetry_classes
    for i, z in enumerate(g.z):
        if z == 6:
            groups.setdefault(cls[i], []).append(i)
    return sorted(tuple(v) for v in groups.values())


def predict_carbons(structure: Structure, *, correction: bool = True, codes: MolCodes | None = None,
                    configuration: bool = True) -> tuple[list[CarbonShift], list[str]]:
    """One :class:`CarbonShift` per set of equivalent carbons.

    Diastereotopic twin groups (the two methyls of an isopropyl next to a
    stereocentre) come out as two entries, split by a small fitted amount, since
    real spectra usually show two lines.

    Parameters
    ----------
    structure : Structure
    correction : bool
        Add the neighbour layer (``tables/layer_c13.csv.gz``) and the
        environment-code correction (``tables/hose_c13.csv.gz``) to the
        increment sum; False gives the increments alone (what the layer is
        fitted on).
    codes : MolCodes, optional
        Code builder of this molecule, if the caller already has one.
    configuration : bool
        Let the neighbour layer read the relative configuration the input gives
        (``hose.configuration_features``); False where the 3D stereo layer will add
        its own cis/trans terms (both would count the same effect twice).

    Returns
    -------
    carbons, warnings
        The predicted shifts, and warning texts for environments the tables do
        not cover (those carbons get the nearest class and a large sigma).
    """
    mol = structure.mol
    g = graph_of(structure)
    sets = _equivalent_carbons(structure, g)
    wanted = []
    split_sets = []
    for atoms in sets:
        wanted.append(atoms[0])
        if len(atoms) > 1 and _on_alkene(g, atoms[0]):
            # twin groups on one alkene carbon are cis and trans to the far side:
            # separate lines in real spectra, so perceive each member
            wanted.extend(atoms[1:])
            split_sets.append(atoms)
    envs = {e.atom: e for e in carbon_environments(mol, sorted(wanted), g)}
    if split_sets:
        sets = [s for s in sets if s not in split_sets]
        for atoms in split_sets:
            by_terms: dict[tuple[str, ...], list[int]] = {}
            for a in atoms:
                by_terms.setdefault(tuple(sorted(envs[a].terms)), []).append(a)
            sets.extend(tuple(v) for v in by_terms.values())
        sets.sort()
    # (atoms, shift, sigma, hydrogens, environment, fallback) per signal: the frozen
    # CarbonShift is built once, after the correction
    out: list[list] = []
    kinds: list[str] = []  # table class of each entry of out
    warnings: list[str] = []
    for atoms in sets:
        env = envs[atoms[0]]
        shift, min_support, missing, unseen = shift_of_terms(env.terms)
        fallback = bool(missing) or env.kind == "other"
        if env.kind == "other":
            sigma = NO_CLASS_SIGMA_PPM
            warnings.append(f"13C: no increment table for the {env.atom_type} carbon at atom {atoms[0] + 1}; "
                            f"a rough class value is used (sigma {sigma:.0f} ppm)")
        else:
            sigma = _class_sigma(env.kind, env.hydrogens, _coverage(min_support))
            if unseen:
                sigma = math.sqrt(sigma ** 2 + unseen * UNSEEN_CORRECTION_SIGMA_PPM ** 2)
            if missing:
                sigma = math.sqrt(sigma ** 2 + len(missing) * MISSING_TERM_SIGMA_PPM ** 2)
                warnings.append(f"13C: environment of atom {atoms[0] + 1} not covered by the tables "
                                f"({', '.join(sorted(set(missing)))}); nearest class used, sigma {sigma:.0f} ppm")
        halves = structure.diastereotopic_halves(atoms) if structure.diastereotopic_pairs else None
        parts = list(halves) if halves else [atoms]
        if len(parts) == 2 and _DIASTEREOTOPIC_SPLIT_PPM:
            half = _DIASTEREOTOPIC_SPLIT_PPM / 2
            for sub, sign in zip(parts, (1.0, -1.0)):
                out.append([sub, shift + sign * half, sigma, env.hydrogens, env.label + ", diastereotopic", fallback])
                kinds.append(env.kind)
        else:
            out.append([atoms, shift, sigma, env.hydrogens, env.label, fallback])
            kinds.append(env.kind)
    table = load_table("13C") if correction else None
    layer = load_layer("13C") if correction else None
    if table is not None and out:
        codes = codes or MolCodes(mol)
        cls = structure.symmetry_classes
        fold = fold_of_mol(structure.mol)  # None unless SPECMATCH_CROSS_VALIDATED=1
        tags = rank_tags([cls[c[0][0]] for c in out], [c[1] for c in out])
        owns = []  # per entry: has it codes (not "other", a table of radius 1 or more)?
        layered = []  # entries of out the layer applies to
        coded = table.max_radius >= 1
        for k, (c, kind) in enumerate(zip(out, kinds)):
            own = coded and kind != "other"
            owns.append(own)
            # the neighbour layer first (the code table was fitted on what it leaves), on every
            # carbon with codes, also where the first sphere is unseen: those carbons (bridged
            # and strained rings, polyhalides) are the worst predicted and what their neighbours
            # explain is all they get (5-fold CV, fit_hose.py layer on all test carbons: 13C
            # core 1.690 -> 1.657, wide 1.491 -> 1.469 ppm; half the layer there: 1.670 / 1.477)
            if layer is not None and own:
                layered.append(k)
        if layered:
            centres = [out[k][0][0] for k in layered]
            for k, v in zip(layered, layer.shifts_bits(codes.bits, g.dist, centres, fold)):
                out[k][1] += v
            # cis/trans on rings and double bonds, where the input gives the configuration (the
            # isomeric SMILES differs from the plain one only then: most molecules skip the walk)
            if configuration and structure.isomeric_smiles != structure.canonical_smiles:
                relations = configuration_features(mol, hex_codes(codes.bits), g.dist, centres)
                for k, centre in zip(layered, centres):
                    if relations[centre]:
                        out[k][1] += layer.shift(relations[centre], fold)
        bits = codes.bits
        for c, own, tag in zip(out, owns, tags):
            if not own:
                continue
            corr, sigma, depth = table.correct_atom(bits[c[0][0]], tag, c[2], fold)
            if depth:
                c[1] += corr
                c[2] = sigma
    shifts = [CarbonShift(*c) for c in out]
    if mol.HasProp(DEUTERIUM_PROP):
        shifts = _deuterated(shifts, deuterium_counts(mol), warnings)
    return shifts, warnings


def _deuterated(carbons: list[CarbonShift], n_d: tuple[int, ...], warnings: list[str]) -> list[CarbonShift]:
    """C-D carbons: isotope shift, DEPT-visible H count without the D, and a note on the C-D multiplet.

    The increments treat C-D as C-H (the environment is the same); in a
    1H-decoupled 13C spectrum the carbon is a 2n+1-line multiplet from spin-1 D.
    """
    out = []
    for c in carbons:
        d = n_d[c.atoms[0]]
        if not d:
            out.append(c)
            continue
        lines = 2 * d + 1
        warnings.append(f"13C: atom {c.atoms[0] + 1} carries {d} D: predicted {abs(D_ISOTOPE_SHIFT_PPM) * d:.1f} ppm upfield "
                        f"of the C-H value, seen as a {lines}-line C-D multiplet (1J(C,D) about {J_CD_HZ:.0f} Hz) "
                        f"that DEPT does not edit (it counts {c.hydrogens - d} H)")
        out.append(replace(c, shift=c.shift + D_ISOTOPE_SHIFT_PPM * d, hydrogens=c.hydrogens - d,
                           environment=c.environment + f", C-D x{d} ({lines}-line C-D multiplet)"))
    return out
