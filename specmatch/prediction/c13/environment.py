"""Perceive each carbon's 13C environment as a list of additive-increment terms.

One function, :func:`carbon_environments`, turns a molecule into, per carbon atom,
the names of the increments that add up to its shift (the rows of
``tables/c13_increments.csv``). The same function serves prediction and the
fitting script (``benchmarks/fit_c13_tables.py``), so the fitted numbers mean
exactly what the code sums.

Term names read as ``class:what:...``:

``sp3:...``
    Grant-Paul style: ``sp3:base`` (-2.3 ppm, methane-like origin) plus, for every
    atom near the carbon, an increment by its type and position: ``sp3:a:Cl:1``
    (alpha Cl on a carbon with one other heavy substituent, i.e. terminal R-CH2Cl;
    ``:2`` = internal R2CHCl, the handbook "n"/"iso" columns), ``sp3:b:C>OH`` (beta
    OH reached through an sp3 carbon), ``sp3:g:OR``, ``sp3:d:O``; branching
    corrections ``sp3:steric:3:2`` (tertiary carbon next to a secondary one,
    Grant-Paul/Lindeman-Adams), ring corrections ``sp3:ring5:H2``, geminal and
    vicinal interactions ``sp3:gem:ClCl``, ``sp3:gem:Br+Car``, ``sp3:vic:OO``, and
    the gamma-cis effect across a neighbouring double bond ``sp3:allyl-cis:C``.
    Interaction corrections (see :func:`is_correction`) refine the main terms and
    are shrunk toward 0 in fitting: ``...@3`` (the same increment on a carbon with 3
    heavy neighbours), ``sp3:b:C3>OH`` (through a tertiary carbon), ``sp3:exo:...``
    (substituents outside the carbon's ring), ``sp3:xring6``, ``sp3:bridged:...``,
    ``sp3:sig:C+OH`` (class value of the first-shell neighbour set).
``ene:...``
    Alkene carbons: ``ene:base`` (123.3 ppm, ethylene) plus substituent atoms on
    the same side (alpha, beta, gamma) and on the far side (alpha', ...), the
    cis correction ``ene:cis``, ring/exocyclic terms, and corrections for the
    substitution pattern, geminal/vicinal heteroatoms and allene ends.
``ar:...``, ``har:...``
    Benzene carbons: 128.5 ppm plus ipso/ortho/meta/para substituent increments;
    other aromatic rings (furans, pyranones) by ring and position.
``yne:...``, ``cn:...``, ``co:...``
    Alkyne, nitrile and carbonyl carbons (ketone, aldehyde, acid, ester,
    anhydride, acid halide, carbonate) by class base and substituent increments;
    ``allene:...`` allene centres.

Atom types (a substituent atom is typed by what it is, so ``OR`` means an ether
oxygen and ``CO`` a ketone carbon): ``C`` sp3 carbon, ``C=C`` alkene carbon,
``Car`` aromatic carbon, ``C#C`` alkyne carbon, ``C#N`` nitrile carbon, ``CHO``,
``CO`` ketone, ``COOH``, ``COOR`` ester/lactone, ``COX`` acid halide, ``COOCO``
anhydride, ``OCOO`` carbonate, ``CON`` amide-like, ``C=X`` other sp2 carbon,
``OH``, ``OR``, ``OC=O`` (ester/anhydride single-bonded O), ``OO`` peroxide O,
``Oar`` aromatic ring O, ``F``, ``Cl``, ``Br``, ``I``, ``N``, ``S``, ``X`` other.
Atoms that belong to a functional group already named by its carbon (the =O of a
carbonyl, the OH of an acid, the halogen of an acid halide, the N of a nitrile)
are not counted again.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from rdkit import Chem

from ...structures.graph import MolGraph

HETERO_ELEMENT = {"OH": "O", "OR": "O", "OC=O": "O", "OO": "O", "F": "F", "Cl": "Cl",
                  "Br": "Br", "I": "I", "N": "N", "S": "S"}
CARBONYL_TYPES = ("CHO", "CO", "COOH", "COOR", "COX", "COOCO", "OCOO", "CON")
_POS = ("a", "b", "g", "d")


#: Nearest covered type for a type the tables may lack (used only as a fallback).
NEAREST_TYPE = {"CON": "COOR", "OCOO": "COOR", "COOCO": "COOR", "COX": "COOR", "CHO": "CO",
                "X": "C", "C=X": "C=C", "OO": "OR", "Oar": "OR", "C#N": "C#C", "N": "OR", "S": "Br"}
_TYPE_TOKEN = re.compile(r"(?<=[:>+|])(CON|OCOO|COOCO|COX|CHO|X|C=X|OO|Oar|C#N|N|S)(?=$|[:>+|@])")
_CORRECTION = ("@", ":sig:", ":pattern:", ":exo:", ":xring", ":bridged:", ":gem", ":vic:", ":bgem:")


def is_correction(term: str) -> bool:
    """True for interaction/correction terms (their absence means 'no correction')."""
    return any(c in term for c in _CORRECTION) or term[:7] in {f"sp3:b:C{k}" for k in "1234"}


def nearest_term(term: str) -> str | None:
    """The same increment with uncovered atom types replaced by their nearest type."""
    new = _TYPE_TOKEN.sub(lambda m: NEAREST_TYPE[m.group(1)], term)
    return new if new != term else None


@dataclass(frozen=True)
class CarbonEnvironment:
    """The increment terms of one carbon atom.

    Attributes
    ----------
    atom : int
        Heavy-atom index.
    kind : str
        Table class: ``sp3``, ``ene``, ``ar``, ``har``, ``yne``, ``cn``, ``co``,
        or ``other`` (no table; nearest class used).
    atom_type : str
        Its own type (see module docstring).
    hydrogens : int
        Attached H.
    terms : tuple of str
        Increment names; a name listed twice counts twice.
    label : str
        Short readable environment, e.g. ``"CH2, alpha Cl"``.
    """

    atom: int
    kind: str
    atom_type: str
    hydrogens: int
    terms: tuple[str, ...]
    label: str


def _atom_types(sym: list[str], arom: list[bool], hs: list[int], bonds: list[list[tuple[int, float]]]
                ) -> tuple[list[str], list[bool]]:
    """Type every heavy atom; flag the atoms that are internal to a named group.

    `bonds[i]` lists (neighbour, bond order) with 1.5 for aromatic bonds.
    """
    n = len(sym)
    types = ["X"] * n
    internal = [False] * n

    def carbonyl_c(j: int) -> bool:
        return sym[j] == "C" and not arom[j] and any(o == 2.0 and sym[k] == "O" for k, o in bonds[j])

    for i in range(n):
        s = sym[i]
        if s == "C":
            if arom[i]:
                types[i] = "Car"
                continue
            dbl_o = dbl_c = dbl_x = tri_c = tri_n = 0
            for k, o in bonds[i]:
                sk = sym[k]
                if o == 2.0:
                    if sk == "O":
                        dbl_o += 1
                    elif sk == "C":
                        dbl_c += 1
                    else:
                        dbl_x += 1
                elif o == 3.0:
                    if sk == "N":
                        tri_n += 1
                    else:
                        tri_c += 1
            if dbl_o == 1 and dbl_c == 0 and dbl_x == 0:
                singles = [k for k, o in bonds[i] if o == 1.0]
                syms = [sym[k] for k in singles]
                o_single = [k for k in singles if sym[k] == "O"]
                if "N" in syms or "S" in syms:
                    types[i] = "CON"
                elif any(x in ("F", "Cl", "Br", "I") for x in syms):
                    types[i] = "COX"
                elif len(o_single) >= 2:
                    types[i] = "OCOO"
                elif len(o_single) == 1:
                    o = o_single[0]
                    if hs[o] > 0:
                        types[i] = "COOH"
                    elif any(carbonyl_c(k) for k, _ in bonds[o] if k != i):
                        types[i] = "COOCO"
                    else:
                        types[i] = "COOR"
                elif hs[i] > 0:
                    types[i] = "CHO"
                else:
                    types[i] = "CO"
            elif dbl_c == 1 and dbl_o == 0 and dbl_x == 0:
                types[i] = "C=C"
            elif dbl_c + dbl_o + dbl_x >= 1:
                types[i] = "C=X"  # allene / ketene centre, C=N, C=S
            elif tri_n:
                types[i] = "C#N"
            elif tri_c:
                types[i] = "C#C"
            else:
                types[i] = "C"
        elif s == "O":
            if arom[i]:
                types[i] = "Oar"
            elif any(o == 2.0 for _, o in bonds[i]):
                types[i] = "=O"
            elif hs[i] > 0:
                types[i] = "OH"
            elif any(sym[k] == "O" for k, _ in bonds[i]):
                types[i] = "OO"
            elif any(carbonyl_c(k) for k, _ in bonds[i]):
                types[i] = "OC=O"
            else:
                types[i] = "OR"
        elif s in ("F", "Cl", "Br", "I", "N", "S"):
            types[i] = s
    # atoms inside a group already named by its carbon
    for i in range(n):
        t = types[i]
        if t == "=O":
            internal[i] = True
        elif t == "OH" and any(types[k] == "COOH" for k, _ in bonds[i]):
            internal[i] = True
        elif t in ("F", "Cl", "Br", "I") and any(types[k] == "COX" for k, _ in bonds[i]):
            internal[i] = True
        elif t == "N" and any(types[k] == "C#N" for k, _ in bonds[i]):
            internal[i] = True
    return types, internal


def _ring_bucket(size: int) -> str:
    return str(size) if size <= 7 else "8"


class _Context:
    """Per-molecule perception shared by all carbons (computed once), on the shared graph view."""

    def __init__(self, mol: Chem.Mol, graph: MolGraph | None = None):
        g = graph if graph is not None else MolGraph(mol)
        self.mol = mol
        self.n = g.n
        self.sym, self.arom, self.hs = g.sym, g.arom, g.nh_total
        self.bonds = g.bonds
        self.double_bonds = g.double_bonds
        self.types, self.internal = _atom_types(self.sym, self.arom, self.hs, self.bonds)
        self.dist = g.dist
        self.nbrs, self.deg = g.nbrs, g.deg
        self.rings, self.atom_rings = g.rings, g.atom_rings
        self._min_ring = g.min_ring_size
        self._bridged: list[bool] | None = None
        self._ranks: list[int] | None = None

    def bridged_role(self, i: int) -> str:
        """'head', 'bridge' or 'member' if atom i is in a bridged ring system, else ''."""
        if self._bridged is None:
            sets = [set(r) for r in self.rings]
            self._bridged = [False] * len(sets)
            for x in range(len(sets)):
                for y in range(x + 1, len(sets)):
                    if len(sets[x] & sets[y]) >= 3:
                        self._bridged[x] = self._bridged[y] = True
        mine = [k for k in self.atom_rings[i] if self._bridged[k]]
        if not mine:
            return ""
        ring_nbrs = sum(1 for j in self.nbrs[i] if any(j in self.rings[k] for k in mine))
        if ring_nbrs >= 3:
            return "head"
        return "bridge" if len(mine) >= 2 else "member"

    def ranks(self) -> list[int]:
        """Topological symmetry classes (computed only when needed)."""
        if self._ranks is None:
            self._ranks = list(Chem.CanonicalRankAtoms(self.mol, breakTies=False, includeChirality=False))
        return self._ranks

    def min_ring(self, i: int) -> int:
        return self._min_ring[i]

    def min_ring_of_bond(self, i: int, j: int) -> int:
        sizes = [len(self.rings[k]) for k in self.atom_rings[i] if j in self.rings[k]]
        return min(sizes) if sizes else 0

    def partner(self, i: int, order: float) -> int:
        for j, o in self.bonds[i]:
            if o == order:
                return j
        return -1

    def hetero_subs(self, c: int, exclude: int = -1) -> list[str]:
        """Elements of heteroatom substituents (O, halogen, N, S) on atom c."""
        out = []
        for j in self.nbrs[c]:
            if j != exclude and not self.internal[j]:
                e = HETERO_ELEMENT.get(self.types[j])
                if e:
                    out.append(e)
        return out

    def cis_to(self, c: int, p: int, s: int) -> list[int] | None:
        """Substituents of alkene carbon p that are cis to substituent s of carbon c.

        None if the geometry is not given (and cannot be implied by a small ring).
        """
        sp = [j for j in self.nbrs[p] if j != c]
        if not sp:
            return []
        sc = [j for j in self.nbrs[c] if j != p]
        ring = self.min_ring_of_bond(c, p)
        if ring and ring <= 7:
            # in a small ring the two ring neighbours are cis; exocyclic ones likewise
            def in_ring(x: int, y: int) -> bool:
                return any(x in self.rings[k] and y in self.rings[k] and c in self.rings[k] and p in self.rings[k]
                           for k in self.atom_rings[x])
            s_ring = in_ring(s, c)
            return [j for j in sp if in_ring(j, p) == s_ring]
        bond = self.double_bonds[(c, p)]
        st = bond.GetStereo()
        ref = list(bond.GetStereoAtoms())
        if st in (Chem.BondStereo.STEREONONE, Chem.BondStereo.STEREOANY) or len(ref) != 2:
            if len(sc) == 1 and len(sp) == 1:
                return None  # a 1,2-disubstituted double bond of unknown geometry
            # without a geometry the answer is still known when one end carries two
            # equivalent groups: twin groups get one cis, one trans (by atom order),
            # and a group facing two equivalent ones has exactly one cis partner
            ranks = self.ranks()
            if len(sc) == 2 and ranks[sc[0]] == ranks[sc[1]]:
                k = sorted(sc).index(s)
                sp = sorted(sp)
                return [sp[k]] if k < len(sp) else []
            if len(sp) == 2 and ranks[sp[0]] == ranks[sp[1]]:
                return [min(sp)]
            return None
        ref_c, ref_p = (ref[0], ref[1]) if ref[0] in sc else (ref[1], ref[0])
        same = st in (Chem.BondStereo.STEREOZ, Chem.BondStereo.STEREOCIS)
        if s != ref_c:
            same = not same
        if same:
            return [ref_p] if ref_p in sp else []
        return [j for j in sp if j != ref_p]


def _pairs(elements: list[str]) -> list[str]:
    els = sorted(elements)
    return [els[x] + els[y] for x in range(len(els)) for y in range(x + 1, len(els))]


def _sp3_terms(ctx: _Context, i: int) -> list[str]:
    t = ["sp3:base"]
    add = t.append  # locals: this is the predictor's innermost loop
    types, dist, nbrs, internal, deg = ctx.types, ctx.dist[i], ctx.nbrs, ctx.internal, ctx.deg
    min_ring, rings, atom_rings = ctx._min_ring, ctx.rings, ctx.atom_rings
    deg_i = deg[i]
    around = nbrs[i]
    for a in around:
        if internal[a]:
            continue
        ta = types[a]
        # alpha increment by how many other heavy substituents the carbon has
        # (0-1: terminal "n" column of the handbook tables, 2-3: internal "iso")
        add(f"sp3:a:{ta}:{deg_i - 1}")
        if ta == "C":
            add(f"sp3:steric:{deg_i}:{deg[a]}")
        for b in nbrs[a]:
            if b != i and dist[b] == 2 and not internal[b]:
                tb = types[b]
                add(f"sp3:b:{ta}>{tb}")
                add(f"sp3:b:{ta}>{tb}@{deg_i}")
                if ta == "C":
                    add(f"sp3:b:C{deg[a]}>{tb}")
    all_dist = ctx.dist
    for j, d in enumerate(dist):
        if d == 3:
            if internal[j]:
                continue
            tj = types[j]
            add(f"sp3:g:{tj}")
            add(f"sp3:g:{tj}@{deg_i}")
            # gamma reached through a heteroatom or an unsaturated atom, not a chain CH2
            via = [a for a in around if all_dist[a][j] == 2]
            if via and all(types[a] != "C" for a in via):
                # two paths (a ring): the first type in sort order, not in atom order
                add(f"sp3:g:{tj}@via-{min(types[a] for a in via)}")
        elif d == 4 and not internal[j]:
            add(f"sp3:d:{HETERO_ELEMENT.get(types[j], 'C')}")
    r = min_ring[i]
    if r:
        add(f"sp3:ring{_ring_bucket(r)}:H{ctx.hs[i]}")
        mine_rings = atom_rings[i]
        nr = len(mine_rings)
        if nr >= 2:
            add(f"sp3:rings{min(nr, 3)}")
        role = ctx.bridged_role(i)
        if role:
            add(f"sp3:bridged:{role}:{_ring_bucket(r)}")
        # substituents outside the carbon's rings act differently from chain atoms
        # (ring substituent parameters of the Dalling-Grant type)
        mine = set()
        for k in mine_rings:
            mine.update(rings[k])
        for j, d in enumerate(dist):
            if 1 <= d <= 3 and j not in mine and not internal[j]:
                add(f"sp3:exo:{_POS[d - 1]}:{types[j]}")
        for k in mine_rings:
            add(f"sp3:xring{_ring_bucket(len(rings[k]))}")
    for a in around:
        ra = min_ring[a]
        if (ra == 3 or ra == 4) and not any(i in rings[k] for k in atom_rings[a] if len(rings[k]) == ra):
            add(f"sp3:nb-ring{ra}")
    for a in around:
        if types[a] == "C=C":
            # gamma substituent cis across the double bond (steric, upfield)
            p = ctx.partner(a, 2.0)
            cis = ctx.cis_to(a, p, i)
            if cis is None:
                if len(nbrs[p]) > 1:
                    add("sp3:allyl-cis?")
            else:
                # the effect is built into the ring terms when the C=C is in a ring
                tag = "allyl-cis-ring" if ctx.min_ring_of_bond(a, p) else "allyl-cis"
                t.extend(f"sp3:{tag}:{types[j]}" for j in cis if not internal[j])
    # first-shell signature: a class value for the combination of neighbours
    add(f"sp3:sig:{'+'.join(sorted([types[a] for a in around if not internal[a]]))}")
    het = ctx.hetero_subs(i)
    if len(het) > 1:
        for p in _pairs(het):
            add(f"sp3:gem:{p}")
    if het:
        # a heteroatom next to an unsaturated or carbonyl group on the same carbon
        unsat = [types[a] for a in around if types[a] != "C" and types[a] not in HETERO_ELEMENT and not internal[a]]
        for e1 in het:
            for u in unsat:
                add(f"sp3:gem:{e1}+{u}")
        for a in around:
            if types[a] == "C":
                for e2 in ctx.hetero_subs(a, exclude=i):
                    for e1 in het:
                        add(f"sp3:vic:{''.join(sorted((e1, e2)))}")
    for a in around:
        if types[a] == "C":
            subs = ctx.hetero_subs(a, exclude=i)
            if len(subs) > 1:
                for p in _pairs(subs):
                    add(f"sp3:bgem:{p}")
    return t


def _side_terms(ctx: _Context, i: int, p: int, cls: str) -> list[str]:
    """Substituent atoms on the observed side (a, b, g) and the far side (a', b', g').

    Beta terms name the atom they pass through (``ene:b:C>Cl`` is the Cl of a CH2Cl
    group); gamma terms name only the gamma atom.
    """
    t = [f"{cls}:base"]
    di, dp = ctx.dist[i], ctx.dist[p]
    types, nbrs, internal = ctx.types, ctx.nbrs, ctx.internal
    for centre, other, dc, do, prime in ((i, p, di, dp, ""), (p, i, dp, di, "'")):
        for a in nbrs[centre]:
            if a == other or internal[a]:
                continue
            ta = types[a]
            t.append(f"{cls}:a{prime}:{ta}")
            for b in nbrs[a]:
                if b != centre and dc[b] == 2 and not internal[b] and (dc[b] < do[b] if prime else dc[b] <= do[b]):
                    t.append(f"{cls}:b{prime}:{ta}>{types[b]}")
    for j in range(ctx.n):
        if internal[j]:
            continue
        x, y = di[j], dp[j]
        if x == 3 and x <= y:
            t.append(f"{cls}:g:{types[j]}")
        elif y == 3 and y < x:
            t.append(f"{cls}:g':{types[j]}")
    return t


def _cis_terms(ctx: _Context, i: int, p: int) -> list[str]:
    """One ``ene:cis`` per pair of cis substituents across the double bond."""
    si = [j for j in ctx.nbrs[i] if j != p]
    sp = [j for j in ctx.nbrs[p] if j != i]
    if not si or not sp:
        return []
    if len(si) == 2 or len(sp) == 2:
        return ["ene:cis"] * (len(si) * len(sp) // 2)
    cis = ctx.cis_to(i, p, si[0])
    if cis is None:
        return ["ene:cis?"]
    return ["ene:cis"] * len(cis)


def _ene_terms(ctx: _Context, i: int) -> list[str]:
    p = ctx.partner(i, 2.0)
    t = _side_terms(ctx, i, p, "ene")
    t += _cis_terms(ctx, i, p)
    r = ctx.min_ring_of_bond(i, p)
    if r:
        t.append(f"ene:ring{_ring_bucket(r)}")
        if ctx.bridged_role(i):
            t.append(f"ene:bridged:{_ring_bucket(r)}")
    else:
        ri = ctx.min_ring(i)
        if ri:
            t.append(f"ene:exo{_ring_bucket(ri)}")
        rp = ctx.min_ring(p)
        if rp:
            t.append(f"ene:exo{_ring_bucket(rp)}'")
    t.append(f"ene:H{ctx.hs[i]}")
    # substitution pattern (mono-, gem-, 1,2-, tri-, tetra-): increments are not
    # strictly additive across patterns
    t.append(f"ene:pattern:{len(ctx.nbrs[i]) - 1}{len(ctx.nbrs[p]) - 1}")
    t.extend([f"{x}@H{ctx.hs[i]}" for x in t if x.startswith(("ene:a:", "ene:a':"))])
    if r:
        t.append(f"ene:ring{_ring_bucket(r)}:H{ctx.hs[i]}")
    near = "+".join(sorted(ctx.types[j] for j in ctx.nbrs[i] if j != p and not ctx.internal[j]))
    farr = "+".join(sorted(ctx.types[j] for j in ctx.nbrs[p] if j != i and not ctx.internal[j]))
    t.append(f"ene:sig:{near}|{farr}")
    if ctx.types[p] == "C=X":
        # a ketene end (C=C=O) is far more shielded than an allene end (ketene CH2 2.5 ppm,
        # propadiene CH2 74.8, from memory): its own term
        t.append("ene:ketene-end" if any(o == 2.0 and ctx.sym[k] == "O" for k, o in ctx.bonds[p])
                 else "ene:allene-end")
    # two heteroatoms (or hetero + unsaturated group) on one alkene carbon, and
    # heteroatoms facing each other across the bond: not additive
    subs = [ctx.types[j] for j in ctx.nbrs[i] if j != p and not ctx.internal[j]]
    far = [ctx.types[j] for j in ctx.nbrs[p] if j != i and not ctx.internal[j]]
    het = [HETERO_ELEMENT[x] for x in subs if x in HETERO_ELEMENT]
    for pr in _pairs(het):
        t.append(f"ene:gem:{pr}")
    het_far = [HETERO_ELEMENT[x] for x in far if x in HETERO_ELEMENT]
    for e1 in het:
        for e2 in het_far:
            t.append(f"ene:vic:{e1}>{e2}")
    for pr in _pairs(het_far):
        t.append(f"ene:gem':{pr}")
    return t


def _allene_terms(ctx: _Context, i: int) -> list[str]:
    """Allene centre: a class value plus the substituents on its two ends."""
    t = ["allene:base"]
    for j in range(ctx.n):
        if ctx.dist[i][j] == 2 and not ctx.internal[j]:
            t.append(f"allene:b:{ctx.types[j]}")
        elif ctx.dist[i][j] == 3 and not ctx.internal[j]:
            t.append(f"allene:g:{ctx.types[j]}")
    return t


def _yne_terms(ctx: _Context, i: int) -> list[str]:
    p = ctx.partner(i, 3.0)
    t = _side_terms(ctx, i, p, "yne")
    r = ctx.min_ring(i)
    if r:
        t.append(f"yne:ring{_ring_bucket(r)}")
    return t


def _first_ring(ctx: _Context, i: int, rings: list[tuple[int, ...]]) -> tuple[int, ...] | None:
    """The ring a fusion atom `i` is read in: the smallest, then the first by the symmetry
    ranks of its atoms seen from `i` (ring distance, rank), so the choice does not follow
    the order the atoms were written in."""
    if len(rings) <= 1:
        return rings[0] if rings else None
    ranks = ctx.ranks()

    def key(r: tuple[int, ...]) -> tuple:
        n, k0 = len(r), r.index(i)
        return n, sorted((min(abs(k - k0), n - abs(k - k0)), ranks[x]) for k, x in enumerate(r))
    return min(rings, key=key)


def _benzene_ring(ctx: _Context, i: int) -> tuple[int, ...] | None:
    return _first_ring(ctx, i, [ctx.rings[k] for k in ctx.atom_rings[i]
                             if len(ctx.rings[k]) == 6 and all(ctx.types[x] == "Car" for x in ctx.rings[k])])


def _ar_terms(ctx: _Context, i: int, ring: tuple[int, ...], cls: str) -> list[str]:
    """Ring-position increments: substituents on each ring atom by ipso/ortho/meta/para."""
    n = len(ring)
    k0 = ring.index(i)
    ring_set = set(ring)
    types = ctx.types
    if cls == "ar":
        t = ["ar:base"]
    else:
        ring_o = [x for x in ring if ctx.sym[x] != "C"]
        hetero = "O" if ring_o else "C"
        d_o = min((ctx.dist[i][x] for x in ring_o), default=0)
        t = [f"har:base{n}{hetero}:dO{d_o}"]  # ring position counted from the ring O
    names = ("ipso", "ortho", "meta", "para")
    for k, r in enumerate(ring):
        d = abs(k - k0)
        d = min(d, n - d)
        pos = names[min(d, 3)]
        if ctx.sym[r] != "C":
            continue  # ring heteroatoms are part of the base value
        for s in ctx.nbrs[r]:
            if s in ring_set:
                continue
            if types[s] == "=O":
                # exocyclic C=O of pyranones, chromones, tropolones
                t.append(f"{cls}:=O:{pos}")
                continue
            if ctx.internal[s]:
                continue
            ts = types[s]
            shared = [q for q in ctx.atom_rings[r] if s in ctx.rings[q]]
            if shared:
                q = min(shared, key=lambda q: len(ctx.rings[q]))
                t.append(f"{cls}:fused{_ring_bucket(len(ctx.rings[q]))}:{pos}")
            t.append(f"{cls}:{ts}:{pos}")
            if cls == "ar":
                for u in ctx.nbrs[s]:
                    if u != r and u not in ring_set and not ctx.internal[u]:
                        t.append(f"ar:2:{ts}>{types[u]}:{pos}")
    return t


def _co_terms(ctx: _Context, i: int) -> list[str]:
    cls = ctx.types[i]
    group = "one" if cls in ("CO", "CHO") else "acid"
    t = [f"co:{cls}:base"]
    dist, types = ctx.dist[i], ctx.types
    for a in ctx.nbrs[i]:
        if ctx.internal[a]:
            continue
        ta = types[a]
        t.append(f"co:{group}:a:{ta}")
        for b in ctx.nbrs[a]:
            if b != i and dist[b] == 2 and not ctx.internal[b]:
                t.append(f"co:{group}:b:{ta}>{types[b]}")
    for j in range(ctx.n):
        if dist[j] == 3 and not ctx.internal[j]:
            t.append(f"co:{group}:g:{types[j]}")
    r = ctx.min_ring(i)
    if r:
        t.append(f"co:{group}:ring{_ring_bucket(r)}")
    return t


def _cn_terms(ctx: _Context, i: int) -> list[str]:
    t = ["cn:base"]
    for j in range(ctx.n):
        d = ctx.dist[i][j]
        if 1 <= d <= 3 and not ctx.internal[j]:
            t.append(f"cn:{_POS[int(d) - 1]}:{ctx.types[j]}")
    return t


_HNAME = ("C", "CH", "CH2", "CH3", "CH4")


_KIND_WORD = {"sp3": "sp3", "ene": "alkene", "ar": "benzene ring", "har": "aromatic ring",
              "yne": "alkyne", "cn": "nitrile", "allene": "allene centre"}


def _label(kind: str, atom_type: str, h: int, alpha_types: set[str] | None = None) -> str:
    """The readable environment; ``alpha_types``: the types of an sp3 carbon's alpha
    substituents (those of its ``sp3:a:`` terms), of which the non-carbon ones are named."""
    what = _KIND_WORD.get(kind) or (f"carbonyl {atom_type}" if kind == "co" else f"{atom_type} (no table)")
    alpha = sorted(alpha_types - {"C"}) if kind == "sp3" and alpha_types else ()
    extra = f", alpha {'/'.join(alpha)}" if alpha else ""
    return f"{_HNAME[min(h, 4)]} {what}{extra}"


def carbon_environments(mol: Chem.Mol, only: list[int] | None = None, graph: MolGraph | None = None
                        ) -> list[CarbonEnvironment]:
    """Increment terms for the carbon atoms of `mol` (all, or those in `only`), in atom order.

    ``graph`` is the molecule's shared graph view if the caller has one
    (:func:`specmatch.structures.graph.graph_of`).
    """
    ctx = _Context(mol, graph)
    out = []
    for i in (range(ctx.n) if only is None else only):
        if ctx.sym[i] != "C":
            continue
        ty = ctx.types[i]
        if ty == "C":
            kind, terms = "sp3", _sp3_terms(ctx, i)
        elif ty == "C=C":
            kind, terms = "ene", _ene_terms(ctx, i)
        elif ty == "Car":
            ring = _benzene_ring(ctx, i)
            if ring is not None:
                kind, terms = "ar", _ar_terms(ctx, i, ring, "ar")
            else:
                rings = [ctx.rings[k] for k in ctx.atom_rings[i] if all(ctx.arom[x] for x in ctx.rings[k])]
                if rings:
                    kind, terms = "har", _ar_terms(ctx, i, _first_ring(ctx, i, rings), "har")
                else:
                    kind, terms = "other", ["other:Car"]
        elif ty == "C#C":
            kind, terms = "yne", _yne_terms(ctx, i)
        elif ty == "C#N":
            kind, terms = "cn", _cn_terms(ctx, i)
        elif ty in CARBONYL_TYPES and ty != "CON":
            kind, terms = "co", _co_terms(ctx, i)
        elif ty == "C=X" and sum(1 for j, o in ctx.bonds[i] if o == 2.0 and ctx.types[j] == "C=C") == 2:
            kind, terms = "allene", _allene_terms(ctx, i)
        else:
            kind, terms = "other", [f"other:{ty}"]
        # an sp3 carbon's alpha terms name the types of its neighbours outside named groups
        alpha = {ctx.types[a] for a in ctx.nbrs[i] if not ctx.internal[a]} if kind == "sp3" else None
        out.append(CarbonEnvironment(i, kind, ty, ctx.hs[i], tuple(terms), _label(kind, ty, ctx.hs[i], alpha)))
    return out
