"""1H environments: which increments apply to each group of equivalent protons.

For every set of equivalent heavy atoms carrying H this module lists the
additive terms (parameter key, coefficient) of the 1H model, the coupling
partners for a first-order multiplet, and flags. It knows no numbers except
coupling constants: shifts are ``sum(value[key] * coefficient)`` with values from
the tables (see :mod:`specmatch.prediction.h1.tables`), so the fitting script
uses exactly the same environments as the predictor.

Rules used
----------
- sp3 C-H: Shoolery's rule in the extended form (base value per CH3/CH2/CH plus
  alpha increments per class, beta and gamma increments, ring-size and
  multiple-substituent corrections).
- alkene C-H: Pascual-Meier-Simon (Helv. Chim. Acta 1966, 49, 164),
  ``5.25 + Z_gem + Z_cis + Z_trans``.
- aromatic C-H: benzene 7.26 + ortho/meta/para increments of every substituent.
- alkyne, aldehyde, allene, heteroaromatic and X-H protons: class values.
"""

from __future__ import annotations

from dataclasses import dataclass

from rdkit import Chem

from ...structures import Structure
from ...structures.graph import graph_of

HALOGENS = {9: "F", 17: "Cl", 35: "Br", 53: "I"}
_O_TYPES = {"OH", "OR", "OCOR", "OAr", "Ovinyl"}
_X_TYPES = {"F", "Cl", "Br", "I", "N", "NCO", "NO2", "S"}
_C_TYPES = {"vinyl", "alkynyl", "aryl", "CHO", "COR", "COOH", "COOR", "COX", "CONR", "CN"}
_VINYL_BETA = {9: "F", 17: "Cl", 35: "Br", 53: "I", 8: "O"}
_CARBONYL = {"CHO", "COR", "COOH", "COOR", "COX", "CONR"}
_RING_TERM = {3: "3", 4: "4", 5: "5", 6: "6"}
_STEREO_CIS = {Chem.BondStereo.STEREOZ, Chem.BondStereo.STEREOCIS}
_STEREO_SET = _STEREO_CIS | {Chem.BondStereo.STEREOE, Chem.BondStereo.STEREOTRANS}
_ORTHO_META_PARA = {1: "ortho", 2: "meta", 3: "para"}


@dataclass(frozen=True)
class ProtonSite:
    """One predicted 1H signal before numbers are attached.

    Attributes
    ----------
    atoms : tuple of int
        Heavy atoms carrying the protons.
    count : int
        Number of protons in the signal.
    terms : tuple of (str, float)
        Additive model terms: parameter key and coefficient.
    sigma_class : str
        Row of h1_sigma.csv giving the expected error.
    environment : str
        Short description for reports.
    couplings : tuple of (int, float)
        First-order partners: (number of equivalent partner nuclei, J in Hz).
    exchangeable, diastereotopic, fallback : bool
    """

    atoms: tuple[int, ...]
    count: int
    terms: tuple[tuple[str, float], ...]
    sigma_class: str
    environment: str
    couplings: tuple[tuple[int, float], ...]
    exchangeable: bool = False
    diastereotopic: bool = False
    fallback: bool = False
    complex_multiplet: bool = False


def _ring_methine_is_complex(g: "_Graph", i: int) -> bool:
    """A CH on a 3-5 or 7+ membered ring with ring CH2 partners: puckering spreads its couplings
    over several unequal values, so the honest label is "m" (common practice)."""
    size = g.ring[i]
    if g.nh[i] != 1 or not size or size == 6:
        return False
    return any(g.sp3(y) and g.nh[y] == 2 and g.ri.AreAtomsInSameRing(i, y) for y, _ in g.nbrs[i])


class _Graph:
    """Per-molecule arrays read once from RDKit (atom loops in pure Python are cheap,
    repeated RDKit calls are not)."""

    __slots__ = ("mol", "z", "nh", "nh_total", "arom", "nbrs", "cls", "ring", "ri", "n_rings", "_sp3", "_dbl_o", "_types")

    def __init__(self, structure: Structure) -> None:
        # the arrays come from the graph view shared with the 13C predictor
        view = graph_of(structure)
        self.mol = structure.mol
        n = view.n
        self.z = view.z
        # nh: protons seen in 1H (D excluded: no signal, no resolved coupling); nh_total: H + D,
        # which decides the increment class (a CHD2 group is typed as a methyl)
        self.nh_total = view.nh_total
        self.nh = view.nh
        self.arom = view.arom
        self.nbrs = view.bonds
        self.cls = structure.symmetry_classes
        self.ri = view.ring_info
        self.ring = view.min_ring_size
        self.n_rings = view.n_rings
        self._sp3 = [self.z[i] == 6 and not self.arom[i] and all(o == 1.0 for _, o in self.nbrs[i])
                     for i in range(n)]
        self._dbl_o = [any(o == 2.0 and self.z[j] == 8 for j, o in self.nbrs[i]) for i in range(n)]
        self._types: dict[tuple[int, int], str | None] = {}

    def sp3(self, i: int) -> bool:
        return self._sp3[i]

    def double_o(self, i: int) -> bool:
        return self._dbl_o[i]

    def double_c(self, i: int) -> int | None:
        for j, o in self.nbrs[i]:
            if o == 2.0 and self.z[j] == 6 and not self.arom[j]:
                return j
        return None

    def groups(self) -> list[tuple[int, ...]]:
        """Equivalence sets in order of first atom (as Structure.equivalence_sets)."""
        by_class: dict[int, list[int]] = {}
        for i, c in enumerate(self.cls):
            by_class.setdefault(c, []).append(i)
        return sorted(tuple(v) for v in by_class.values())


