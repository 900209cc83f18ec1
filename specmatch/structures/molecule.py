"""Parse and perceive molecules once; every later stage reads the perceived object.

A :class:`Structure` holds the RDKit molecule (heavy atoms in the input's parse
order, hydrogens implicit) together with everything the NMR stages ask about it:
canonical SMILES, formula, topological symmetry classes, diastereotopic groups
and potential stereocentres. It is computed once per input and is immutable.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from functools import lru_cache
from typing import TYPE_CHECKING

from rdkit import Chem, RDLogger
from rdkit.Chem import rdMolDescriptors

from ..errors import SpecmatchError

if TYPE_CHECKING:
    from .graph import MolGraph

RDLogger.DisableLog("rdApp.*")

#: Largest molecule the structures layer accepts. The NMR tables are meant for
#: small molecules; a 500-atom input is almost certainly a paste error.
MAX_HEAVY_ATOMS = 150

# elements the increment tables know something about; others still parse
_ALLOWED = {"H", "C", "N", "O", "F", "Cl", "Br", "I", "S", "P", "Si", "B", "Se", "Hg", "D"}


@dataclass(frozen=True)
class Structure:
    """A molecule perceived once for the NMR stages.

    Attributes
    ----------
    mol : rdkit.Chem.Mol
        Sanitised molecule, heavy atoms in the input's parse order, H implicit.
    smiles : str
        The text as given (SMILES, or ``"molfile"`` for a molfile).
    canonical_smiles : str
        RDKit canonical SMILES without stereo (the constitution).
    formula : str
        Molecular formula in Hill order, e.g. ``"C8H16O"``.
    symmetry_classes : tuple of int
        Per heavy atom, its topological symmetry class (RDKit canonical ranking
        without tie breaking): atoms with the same number are equivalent.
    diastereotopic_ch2 : frozenset of int
        Carbon atoms carrying two H that are diastereotopic (separate 1H signals).
    diastereotopic_pairs : tuple of (int, int)
        Pairs of topologically equivalent groups on one carbon (gem-dimethyls,
        isopropyl methyls) that are diastereotopic, given by the heavy atom that
        attaches each group. They are expected as separate signals.
    stereocentres : tuple of int
        Atoms that are potential tetrahedral stereocentres (assigned or not).
    isomeric_smiles : str
        RDKit canonical isomeric SMILES: the constitution plus every configuration the
        input specifies (``"C[C@@H](Br)[C@@H](C)Br"``). Equal to `canonical_smiles` when
        the input gives no stereo.
    specified_stereo : tuple of int
        Tetrahedral stereocentres whose configuration the input specifies. Two or more
        define a relative configuration (cis/trans, meso/dl), which the stereo layer of
        the prediction reads.
    """

    mol: Chem.Mol
    smiles: str
    canonical_smiles: str
    formula: str
    symmetry_classes: tuple[int, ...]
    diastereotopic_ch2: frozenset[int]
    diastereotopic_pairs: tuple[tuple[int, int], ...]
    stereocentres: tuple[int, ...]
    isomeric_smiles: str = ""
    specified_stereo: tuple[int, ...] = ()
    #: views derived on demand and kept with the structure (``structures.graph.graph_of``)
    _memo: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def n_heavy(self) -> int:
        return self.mol.GetNumAtoms()

    def equivalence_sets(self, element: str | None = None) -> list[tuple[int, ...]]:
        """Sets of topologically equivalent heavy atoms, in order of first atom.

        Parameters
        ----------
        element : str, optional
            Only atoms of this element symbol (e.g. ``"C"``).
        """
        groups: dict[int, list[int]] = {}
        for atom in self.mol.GetAtoms():
            if element is None or atom.GetSymbol() == element:
                groups.setdefault(self.symmetry_classes[atom.GetIdx()], []).append(atom.GetIdx())
        return [tuple(v) for v in sorted(groups.values())]

    def diastereotopic_halves(self, atoms: tuple[int, ...]) -> tuple[tuple[int, ...], tuple[int, ...]] | None:
        """The two halves of an equivalence set made of diastereotopic twins, or None.

        The pairs are 2-coloured (each pair has one atom in each half), so the sizes of
        the halves do not depend on the order the atoms were written in; atoms in no
        pair, and the larger side of each linked set, go to the first half.
        """
        members = set(atoms)
        adj: dict[int, set[int]] = {}
        for a, b in self.diastereotopic_pairs:
            if a in members and b in members and a != b:
                adj.setdefault(a, set()).add(b)
                adj.setdefault(b, set()).add(a)
        if not adj:
            return None
        first: list[int] = []
        second: list[int] = []
        colour: dict[int, int] = {}
        for start in sorted(adj):
            if start in colour:
                continue
            colour[start] = 0
            part = [[start], []]
            queue = [start]
            while queue:
                x = queue.pop()
                for y in sorted(adj[x]):
                    if y not in colour:
                        colour[y] = 1 - colour[x]
                        part[colour[y]].append(y)
                        queue.append(y)
                    elif colour[y] == colour[x]:
                        return None  # an odd ring of pairs: no consistent split
            big, small = sorted(part, key=len, reverse=True)
            first += big
            second += small
        rest = [a for a in atoms if a not in colour]
        return tuple(sorted(first + rest)), tuple(sorted(second))

    def is_diastereotopic_group(self, atom_index: int) -> bool:
        """True if this atom attaches a group that has a diastereotopic twin."""
        return any(atom_index in pair for pair in self.diastereotopic_pairs)


def _hill_formula(mol: Chem.Mol) -> str:
    return rdMolDescriptors.CalcMolFormula(mol)


def _smiles_problem(text: str) -> str:
    """A best guess at why RDKit refused a SMILES, for the error message."""
    opened: dict[str, int] = {}
    for m in re.finditer(r"%\d\d|(?<!\[)\d", re.sub(r"\[[^\]]*\]", "", text)):
        opened[m.group()] = opened.get(m.group(), 0) ^ 1
    unclosed = [k for k, v in opened.items() if v]
    if unclosed:
        return f"ring bond {unclosed[0].lstrip('%')} is never closed"
    if text.count("(") != text.count(")"):
        return "parentheses do not balance"
    if text.count("[") != text.count("]"):
        return "square brackets do not balance"
    mol = Chem.MolFromSmiles(text, sanitize=False)
    if mol is None:
        return "it does not follow SMILES syntax"
    try:
        Chem.SanitizeMol(mol)
    except Exception as exc:  # RDKit raises several types; we only want the text
        msg = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        msg = msg.replace("Explicit valence for atom", "valence too high for atom")
        return msg
    return "RDKit could not interpret it"


#: atomic numbers of `_ALLOWED` (D is H); symbols are only looked up for the message
_ALLOWED_Z = frozenset(Chem.GetPeriodicTable().GetAtomicNumber(e) for e in _ALLOWED - {"D"})


def _check_size(mol: Chem.Mol, what: str, max_heavy_atoms: int, *, connected: bool = False,
                elements: bool = True) -> None:
    """Refuse empty, oversized, disconnected molecules and unhandled elements.

    ``connected=True``: the caller knows the molecule is one fragment (a SMILES without
    '.'), which spares the fragment search; ``elements=False``: the caller knows every
    element is handled (a SMILES of organic-subset atoms only).
    """
    n = mol.GetNumHeavyAtoms()
    if n == 0:
        raise SpecmatchError(f"{what} contains no heavy atoms")
    if n > max_heavy_atoms:
        raise SpecmatchError(
            f"{what} has {n} heavy atoms; specmatch handles molecules of up to "
            f"{max_heavy_atoms} heavy atoms (small organic molecules)"
        )
    if not connected:
        n_parts = len(Chem.GetMolFrags(mol))
        if n_parts > 1:
            raise SpecmatchError(
                f"{what} has {n_parts} disconnected parts; give one molecule "
                "(drop counter-ions and solvent)"
            )
    if elements and not {mol.GetAtomWithIdx(i).GetAtomicNum() for i in range(mol.GetNumAtoms())} <= _ALLOWED_Z:
        odd = sorted({mol.GetAtomWithIdx(i).GetSymbol() for i in range(mol.GetNumAtoms())} - _ALLOWED)
        raise SpecmatchError(f"{what} contains {', '.join(odd)}, which specmatch does not handle")


#: RDKit atom property holding the number of deuterium atoms a heavy atom carried in the input
DEUTERIUM_PROP = "specmatch_deuterium"


def _check_species(mol: Chem.Mol, what: str) -> None:
    """Refuse radicals and charged species: the tables describe closed-shell neutral molecules.

    Charge-separated neutral groups on N, O, S, P (nitro, N-oxides, sulfoxides written
    S+-O-) are accepted; a charged carbon, a net charge or an unpaired electron is not,
    because predicting it as the parent molecule would be silently wrong.
    """
    atoms = [mol.GetAtomWithIdx(i) for i in range(mol.GetNumAtoms())]  # by index: the sequence wrapper is slow
    radicals = [a for a in atoms if a.GetNumRadicalElectrons()]
    if radicals:
        a = radicals[0]
        raise SpecmatchError(
            f"{what} is a radical (unpaired electron on {a.GetSymbol()} atom {a.GetIdx() + 1}); "
            "specmatch predicts closed-shell molecules: write every atom's hydrogens "
            "(e.g. C for methane, not [CH3])")
    charges = [a.GetFormalCharge() for a in atoms]
    if not any(charges):
        return
    net = sum(charges)
    charged_c = [a for a, q in zip(atoms, charges) if q and a.GetAtomicNum() == 6]
    if net or charged_c:
        where = charged_c[0] if charged_c else next(a for a, q in zip(atoms, charges) if q)
        kind = "a carbocation" if where.GetAtomicNum() == 6 and where.GetFormalCharge() > 0 else \
            "a carbanion" if where.GetAtomicNum() == 6 else "an ion"
        raise SpecmatchError(
            f"{what} is {kind} (charge {where.GetFormalCharge():+d} on {where.GetSymbol()} atom "
            f"{where.GetIdx() + 1}, net charge {net:+d}); the tables describe neutral molecules: "
            "give the neutral product (e.g. the alcohol or halide formed from a cation)")


def _fold_deuterium(mol: Chem.Mol, what: str) -> Chem.Mol:
    """Remove D atoms, counting them on their heavy atom (``DEUTERIUM_PROP``).

    The carbon keeps its hydrogen count (a C-D is a C-H for the 13C increments); the
    1H predictor leaves D out of integrals and multiplets. Partial labelling that
    makes topologically equivalent atoms different (CH2D next to CH3) is refused:
    symmetry is perceived on the unlabelled skeleton.
    """
    counts: dict[int, int] = {}
    for a in mol.GetAtoms():
        if a.GetAtomicNum() == 1:
            if a.GetIsotope() not in (0, 1, 2):
                raise SpecmatchError(f"{what} contains tritium or another hydrogen isotope ({a.GetIsotope()}H); "
                                     "only D ([2H]) is handled")
            if a.GetIsotope() == 2:
                nbs = a.GetNeighbors()
                if len(nbs) != 1:
                    raise SpecmatchError(f"{what} has a D atom that is not bonded to exactly one heavy atom")
                counts[nbs[0].GetIdx()] = counts.get(nbs[0].GetIdx(), 0) + 1
        elif a.GetIsotope():
            raise SpecmatchError(f"{what} gives a mass number for {a.GetSymbol()} atom {a.GetIdx() + 1} "
                                 f"({a.GetIsotope()}{a.GetSymbol()}); isotope labels other than D are not handled: "
                                 "drop the mass number")
    if not counts:
        return mol
    # index of each heavy atom after the H atoms are removed (RemoveHs keeps heavy-atom order)
    heavy = [a.GetIdx() for a in mol.GetAtoms() if a.GetAtomicNum() != 1]
    new_index = {old: k for k, old in enumerate(heavy)}
    params = Chem.RemoveHsParameters()
    params.removeIsotopes = True
    out = Chem.RemoveHs(mol, params)
    for old, n in counts.items():
        out.GetAtomWithIdx(new_index[old]).SetIntProp(DEUTERIUM_PROP, n)
    out.SetIntProp(DEUTERIUM_PROP, sum(counts.values()))
    ranks = list(Chem.CanonicalRankAtoms(out, breakTies=False, includeChirality=False))
    seen: dict[int, int] = {}
    for a in out.GetAtoms():
        n = a.GetIntProp(DEUTERIUM_PROP) if a.HasProp(DEUTERIUM_PROP) else 0
        r = ranks[a.GetIdx()]
        if seen.setdefault(r, n) != n:
            raise SpecmatchError(
                f"{what}: the D label makes atoms different that are equivalent in the unlabelled "
                "molecule; specmatch handles D only where it keeps the symmetry (e.g. CD3 groups, "
                "all equivalent positions labelled); predict the unlabelled molecule instead")
    return out


def deuterium_counts(mol: Chem.Mol) -> tuple[int, ...]:
    """Per heavy atom, the number of its hydrogens that are D (see :func:`mol_from_text`);
    ``()`` for a molecule without D."""
    if not mol.HasProp(DEUTERIUM_PROP):
        return ()
    return tuple(a.GetIntProp(DEUTERIUM_PROP) if a.HasProp(DEUTERIUM_PROP) else 0 for a in mol.GetAtoms())


def mol_from_text(text: str, *, max_heavy_atoms: int = MAX_HEAVY_ATOMS) -> Chem.Mol:
    """Parse SMILES or a molfile (V2000/V3000 block) into a sanitised RDKit molecule.

    D atoms ([2H]) are removed and counted on their heavy atom (see
    :func:`deuterium_counts`); other isotope labels, radicals and charged species
    are refused with the reason.

    Raises
    ------
    SpecmatchError
        With a message that says what is wrong: empty input, bad syntax, a valence
        error, several fragments, a molecule too large, a radical or ion, an
        isotope label other than D.
    """
    if not isinstance(text, str):
        raise SpecmatchError(f"expected a SMILES string or molfile text, got {type(text).__name__}")
    stripped = text.strip()
    if not stripped:
        raise SpecmatchError("no structure given (the SMILES or molfile is empty)")
    if "M  END" in text or "V2000" in text or "V3000" in text:
        mol = Chem.MolFromMolBlock(text, sanitize=False, removeHs=False)
        what = "the molfile"
        if mol is None:
            raise SpecmatchError("the molfile could not be read (check the counts line and atom block)")
        try:
            Chem.SanitizeMol(mol)
        except Exception as exc:
            raise SpecmatchError(f"the molfile is not a valid structure: {str(exc).splitlines()[0]}") from None
    else:
        if "\n" in stripped:
            raise SpecmatchError("give one SMILES per structure (the text has several lines)")
        what = f"'{stripped}'" if len(stripped) <= 60 else f"'{stripped[:57]}...'"
        mol = Chem.MolFromSmiles(stripped)
        if mol is None:
            raise SpecmatchError(f"{what} is not a valid SMILES ({_smiles_problem(stripped)})")
    # A SMILES without brackets and '*' holds only organic-subset atoms (B, C, N, O, P, S and
    # the halogens, all handled): no H atoms, isotopes, charges, radicals or wildcards, so
    # the atom loops below are skipped for the common plain SMILES
    plain = what != "the molfile" and "[" not in stripped and "*" not in stripped
    if not plain:
        # one pass over the atoms, by index (RDKit's atom sequence wrapper is slow for small molecules)
        numbers = {mol.GetAtomWithIdx(i).GetAtomicNum() for i in range(mol.GetNumAtoms())}
        if 0 in numbers:
            raise SpecmatchError(f"{what} contains a wildcard atom '*'; give a complete structure")
        if 1 in numbers:
            mol = Chem.RemoveHs(mol)  # keeps isotope-labelled H, folded next
        if any(mol.GetAtomWithIdx(i).GetIsotope() for i in range(mol.GetNumAtoms())):
            mol = _fold_deuterium(mol, what)
        _check_species(mol, what)
    # a SMILES without '.' is one fragment (ring-closure digits only join atoms across a '.')
    _check_size(mol, what, max_heavy_atoms, connected=what != "the molfile" and "." not in stripped,
                elements=not plain)
    return mol


def _label_one_h(mol: Chem.Mol, carbon: int) -> Chem.Mol:
    mh = Chem.AddHs(mol, onlyOnAtoms=(carbon,))
    for nb in mh.GetAtomWithIdx(carbon).GetNeighbors():
        if nb.GetAtomicNum() == 1:
            nb.SetIsotope(2)
            break
    return mh


def _label_atom(mol: Chem.Mol, atom: int) -> Chem.Mol:
    rw = Chem.RWMol(mol)
    a = rw.GetAtomWithIdx(atom)
    a.SetIsotope(a.GetMass().__round__() + 1 if a.GetIsotope() == 0 else a.GetIsotope() + 1)
    return rw.GetMol()


_STEREO_KIND = {Chem.StereoType.Atom_Tetrahedral: "Atom_Tetrahedral", Chem.StereoType.Bond_Double: "Bond_Double"}
_SPECIFIED = Chem.StereoSpecified.Specified


def _stereo_elements(mol: Chem.Mol, *, copy: bool = True) -> list[tuple[str, int, bool]]:
    """(type, centre atom or bond, configuration specified?) of every potential stereo element.

    The search runs without cleaning (``cleanIt=False``: on the 7,000 dev molecules and
    their 55,000 labelled copies it lists the same elements and leaves the SMILES
    unchanged, at 40% of the time of copy-and-clean); it still leaves computed flags
    behind, so it runs on a copy unless the caller owns a throw-away molecule
    (``copy=False``).
    """
    if copy:
        mol = Chem.Mol(mol)
    info = Chem.FindPotentialStereo(mol, cleanIt=False, flagPossible=True)
    kind = _STEREO_KIND
    # by index: iterating RDKit's vector wrapper ends on a caught IndexError, four times slower
    items = [info[k] for k in range(len(info))]
    return [(kind.get(s.type) or str(s.type), s.centeredOn, s.specified == _SPECIFIED) for s in items]


def mol_smiles(mol: Chem.Mol, *, isomeric: bool = True) -> str:
    """Canonical SMILES of a parsed molecule: the one place specmatch writes SMILES.

    ``isomeric=True`` (default) keeps the configurations the molecule carries;
    ``isomeric=False`` gives the constitution, the key that merges configurations.
    RDKit caches stereo perception: after changing chiral tags call
    ``ClearComputedProps()`` first (:func:`mirror_image` does).
    """
    return Chem.MolToSmiles(mol, isomericSmiles=isomeric)


def enantiomer_key(mol: Chem.Mol) -> str:
    """One canonical isomeric SMILES for a molecule and its mirror image (the lexically
    smaller), so a racemic pair always has one text."""
    return min(mol_smiles(mol), mol_smiles(mirror_image(mol)))


def mirror_image(mol: Chem.Mol) -> Chem.Mol:
    """The mirror image: every tetrahedral tag inverted (a copy; perception cleared)."""
    m = Chem.Mol(mol)
    for i in range(m.GetNumAtoms()):  # by index: the sequence wrapper is slow
        a = m.GetAtomWithIdx(i)
        tag = a.GetChiralTag()
        if tag == Chem.ChiralType.CHI_TETRAHEDRAL_CW:
            a.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
        elif tag == Chem.ChiralType.CHI_TETRAHEDRAL_CCW:
            a.SetChiralTag(Chem.ChiralType.CHI_TETRAHEDRAL_CW)
    m.ClearComputedProps()  # RDKit caches the stereo perception; tags changed
    return m


def _with_tag(mol: Chem.Mol, centre: int, tag: Chem.ChiralType) -> str:
    """SMILES of `mol` (plain H already removed) with the centre's configuration set."""
    m = Chem.Mol(mol)
    m.GetAtomWithIdx(centre).SetChiralTag(tag)
    m.ClearComputedProps()
    return mol_smiles(m)


