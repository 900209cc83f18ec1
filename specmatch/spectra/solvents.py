"""Residual solvent, water, TMS, grease and impurity lines (``data/solvents.csv``).

The table follows Fulmer et al., Organometallics 2010, 29, 2176; every row names
its source. Names a chemist types ("chloroform-d", "dmso", "MeOD") are mapped to
the table's solvent keys here.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

from ..errors import SpecmatchError

SOLVENTS = ("CDCl3", "DMSO-d6", "CD3OD", "C6D6", "acetone-d6", "CD3CN", "CD2Cl2", "D2O")

_ALIASES = {
    "cdcl3": "CDCl3", "chloroform-d": "CDCl3", "chloroformd": "CDCl3", "chloroform": "CDCl3",
    "deuterochloroform": "CDCl3",
    "dmso-d6": "DMSO-d6", "dmsod6": "DMSO-d6", "dmso": "DMSO-d6", "(cd3)2so": "DMSO-d6",
    "dimethylsulfoxide-d6": "DMSO-d6",
    "cd3od": "CD3OD", "meod": "CD3OD", "methanol-d4": "CD3OD", "methanold4": "CD3OD",
    "methanol": "CD3OD", "cd3oh": "CD3OD",
    "c6d6": "C6D6", "benzene-d6": "C6D6", "benzened6": "C6D6", "benzene": "C6D6",
    "acetone-d6": "acetone-d6", "acetoned6": "acetone-d6", "acetone": "acetone-d6",
    "(cd3)2co": "acetone-d6",
    "cd3cn": "CD3CN", "acetonitrile-d3": "CD3CN", "acetonitriled3": "CD3CN", "acetonitrile": "CD3CN",
    "cd2cl2": "CD2Cl2", "dichloromethane-d2": "CD2Cl2", "dichloromethaned2": "CD2Cl2",
    "methylene chloride-d2": "CD2Cl2", "dichloromethane": "CD2Cl2",
    "d2o": "D2O", "deuterium oxide": "D2O", "water-d2": "D2O", "heavy water": "D2O",
}


@dataclass(frozen=True)
class SolventLine:
    """One row of the table."""

    solvent: str
    nucleus: str
    compound: str
    group: str
    shift_ppm: float
    multiplicity: str
    j_hz: float | None
    kind: str  # solvent | water | TMS | grease | impurity
    source: str


def canonical_solvent(name: str | None, *, strict: bool = True) -> str | None:
    """The table key for a solvent name, e.g. 'chloroform-d' -> 'CDCl3'.

    With ``strict`` an unknown name raises SpecmatchError listing the known ones;
    otherwise it returns None (used for names read from files).
    """
    if name is None or not name.strip():
        return None
    key = name.strip().lower().replace("_", "-")
    if key in _ALIASES:
        return _ALIASES[key]
    key2 = key.replace(" ", "").replace("-", "")
    for alias, canon in _ALIASES.items():
        if alias.replace(" ", "").replace("-", "") == key2:
            return canon
    if strict:
        raise SpecmatchError(
            f"solvent '{name}' is not in the solvent table; known solvents: {', '.join(SOLVENTS)} "
            "(or leave --solvent out to use the one the file names)")
    return None


@lru_cache(maxsize=1)
def solvent_table() -> tuple[SolventLine, ...]:
    """All rows of ``data/solvents.csv``."""
    text = resources.files(__package__).joinpath("data/solvents.csv").read_text(encoding="utf-8")
    rows = csv.DictReader(line for line in text.splitlines() if line and not line.startswith("#"))
    out = []
    for r in rows:
        out.append(SolventLine(
            solvent=r["solvent"], nucleus=r["nucleus"], compound=r["compound"], group=r["group"],
            shift_ppm=float(r["shift_ppm"]), multiplicity=r["multiplicity"],
            j_hz=float(r["j_hz"]) if r["j_hz"] else None, kind=r["kind"], source=r["source"]))
    return tuple(out)


def lines_for(solvent: str | None, nucleus: str) -> tuple[SolventLine, ...]:
    """Rows for one solvent and nucleus (empty without a solvent)."""
    if solvent is None:
        return ()
    return tuple(r for r in solvent_table() if r.solvent == solvent and r.nucleus == nucleus)


from ..prediction.multiplicity import N_LINES as _N_LINES  # noqa: E402  (one owner of the letters)


def pattern_ppm(line: SolventLine, frequency_mhz: float | None) -> list[float]:
    """Positions of the lines of a solvent multiplet (a C-D or H-D pattern).

    Spin-1 deuterium: n equivalent D give 2n+1 lines 1:n:...; the table's
    multiplicity gives the count directly (CDCl3 13C 't' = 3 lines, J(C,D) apart).
    """
    n = _N_LINES.get(line.multiplicity, 1)
    if n == 1 or not line.j_hz or not frequency_mhz:
        return [line.shift_ppm]
    step = line.j_hz / frequency_mhz
    return [line.shift_ppm + (k - (n - 1) / 2) * step for k in range(n)]