def substituent_type(g: _Graph, x: int, frm: int) -> str | None:
    """Type of substituent atom ``x`` seen from atom ``frm`` (alpha/beta tables).

    ``alkyl`` means a saturated carbon (its own substituents count as beta/gamma).
    Returns None for an isotopic hydrogen kept as an atom.
    """
    key = (x, frm)
    got = g._types.get(key, _UNTYPED)
    if got is _UNTYPED:
        got = g._types[key] = _substituent_type(g, x, frm)
    return got


_UNTYPED = object()  # not typed yet (None is an answer: an isotopic H)


def _substituent_type(g: _Graph, x: int, frm: int) -> str | None:
    z = g.z[x]
    if z == 6:
        if g.arom[x]:
            return "aryl"
        rest = [(y, o) for y, o in g.nbrs[x] if y != frm]
        for y, o in rest:
            if o == 3.0:
                return "CN" if g.z[y] == 7 else "alkynyl"
        if any(o == 2.0 and g.z[y] == 8 for y, o in rest):
            if g.nh_total[x]:
                return "CHO"
            single = [y for y, o in rest if o == 1.0]
            for y in single:
                if g.z[y] == 8:
                    return "COOH" if g.nh_total[y] else "COOR"
            if any(g.z[y] in HALOGENS for y in single):
                return "COX"
            if any(g.z[y] == 7 for y in single):
                return "CONR"
            return "COR"
        for y, o in rest:
            if o == 2.0:
                return "vinyl" if g.z[y] == 6 else "COR"
        return "alkyl"
    if z == 8:
        others = [y for y, _ in g.nbrs[x] if y != frm]
        if g.nh_total[x] or not others:
            return "OH"
        y = others[0]
        if g.z[y] == 6:
            if g.arom[y]:
                return "OAr"
            if g.double_o(y):
                return "OCOR"
            if g.double_c(y) is not None:
                return "Ovinyl"
        return "OR"
    if z in HALOGENS:
        return HALOGENS[z]
    if z == 7:
        others = [y for y, _ in g.nbrs[x] if y != frm]
        if sum(1 for y in others if g.z[y] == 8) >= 2:
            return "NO2"
        if any(g.z[y] == 6 and g.double_o(y) for y in others):
            return "NCO"
        return "N"
    if z == 16:
        return "S"
    if z == 14:
        return "Si"
    if z == 1:
        return None
    return "other"


def vinyl_substituent_type(g: _Graph, y: int, c: int, partner: int) -> str | None:
    """Pascual-Meier-Simon substituent class of atom ``y`` on alkene carbon ``c``."""
    z = g.z[y]
    if z == 6 and not g.arom[y] and g.sp3(y):
        n_f = n_x = n_i = n_o = n_n = n_s = 0
        for w, _ in g.nbrs[y]:
            if w == c:
                continue
            zw = g.z[w]
            n_f += zw == 9
            n_x += zw in (17, 35)
            n_i += zw == 53
            n_o += zw == 8
            n_n += zw == 7
            n_s += zw == 16
        if n_f + n_x + n_i >= 2:
            return "CX3"
        n_o += n_i  # Pascual-Meier-Simon list CH2I with CH2O
        if n_o:
            return "CH2O"
        if n_x or n_f:
            return "CH2X"
        if n_n:
            return "CH2N"
        if n_s:
            return "CH2S"
        b1 = g.mol.GetBondBetweenAtoms(c, y)
        b2 = g.mol.GetBondBetweenAtoms(c, partner)
        if b1.IsInRing() and b2.IsInRing() and g.ri.AreAtomsInSameRing(y, partner):
            return "alkyl_ring"
        return "alkyl"
    t = substituent_type(g, y, c)
    if t in ("OH", "OR", "OAr", "Ovinyl"):
        return "OR"
    if t in ("Si", "alkyl"):
        return "alkyl"
    return t


def _ring_term(size: int) -> str | None:
    if size == 0:
        return None
    return _RING_TERM.get(size, "7+")


# --------------------------------------------------------------------------- sp3
#: an sp3 carbon's class by its H count (a carbon without H has no proton site)
_HC_NAME = {4: "CH4", 3: "CH3", 2: "CH2", 1: "CH"}