def _is_diastereotopic_after_label(labelled: Chem.Mol, centre: int, parent_chiral: bool = False,
                                   centre_stereogenic: bool = False) -> bool:
    """Labelling one of two equivalent ligands turns `centre` into a stereocentre;
    the ligands are diastereotopic if the two labelled molecules are diastereomers.

    This is the substitution test of standard texts (replace each ligand in turn by
    a test group; diastereomers result -> diastereotopic, enantiomers -> enantiotopic).
    A C=C stereo element alone does not make the pair diastereotopic: mirroring leaves
    E/Z unchanged, so the two labelled molecules are enantiomers ((E)-1-bromobut-2-ene's
    CH2Br is enantiotopic; common practice). With another tetrahedral element of
    unspecified configuration (a racemate) the pair counts as diastereotopic; when
    every other element is specified the labelled molecules are compared exactly
    (the CH2 of meso- and dl-pentane-2,4-diol differ).
    """
    elements = _stereo_elements(labelled, copy=False)  # the labelled copy is the caller's throw-away
    if not any(kind == "Atom_Tetrahedral" and at == centre for kind, at, _ in elements):
        return False
    others = [(kind, spec) for kind, at, spec in elements if at != centre and kind != "Bond_Double"]
    if not others:
        return False
    if not all(spec for _, spec in others):
        return True
    # Labelled molecules "one" (centre CW) and "two" (CCW) are compared as SMILES, and "two"
    # with the mirror image of "one". Two shortcuts give the same answer without SMILES:
    # `centre_stereogenic`, the caller knows one != two (a labelled CH2 whose heavy ligands
    # fall in different symmetry classes: the label fixes the centre, so no symmetry undoes
    # its inversion); `parent_chiral`, the unlabelled molecule differs from its mirror
    # image, and "two" carries the molecule while the mirror image of "one" carries its
    # enantiomer, so they differ.
    if centre_stereogenic and parent_chiral:
        return True
    # the plain H removed once (the label stays; heavy-atom indices do not change); the
    # centre has no tag yet, so no configuration is lost
    bare = Chem.RemoveHs(labelled) if labelled.GetNumAtoms() > labelled.GetNumHeavyAtoms() else labelled
    two = _with_tag(bare, centre, Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
    if not centre_stereogenic and _with_tag(bare, centre, Chem.ChiralType.CHI_TETRAHEDRAL_CW) == two:
        return False
    if parent_chiral:
        return True
    mirror = _with_tag(mirror_image(bare), centre, Chem.ChiralType.CHI_TETRAHEDRAL_CCW)
    return two != mirror


def _may_be_prochiral(nbrs: list[int], classes: tuple[int, ...]) -> bool:
    """An sp3 centre Caabc (the caller checks sp3 and at most one H): two equivalent heavy
    ligands, the other two different."""
    counts: dict[int, int] = {}
    for nb in nbrs:
        counts[classes[nb]] = counts.get(classes[nb], 0) + 1
    return max(counts.values(), default=0) == 2


def _tie_branches(nbrs: list[list[int]], classes: tuple[int, ...]) -> list[tuple[int, set[int]]]:
    """Atoms with two or more equivalent neighbours, each with the atoms of those
    neighbours' branches (reachable from them without passing the atom)."""
    out = []
    for p, around in enumerate(nbrs):
        if len(around) < 2:
            continue
        by_class: dict[int, list[int]] = {}
        for nb in around:
            by_class.setdefault(classes[nb], []).append(nb)
        twins = [nb for members in by_class.values() if len(members) > 1 for nb in members]
        if not twins:
            continue
        seen = {p, *twins}
        stack = list(twins)
        while stack:
            for y in nbrs[stack.pop()]:
                if y not in seen:
                    seen.add(y)
                    stack.append(y)
        seen.discard(p)
        out.append((p, seen))
    return out


def _diastereotopic(mol: Chem.Mol, classes: tuple[int, ...], original_stereo: list[tuple[str, int, bool]],
                    *, fast: bool = True, graph: MolGraph | None = None, isomeric: str | None = None
                    ) -> tuple[frozenset[int], tuple[tuple[int, int], ...]]:
    """Diastereotopic CH2 carbons and pairs of diastereotopic twin groups.

    ``fast=False`` runs the full substitution test everywhere (the tests compare both);
    ``graph`` is the molecule's graph view and ``isomeric`` its canonical isomeric
    SMILES, if the caller has them.
    """
    from .graph import MolGraph  # the graph module reads this one's constants

    g = graph if graph is not None else MolGraph(mol)
    sp3 = Chem.HybridizationType.SP3
    nbrs_of, nh_of = g.nbrs, g.nh_total

    def tetrahedral(i: int) -> bool:  # sp3 (any element); asked only where it decides
        return mol.GetAtomWithIdx(i).GetHybridization() == sp3

    # Cheap pre-test: without a stereo element or a prochiral centre nothing can be
    # diastereotopic, which spares the labelled-molecule test for most small molecules.
    if not original_stereo and not any(nh_of[i] <= 1 and _may_be_prochiral(nbrs_of[i], classes) and tetrahedral(i)
                                       for i in range(g.n)):
        return frozenset(), ()
    # Fast path of the substitution test, without building the labelled molecule: when no
    # configuration is specified, the test says "diastereotopic" as soon as the labelled
    # centre is stereogenic and another stereo element (not a C=C) exists. Both are known
    # beforehand in the common cases: the centre's other ligands fall in different symmetry
    # classes (labelling only refines classes), and the unlabelled molecule already has a
    # stereo element elsewhere (it keeps it after labelling). Every other case runs the test.
    tetra = [(at, spec) for kind, at, spec in original_stereo if kind != "Bond_Double"]
    given = any(spec for _, spec in tetra)
    # with configurations given: is the molecule chiral (unequal to its mirror image)?
    shortcuts = fast
    # (asked lazily: writing the mirror image's SMILES is a good share of the test)
    chiral_memo: list[bool] = []

    def chiral() -> bool:
        if not chiral_memo:
            chiral_memo.append(shortcuts and given and (isomeric or mol_smiles(mol)) != mol_smiles(mirror_image(mol)))
        return chiral_memo[0]

    fast = fast and not given
    elsewhere = {at for at, _ in tetra}
    ch2: set[int] = set()
    pairs: list[tuple[int, int]] = []
    # Labelling (one H of a CH2, one of two twin ligands) adds a stereo element elsewhere only
    # at an atom whose equivalent ligands it tells apart: one with the label inside the branch
    # of one of them. Without such an atom, and without another tetrahedral (or other
    # non-C=C) element to begin with, the labelled molecule has no stereo element besides
    # the centre, and the test says "not diastereotopic" (first check of the test).
    exotic = any(kind not in ("Atom_Tetrahedral", "Bond_Double") for kind, _, _ in original_stereo)
    ties: list[tuple[int, set[int]]] | None = None

    def lone_centre(centre: int, label: int) -> bool:
        nonlocal ties
        if not shortcuts or exotic or elsewhere - {centre}:
            return False
        if ties is None:
            ties = _tie_branches(nbrs_of, classes)
        return not any(p != centre and label in branch for p, branch in ties)

    # answers of the labelled test per symmetry class (of the centre; of the centre and the
    # twin ligands): equivalent atoms get the same answer, so each class is labelled once
    known: dict[tuple[int, ...], bool] = {}
    for idx in range(g.n):
        n_h = nh_of[idx]
        # a CH3 is neither a CH2 nor a centre with twin ligands that can become a stereocentre
        if g.z[idx] != 6 or n_h > 2 or not tetrahedral(idx):
            continue
        neighbours = nbrs_of[idx]
        has_other = bool(elsewhere - {idx})
        other_element = fast and has_other
        # with configurations given, in a chiral molecule: a stereogenic labelled centre
        # with another tetrahedral element (kept by labelling) is diastereotopic, the
        # answer of the test's own shortcut, known here without labelling
        chiral_other = shortcuts and given and has_other  # and chiral(), asked only when it decides
        if n_h == 2 and len(neighbours) == 2:
            stereogenic = classes[neighbours[0]] != classes[neighbours[1]]
            if stereogenic and (other_element or (chiral_other and chiral())):
                ch2.add(idx)
            else:
                key = (classes[idx],)
                got = known.get(key) if shortcuts else None
                if got is None and lone_centre(idx, idx):
                    got = known[key] = False
                if got is None:
                    got = _is_diastereotopic_after_label(_label_one_h(mol, idx), idx, chiral(),
                                                         shortcuts and stereogenic)
                    known[key] = got
                if got:
                    ch2.add(idx)
        by_class: dict[int, list[int]] = {}
        for nb in neighbours:
            by_class.setdefault(classes[nb], []).append(nb)
        for members in by_class.values():
            if len(members) == 2:
                a, b = members
                if n_h >= 2:
                    continue  # two H on the centre: never a stereocentre, whatever is labelled
                rest = [x for x in neighbours if x != a and x != b]
                stereogenic = n_h == 1 or (len(rest) == 2 and classes[rest[0]] != classes[rest[1]])
                if stereogenic and (other_element or (chiral_other and chiral())):
                    pairs.append((a, b))
                else:
                    key = (classes[idx], classes[a], -1)
                    got = known.get(key) if shortcuts else None
                    if got is None and lone_centre(idx, a):
                        got = known[key] = False
                    if got is None:
                        got = known[key] = _is_diastereotopic_after_label(_label_atom(mol, a), idx, chiral())
                    if got:
                        pairs.append((a, b))
    return frozenset(ch2), tuple(pairs)


def perceive(mol: Chem.Mol, smiles: str = "") -> Structure:
    """Perceive an already parsed molecule (see :func:`parse_structure`)."""
    # by index: iterating RDKit's vector wrapper costs a Python call per atom
    ranks = Chem.CanonicalRankAtoms(mol, breakTies=False, includeChirality=False)
    classes = tuple([int(ranks[k]) for k in range(len(ranks))])
    from .graph import MolGraph

    graph = MolGraph(mol)  # built here once, kept with the structure for the predictors
    original_stereo = _stereo_elements(mol)
    plain = mol_smiles(mol, isomeric=False)
    # with no configuration given the isomeric SMILES is the plain one (D is folded and
    # other isotopes are refused at parsing; checked on the 7,000 dev molecules), so it
    # is written only when some element is specified
    isomeric = mol_smiles(mol) if any(spec for _, _, spec in original_stereo) else plain
    ch2, pairs = _diastereotopic(mol, classes, original_stereo, graph=graph, isomeric=isomeric)
    stereo = tuple(sorted(at for kind, at, _ in original_stereo if kind == "Atom_Tetrahedral"))
    specified = tuple(sorted(at for kind, at, spec in original_stereo if kind == "Atom_Tetrahedral" and spec))
    structure = Structure(
        mol=mol,
        smiles=smiles or isomeric,
        canonical_smiles=plain,
        formula=_hill_formula(mol),
        symmetry_classes=classes,
        diastereotopic_ch2=ch2,
        diastereotopic_pairs=pairs,
        stereocentres=stereo,
        isomeric_smiles=isomeric,
        specified_stereo=specified,
    )
    structure._memo["graph"] = graph
    return structure


@lru_cache(maxsize=4096)
def parse_structure(text: str, *, max_heavy_atoms: int = MAX_HEAVY_ATOMS) -> Structure:
    """Parse SMILES or a molfile and perceive it once (cached per input text).

    Examples
    --------
    >>> s = parse_structure("CC(C)C(C)O")
    >>> s.formula
    'C5H12O'
    >>> s.diastereotopic_pairs   # isopropyl methyls next to a stereocentre
    ((0, 2),)
    """
    mol = mol_from_text(text, max_heavy_atoms=max_heavy_atoms)
    label = text.strip() if "M  END" not in text else "molfile"
    return perceive(mol, label)


def canonical_smiles(text: str) -> str:
    """Canonical SMILES of the constitution (no stereo), for de-duplication."""
    return parse_structure(text).canonical_smiles


def isomeric_smiles(text: str) -> str:
    """Canonical isomeric SMILES: constitution plus the configurations the input specifies."""
    return parse_structure(text).isomeric_smiles


def stereocentres_created(before: str | Structure, after: str | Structure) -> int:
    """How many more potential stereocentres the product has than the substrate."""
    b = before if isinstance(before, Structure) else parse_structure(before)
    a = after if isinstance(after, Structure) else parse_structure(after)
    return max(0, len(a.stereocentres) - len(b.stereocentres))
