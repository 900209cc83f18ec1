"""Result objects of the reactions stage: one Candidate per product, one Enumeration per reaction."""

from __future__ import annotations

from dataclasses import dataclass, field

from .reagents import Reagent

ROLES = ("major", "minor", "trace", "not expected under these conditions")


@dataclass(frozen=True)
class Candidate:
    """A product worth testing against the spectra.

    Attributes
    ----------
    smiles : str
        Canonical isomeric SMILES: the relative configuration where the mechanism fixes it
        (anti/syn additions, diastereomers from capture on either face, where they give
        different predicted spectra), otherwise the constitution. A racemic candidate is
        written as the enantiomer with the lexically smaller SMILES.
    label : str
        Short description in the trade's words ("Markovnikov product", "after 1,2-hydride shift",
        "ring-expanded", "1,4-adduct", "E1 alkene", ...).
    pathway : tuple of str
        Readable steps, with cation classes and energies (kcal/mol on the specmatch scale,
        0 = tert-alkyl cation, ring strain included).
    prior : float
        Mechanistic prior; the priors of one enumeration sum to 1.
    role : str
        ``"major"``, ``"minor"``, ``"trace"`` or ``"not expected under these conditions"``.
    flags : tuple of str
        Machine-readable tags: ``rearranged``, ``isoenergetic shift``, ``ring-expanded``,
        ``ring-contracted``, ``anti-Markovnikov``, ``E1 by-product``, ``unreacted substrate``,
        ``1,4-adduct``, ``other conditions`` ...
    notes : tuple of str
        Stereochemical and practical notes (racemic new stereocentre, diastereomers, E/Z,
        syn/anti addition, other routes to the same product).
    constitution : str
        Canonical SMILES without stereo (diastereomer candidates share it).
    racemic : bool
        True if the candidate is chiral and formed with its mirror image in equal amounts.
    configuration : str
        Words for the configuration: "meso", "racemic (C2 R*, C3 R*)" (substrate atom
        numbers), or "" when no relative configuration is set.
    """

    smiles: str
    label: str
    pathway: tuple[str, ...]
    prior: float
    role: str
    flags: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    mechanistic_weight: float = 0.0
    constitution: str = ""
    racemic: bool = False
    configuration: str = ""

    def to_dict(self) -> dict:
        return {"smiles": self.smiles, "label": self.label, "pathway": list(self.pathway),
                "prior": round(self.prior, 6), "role": self.role, "flags": list(self.flags),
                "notes": list(self.notes), "mechanistic_weight": float(f"{self.mechanistic_weight:.4g}"),
                "constitution": self.constitution or self.smiles, "racemic": self.racemic,
                "configuration": self.configuration}


@dataclass(frozen=True)
class Enumeration:
    """The plausible products of one reaction, most probable first.

    Attributes
    ----------
    substrate : str
        Canonical SMILES of the substrate.
    reagent : Reagent
        The catalogue reagent the text was matched to.
    candidates : tuple of Candidate
        Sorted by descending prior; priors sum to 1.
    warnings : tuple of str
        Things the chemist should know (model limits, reagent read as ..., caps).
    ranked_by : str
        What ranked the pathways ("empirical cation scale" or "... + GFN2-xTB (tblite)").
    alcohol : str or None
        Canonical SMILES of the alcohol nucleophile, if any.
    reaction_class : str
        The mechanism class used (the reagent class after resolving a bare acid).
    substrate_input : str
        The substrate as typed; pathway atom numbers (C1, C2, ...) count its heavy atoms
        from 1 in the order they are written.
    substrate_stereo : tuple of str
        Specified configurations of the substrate in that numbering ("C2=C3 E", "C4 R").
    """

    substrate: str
    reagent: Reagent
    candidates: tuple[Candidate, ...]
    warnings: tuple[str, ...] = ()
    ranked_by: str = "empirical cation scale"
    alcohol: str | None = None
    reaction_class: str = ""
    substrate_input: str = ""
    safety: tuple[str, ...] = field(default_factory=tuple)
    substrate_stereo: tuple[str, ...] = ()

    @property
    def major(self) -> Candidate:
        return self.candidates[0]

    def candidate(self, smiles: str) -> Candidate | None:
        """The candidate for this SMILES (any spelling), or None.

        With stereo in the SMILES the configuration must match (either enantiomer of a
        racemic candidate); without, the most probable candidate of that constitution.
        """
        from ..structures import mirror_image, mol_from_text, mol_smiles

        mol = mol_from_text(smiles)
        plain = mol_smiles(mol, isomeric=False)
        iso = mol_smiles(mol)
        if iso != plain:
            keys = {iso, mol_smiles(mirror_image(mol))}
            return next((c for c in self.candidates if c.smiles in keys), None)
        return next((c for c in self.candidates if (c.constitution or c.smiles) == plain), None)

    def diastereomers(self, smiles: str) -> tuple[Candidate, ...]:
        """Every candidate with the constitution of `smiles`, most probable first."""
        from ..structures import mol_from_text, mol_smiles

        plain = mol_smiles(mol_from_text(smiles), isomeric=False)
        return tuple(c for c in self.candidates if (c.constitution or c.smiles) == plain)

    def to_dict(self) -> dict:
        return {"substrate": self.substrate, "reagent": self.reagent.name,
                "candidates": [c.to_dict() for c in self.candidates], "warnings": list(self.warnings),
                "ranked_by": self.ranked_by, "reaction_class": self.reaction_class, "alcohol": self.alcohol,
                "substrate_input": self.substrate_input, "reagent_key": self.reagent.key,
                "substrate_stereo": list(self.substrate_stereo),
                "safety": list(self.safety)}