def _sp3_terms(g: _Graph, i: int) -> tuple[list[tuple[str, float]], str, str, bool]:
    nh = g.nh_total[i]
    hc = _HC_NAME[min(nh, 4)]
    terms: list[tuple[str, float]] = [(f"sp3:base:alkyl:{hc}", 1.0)]
    fallback = False
    n_o = n_x = n_c = 0
    alpha_names: list[str] = []
    beta: list[str] = []
    for y, _ in g.nbrs[i]:
        t = substituent_type(g, y, i)
        if t is None:
            continue
        if t != "alkyl":
            terms.append((f"sp3:alpha:{t}:{hc}", 1.0))
            alpha_names.append(t)
            fallback |= t == "other"
            if t == "vinyl":  # halogen/O on the alkene carbon itself (2-bromopropene CH3 2.32 ppm)
                for w, ow in g.nbrs[y]:
                    if w != i and ow == 1.0 and g.z[w] in _VINYL_BETA:
                        terms.append((f"sp3:beta:{_VINYL_BETA[g.z[w]]}:vinyl", 1.0))
            if t in _O_TYPES:
                n_o += 1
                if t == "OR":  # halogens across the ether oxygen (CH3OCH2Cl 3.53 vs Me2O 3.24, from memory)
                    for w, _ in g.nbrs[y]:
                        if w != i:
                            for v, _ in g.nbrs[w]:
                                if g.z[v] in HALOGENS:
                                    terms.append((f"sp3:beta:{HALOGENS[g.z[v]]}:viaO", 1.0))
            elif t in _X_TYPES:
                n_x += 1
            elif t in _C_TYPES:
                n_c += 1
            continue
        n_beta_o = 0
        for w, _ in g.nbrs[y]:
            if w == i:
                continue
            t2 = substituent_type(g, w, y)
            if t2 is None:
                continue
            if t2 != "alkyl":
                beta.append(t2)
                n_beta_o += t2 in _O_TYPES
                continue
            terms.append((f"sp3:beta:alkyl:{hc}", 1.0))
            for v, _ in g.nbrs[w]:
                if v == y:
                    continue
                zv = g.z[v]
                if zv in HALOGENS:
                    terms.append((f"sp3:gamma:{HALOGENS[zv]}:any", 1.0))
                elif zv == 8:
                    terms.append(("sp3:gamma:O:any", 1.0))
        if n_beta_o > 1:  # acetal/ketal carbons next door: beta O effects saturate
            terms.append(("sp3:betapair:OO:any", n_beta_o * (n_beta_o - 1) / 2))
    # beta effects shrink on a carbon that already bears a polar or unsaturated group
    # (BrCH2CH2Br 3.65 ppm, not 4.1; from memory)
    where = "subst" if (n_o or n_x or n_c) else hc
    for t2 in beta:
        terms.append((f"sp3:beta:{t2}:{where}", 1.0))
    if hc in ("CH2", "CH"):
        n_het = n_o + n_x
        n_f = alpha_names.count("F")
        if n_o > 1:
            terms.append((f"sp3:pair:OO:{hc}", n_o * (n_o - 1) / 2))
        if n_f > 1:
            terms.append((f"sp3:pair:FF:{hc}", n_f * (n_f - 1) / 2))
        n_other = n_het - n_f  # O, Cl, Br, I, N, S
        f_mixed = n_f * n_other
        mixed = n_het * (n_het - 1) / 2 - n_o * (n_o - 1) / 2 - n_f * (n_f - 1) / 2 - f_mixed
        if mixed:
            terms.append((f"sp3:pair:XX:{hc}", mixed))
        if f_mixed:
            terms.append((f"sp3:pair:FX:{hc}", float(f_mixed)))
        n_i = alpha_names.count("I")
        if n_i > 1:  # iodines crowd each other far more than Cl/Br (CH2I2 3.90 ppm; from memory)
            terms.append((f"sp3:pair:II:{hc}", n_i * (n_i - 1) / 2))
        if n_het and n_c:
            terms.append((f"sp3:pair:XC:{hc}", float(n_het * n_c)))
        if n_c > 1:
            terms.append((f"sp3:pair:CC:{hc}", n_c * (n_c - 1) / 2))
    ring = _ring_term(g.ring[i])
    if ring:
        # small rings with an oxygen (oxiranes, oxetanes) differ from carbocycles
        if ring in ("3", "4") and any(g.z[y] == 8 and g.ring[y] == g.ring[i] for y, _ in g.nbrs[i]):
            ring += "O"
        terms.append((f"sp3:ring:{ring}:{hc}", 1.0))
        if ring != "3" and g.n_rings[i] > 1:
            terms.append(("sp3:ring:bridgehead:any", 1.0))
    env = hc
    if alpha_names:
        env += ", alpha " + " ".join(alpha_names)
    if beta:
        env += ", beta " + " ".join(beta)
    if ring:
        env += f", {ring}-ring"
    return terms, hc, env, fallback


