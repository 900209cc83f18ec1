"""1H prediction from additive increment tables.

One :class:`~specmatch.prediction.types.ProtonGroup` per set of equivalent
protons (diastereotopic protons and groups as separate signals): shift from the
additive tables (Shoolery's rule extended to CH for sp3 C-H, Pascual-Meier-Simon
for alkenes, benzene increments for aromatics), sigma per environment class,
first-order multiplicity with estimated J. The environments are perceived in
:mod:`specmatch.prediction.h1.environment`; the numbers live in ``tables/h1_*.csv``.
"""

from __future__ import annotations

import math

from ...errors import SpecmatchError
from ...structures import Structure
from ...structures.molecule import deuterium_counts
from ..hose import MolCodes, fold_of_mol, load_table, rank_tags
from ..types import ProtonGroup
from ..multiplicity import multiplicity
from .environment import proton_sites
from .tables import load_tables

TABLES_VERSION = "h1-2026.12-4+morgan-codes-2026-12-03b"

#: (couplings, exchangeable) -> multiplicity letters and J: a pure function of its inputs,
#: and the same few hundred partner patterns recur in every batch
_MULTIPLICITY: dict[tuple, tuple[str, tuple[float, ...]]] = {}


def _check_deuterium(structure: Structure) -> None:
    """D on an sp2 carbon that keeps one H (=CHD) leaves the remaining H's position
    (cis or trans) undefined in the first-order model: refused with the reason."""
    counts = deuterium_counts(structure.mol)
    if not any(counts):
        return
    for i, n in enumerate(counts):
        a = structure.mol.GetAtomWithIdx(i)
        if n and a.GetTotalNumHs() > n and any(b.GetBondTypeAsDouble() != 1.0 for b in a.GetBonds()):
            raise SpecmatchError(
                f"atom {i + 1} carries both H and D on an sp2 carbon; the 1H prediction cannot place the "
                "remaining H (cis or trans): give the fully protonated or fully deuterated group")


def predict_protons(structure: Structure, *, correction: bool = True, codes: MolCodes | None = None
                    ) -> tuple[list[ProtonGroup], list[str]]:
    """Predict every 1H signal of a perceived structure.

    Parameters
    ----------
    structure : Structure
    correction : bool
        Add the environment-code correction (``tables/hose_h1.csv.gz``); False
        gives the increments alone (what the correction table is fitted on).
    codes : MolCodes, optional
        Code builder of this molecule, if the caller already has one.

    Returns
    -------
    (list of ProtonGroup, list of str)
        Groups ordered by atom index, and warnings for environments the tables do
        not cover (these get a generic value and a wide sigma, never an error).
    """
    _check_deuterium(structure)
    tables = load_tables()
    value, sigma, j_hz = tables.value, tables.sigma, tables.j_hz
    # shift, sigma, multiplicity per site first; the groups are built once the correction
    # is known (building a frozen group and replacing it costs more than the sums)
    rows: list[tuple] = []
    warnings: list[str] = []
    for site in proton_sites(structure, j_hz):
        parts = []
        missing = False
        for key, coef in site.terms:
            v = value.get(key)
            if v is None:  # a type without its own row: the class placeholder, flagged
                missing = True
                v = value.get(key.rsplit(":", 2)[0] + ":other:" + key.rsplit(":", 1)[1], 0.0) \
                    if key.startswith("sp3:") else 0.0
            parts.append(v * coef)
        # exactly rounded: independent of the order the terms were perceived in
        shift = math.fsum(parts)
        s, extra = sigma.get(site.sigma_class, sigma["other"])
        if site.fallback or missing:
            s += extra
            warnings.append(f"1H: the tables do not cover the protons on atom {site.atoms[0] + 1} "
                            f"({site.environment}); a generic value with a wide sigma is used")
        key = (site.couplings, site.exchangeable)
        got = _MULTIPLICITY.get(key)
        if got is None:
            got = _MULTIPLICITY[key] = multiplicity(site.couplings, exchangeable=site.exchangeable)
        mult, js = got
        if site.complex_multiplet and not site.exchangeable:
            mult, js = "m", ()
        rows.append([site, shift, s, mult, js])
    table = load_table("1H") if correction else None
    if table is not None and rows:
        codes = codes or MolCodes(structure.mol)
        cls = structure.symmetry_classes
        fold = fold_of_mol(structure.mol)  # None unless SPECMATCH_CROSS_VALIDATED=1
        tags = rank_tags([cls[r[0].atoms[0]] for r in rows], [r[1] for r in rows])
        bits = codes.bits
        for row, tag in zip(rows, tags):
            corr, sig, depth = table.correct_atom(bits[row[0].atoms[0]], tag, row[2], fold)
            if depth:
                row[1] += corr
                row[2] = sig
    groups = [ProtonGroup(atoms=site.atoms, shift=shift, sigma=s, count=site.count, multiplicity=mult,
                          j_hz=js, exchangeable=site.exchangeable, diastereotopic=site.diastereotopic,
                          environment=site.environment, couplings=site.couplings)
              for site, shift, s, mult, js in rows]
    return groups, warnings
