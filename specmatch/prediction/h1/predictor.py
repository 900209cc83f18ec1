"""1H prediction from additive increment tables.

One :class:`~specmatch.prediction.model.ProtonGroup` per set of equivalent
protons (diastereotopic protons and groups as separate signals): shift from the
additive tables (Shoolery's rule extended to CH for sp3 C-H, Pascual-Meier-Simon
for alkenes, benzene increments for aromatics), sigma per environment class,
first-order multiplicity with estimated J. The environments are perceived in
:mod:`specmatch.prediction.h1.environment`; the numbers live in ``tables/h1_*.csv``.
"""

from __future__ import annotations

from ...structures import Structure
from ..model import ProtonGroup
from ..multiplicity import multiplicity
from .environment import proton_sites
from .tables import load_tables

TABLES_VERSION = "h1-2026.12-1"


def predict_protons(structure: Structure) -> tuple[list[ProtonGroup], list[str]]:
    """Predict every 1H signal of a perceived structure.

    Returns
    -------
    (list of ProtonGroup, list of str)
        Groups ordered by atom index, and warnings for environments the tables do
        not cover (these get a generic value and a wide sigma, never an error).
    """
    tables = load_tables()
    value, sigma, j_hz = tables.value, tables.sigma, tables.j_hz
    groups: list[ProtonGroup] = []
    warnings: list[str] = []
    for site in proton_sites(structure, j_hz):
        shift = 0.0
        missing = False
        for key, coef in site.terms:
            v = value.get(key)
            if v is None:  # a type without its own row: the class placeholder, flagged
                missing = True
                v = value.get(key.rsplit(":", 2)[0] + ":other:" + key.rsplit(":", 1)[1], 0.0) \
                    if key.startswith("sp3:") else 0.0
            shift += v * coef
        s, extra = sigma.get(site.sigma_class, sigma["other"])
        if site.fallback or missing:
            s += extra
            warnings.append(f"1H: the tables do not cover the protons on atom {site.atoms[0]} "
                            f"({site.environment}); a generic value with a wide sigma is used")
        mult, js = multiplicity(site.couplings, exchangeable=site.exchangeable)
        if site.complex_multiplet and not site.exchangeable:
            mult, js = "m", ()
        groups.append(ProtonGroup(
            atoms=site.atoms, shift=shift, sigma=s, count=site.count, multiplicity=mult,
            j_hz=js, exchangeable=site.exchangeable, diastereotopic=site.diastereotopic,
            environment=site.environment, couplings=site.couplings,
        ))
    return groups, warnings