def _sp3_couplings(g: _Graph, i: int, j_hz: dict[str, float]) -> list[tuple[int, float]]:
    out: list[tuple[int, float]] = []
    n_f_self = 0
    for y, o in g.nbrs[i]:
        zy = g.z[y]
        if zy == 9:
            n_f_self += 1
            continue
        if zy != 6:
            continue  # OH/NH: exchange removes the coupling (common practice)
        if g.sp3(y):
            n_f = sum(1 for w, _ in g.nbrs[y] if g.z[w] == 9)
            if n_f:
                out.append((n_f, j_hz["3J_HF"] if n_f == 1 else j_hz["3J_HF_CF2"]))
        if g.nh[y] and g.cls[y] != g.cls[i]:
            if g.sp3(y) and g.nh[i] == 1 and g.nh[y] == 2 and g.ring[i] == 6 and g.ring[y] == 6 \
                    and g.ri.AreAtomsInSameRing(i, y):
                # cyclohexyl methine, substituent mostly equatorial: its axial H couples
                # strongly to one H of each ring CH2 (ax-ax) and weakly to the other (ax-eq)
                out += [(1, j_hz["3J_ring6_ax_ax"]), (1, j_hz["3J_ring6_ax_eq"])]
            elif g.sp3(y):
                out.append((g.nh[y], j_hz["3J_sp3_sp3"]))
            elif g.double_o(y):
                out.append((g.nh[y], j_hz["3J_sp3_aldehyde"]))
            elif not g.arom[y]:
                out.append((g.nh[y], j_hz["3J_sp3_vinyl"]))
        for w, ow in g.nbrs[y]:
            if ow == 3.0 and w != i and g.nh[w] and g.z[w] == 6:
                out.append((g.nh[w], j_hz["4J_alkyne"]))
    if n_f_self:
        out.append((n_f_self, j_hz["2J_HF"]))
    return out


# --------------------------------------------------------------------------- alkenes
def _slots(g: _Graph, c: int, partner: int) -> list[int | None]:
    """The two substituent positions on an alkene carbon: heavy atoms, then None for H."""
    heavy = [y for y, _ in g.nbrs[c] if y != partner and g.z[y] != 1]
    return (heavy + [None] * 2)[:2]


def _first_cis(g: _Graph, i: int, j: int, si: list, sj: list) -> bool | None:
    """True if si[0] is cis to sj[0], False if trans, None if unknown."""
    bond = g.mol.GetBondBetweenAtoms(i, j)
    stereo = bond.GetStereo()
    if stereo in _STEREO_SET:
        sa, sb = list(bond.GetStereoAtoms())
        if bond.GetBeginAtomIdx() == j:
            sa, sb = sb, sa
        rel_cis = stereo in _STEREO_CIS
        if sa in si and sb in sj:
            return rel_cis if (si.index(sa) == 0) == (sj.index(sb) == 0) else not rel_cis
    if bond.IsInRing():
        rings = [r for r in g.ri.BondRings() if bond.GetIdx() in r]
        size = min(len(r) for r in rings)
        if size <= 7:
            ring_bonds = min(rings, key=len)
            ring_atoms = set()
            for b in ring_bonds:
                bb = g.mol.GetBondWithIdx(b)
                ring_atoms.update((bb.GetBeginAtomIdx(), bb.GetEndAtomIdx()))
            ra = next((k for k, y in enumerate(si) if y is not None and y in ring_atoms), None)
            rb = next((k for k, y in enumerate(sj) if y is not None and y in ring_atoms), None)
            if ra is not None and rb is not None:
                return ra == rb
    heavy_i = sum(y is not None for y in si)
    heavy_j = sum(y is not None for y in sj)
    if heavy_i == 0 or heavy_j == 0 or (heavy_i == 2 and si[0] is not None and
                                        g.cls[si[0]] == g.cls[si[1]]):
        return True  # either labelling gives the same answer
    if heavy_j == 2 and g.cls[sj[0]] == g.cls[sj[1]]:
        return True
    if heavy_i == 1 and heavy_j == 1:
        return False  # unspecified 1,2-disubstituted acyclic alkene: assume E (common practice)
    return None


def _alkene_ring_term(g: _Graph, i: int, j: int) -> str | None:
    """Ring-strain class of a C=C bond: small ring, or bridged bicyclic."""
    bond = g.mol.GetBondBetweenAtoms(i, j)
    if not bond.IsInRing():
        return None
    size = min(len(r) for r in g.ri.BondRings() if bond.GetIdx() in r)
    if size <= 4:
        return str(size)
    # a bridgehead next to the double bond (norbornene type) shifts the alkene H downfield,
    # a second C=C on the same bridgeheads (norbornadiene type) further
    bridged = False
    for c in (i, j):
        for y, _ in g.nbrs[c]:
            if y not in (i, j) and g.n_rings[y] > 1 and g.sp3(y):
                bridged = True
                if any(w not in (i, j) and g.double_c(w) is not None for w, _ in g.nbrs[y]):
                    return "bridged_diene"
    return "bridged" if bridged else None


