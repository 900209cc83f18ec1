"""Enumerate the plausible products of a reaction, with pathway, prior and role.

One driver per reaction class builds either a cation/radical network (see
:mod:`specmatch.reactions.network`) or a short list of direct products (hydroboration,
oxymercuration, halogen additions), each as weighted *outcomes*. The outcomes are merged by
constitution, given a floor, normalised to priors and assigned a role.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from rdkit import Chem

from ..errors import SpecmatchError
from ..structures import mol_from_text, mol_smiles
from .types import Candidate, Enumeration
from .network import (
    SINGLE,
    Channel,
    Intermediate,
    Network,
    Nucleophile,
    add_across,
    to_carbonyl,
    alkene_bonds,
    capture,
    e1_alkenes,
    ionise,
    lab,
    make_intermediate,
    prepare,
    shift,
    terminus_shares,
)
from .scales import alkene_dh
from .reagents import ADDITION_CLASSES, Reagent, parse_reagent
from .scales import prior_parameters

_HALIDE_NAME = {"Cl": "Cl-", "Br": "Br-", "I": "I-"}


@dataclass
class Outcome:
    """A product with its mechanistic weight and how it forms (before merging)."""

    mol: Chem.Mol
    weight: float
    label: str
    pathway: list[str]
    flags: set[str] = field(default_factory=set)
    notes: list[str] = field(default_factory=list)


@dataclass
class Context:
    sub: Chem.Mol                       # prepared substrate (explicit H, numbered)
    reagent: Reagent
    cls: str
    max_shifts: int
    use_xtb: bool
    alcohol: Nucleophile | None
    warnings: list[str]
    par: dict
    xtb_used: list[int] = field(default_factory=lambda: [0])
    control: str = "auto"
    assisted: set[str] = field(default_factory=set)  # cations whose shift is concerted with ionisation

    @property
    def rt(self) -> float:
        return self.par["thermal"]["rt_kcal_mol"]


# ------------------------------------------------------------------ input checks
def _alcohol_sites(mol: Chem.Mol) -> list[tuple[int, int]]:
    """(carbon, oxygen) of every aliphatic C-OH (not acids, hemiacetals, enols or phenols)."""
    out = []
    for atom in mol.GetAtoms():
        if atom.GetAtomicNum() != 8 or atom.GetTotalNumHs() != 1 or atom.GetDegree() != 1:
            continue
        c = atom.GetNeighbors()[0]
        if c.GetAtomicNum() != 6 or c.GetIsAromatic() or any(b.GetBondType() != SINGLE for b in c.GetBonds()):
            continue
        if sum(1 for n in c.GetNeighbors() if n.GetAtomicNum() in (7, 8)) > 1:
            continue
        out.append((c.GetIdx(), atom.GetIdx()))
    return out


def _oh_nucleophile(text: str, name: str, weight: float) -> Nucleophile:
    """Any O-H compound (carboxylic acid solvent, water-like) as a nucleophile through its O-H oxygen."""
    prepared = prepare(mol_from_text(text, max_heavy_atoms=30))
    for a in prepared.GetAtoms():
        a.ClearProp("n")
    o = next(a.GetIdx() for a in prepared.GetAtoms() if a.GetAtomicNum() == 8 and a.GetTotalNumHs() == 1)
    return Nucleophile(name, "solvent", weight, mol=prepared, oxygen=o)


def _alcohol_nucleophile(text: str, weight: float = 1.0) -> Nucleophile:
    mol = mol_from_text(text, max_heavy_atoms=30)
    prepared = prepare(mol)
    sites = _alcohol_sites(prepared)
    if not sites:
        raise SpecmatchError(f"--alcohol '{text}' is not an alcohol (no C-OH group found); give e.g. CO for "
                             "methanol or CC(C)O for propan-2-ol")
    for a in prepared.GetAtoms():
        a.ClearProp("n")
    name = {"CO": "MeOH", "CCO": "EtOH"}.get(mol_smiles(prepared, isomeric=False), mol_smiles(prepared, isomeric=False))
    return Nucleophile(name, "alcohol", weight, mol=prepared, oxygen=sites[0][1])


def _activated_oh(sub: Chem.Mol) -> bool:
    for c, o in _alcohol_sites(sub):
        m = ionise(sub, c, o)
        if m is None:
            continue
        inter = make_intermediate(m, c - 1 if c > o else c)
        if len(inter.forms) > 1 or "benzylic" in inter.cls or inter.substitution == "tertiary" \
                or "cyclopropylcarbinyl" in inter.cls:
            return True
    return False


def _resolve_class(r: Reagent, sub: Chem.Mol, alcohol: str | None, warnings: list[str]) -> str:
    cls = r.reagent_class
    has_alkene = bool(alkene_bonds(sub))
    has_oh = bool(_alcohol_sites(sub))
    if cls == "acid":
        if alcohol:
            return "alcohol_addition"
        if has_alkene:
            warnings.append(f"'{r.name}' read as acid-catalysed hydration (aqueous work-up); write "
                            "'H2SO4, heat' for a dehydration or give --alcohol for ether formation")
            return "hydration"
        if has_oh:
            warnings.append(f"'{r.name}' with an alcohol substrate read as E1 dehydration ('H2SO4, heat')")
            return "dehydration"
    if cls == "alcohol_addition" and r.needs_alcohol and not alcohol:
        raise SpecmatchError(f"'{r.name}' needs the alcohol: give it with --alcohol SMILES (e.g. --alcohol CO)")
    if cls == "hx_ionic" and has_oh:
        if not has_alkene:
            return "substitution"
        if _activated_oh(sub):
            warnings.append("the substrate has both C=C and an allylic, benzylic or tertiary OH: substitution "
                            "of the OH (via the stabilised cation) is enumerated; addition to the C=C is not")
            return "substitution"
        warnings.append("the substrate has both C=C and OH: addition to the C=C is enumerated; substitution "
                        "of the OH is not")
    if cls == "dehydration" and not has_oh:
        raise SpecmatchError(f"'{r.name}' is an alcohol dehydration, but the substrate has no aliphatic C-OH "
                             "group; for an alkene use H2O/H2SO4 (hydration) or HBr, HCl, HI")
    if cls in ADDITION_CLASSES or cls == "acid":
        if not has_alkene:
            triple = any(b.GetBondType() == Chem.BondType.TRIPLE for b in sub.GetBonds())
            hint = " (C#C triple bonds are not handled)" if triple else ""
            extra = ("; for an alcohol substrate use HBr, HCl or HI (substitution) or 'H2SO4, heat' "
                     "(dehydration)") if has_oh else ""
            raise SpecmatchError(f"'{r.name}' adds across a C=C, but the substrate has no non-aromatic C=C "
                                 f"double bond{hint}{extra}")
    if alcohol and cls not in {"alcohol_addition", "oxymercuration", "acid"}:
        warnings.append(f"--alcohol is ignored for '{r.name}'")
    return cls


# ------------------------------------------------------------------ shared pieces
def _energy(node: Intermediate) -> float:
    return node.energy if node.xtb_energy is None else node.xtb_energy


def _kcal(e: float) -> str:
    return f"{e:+.1f} kcal/mol"


def _node_desc(node: Intermediate) -> str:
    where = ", ".join(lab(m, c) for m, c in node.forms)
    scale = " vs a primary radical, C-H bond energy scale" if node.radical else ""
    return f"{node.cls} at {where} ({_kcal(_energy(node))}{scale})"


def _distance(mol: Chem.Mol, a: int, b: int) -> int:
    return len(Chem.GetShortestPath(mol, a, b)) - 1 if a != b else 0


def _halide(ctx: Context, weight: float = 1.0) -> Nucleophile:
    x = ctx.reagent.halogen or "Br"
    return Nucleophile(_HALIDE_NAME[x], "halide", weight, symbol=x)


def _water(weight: float) -> Nucleophile:
    return Nucleophile("H2O", "water", weight)


def _markovnikov_entries(ctx: Context, net: Network, electrophile: str, *, radical: bool, alpha: float,
                         group: str, share: float) -> None:
    """Electrophile onto each alkene carbon; the other carbon becomes the cation/radical."""
    made = []
    for a, b in alkene_bonds(ctx.sub):
        for x, y in ((a, b), (b, a)):
            m = add_across(ctx.sub, x, y, electrophile, radical=radical)
            if m is not None:
                made.append((x, y, make_intermediate(m, y, radical=radical)))
    if not made:
        return
    lo = min(i.energy for *_, i in made)
    best_per_bond: dict[frozenset, float] = {}
    for x, y, inter in made:
        k = frozenset((x, y))
        best_per_bond[k] = min(best_per_bond.get(k, math.inf), inter.energy)
    what = "H+" if electrophile == "H" else f"{electrophile}{'.' if radical else '+'}"
    for x, y, inter in made:
        # Markovnikov's rule as stated: the electrophile goes to the carbon with more H
        hx, hy = ctx.sub.GetAtomWithIdx(x).GetTotalNumHs(), ctx.sub.GetAtomWithIdx(y).GetTotalNumHs()
        favoured = inter.energy <= best_per_bond[frozenset((x, y))] + 0.5
        markov = hx > hy or (hx == hy and favoured)
        # far uphill entries are kept for contrast only (capture, no shifts/E1)
        expand = (inter.energy - lo) * alpha / ctx.rt < math.log(1e4)
        text = f"{what} adds to {lab(ctx.sub, x)} of {lab(ctx.sub, x)}={lab(ctx.sub, y)}"
        net.add_entry(inter, share, text, expand=expand, alpha=alpha, group=group, kind="addition",
                      markov=markov, favoured=favoured, e_atom=x, start=y)


def _label(kind: str, entry_info: dict, chain, node: Intermediate, centre: int, nu: Nucleophile | None,
           main_nu: str) -> tuple[str, set[str]]:
    flags: set[str] = set()
    base = ""
    if kind == "E1":
        base = "E1 alkene"
        flags.add("E1 by-product")
    elif kind == "carbonyl":
        base = "carbonyl compound"
        flags.add("carbonyl")
    elif entry_info.get("kind") == "addition":
        markov = entry_info.get("markov", True)
        base = "Markovnikov product" if markov else "anti-Markovnikov product"
        if not markov:
            flags.add("anti-Markovnikov")
            if entry_info.get("favoured"):
                base += " (via the more stable cation)"
                flags.add("electronic control")
        if not chain and len(node.forms) > 1:
            d = _distance(node.mol, entry_info["e_atom"], centre)
            if d >= 3:
                base = f"1,{d + 1}-adduct" + ("" if markov else " (anti-Markovnikov)")
                flags.add(f"1,{d + 1}-adduct")
            else:
                base = "1,2-adduct" + ("" if markov else " (anti-Markovnikov)")
    elif entry_info.get("kind") == "ionisation":
        base = entry_info.get("word", "SN1 product")
        if not chain and len(node.forms) > 1 and centre != entry_info["start"]:
            base = "allylic transposition (SN1')"
            flags.add("allylic transposition")
    elif entry_info.get("kind") == "radical":
        if entry_info.get("markov", True):
            base = "anti-Markovnikov product (radical chain)"
            flags.add("anti-Markovnikov")
        else:
            base = "Markovnikov orientation (radical chain, minor)"
        if len(node.forms) > 1:
            d = _distance(node.mol, entry_info["e_atom"], centre)
            base = f"1,{d + 1}-adduct (radical chain)"
            if d >= 3:
                flags.add(f"1,{d + 1}-adduct")
    if nu is not None and nu.name != main_nu and kind != "E1":
        word = {"water": "alcohol", "alcohol": "ether", "halide": "alkyl halide", "solvent": "solvent adduct"}[nu.kind]
        if nu.kind == "solvent" and nu.name == "AcOH":
            word = "acetate"
        base = f"{word} by capture of {nu.name}"
        flags.add(f"capture by {nu.name}")
    if chain:
        flags.add("rearranged")
        words = []
        for s in chain:
            if s.label.startswith("ring bond shift"):
                flags.add("skeletal rearrangement")
                words.append("after Wagner-Meerwein ring bond shift")
            elif s.label.startswith("ring "):
                word = "ring-expanded" if "expansion" in s.label else "ring-contracted"
                flags.add(word)
                words.append(word + s.label[len("ring expansion"):] if "expansion" in s.label
                             else word + s.label[len("ring contraction"):])
            else:
                words.append(f"after {s.label}")
        rearr = ", then ".join(words).replace(", then after ", ", then ")
        if kind in ("E1", "carbonyl") or (nu is not None and nu.name != main_nu):
            label = f"{base} ({rearr})"
        else:
            label = rearr
    else:
        label = base
    return label, flags


def _run_network(ctx: Context, net: Network, nucleophiles: list[Nucleophile], e1_weight: float,
                 *, rt_e1: float, main_nu: str) -> list[Outcome]:
    par = ctx.par
    net.expand()
    if ctx.use_xtb:
        from .xtb import refine_network

        ctx.xtb_used[0] += refine_network(net, window=par["shift"]["xtb_window_kcal_mol"], warnings=ctx.warnings)
    primary_scale = par["capture"]["primary_capture_scale"]
    sub_key = mol_smiles(ctx.sub, isomeric=False)

    def channels_for(node: Intermediate) -> list[Channel]:
        chs: list[Channel] = []
        scale = primary_scale if node.substitution in ("primary", "methyl") and len(node.forms) == 1 else 1.0
        if node.key in ctx.assisted:
            scale *= par["elimination"]["assisted_secondary_scale"]
        if node.radical:
            scale = 1.0
        if len(node.forms) == 1 and not node.radical and "cyclopropylcarbinyl" in node.cls:
            return _manifold_channels(ctx, node, nucleophiles)
        shares = terminus_shares(node) if _control(ctx) == "kinetic" else _thermo_shares(ctx, node)
        for (m, c), f in zip(node.forms, shares):
            oh = next((n.GetIdx() for n in m.GetAtomWithIdx(c).GetNeighbors()
                       if n.GetAtomicNum() == 8 and n.GetTotalNumHs() > 0), None)
            if oh is not None and not node.radical:
                # protonated carbonyl: it loses H+ from O (pinacol-type), no capture
                p = to_carbonyl(m, c, oh)
                if p is not None:
                    chs.append(Channel(p, f * scale, "carbonyl", f"loss of H+ from {lab(m, oh)}: C=O at {lab(m, c)}",
                                       {"centre": c}))
                continue
            for nu in nucleophiles:
                p = capture(m, c, nu)
                if p is not None and nu.kind == "water" and ctx.cls in ("substitution", "dehydration") \
                        and mol_smiles(p, isomeric=False) == sub_key:
                    continue  # recapture of the first cation re-forms the substrate: not an exit
                if p is not None:
                    verb = "transfers H to" if nu.kind == "hydrogen" else "captures the cation at"
                    chs.append(Channel(p, nu.weight * f * scale, "capture", f"{nu.name} {verb} {lab(m, c)}",
                                       {"centre": c, "nu": nu}))
        oxo = any(n.GetAtomicNum() == 8 and n.GetTotalNumHs() > 0
                  for m, c in node.forms for n in m.GetAtomWithIdx(c).GetNeighbors())
        if e1_weight > 0 and node.expand and not node.radical and not oxo:
            alpha = par["elimination"]["alpha_heat"] if ctx.cls == "dehydration" else None
            for alk, share, text in e1_alkenes(node, rt_e1, alpha):
                if mol_smiles(alk, isomeric=False) == sub_key:
                    continue  # back to the substrate: it re-enters the same manifold, not an exit
                chs.append(Channel(alk, e1_weight * share * scale, "E1", f"E1: {text}", {"centre": -1}))
        return chs

    # entry weights: Boltzmann-like over each group, on the (refined) energies
    groups: dict[str, list] = {}
    for e in net.entries:
        groups.setdefault(e.info.get("group", ""), []).append(e)
    for lst in groups.values():
        es = [_energy(net.nodes[e.key]) for e in lst]
        lo = min(es)
        ws = [e.info.get("base", 1.0) * math.exp(-e.info.get("alpha", 0.0) * (x - lo) / ctx.rt)
              for e, x in zip(lst, es)]
        tot = sum(ws)
        for e, w in zip(lst, ws):
            e.weight = e.weight * w / tot  # e.weight held the group's share
    sol = net.solve(channels_for, iso=par["shift"]["isoenergetic_kcal_mol"], alpha=par["shift"]["alpha"],
                    rt=ctx.rt)
    iso = par["shift"]["isoenergetic_kcal_mol"]
    outcomes = []
    for ch, w, i in sol.products():
        if w <= 0:
            continue
        node = net.nodes[sol.keys[i]]
        entry, chain = sol.path_to(i)
        info = entry.info if entry else {}
        nu = ch.info.get("nu")
        label, flags = _label(ch.kind, info, chain, node, ch.info.get("centre", -1), nu, main_nu)
        if ch.info.get("manifold"):
            word = ch.info["manifold"]
            label = (f"{label}, then " if chain else "") + word
            flags |= {"rearranged", "ring-expanded" if "cyclobutyl" in word else "ring-opened"}
        steps = []
        if entry is not None:
            steps.append(f"{entry.text} -> {_node_desc(net.nodes[entry.key])}")
        for s in chain:
            steps.append(f"{s.text} -> {_node_desc(net.nodes[s.target])}, {s.d_energy:+.1f} kcal/mol")
            if abs(s.d_energy) <= iso:
                flags.add("isoenergetic shift")
        steps.append(ch.text)
        notes = []
        if "isoenergetic shift" in flags:
            notes.append("formed by a shift between cations of equal stability on the empirical scale: "
                         "low prior, kept because real mixtures contain such products")
        if entry is not None and not entry_expanded(net, entry):
            flags.add("other conditions")
        if len(node.forms) > 1 and ch.kind == "capture" and not node.radical:
            notes.append(_ALLYLIC_NOTES[_control(ctx)])
        outcomes.append(Outcome(ch.product, w, label, steps, flags, notes))
    return outcomes


_ALLYLIC_NOTES = {
    "kinetic": "allylic cation, kinetic control (low temperature, short times): capture at the terminus "
               "carrying more charge; warm and equilibrating (about 40 C), the isomer with the more "
               "substituted C=C dominates (buta-1,3-diene + HBr: about 80:20 1,2 : 1,4 at -80 C, 15:85 "
               "at 40 C; values from memory); rerun with --control thermodynamic",
    "thermodynamic": "allylic cation, thermodynamic control (the allylic products equilibrate): the isomer "
                     "with the more substituted C=C dominates (Winstein & Young, J. Am. Chem. Soc. 1936, 58, "
                     "104; values from memory); at low temperature and short times capture is kinetic: "
                     "rerun with --control kinetic",
}


def _control(ctx: Context) -> str:
    """Kinetic or thermodynamic capture of allylic cations for this run."""
    if ctx.control != "auto":
        return ctx.control
    # HX with allylic alcohols: the allylic halides ionise again and equilibrate (Winstein & Young)
    return "thermodynamic" if ctx.cls == "substitution" else "kinetic"


def _thermo_shares(ctx: Context, node: Intermediate) -> list[float]:
    """Terminus weights from the stability of the C=C each capture product keeps."""
    if len(node.forms) == 1:
        return [1.0]
    par = ctx.par["allylic"]
    dh = [sum(alkene_dh(m, a, b) for a, b in alkene_bonds(m)) for m, _ in node.forms]
    lo = min(dh)
    w = [math.exp(-par["thermo_alpha"] * (x - lo) / par["rt_thermo_kcal_mol"]) for x in dh]
    return [x / sum(w) for x in w]


def open_cyclopropane(mol: Chem.Mol, c: int, r: int, r1: int) -> Chem.Mol | None:
    """Cyclopropylcarbinyl -> homoallyl cation: ring bond r-r1 breaks, C=C between c and r,
    the cation moves to r1."""
    rw = Chem.RWMol(mol)
    rw.RemoveBond(r, r1)
    rw.GetBondBetweenAtoms(c, r).SetBondType(Chem.BondType.DOUBLE)
    rw.GetAtomWithIdx(c).SetFormalCharge(0)
    rw.GetAtomWithIdx(r1).SetFormalCharge(1)
    try:
        Chem.SanitizeMol(rw)
    except Exception:  # an edit that gives no valid molecule is not a pathway
        return None
    return rw.GetMol()


def _manifold_channels(ctx: Context, node: Intermediate, nucleophiles: list[Nucleophile]) -> list[Channel]:
    """Capture of the cyclopropylcarbinyl/cyclobutyl/homoallyl manifold (Roberts & Mazur 1951).

    The three cations interconvert faster than capture, so each nucleophile gives all three
    skeletons in fixed shares (``[cyclopropylcarbinyl]`` in prior_parameters.toml), whatever the
    empirical scale says about the separate classical cations.
    """
    par = ctx.par["cyclopropylcarbinyl"]
    m, c = node.forms[0]
    ri = m.GetRingInfo()
    r = next(n.GetIdx() for n in m.GetAtomWithIdx(c).GetNeighbors()
             if n.GetAtomicNum() == 6 and ri.IsAtomInRingOfSize(n.GetIdx(), 3))
    ring = next(rg for rg in ri.AtomRings() if len(rg) == 3 and r in rg)
    others = [x for x in ring if x != r]
    chs: list[Channel] = []
    for nu in nucleophiles:
        p = capture(m, c, nu)
        if p is not None:
            chs.append(Channel(p, nu.weight * par["carbinyl_share"], "capture",
                               f"{nu.name} captures the cyclopropylcarbinyl cation at {lab(m, c)}", {"centre": c, "nu": nu}))
        for r1 in others:
            # the two other members of the manifold: (cation, where it is captured, share, how, manifold)
            routes = (
                (shift(m, c, r, r1), r, "cyclobutyl_share",
                 f"ring bond {lab(m, r)}-{lab(m, r1)} shifts to {lab(m, c)} (cyclobutyl cation)",
                 "ring-expanded (cyclopropylcarbinyl -> cyclobutyl)"),
                (open_cyclopropane(m, c, r, r1), r1, "homoallyl_share",
                 f"ring bond {lab(m, r)}-{lab(m, r1)} opens (homoallyl cation, C=C {lab(m, c)}={lab(m, r)})",
                 "ring-opened (homoallyl)"),
            )
            for cation, site, share, how, manifold in routes:
                p = None if cation is None else capture(cation, site, nu)
                if p is not None:
                    chs.append(Channel(p, nu.weight * par[share] / len(others), "capture",
                                       f"{how}; {nu.name} captures it at {lab(m, site)}",
                                       {"centre": site, "nu": nu, "manifold": manifold}))
    return chs


def entry_expanded(net: Network, entry) -> bool:
    return net.nodes[entry.key].expand


def _network(ctx: Context, explore: bool = True) -> Network:
    par = ctx.par
    window = par["shift"]["xtb_window_kcal_mol"] if ctx.use_xtb else par["shift"]["isoenergetic_kcal_mol"]
    return Network(max_shifts=ctx.max_shifts if explore else 0, explore_window=window,
                   max_nodes=par["candidates"]["max_intermediates"])


# ------------------------------------------------------------------ drivers
def _enone_bonds(mol: Chem.Mol) -> list[tuple[int, int]]:
    """(alpha, beta) carbons of C=C conjugated to C=O (Michael acceptors)."""
    out = []
    for a, b in alkene_bonds(mol):
        for x, y in ((a, b), (b, a)):
            if any(n.GetAtomicNum() == 6 and n.GetIdx() != y and any(
                    bd.GetBondType() == Chem.BondType.DOUBLE and bd.GetOtherAtom(n).GetAtomicNum() == 8
                    for bd in n.GetBonds()) for n in mol.GetAtomWithIdx(x).GetNeighbors()):
                out.append((x, y))
    return out


def _conjugate_additions(ctx: Context, nu: Nucleophile, share: float) -> list[Outcome]:
    out = []
    enones = _enone_bonds(ctx.sub)
    for alpha, beta in enones:
        group = {"halide": nu.symbol, "water": "OH", "alcohol": "OR"}[nu.kind]
        m = _add_two(ctx.sub, alpha, beta, "H", group, nu if nu.kind == "alcohol" else None)
        if m is None:
            continue
        out.append(Outcome(m, share / len(enones), "conjugate (1,4-) addition product",
                           [f"H+ on the carbonyl O: allylic oxocarbenium ion over O=C-{lab(ctx.sub, alpha)}="
                            f"{lab(ctx.sub, beta)}", f"{nu.name} adds to the beta carbon {lab(ctx.sub, beta)}",
                           f"the enol tautomerises: H at {lab(ctx.sub, alpha)}"], {"1,4-adduct"},
                           ["alpha,beta-unsaturated carbonyl: the nucleophile ends up on the beta carbon "
                            "(common practice)"]))
    return out


def _cationic_addition(ctx: Context, nucleophiles: list[Nucleophile], e1_weight: float, main_nu: str,
                       share: float = 1.0) -> list[Outcome]:
    conj: list[Outcome] = []
    if _enone_bonds(ctx.sub):
        c_share = ctx.par["conjugate"]["share"]
        conj = _conjugate_additions(ctx, nucleophiles[0], share * c_share)
        share *= 1.0 - c_share
    net = _network(ctx)
    _markovnikov_entries(ctx, net, "H", radical=False, alpha=ctx.par["protonation"]["alpha"],
                         group="protonation", share=share)
    return conj + _run_network(ctx, net, nucleophiles, e1_weight, rt_e1=ctx.rt, main_nu=main_nu)


def _hx_ionic(ctx: Context, share: float = 1.0) -> list[Outcome]:
    x = _halide(ctx)
    nus = [x, _water(ctx.par["nucleophiles"]["water_in_hx"])]
    if ctx.reagent.solvent:
        nus.append(_oh_nucleophile(ctx.reagent.solvent, ctx.reagent.solvent_name or "solvent",
                                   ctx.reagent.solvent_weight))
    out = _cationic_addition(ctx, nus, ctx.par["elimination"]["hx_addition"], x.name, share)
    for o in out:
        if "capture by H2O" in o.flags:
            o.notes.append("only if aqueous HX is used")
    return out


def _hydration(ctx: Context) -> list[Outcome]:
    return _cationic_addition(ctx, [_water(1.0)], ctx.par["elimination"]["hydration"], "H2O")


def _alcohol_addition(ctx: Context) -> list[Outcome]:
    nu = ctx.alcohol
    assert nu is not None
    return _cationic_addition(ctx, [nu], ctx.par["elimination"]["alcohol_addition"], nu.name)


def _ionisations(ctx: Context, sites):
    """For each alcohol site (C, O): the cation after loss of water, as
    (c, o, cation carbon index in the new molecule, intermediate, step text)."""
    for c, o in sites:
        cation = ionise(ctx.sub, c, o)
        if cation is None:
            continue
        cc = c - 1 if c > o else c  # indices after the removed O shift down by one
        what = f"protonation of O{ctx.sub.GetAtomWithIdx(o).GetIntProp('n')}, loss of water from {lab(ctx.sub, c)}"
        yield c, o, cc, make_intermediate(cation, cc), what


def _substitution(ctx: Context) -> list[Outcome]:
    """Alcohol + HX: SN1 via the cation (2/3/allylic/benzylic), SN2 for primary (and partly secondary)."""
    par = ctx.par["substitution"]
    x = _halide(ctx)
    net = _network(ctx)
    direct: list[Outcome] = []
    sites = _alcohol_sites(ctx.sub)
    for c, o, cc, inter, what in _ionisations(ctx, sites):
        stabilised = len(inter.forms) > 1 or "benzylic" in inter.cls or inter.substitution == "tertiary" \
            or "cyclopropylcarbinyl" in inter.cls
        next_to_quaternary = any(n.GetAtomicNum() == 6 and n.GetTotalNumHs() == 0 and n.GetDegree() == 4
                                 for n in ctx.sub.GetAtomWithIdx(c).GetNeighbors())
        neopentyl = inter.substitution == "primary" and next_to_quaternary
        if stabilised:
            w_ion, w_sn2 = 1.0, 0.0
        elif inter.substitution == "secondary":
            w_sn2 = par["sn2_secondary_hcl"] if x.symbol == "Cl" else par["sn2_secondary_hbr_hi"]
            if next_to_quaternary:
                w_sn2 = par["sn2_secondary_hindered"]
            w_ion = 1.0
        elif neopentyl:
            w_ion, w_sn2 = 1.0, par["sn2_neopentyl"]
        else:
            w_ion, w_sn2 = par["ionisation_primary"], par["sn2_primary"]
        tot = (w_ion + w_sn2) * len(sites)
        word = "SN1 product" if inter.substitution != "primary" else "substitution product"
        if neopentyl:
            what += " (assisted by the 1,2-shift: no free primary cation)"
        net.add_entry(inter, w_ion / tot, what, kind="ionisation", start=cc, word=word, group=f"site{c}")
        if w_sn2 > 0:
            rw = Chem.RWMol(ctx.sub)
            atom = rw.GetAtomWithIdx(o)
            atom.SetAtomicNum(Chem.Atom(x.symbol).GetAtomicNum())
            atom.SetNumExplicitHs(0)
            m = rw.GetMol()
            Chem.SanitizeMol(m)
            lbl = "SN2 product (no rearrangement)"
            notes = ["SN2 with inversion at the carbinol carbon"]
            if neopentyl:
                notes.append("neopentyl-type carbon: SN2 is very slow")
            direct.append(Outcome(m, w_sn2 / tot, lbl,
                                  [f"protonation of O{ctx.sub.GetAtomWithIdx(o).GetIntProp('n')}",
                                   f"{x.name} displaces water at {lab(ctx.sub, c)} (SN2)"], set(), notes))
    if not net.entries and not direct:
        raise SpecmatchError("no alcohol group of the substrate can react")
    outs = direct
    if net.entries:
        nus = [x, _water(par["water_recapture"])]
        outs = outs + _run_network(ctx, net, nus, ctx.par["elimination"]["substitution"], rt_e1=ctx.rt,
                                   main_nu=x.name)
    return outs


def _dehydration(ctx: Context) -> list[Outcome]:
    net = _network(ctx)
    sites = _alcohol_sites(ctx.sub)
    for c, _o, cc, inter, what in _ionisations(ctx, sites):
        if inter.substitution == "secondary" and len(inter.forms) == 1 and any(
                n.GetAtomicNum() == 6 and n.GetTotalNumHs() == 0 and n.GetDegree() == 4
                for n in ctx.sub.GetAtomWithIdx(c).GetNeighbors()):
            ctx.assisted.add(inter.key)
            what += " (assisted by the 1,2-shift from the quaternary neighbour)"
        net.add_entry(inter, 1.0 / len(sites), what, kind="ionisation", start=cc, word="alcohol",
                      group=f"site{c}")
    out = _run_network(ctx, net, [_water(ctx.par["nucleophiles"]["water_in_dehydration"])],
                       ctx.par["elimination"]["dehydration"], rt_e1=ctx.par["thermal"]["rt_heat_kcal_mol"],
                       main_nu="none")
    for o in out:
        if "capture by H2O" in o.flags:
            o.notes.append("re-formed alcohol; eliminates further on heating")
    return out


def _radical_hbr(ctx: Context) -> list[Outcome]:
    par = ctx.par["radical"]
    share = 1.0 - par["ionic_competition"]
    net = _network(ctx, explore=False)
    _markovnikov_entries(ctx, net, "Br", radical=True, alpha=par["alpha"], group="radical", share=share)
    for e in net.entries:
        e.info["kind"] = "radical"
    hydrogen = Nucleophile("HBr", "hydrogen", 1.0)
    out = _run_network(ctx, net, [hydrogen], 0.0, rt_e1=ctx.rt, main_nu="HBr")
    for o in out:
        o.notes.append("radical chain (Br. adds first, giving the more stable radical); no rearrangement")
    ionic = _hx_ionic(ctx, share=par["ionic_competition"])
    for o in ionic:
        o.flags.add("ionic pathway")
        o.notes.append("ionic addition competing with the radical chain (e.g. peroxide-free HBr)")
        o.label += " (competing ionic addition)"
    return out + ionic


def _subst_count(mol: Chem.Mol, a: int, b: int, *, aryl: float = 1.0, other: float = 1.0) -> float:
    return sum(aryl if n.GetIsAromatic() else other for n in mol.GetAtomWithIdx(a).GetNeighbors()
               if n.GetIdx() != b)


def _add_two(mol: Chem.Mol, a: int, b: int, ga: str, gb: str, alcohol: Nucleophile | None = None) -> Chem.Mol | None:
    """Add group ga to a and gb to b across the C=C; groups: 'H', 'OH', 'OR', or a halogen symbol."""
    rw = Chem.RWMol(mol)
    rw.GetBondBetweenAtoms(a, b).SetBondType(SINGLE)
    for atom_idx, g in ((a, ga), (b, gb)):
        if g == "H":
            at = rw.GetAtomWithIdx(atom_idx)
            at.SetNumExplicitHs(at.GetNumExplicitHs() + 1)
        elif g == "OR":
            assert alcohol is not None
            n0 = rw.GetNumAtoms()
            rw.InsertMol(alcohol.mol)
            o = n0 + alcohol.oxygen
            rw.AddBond(atom_idx, o, SINGLE)
            oat = rw.GetAtomWithIdx(o)
            oat.SetNumExplicitHs(oat.GetNumExplicitHs() - 1)
        else:
            new = Chem.Atom("O" if g == "OH" else g)
            new.SetNoImplicit(True)
            new.SetNumExplicitHs(1 if g == "OH" else 0)
            rw.AddBond(atom_idx, rw.AddAtom(new), SINGLE)
    try:
        Chem.SanitizeMol(rw)
    except Exception:
        return None
    return rw.GetMol()


def _cation_energy_at(ctx: Context, a: int, b: int, electrophile: str = "H") -> float:
    m = add_across(ctx.sub, a, b, electrophile)
    return make_intermediate(m, b).energy if m is not None else math.inf


_ONIUM = {"Br": "bromonium", "Cl": "chloronium", "I": "iodonium", "Hg": "mercurinium"}


def _new_neighbour(product: Chem.Mol, atom: int, n_sub: int) -> int | None:
    """The atom the addition bonded to `atom` (indices >= n_sub are new), or None for H."""
    return next((n.GetIdx() for n in product.GetAtomWithIdx(atom).GetNeighbors() if n.GetIdx() >= n_sub), None)


def _stereospecific(ctx: Context, product: Chem.Mol, a: int, b: int, *, syn: bool
                    ) -> list[tuple[Chem.Mol, float, list[str]]]:
    """Products of a syn or anti addition across a=b with their configuration set.

    One product when the alkene geometry is fixed (E/Z given, or a ring); both diastereomers,
    half each, when the alkene is stereogenic but its configuration was not given.
    """
    from .stereo import add_faces, alkene_is_stereogenic, cis_pairs

    n_sub = ctx.sub.GetNumAtoms()
    na, nb = _new_neighbour(product, a, n_sub), _new_neighbour(product, b, n_sub)
    cis = cis_pairs(ctx.sub, a, b)
    if cis is not None:
        return [(add_faces(product, ctx.sub, a, b, na, nb, syn=syn, cis=cis), 1.0, [])]
    if not alkene_is_stereogenic(ctx.sub, a, b):
        return [(product, 1.0, [])]
    sa = [n.GetIdx() for n in ctx.sub.GetAtomWithIdx(a).GetNeighbors() if n.GetIdx() != b]
    sb = [n.GetIdx() for n in ctx.sub.GetAtomWithIdx(b).GetNeighbors() if n.GetIdx() != a]
    where = f"{lab(ctx.sub, a)}={lab(ctx.sub, b)}"
    out = []
    for geo, pairs in (("Z", [(sa[0], sb[0])]), ("E", [])):
        note = (f"the configuration of {where} is not given: this is the product of the {geo}-alkene "
                "(write it in the SMILES, e.g. C/C=C/C for E, to keep one)")
        out.append((add_faces(product, ctx.sub, a, b, na, nb, syn=syn, cis=pairs), 0.5, [note]))
    return out


def _hydroboration(ctx: Context) -> list[Outcome]:
    par = ctx.par["hydroboration"]
    out = []
    bonds = alkene_bonds(ctx.sub)
    site_w = [math.exp(-par["site_per_substituent"] * (_subst_count(ctx.sub, a, b) + _subst_count(ctx.sub, b, a)))
              for a, b in bonds]
    st = sum(site_w)
    for (a, b), sw in zip(bonds, site_w):
        wa = math.exp(-(_subst_count(ctx.sub, a, b, aryl=par["aryl_substituent"], other=par["per_substituent"])))
        wb = math.exp(-(_subst_count(ctx.sub, b, a, aryl=par["aryl_substituent"], other=par["per_substituent"])))
        for x, y, w in ((a, b, wa), (b, a, wb)):
            m = _add_two(ctx.sub, x, y, "OH", "H")
            if m is None:
                continue
            anti = w >= (wa if x == b else wb)
            equal = abs(wa - wb) < 1e-9
            label = ("hydroboration alcohol" if equal else
                     "anti-Markovnikov alcohol (no rearrangement)" if anti else "Markovnikov alcohol (minor regioisomer)")
            flags = set() if equal or not anti else {"anti-Markovnikov"}
            where = ("" if equal else " (the less hindered carbon)" if anti
                     else " (the more hindered carbon: minor orientation)")
            steps = [f"syn addition of H-BH2 across {lab(ctx.sub, a)}={lab(ctx.sub, b)}: B to {lab(ctx.sub, x)}"
                     f"{where}, H to {lab(ctx.sub, y)}",
                     f"H2O2/NaOH: C-B to C-OH with retention at {lab(ctx.sub, x)}"]
            for mol, frac, extra in _stereospecific(ctx, m, x, y, syn=True):
                out.append(Outcome(mol, sw / st * w / (wa + wb) * frac, label, list(steps), set(flags),
                                   ["syn addition of H and OH (same face); no carbocation, no rearrangement",
                                    *extra]))
    return out


def _oxymercuration(ctx: Context) -> list[Outcome]:
    par = ctx.par["halonium"]
    nu_group = "OR" if ctx.alcohol else "OH"
    word = "ether" if ctx.alcohol else "alcohol"
    return _opening(ctx, "Hg", nu_group, par["alpha_mercurinium"], word,
                    "mercurinium ion; the nucleophile opens it at the carbon that best carries + charge",
                    "NaBH4 replaces C-Hg by C-H", "no free carbocation, no rearrangement; Hg and O add anti, "
                    "but the NaBH4 step scrambles the configuration at the former C-Hg carbon")


def _opening(ctx: Context, electrophile: str, nu_group: str, alpha: float, word: str, step1: str,
             step2: str | None, note: str, share: float = 1.0, halide_share: float = 0.0,
             anti: bool = False) -> list[Outcome]:
    """Bridged-ion additions (mercurinium, halonium): regiochemistry from the cation scale, anti, no shifts."""
    out: list[Outcome] = []
    bonds = alkene_bonds(ctx.sub)
    options = []
    for a, b in bonds:
        for x, y in ((a, b), (b, a)):
            options.append((x, y, _cation_energy_at(ctx, x, y, "H" if electrophile == "Hg" else electrophile)))
    lo = min(e for *_, e in options)
    ws = [math.exp(-alpha * (e - lo) / ctx.rt) for *_, e in options]
    tot = sum(ws)
    for (x, y, e), w in zip(options, ws):
        best_here = min(ee for xx, yy, ee in options if {xx, yy} == {x, y})
        markov = e <= best_here + 0.5
        ga = "H" if electrophile == "Hg" else electrophile
        m = _add_two(ctx.sub, x, y, ga, nu_group, ctx.alcohol)
        if m is None:
            continue
        label = f"Markovnikov {word} (no rearrangement)" if markov else f"anti-Markovnikov {word} (minor regioisomer)"
        steps = [f"{electrophile}{'(OAc)+' if electrophile == 'Hg' else '+'} adds to "
                 f"{lab(ctx.sub, x)}={lab(ctx.sub, y)}: {step1}",
                 f"{'ROH' if nu_group == 'OR' else 'H2O'} attacks {lab(ctx.sub, y)} anti "
                 f"(cation there would be {_kcal(e)})"]
        if step2:
            steps.append(step2)
        made = _stereospecific(ctx, m, x, y, syn=False) if anti else [(m, 1.0, [])]
        for mol, frac, extra in made:
            out.append(Outcome(mol, share * w / tot * frac, label, list(steps),
                               set() if markov else {"anti-Markovnikov"}, [note, *extra]))
    return out


def _conjugated(mol: Chem.Mol, a: int, b: int) -> bool:
    for x in (a, b):
        for n in mol.GetAtomWithIdx(x).GetNeighbors():
            if n.GetIdx() in (a, b):
                continue
            if any(bd.GetBondType() == Chem.BondType.DOUBLE and not bd.GetIsAromatic()
                   and bd.GetOtherAtom(n).GetAtomicNum() == 6 for bd in n.GetBonds()):
                return True
    return False


def _halogen_addition(ctx: Context, in_water: bool) -> list[Outcome]:
    x = ctx.reagent.halogen or "Br"
    par = ctx.par["halonium"]
    conj = any(_conjugated(ctx.sub, a, b) for a, b in alkene_bonds(ctx.sub))
    hal_share = par["dihalide_in_water"] if in_water else 1.0
    if conj:
        # conjugated diene: X+ at a terminus gives an allylic cation, captured at both ends
        net = _network(ctx, explore=False)
        _markovnikov_entries(ctx, net, x, radical=False, alpha=par["alpha_halonium"] * 5, group="halogen",
                             share=1.0)
        nus = [Nucleophile(_HALIDE_NAME[x], "halide", hal_share, symbol=x)]
        if in_water:
            nus.append(_water(1.0 - hal_share))
        out = _run_network(ctx, net, nus, 0.0, rt_e1=ctx.rt, main_nu="H2O" if in_water else nus[0].name)
        for o in out:
            o.label = o.label.replace("Markovnikov product", "1,2-adduct").replace("alkyl halide", "dihalide")
            o.notes.append("conjugated diene: via the allylic cation (1,2- and 1,4-addition)")
        return out
    out = []
    if in_water:
        out += _opening(ctx, x, "OH", par["alpha_halonium"], "halohydrin",
                        f"bridged {_ONIUM[x]} ion; water opens it at the carbon that best carries + charge",
                        None, "anti addition of X and OH; no rearrangement", share=1.0 - hal_share, anti=True)
        for o in out:
            o.label = o.label.replace("Markovnikov halohydrin", "halohydrin, OH on the more substituted carbon") \
                if "anti-" not in o.label else "halohydrin, OH on the less substituted carbon (minor)"
    bonds = alkene_bonds(ctx.sub)
    es = [min(_cation_energy_at(ctx, a, b, x), _cation_energy_at(ctx, b, a, x)) for a, b in bonds]
    lo = min(es)
    ws = [math.exp(-par["alpha_halonium"] * (e - lo) / ctx.rt) for e in es]
    for (a, b), w in zip(bonds, ws):
        m = _add_two(ctx.sub, a, b, x, x)
        if m is None:
            continue
        label = f"vicinal di{'chloride' if x == 'Cl' else 'bromide' if x == 'Br' else 'iodide'} (anti addition)"
        notes = [f"anti addition (bridged {_ONIUM[x]} ion); no rearrangement"]
        stereo = ctx.sub.GetBondBetweenAtoms(a, b).GetStereo()
        if stereo in (Chem.BondStereo.STEREOZ, Chem.BondStereo.STEREOCIS):
            notes.append("anti addition to the Z-alkene gives the racemic pair (cis-but-2-ene gives "
                         "(2R,3R)/(2S,3S)-2,3-dibromobutane)")
        elif stereo in (Chem.BondStereo.STEREOE, Chem.BondStereo.STEREOTRANS):
            notes.append("anti addition to the E-alkene (trans-but-2-ene gives meso-2,3-dibromobutane)")
        if in_water:
            label += ": halide competes with water"
        for mol, frac, extra in _stereospecific(ctx, m, a, b, syn=False):
            out.append(Outcome(mol, hal_share * w / sum(ws) * frac, label,
                               [f"{x}+ adds to {lab(ctx.sub, a)}={lab(ctx.sub, b)}: bridged {_ONIUM[x]} ion",
                                f"{_HALIDE_NAME[x]} opens it anti"], set(), notes + extra))
    return out


def _halogenation(ctx: Context) -> list[Outcome]:
    return _halogen_addition(ctx, in_water=False)


def _halohydrin(ctx: Context) -> list[Outcome]:
    return _halogen_addition(ctx, in_water=True)


_DRIVERS = {
    "hx_ionic": _hx_ionic,
    "hydration": _hydration,
    "alcohol_addition": _alcohol_addition,
    "substitution": _substitution,
    "dehydration": _dehydration,
    "hx_radical": _radical_hbr,
    "hydroboration": _hydroboration,
    "oxymercuration": _oxymercuration,
    "halogenation": _halogenation,
    "halohydrin": _halohydrin,
}


# ------------------------------------------------------------------ merge, stereo, roles
def _stereo_count(mol: Chem.Mol) -> tuple[int, int]:
    m = Chem.Mol(mol)
    info = Chem.FindPotentialStereo(m, cleanIt=True, flagPossible=True)
    tet = sum(1 for s in info if s.type == Chem.StereoType.Atom_Tetrahedral)
    dbl = sum(1 for s in info if s.type == Chem.StereoType.Bond_Double)
    return tet, dbl


_STEREO_CLASS_NOTES = {
    "hydroboration": "syn addition: H and OH are cis on the two carbons (e.g. trans-2-methylcyclohexanol "
                     "from 1-methylcyclohexene)",
    "halogenation": "anti addition: the two halogens trans (a cyclic alkene gives the trans-1,2-dihalide; "
                    "cis-/trans-alkenes give different diastereomers)",
    "halohydrin": "anti addition: halogen and OH trans",
}


def _stereo_notes(product: Chem.Mol, sub_counts: tuple[int, int], sub_chiral: bool, cls: str,
                  flags: set[str], conf) -> list[str]:
    """Stereochemical notes that agree with the candidate's own configuration."""
    from .stereo import relation_matters, stereo_info

    spec, unspec, dbl = stereo_info(product)
    tet = len(spec) + len(unspec)
    notes = []
    new = tet - sub_counts[0]
    if conf is not None and conf.meso:
        notes.append("meso compound (achiral): one stereoisomer")
    elif conf is not None and conf.racemic and not unspec and "either face" in flags:
        notes.append(f"formed {conf.words} (both enantiomers equally)")
    elif conf is not None and conf.racemic and not unspec:
        notes.append(f"relative configuration fixed by the mechanism; formed {conf.words} "
                     "(both enantiomers equally)")
    elif new > 0 and sub_chiral:
        notes.append(f"{new} new stereocentre(s) next to an existing one: diastereomers, usually unequal")
    elif tet == 1 and new == 1:
        notes.append("new stereocentre: formed racemic (both enantiomers equally)")
    elif tet >= 2 and unspec and not relation_matters(product):
        notes.append("open-chain diastereomers (erythro/threo) both form from the planar cation; listed "
                     "together as one candidate")
    elif tet >= 2 and unspec:
        notes.append("diastereomers possible (configuration not fixed here)")
    if dbl > 0:
        notes.append("E/Z isomers possible (E usually favoured for open-chain alkenes)")
    if cls in _STEREO_CLASS_NOTES and tet >= 2 and "E1 by-product" not in flags:
        notes.append(_STEREO_CLASS_NOTES[cls])
    return notes


