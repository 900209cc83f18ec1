"""The 1H increment tables (CSV data files in ``prediction/tables/``), loaded once.

Each table row becomes one named parameter, so the predictor and the fitting
script (benchmarks/fit_h1_tables.py) share one additive model:
``shift = sum(value[key] * coefficient)`` over the terms a proton's environment
produces. Parameter keys:

- ``sp3:<term>:<substituent>:<h_class>`` from h1_sp3.csv (Shoolery-type sums),
- ``alkene:<position>:<substituent>`` from h1_alkene.csv (Pascual-Meier-Simon),
- ``arom:<position>:<substituent>`` from h1_aromatic.csv (benzene increments),
- ``<class>:<environment>`` from h1_other.csv (alkyne, aldehyde, OH, ...).
"""

from __future__ import annotations

import csv
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

TABLE_DIR = Path(__file__).resolve().parent.parent / "tables"

#: file -> (columns forming the key, key prefix)
_KEYED = {
    "h1_sp3.csv": (("term", "substituent", "h_class"), "sp3"),
    "h1_alkene.csv": (("position", "substituent"), "alkene"),
    "h1_aromatic.csv": (("position", "substituent"), "arom"),
    "h1_other.csv": (("class", "environment"), ""),
}


@dataclass(frozen=True)
class H1Tables:
    """All 1H parameters.

    Attributes
    ----------
    value : dict
        Parameter key -> shift contribution, ppm (the value the predictor uses).
    handbook : dict
        Parameter key -> published / handbook value, ppm (the prior a fit is regularised toward).
    sigma : dict
        Sigma class -> (sigma_ppm, extra ppm added when a fallback was used).
    j_hz : dict
        Coupling name -> J, Hz.
    """

    value: dict[str, float]
    handbook: dict[str, float]
    sigma: dict[str, tuple[float, float]]
    j_hz: dict[str, float]


def row_key(file_name: str, row: dict[str, str]) -> str:
    """Parameter key of one table row."""
    cols, prefix = _KEYED[file_name]
    parts = [row[c] for c in cols]
    return ":".join([prefix, *parts] if prefix else parts)


def read_rows(file_name: str) -> list[dict[str, str]]:
    with open(TABLE_DIR / file_name, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


@lru_cache(maxsize=1)
def load_tables() -> H1Tables:
    """Read every 1H table once per process."""
    value: dict[str, float] = {}
    handbook: dict[str, float] = {}
    for name in _KEYED:
        for row in read_rows(name):
            key = row_key(name, row)
            value[key] = float(row["shift_ppm"])
            handbook[key] = float(row["handbook_ppm"])
    sigma = {r["sigma_class"]: (float(r["sigma_ppm"]), float(r["fallback_extra_ppm"]))
             for r in read_rows("h1_sigma.csv")}
    j_hz = {r["coupling"]: float(r["j_hz"]) for r in read_rows("h1_coupling.csv")}
    return H1Tables(value, handbook, sigma, j_hz)