def _alkene_sites(g: _Graph, atoms: tuple[int, ...], i: int, j: int, j_hz: dict[str, float]) -> list[ProtonSite]:
    si, sj = _slots(g, i, j), _slots(g, j, i)
    first_cis = _first_cis(g, i, j, si, sj)
    types_i = [vinyl_substituent_type(g, y, i, j) if y is not None else None for y in si]
    types_j = [vinyl_substituent_type(g, y, j, i) if y is not None else None for y in sj]
    fallback = "other" in types_i or "other" in types_j
    h_slots = [k for k in (0, 1) if si[k] is None]
    per_slot = []
    for a in h_slots:
        terms: list[tuple[str, float]] = [("alkene:base:base", 1.0)]
        words = []
        gem = types_i[1 - a]
        if gem is not None:
            terms.append((f"alkene:gem:{gem}", 1.0))
            words.append(f"gem {gem}")
        for b in (0, 1):
            t = types_j[b]
            if t is None:
                continue
            if first_cis is None:
                terms += [(f"alkene:cis:{t}", 0.5), (f"alkene:trans:{t}", 0.5)]
                words.append(f"cis/trans {t}")
            else:
                pos = "cis" if (a == b) == first_cis else "trans"
                terms.append((f"alkene:{pos}:{t}", 1.0))
                words.append(f"{pos} {t}")
        per_slot.append((a, tuple(sorted(terms)), words))
    strain = _alkene_ring_term(g, i, j)
    if strain:
        per_slot = [(a, tuple(sorted(t + ((f"alkene:ring:{strain}", 1.0),))), w + [f"{strain} ring"])
                    for a, t, w in per_slot]
    same = len(per_slot) == 2 and per_slot[0][1] == per_slot[1][1]
    out = []
    for a, terms, words in per_slot[: 1 if same else 2]:
        coup: list[tuple[int, float]] = []
        if len(h_slots) == 2 and not same:
            coup.append((1, j_hz["2J_vinyl_gem"]))
        if si[1 - a] is not None and g.z[si[1 - a]] == 9:
            coup.append((1, j_hz["2J_HF_vinyl"]))
        for b in (0, 1):
            cis = None if first_cis is None else (a == b) == first_cis
            if sj[b] is None:
                if g.nh[j] and g.cls[j] != g.cls[i]:
                    # -CH=CH- between two substituted carbons couples less than a vinyl group's trans pair
                    trans = "3J_vinyl_trans_12" if g.nh[i] == 1 and g.nh[j] == 1 else "3J_vinyl_trans"
                    coup.append((1, j_hz["3J_vinyl_cis"] if cis else j_hz[trans]))
            elif g.z[sj[b]] == 9:
                if cis is None:
                    coup.append((1, (j_hz["3J_HF_vinyl_cis"] + j_hz["3J_HF_vinyl_trans"]) / 2))
                else:
                    coup.append((1, j_hz["3J_HF_vinyl_cis"] if cis else j_hz["3J_HF_vinyl_trans"]))
        for y in si:
            if y is None or not g.nh[y] or g.z[y] != 6:
                continue
            if g.sp3(y):
                coup.append((g.nh[y], j_hz["3J_sp3_vinyl"]))
            elif g.double_o(y):
                coup.append((g.nh[y], j_hz["3J_sp2_aldehyde"]))
            elif not g.arom[y] and g.cls[y] != g.cls[i]:
                coup.append((g.nh[y], j_hz["3J_sp2_sp2_single"]))
        n_h = 1 if len(h_slots) == 2 and not same else g.nh[i]
        env = ("=CH2" if len(h_slots) == 2 else "=CH") + " (Pascual-Meier-Simon)"
        if words:
            env += ": " + ", ".join(words)
        out.append(ProtonSite(atoms, n_h * len(atoms), terms, "alkene", env, tuple(coup),
                              diastereotopic=len(h_slots) == 2 and not same, fallback=fallback))
    return out


# --------------------------------------------------------------------------- aromatic
def _aromatic_ring(g: _Graph, i: int) -> tuple[int, ...] | None:
    best = None
    for ring in g.ri.AtomRings():
        if i in ring and all(g.arom[a] for a in ring):
            if best is None or (len(ring) == 6) > (len(best) == 6) or \
                    ((len(ring) == 6) == (len(best) == 6) and len(ring) < len(best)):
                best = ring
    return best


def _aromatic_substituent_type(g: _Graph, s: int, r: int) -> str | None:
    if g.z[s] == 6 and not g.arom[s] and g.sp3(s):
        n_f = n_x = n_o = n_n = 0
        for w, _ in g.nbrs[s]:
            if w == r:
                continue
            zw = g.z[w]
            n_f += zw == 9
            n_x += zw in (17, 35, 53)
            n_o += zw == 8
            n_n += zw == 7
        if n_f >= 2 or n_x >= 2 or n_f + n_x >= 2:
            return "CX3"
        if n_o:
            return "CH2O"
        if n_x or n_f:
            return "CH2X"
        if n_n:
            return "CH2N"
        return "CH3" if g.nh_total[s] == 3 else "alkyl"
    t = substituent_type(g, s, r)
    if t == "Ovinyl":
        return "OR"
    if t in ("Si", "alkyl"):
        return "alkyl"
    return t


#: substituent types with a peri row in h1_aromatic.csv (others add no peri term)
_PERI_TYPES = {"CH3", "alkyl", "OH", "OR", "Cl", "Br", "CHO", "COR", "COOH", "COOR", "NO2"}