def _expand_faces(ctx: Context, outcomes: list[Outcome], sub_chiral: bool) -> list[Outcome]:
    """Split products with unassigned stereocentres into diastereomers where it matters.

    A planar cation (or the NaBH4 step of oxymercuration) sets a centre from either face, so
    each diastereomer gets its statistical share (common practice: no directing group).
    """
    from .stereo import enumerate_unassigned, relation_matters

    out = []
    for o in outcomes:
        if "unreacted substrate" in o.flags or not relation_matters(o.mol):
            out.append(o)
            continue
        split = enumerate_unassigned(o.mol, substrate_chiral=sub_chiral)
        if split is None:
            out.append(o)
            continue
        for mol, frac in split:
            note = f"one of {len(split)} diastereomers formed on either face ({frac:.0%} of this constitution)"
            out.append(Outcome(mol, o.weight * frac, o.label, list(o.pathway), set(o.flags) | {"either face"},
                               [*o.notes, note]))
    return out


def _key(mol: Chem.Mol, sub_chiral: bool):
    """Merge key: canonical isomeric SMILES when a configuration is set, else the constitution."""
    from .stereo import describe, stereo_info

    spec, _unspec, _ = stereo_info(mol)
    if not spec:
        return mol_smiles(mol, isomeric=False), None
    conf = describe(mol, substrate_chiral=sub_chiral)
    return conf.smiles, conf


