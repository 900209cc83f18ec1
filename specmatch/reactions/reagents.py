"""The reagent catalogue: written forms a chemist uses, reaction class, safety notes.

The catalogue is the data file ``data/reagents.toml``; this module only reads it and
matches user text against the aliases, tolerant of case, spaces, the order of the parts
and the separator used (``,`` ``;`` ``/`` or a spaced ``+``).
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

from ..errors import SpecmatchError

DATA_DIR = Path(__file__).parent / "data"

#: reaction classes that add across a C=C
ADDITION_CLASSES = frozenset({"hx_ionic", "hydration", "alcohol_addition", "hx_radical", "hydroboration",
                              "oxymercuration", "halogenation", "halohydrin"})


@dataclass(frozen=True)
class Reagent:
    """One entry of the reagent catalogue.

    Attributes
    ----------
    key : str
        Catalogue key, e.g. ``"HBr/ROOR"``.
    name : str
        Display name, e.g. ``"HBr/ROOR"``.
    aliases : tuple of str
        Written forms accepted by :func:`parse_reagent`.
    reagent_class : str
        ``hx_ionic``, ``hydration``, ``alcohol_addition``, ``acid``, ``dehydration``, ``hx_radical``,
        ``hydroboration``, ``oxymercuration``, ``halogenation`` or ``halohydrin``.
    needs_alcohol : bool
        True if the alcohol must be given separately (``--alcohol SMILES``).
    safety : tuple of str
        Safety notes; the last always says to read the SDS and follow local rules.
    halogen : str or None
        ``"Cl"``, ``"Br"`` or ``"I"`` for halogen reagents.
    alcohol : str or None
        SMILES of the alcohol the reagent brings (``"CO"`` for MeOH/H2SO4).
    description : str
        One line on what the reagent does.
    solvent, solvent_name, solvent_weight : str, str, float
        A nucleophilic solvent the reagent brings (SMILES of its O-H compound, e.g. acetic acid),
        and its capture rate relative to the halide.
    """

    key: str
    name: str
    aliases: tuple[str, ...]
    reagent_class: str
    needs_alcohol: bool = False
    safety: tuple[str, ...] = field(default_factory=tuple)
    halogen: str | None = None
    alcohol: str | None = None
    description: str = ""
    solvent: str | None = None
    solvent_name: str | None = None
    solvent_weight: float = 0.0

    @property
    def safety_notes(self) -> list[str]:
        """The safety notes as a list (for the app's picker)."""
        return list(self.safety)

    def to_dict(self) -> dict:
        return {"key": self.key, "name": self.name, "aliases": list(self.aliases),
                "class": self.reagent_class, "needs_alcohol": self.needs_alcohol,
                "safety": list(self.safety), "halogen": self.halogen, "alcohol": self.alcohol,
                "description": self.description, "solvent": self.solvent}


_UNICODE = str.maketrans({"₂": "2", "₃": "3", "₄": "4", "⁺": "+", "⁻": "-", "–": "-", "—": "-",
                          "·": ".", "•": ".", "∆": "Δ"})


def _tokens(text: str) -> frozenset[str]:
    """Normalised parts of a reagent text, order-free: 'BH3/THF; H2O2, NaOH' -> {bh3,thf,h2o2,naoh}."""
    t = text.translate(_UNICODE).strip().lower()
    t = re.sub(r"(^|\s)\d\s*[.)]\s*", " ; ", t)          # step numbers "1." "2)"
    t = re.sub(r"\s\+\s", ";", t)                        # a spaced plus separates parts
    t = re.sub(r"\bthen\b", ";", t)
    t = re.sub(r"\s+", "", t)
    parts = re.split(r"[;,/&]+", t)
    return frozenset(p for p in parts if p)


@lru_cache(maxsize=1)
def _catalogue() -> tuple[tuple[Reagent, ...], dict[str, str]]:
    with open(DATA_DIR / "reagents.toml", "rb") as fh:
        data = tomllib.load(fh)
    always = data["common"]["safety_always"]
    halide_note = data["common"]["alkyl_halide_products"]
    reagents = []
    for key, row in data["reagents"].items():
        safety = list(row.get("safety", []))
        if row.get("halogen") and row["class"] in {"hx_ionic", "hx_radical", "halogenation"}:
            safety.append(halide_note)
        safety.append(always)
        reagents.append(Reagent(
            key=key, name=row["name"], aliases=tuple(row["aliases"]), reagent_class=row["class"],
            needs_alcohol=bool(row.get("needs_alcohol", False)), safety=tuple(safety),
            halogen=row.get("halogen"), alcohol=row.get("alcohol"), description=row.get("description", ""),
            solvent=row.get("solvent"), solvent_name=row.get("solvent_name"),
            solvent_weight=float(row.get("solvent_weight", 0.0))))
    index: dict[frozenset[str], str] = {}
    for r in reagents:
        for text in (r.key, r.name, *r.aliases):
            index.setdefault(_tokens(text), r.key)
    return tuple(reagents), index  # type: ignore[return-value]


def known_reagents() -> list[Reagent]:
    """All catalogue reagents, in catalogue order (for pickers and help text)."""
    return list(_catalogue()[0])


def parse_reagent(text: str) -> Reagent:
    """Match a reagent as a chemist writes it to the catalogue.

    Examples
    --------
    >>> parse_reagent("hbr").key
    'HBr'
    >>> parse_reagent("1. BH3/THF 2. H2O2, NaOH").reagent_class
    'hydroboration'

    Raises
    ------
    SpecmatchError
        If the text matches no alias; the message lists the known reagents.
    """
    if not isinstance(text, str) or not text.strip():
        raise SpecmatchError("no reagent given; known reagents: " + _known_list())
    reagents, index = _catalogue()
    key = index.get(_tokens(text))  # type: ignore[call-overload]
    if key is None:
        raise SpecmatchError(f"reagent '{text.strip()}' is not known; known reagents: {_known_list()} "
                             "(case, spaces and the order of the parts do not matter; "
                             "see 'specmatch enumerate --help')")
    return next(r for r in reagents if r.key == key)


def _known_list() -> str:
    return " | ".join(r.name for r in _catalogue()[0])