def _peri_term(g: _Graph, r: int, ring_set: set[int]) -> tuple[str, str] | None:
    """The peri or bay term of a ring H whose ortho ring atom ``r`` is a fusion atom.

    In naphthalene the alpha H (H1) faces the other ring's alpha position (C8) across
    the fusion atom: a substituent there (peri) deshields H1 by its field and steric
    compression (1-naphthaldehyde H8 near 9.2 ppm, 1-naphthol H8 near 8.2, from memory).
    When that position is itself a fusion atom, the H sits in a bay (phenanthrene H4/H5
    near 8.7 ppm against 7.8 for the naphthalene-like H1; from memory), which the
    ortho/meta increments of the fused ring do not give. Returns ``("peri", type)``,
    ``("bay", "ring")`` or None.
    """
    if not g.arom[r]:
        return None
    for p, o in g.nbrs[r]:
        if p in ring_set or not g.arom[p] or not g.ri.AreAtomsInSameRing(r, p):
            continue
        ring_nbrs = [w for w, _ in g.nbrs[p] if w != r and g.arom[w] and g.ri.AreAtomsInSameRing(p, w)]
        if len(ring_nbrs) >= 2 and all(w not in ring_set for w in ring_nbrs):
            return ("bay", "ring")
        for w, _ in g.nbrs[p]:
            if w == r or g.ri.AreAtomsInSameRing(p, w):
                continue
            t = _aromatic_substituent_type(g, w, p)
            if t in _PERI_TYPES:
                return ("peri", t)
    return None


def _aromatic_site(g: _Graph, atoms: tuple[int, ...], i: int, j_hz: dict[str, float]) -> ProtonSite:
    ring = _aromatic_ring(g, i)
    coup: list[tuple[int, float]] = []
    if ring is None or len(ring) not in (5, 6):
        return ProtonSite(atoms, g.nh[i] * len(atoms), (("aromatic:other", 1.0),), "other",
                          "aromatic H, ring not covered", (), fallback=True)
    n = len(ring)
    pos = ring.index(i)
    ring_set = set(ring)
    terms: list[tuple[str, float]] = []
    words = []
    fallback = False
    hetero = None
    for k in range(1, n):
        r = ring[(pos + k) % n]
        d = min(k, n - k)
        where = _ORTHO_META_PARA[d]
        if g.z[r] != 6:
            if n == 6:
                if g.z[r] == 7:
                    terms.append((f"arom:{where}:ring_N", 1.0))
                    words.append(f"{where} ring N")
                else:
                    terms.append((f"arom:{where}:other", 1.0))
                    fallback = True
            elif hetero is None or d < hetero[1]:
                hetero = (g.z[r], d)
            continue
        if g.nh[r] and g.cls[r] != g.cls[i]:
            if d == 1:
                coup.append((1, j_hz["3J_aromatic_ortho"] if n == 6 else j_hz["3J_arom5"]))
            elif d == 2 and n == 6:
                coup.append((1, j_hz["4J_aromatic_meta"]))
        for s, _ in g.nbrs[r]:
            if s in ring_set:
                continue
            t = _aromatic_substituent_type(g, s, r)
            if t is None:
                continue
            if t == "aryl" and g.ri.AreAtomsInSameRing(r, s):
                # the other ring of a fused system is not a twisted biaryl ring: its own
                # rows (a phenyl substituent shields less than a ring fusion deshields)
                t = "fused"
            terms.append((f"arom:{where}:{t}", 1.0))
            words.append(f"{where} {t}")
            fallback |= t == "other"
            if t == "F" and d in (1, 2) and n == 6:
                coup.append((1, j_hz["3J_HF_aromatic_ortho"] if d == 1 else j_hz["4J_HF_aromatic_meta"]))
    if n == 6:
        for k in (1, n - 1):  # fused neighbours: peri and bay positions across the ring fusion
            where = _peri_term(g, ring[(pos + k) % n], ring_set)
            if where:
                terms.append((f"arom:{where[0]}:{where[1]}", 1.0))
                words.append(f"{where[0]} {where[1]}")
        terms.insert(0, ("arom:base:base", 1.0))
        sigma_class, env = "aromatic", "ArH (benzene increments)"
    else:
        sym = {8: "O", 16: "S", 7: "N"}.get(hetero[0]) if hetero else None
        key = f"arom5:{sym}_{'alpha' if hetero[1] == 1 else 'beta'}" if sym else "arom5:other"
        fallback |= sym is None
        # benzene increments stand in for five-membered rings (common practice, wide sigma)
        terms = [(key, 1.0)] + [(k.replace(":para:", ":meta:"), c) for k, c in terms]
        sigma_class, env = "arom5", "heteroaromatic H"
    if words:
        env += ": " + ", ".join(words)
    return ProtonSite(atoms, g.nh[i] * len(atoms), tuple(terms), sigma_class, env, tuple(coup),
                      fallback=fallback)


# --------------------------------------------------------------------------- others
_ALKYNE_CLASS = {"alkyl": "alkyl", "alkyl_ring": "alkyl", "CH2O": "CH2O", "CH2X": "CH2X", "CH2N": "CH2X",
                 "CH2S": "CH2X", "CX3": "CX3", "aryl": "aryl", "vinyl": "vinyl", "alkynyl": "alkynyl",
                 "OR": "OR", "OCOR": "OR", **{c: "carbonyl" for c in _CARBONYL}}