def _substrate_stereo(sub: Chem.Mol) -> tuple[str, ...]:
    """E/Z of each specified C=C and R/S of each specified centre, in substrate numbering."""
    from rdkit.Chem import rdCIPLabeler

    m = Chem.Mol(sub)
    try:
        rdCIPLabeler.AssignCIPLabels(m)
    except Exception:  # descriptors are a courtesy in the header; never fail on them
        return ()
    out = []
    for b in m.GetBonds():
        if b.HasProp("_CIPCode"):
            out.append(f"{lab(m, b.GetBeginAtomIdx())}={lab(m, b.GetEndAtomIdx())} {b.GetProp('_CIPCode')}")
    for a in m.GetAtoms():
        if a.HasProp("_CIPCode"):
            out.append(f"{lab(m, a.GetIdx())} {a.GetProp('_CIPCode')}")
    return tuple(out)


def _finalise(ctx: Context, outcomes: list[Outcome], substrate_input: str, alcohol: str | None) -> Enumeration:
    cand = ctx.par["candidates"]
    sub_chiral = any(a.GetChiralTag() != Chem.ChiralType.CHI_UNSPECIFIED for a in ctx.sub.GetAtoms())
    sub_key = mol_smiles(ctx.sub)
    total = sum(o.weight for o in outcomes)
    if total <= 0:
        raise SpecmatchError("no product could be formed from this substrate with this reagent")
    w_unreacted = cand["unreacted_substrate"]
    outcomes = _expand_faces(ctx, outcomes, sub_chiral)
    merged: dict[str, list[Outcome]] = {}
    confs: dict[str, object] = {}
    for o in outcomes:
        o.weight = o.weight / total * (1.0 - w_unreacted)
        key, conf = _key(o.mol, sub_chiral)
        if mol_smiles(o.mol, isomeric=False) == mol_smiles(ctx.sub, isomeric=False) and conf is None:
            key = sub_key
        merged.setdefault(key, []).append(o)
        confs[key] = conf
    merged.setdefault(sub_key, []).append(
        Outcome(ctx.sub, w_unreacted, "unreacted substrate", ["no reaction (incomplete conversion)"],
                {"unreacted substrate"}))
    confs.setdefault(sub_key, None)
    if len(merged) > cand["max_candidates"]:
        raise SpecmatchError(f"the enumeration gives {len(merged)} candidates, more than the cap of "
                             f"{cand['max_candidates']}; use a smaller --max-shifts")
    sub_counts = _stereo_count(ctx.sub)
    rows = []
    for key, lst in merged.items():
        lst.sort(key=lambda o: -o.weight)
        best = lst[0]
        w = sum(o.weight for o in lst)
        flags = set(best.flags)
        notes = list(best.notes)
        if key == sub_key:
            best = next(o for o in lst if "unreacted substrate" in o.flags)
            flags = set(best.flags)
            others = [o for o in lst if o is not best]
            if others:
                notes.append("also re-formed by " + "; ".join(sorted({o.label for o in others})))
        else:
            for o in lst[1:]:
                if o.label != best.label and o.weight > 1e-4:
                    notes.append(f"also formed as: {o.label} ({o.weight / w:.0%} of this product)")
            # a product is only 'rearranged'/'other conditions' if its main route is
            if any("other conditions" not in o.flags for o in lst):
                flags.discard("other conditions")
            notes += _stereo_notes(best.mol, sub_counts, sub_chiral, ctx.cls, flags, confs[key])
        conf = confs[key]
        smiles = key if conf is not None else mol_smiles(Chem.MolFromSmiles(key), isomeric=False)
        if key == sub_key:
            smiles = sub_key
        rows.append([smiles, best.label, tuple(best.pathway), w, flags, tuple(dict.fromkeys(notes)),
                     mol_smiles(best.mol, isomeric=False), conf])
    floor = cand["floor"]
    tot = sum(max(r[3], floor) for r in rows)
    top = max(max(r[3], floor) / tot for r in rows)
    cands = []
    for smiles, label, path, w, flags, notes, constitution, conf in rows:
        prior = max(w, floor) / tot
        if w < cand["not_expected_below"]:
            role = "not expected under these conditions"
        elif prior >= cand["major_fraction"] * top:
            role = "major"
        elif prior >= cand["minor_min"]:
            role = "minor"
        else:
            role = "trace"
        cands.append(Candidate(smiles, label, path, prior, role, tuple(sorted(flags)), notes, w,
                               constitution=constitution, racemic=bool(conf is not None and conf.racemic),
                               configuration=conf.words if conf is not None else ""))
    cands.sort(key=lambda c: (-c.prior, c.smiles))
    ranked_by = "empirical cation scale (specmatch/reactions/data)"
    if ctx.cls in {"hydroboration", "oxymercuration", "halogenation", "halohydrin", "hx_radical"}:
        ranked_by = "empirical regiochemistry rules and cation/radical scales (specmatch/reactions/data)"
    if ctx.use_xtb:
        ranked_by += (f" + GFN2-xTB (tblite) for {ctx.xtb_used[0]} close cation(s)" if ctx.xtb_used[0]
                  else "; GFN2-xTB requested but no close cation pair needed it")
    return Enumeration(substrate=mol_smiles(Chem.MolFromSmiles(sub_key)),
                       substrate_stereo=_substrate_stereo(ctx.sub),
                       reagent=ctx.reagent, candidates=tuple(cands), warnings=tuple(dict.fromkeys(ctx.warnings)),
                       ranked_by=ranked_by, alcohol=alcohol, reaction_class=ctx.cls, substrate_input=substrate_input,
                       safety=ctx.reagent.safety)