def _alkyne_site(g: _Graph, atoms: tuple[int, ...], i: int, j: int, j_hz: dict[str, float]) -> ProtonSite:
    others = [y for y, _ in g.nbrs[j] if y != i and g.z[y] != 1]
    coup: list[tuple[int, float]] = []
    if not others:
        kind = "H"
    else:
        y = others[0]
        kind = _ALKYNE_CLASS.get(vinyl_substituent_type(g, y, j, i) or "", "other")
        if g.sp3(y) and g.nh[y]:
            coup.append((g.nh[y], j_hz["4J_alkyne"]))
    return ProtonSite(atoms, g.nh[i] * len(atoms), ((f"alkyne:{kind}", 1.0),), "alkyne",
                      f"alkyne C-H, {kind}", tuple(coup), fallback=kind == "other")


def _aldehyde_site(g: _Graph, atoms: tuple[int, ...], i: int, j_hz: dict[str, float]) -> ProtonSite:
    others = [y for y, o in g.nbrs[i] if o == 1.0 and g.z[y] != 1]
    coup: list[tuple[int, float]] = []
    if not others:
        kind = "H"
    else:
        y = others[0]
        zy = g.z[y]
        if zy == 8:
            kind = "O"
        elif zy == 7:
            kind = "N"
        elif zy == 6 and g.arom[y]:
            kind = "aryl"
        elif zy == 6 and g.sp3(y):
            kind = "alkyl"
            if g.nh[y]:
                coup.append((g.nh[y], j_hz["3J_sp3_aldehyde"]))
        elif zy == 6:
            kind = "vinyl"
            if g.nh[y]:
                coup.append((g.nh[y], j_hz["3J_sp2_aldehyde"]))
        else:
            kind = "other"
    return ProtonSite(atoms, g.nh[i] * len(atoms), ((f"aldehyde:{kind}", 1.0),), "aldehyde",
                      f"CHO, {kind}", tuple(coup), fallback=kind == "other")


def _chelating_neighbour(g: _Graph, y: int) -> bool:
    """True when the sp2 carbon ``y`` carrying an OH has a neighbour on its C=C or aromatic
    ring that bears a carbonyl or nitro group: the OH then sits in a six-membered
    intramolecular hydrogen bond (O-H...O=C), which moves it some 5-10 ppm downfield
    (salicylaldehyde OH near 11 ppm, the enol of pentane-2,4-dione near 15.5 ppm; from memory)."""
    for w, o in g.nbrs[y]:
        if g.z[w] != 6 or o == 1.0:
            continue  # only the partner across the C=C or along the aromatic ring (order 1.5)
        for v, o2 in g.nbrs[w]:
            if v == y or o2 != 1.0:
                continue
            if g.z[v] == 6 and not g.arom[v] and g.double_o(v):
                return True
            if g.z[v] == 7 and sum(1 for u, _ in g.nbrs[v] if g.z[u] == 8) == 2:
                return True
    return False


def _exchangeable_site(g: _Graph, atoms: tuple[int, ...], i: int) -> ProtonSite:
    z = g.z[i]
    nb = [y for y, _ in g.nbrs[i] if g.z[y] != 1]
    if z == 8:
        if not nb:
            kind = "water"
        else:
            y = nb[0]
            if g.z[y] == 8:
                kind = "hydroperoxide"
            elif g.z[y] == 6 and g.arom[y]:
                kind = "phenol_chelated" if _chelating_neighbour(g, y) else "phenol"
            elif g.z[y] == 6 and g.double_o(y):
                kind = "acid"
            elif g.z[y] == 6 and not g.sp3(y):
                kind = "enol_chelated" if _chelating_neighbour(g, y) else "enol"
            elif g.z[y] == 6:
                kind = "alcohol"
            else:
                kind = "other"  # N-OH, B-OH, Si-OH, ...: no table value
    elif z == 7:
        if any(g.z[y] == 6 and g.double_o(y) for y in nb):
            kind = "amide"
        elif any(g.arom[y] for y in nb):
            kind = "aniline"
        else:
            kind = "amine"
    elif z == 16:
        kind = "thiol"
    else:
        kind = "other"
    label = {8: "OH", 7: "NH", 16: "SH"}.get(z, "X-H")
    note = ", exchangeable" if z in (7, 8, 16) else ""
    return ProtonSite(atoms, g.nh[i] * len(atoms), ((f"exchangeable:{kind}", 1.0),),
                      "exchangeable",
                      f"{label} ({kind}){note}", (), exchangeable=z in (7, 8, 16),
                      fallback=kind == "other")


def _alkene_twins(g: _Graph, atoms: tuple[int, ...]) -> tuple[tuple[int, ...], tuple[int, ...]] | None:
    """Halves of an equivalence set of sp3 groups sitting in twos on alkene carbons whose
    partner carbon has two different substituents (cis and trans groups), or None."""
    if len(atoms) < 2:
        return None
    first: list[int] = []
    second: list[int] = []
    members = set(atoms)
    done: set[int] = set()
    for y in atoms:
        for c, o in g.nbrs[y]:
            if c in done or o != 1.0 or g.z[c] != 6 or g.arom[c]:
                continue
            d = g.double_c(c)
            if d is None:
                continue
            twins = [w for w, ow in g.nbrs[c] if w in members and ow == 1.0]
            if len(twins) != 2:
                continue
            far = [w for w, _ in g.nbrs[d] if w != c]
            far_cls = {g.cls[w] for w in far}
            if len(far) + g.nh[d] != 2 or (len(far) == 2 and len(far_cls) == 1):
                continue
            done.add(c)
            first.append(twins[0])
            second.append(twins[1])
    if not first:
        return None
    rest = [a for a in atoms if a not in first and a not in second]
    return tuple(sorted(first + rest)), tuple(sorted(second))


def proton_sites(structure: Structure, j_hz: dict[str, float]) -> list[ProtonSite]:
    """All 1H signals of a structure with their model terms and couplings.

    Parameters
    ----------
    structure : Structure
        Perceived molecule (equivalence, diastereotopic groups).
    j_hz : dict
        Coupling constants by name (h1_coupling.csv).
    """
    g = _Graph(structure)
    sites: list[ProtonSite] = []
    for atoms in g.groups():
        i = atoms[0]
        if not g.nh[i]:
            continue
        z = g.z[i]
        if z != 6:
            sites.append(_exchangeable_site(g, atoms, i))
            continue
        if g.arom[i]:
            sites.append(_aromatic_site(g, atoms, i, j_hz))
            continue
        if g.sp3(i):
            terms, hc, env, fb = _sp3_terms(g, i)
            coup = _sp3_couplings(g, i, j_hz)
            if i in structure.diastereotopic_ch2 and g.nh[i] == 2:
                kind = "CH2_ring" if g.ring[i] else "CH2_chain"
                coup2 = tuple(coup) + ((1, j_hz["2J_sp3_gem"]),)
                for sign, tag in ((1.0, "a"), (-1.0, "b")):
                    sites.append(ProtonSite(atoms, len(atoms), tuple(terms) + ((f"sp3:split:{kind}:any", sign),),
                                            hc, f"{env}, diastereotopic H{tag}", coup2,
                                            diastereotopic=True, fallback=fb))
                continue
            halves = structure.diastereotopic_halves(atoms) if structure.diastereotopic_pairs else None
            if halves:
                for sign, part in ((1.0, halves[0]), (-1.0, halves[1])):
                    sites.append(ProtonSite(part, g.nh[i] * len(part), tuple(terms) + (("sp3:split:group:any", sign),),
                                            hc, f"{env}, diastereotopic group", tuple(coup),
                                            diastereotopic=True, fallback=fb))
                continue
            twins = _alkene_twins(g, atoms)
            if twins:
                # twin groups on one alkene carbon: one cis, one trans to the far substituent
                # (2-methylbut-2-ene CH3 1.68 and 1.60 ppm, from memory); the one cis to the
                # heavier far group is upfield
                for sign, part, where in ((1.0, twins[0], "cis to H"), (-1.0, twins[1], "cis to the far substituent")):
                    sites.append(ProtonSite(part, g.nh[i] * len(part), tuple(terms) + (("sp3:split:group:any", sign),),
                                            hc, f"{env}, allylic twin {where}", tuple(coup), fallback=fb))
                continue
            sites.append(ProtonSite(atoms, g.nh[i] * len(atoms), tuple(terms), hc, env, tuple(coup), fallback=fb,
                                    complex_multiplet=_ring_methine_is_complex(g, i)))
            continue
        triple = next((y for y, o in g.nbrs[i] if o == 3.0), None)
        if triple is not None:
            if g.z[triple] == 6:
                sites.append(_alkyne_site(g, atoms, i, triple, j_hz))
            else:
                sites.append(ProtonSite(atoms, g.nh[i] * len(atoms), (("sp:other", 1.0),), "other",
                                        "sp C-H, not covered", (), fallback=True))
            continue
        if g.double_o(i):
            sites.append(_aldehyde_site(g, atoms, i, j_hz))
            continue
        j = g.double_c(i)
        if j is not None:
            if sum(1 for _, o in g.nbrs[j] if o == 2.0) == 2:
                kind = "CH2" if g.nh[i] == 2 else "CH"
                coup = [(g.nh[y], j_hz["3J_sp3_vinyl"]) for y, _ in g.nbrs[i] if g.sp3(y) and g.nh[y]]
                sites.append(ProtonSite(atoms, g.nh[i] * len(atoms), ((f"allene:{kind}", 1.0),), "allene",
                                        f"allene =C{kind[1:]}", tuple(coup)))
            else:
                sites.extend(_alkene_sites(g, atoms, i, j, j_hz))
            continue
        if any(o == 2.0 and g.z[y] == 7 for y, o in g.nbrs[i]):
            sites.append(ProtonSite(atoms, g.nh[i] * len(atoms), (("sp2:imine", 1.0),), "other", "CH=N", ()))
            continue
        sites.append(ProtonSite(atoms, g.nh[i] * len(atoms), (("sp2:other", 1.0),), "other",
                                "sp2 C-H, not covered", (), fallback=True))
    return sites