# ------------------------------------------------------------------ public entry point
CONTROLS = ("auto", "kinetic", "thermodynamic")


def enumerate_products(substrate: str, reagent: str | Reagent, *, alcohol: str | None = None,
                       max_shifts: int = 2, use_xtb: bool = False, control: str = "auto") -> Enumeration:
    """Plausible products of `substrate` with `reagent`, with pathway, prior and role.

    Parameters
    ----------
    substrate : str
        SMILES or molfile text (at most 60 heavy atoms).
    reagent : str or Reagent
        As a chemist writes it (``"HBr"``, ``"H2O/H2SO4"``, ``"BH3; H2O2, NaOH"``), see
        :func:`known_reagents`.
    alcohol : str, optional
        SMILES of the alcohol for acid-catalysed ether formation (or alkoxymercuration).
    max_shifts : int
        Longest sequence of 1,2-shifts followed (default 2, at most 4).
    use_xtb : bool
        Refine cations the empirical scale cannot order (within ~2 kcal/mol) with GFN2-xTB
        (needs the optional ``tblite`` package; without it a warning says so).
    control : str
        Capture of allylic cations: ``"kinetic"`` (low temperature, short times: the terminus
        carrying more charge, e.g. the 1,2-adduct of a diene), ``"thermodynamic"`` (warm,
        equilibrating: the product with the more substituted C=C, e.g. the 1,4-adduct), or
        ``"auto"`` (thermodynamic for HX with allylic alcohols, whose halides equilibrate;
        kinetic otherwise). Allylic products carry a note either way.

    Returns
    -------
    Enumeration
        Candidates sorted by prior (priors sum to 1), warnings, and what ranked the pathways.

    Examples
    --------
    >>> res = enumerate_products("C=CC(C)C", "HCl")
    >>> res.candidates[0].smiles, res.candidates[0].label
    ('CCC(C)(C)Cl', 'after 1,2-hydride shift')
    """
    par = prior_parameters()
    cand = par["candidates"]
    if isinstance(max_shifts, bool) or not isinstance(max_shifts, int) or not 0 <= max_shifts <= cand["max_shifts_allowed"]:
        raise SpecmatchError(f"--max-shifts must be a whole number from 0 to {cand['max_shifts_allowed']} "
                             f"(got {max_shifts!r})")
    if control not in CONTROLS:
        raise SpecmatchError(f"--control must be one of {', '.join(CONTROLS)} (got {control!r})")
    r = reagent if isinstance(reagent, Reagent) else parse_reagent(reagent)
    mol = mol_from_text(substrate, max_heavy_atoms=cand["max_heavy_atoms"])
    if Chem.GetFormalCharge(mol) != 0 or any(a.GetNumRadicalElectrons() for a in mol.GetAtoms()) \
            or any(a.GetFormalCharge() != 0 and a.GetAtomicNum() == 6 for a in mol.GetAtoms()):
        raise SpecmatchError("give a neutral closed-shell substrate (no net charge, no carbocations or radicals)")
    sub = prepare(Chem.Mol(mol))
    warnings: list[str] = []
    alc_text = alcohol.strip() if isinstance(alcohol, str) and alcohol.strip() else None
    if alc_text is None and r.alcohol:
        alc_text = r.alcohol
    elif alc_text and r.alcohol and alc_text != r.alcohol:
        warnings.append(f"--alcohol {alc_text} replaces the alcohol of '{r.name}'")
    cls = _resolve_class(r, sub, alc_text if alcohol or r.alcohol else None, warnings)
    nu = _alcohol_nucleophile(alc_text) if alc_text and cls in {"alcohol_addition", "oxymercuration"} else None
    if use_xtb:
        from .xtb import available

        if not available():
            warnings.append("GFN2-xTB refinement requested but the optional 'tblite' package is not installed "
                            "(pip install 'specmatch[xtb]'); ranked with the empirical scale only")
            use_xtb = False
    ctx = Context(sub, r, cls, max_shifts, use_xtb, nu, warnings, par, control=control)
    if len(alkene_bonds(sub)) > 1 and cls in ADDITION_CLASSES:
        warnings.append("several C=C: mono-addition products are listed; with excess reagent each C=C reacts")
    if sub.GetRingInfo().NumRings() >= 2 and any(sub.GetRingInfo().NumAtomRings(i) >= 2 for i in range(sub.GetNumAtoms())):
        warnings.append("fused or bridged rings: ring strain is approximated by the sum over the smallest "
                        "rings; check rearrangements of polycyclic cations with care")
    outcomes = _DRIVERS[cls](ctx)
    return _finalise(ctx, outcomes, substrate.strip() if "M  END" not in substrate else "molfile",
                     mol_smiles(nu.mol, isomeric=False) if nu else None)
