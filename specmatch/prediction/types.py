"""The prediction stage's contract: one :class:`Prediction` per molecule."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass(frozen=True)
class CarbonShift:
    """A predicted 13C signal for one set of equivalent carbons.

    Attributes
    ----------
    atoms : tuple of int
        0-based heavy-atom indices (input parse order) of the equivalent carbons.
    shift : float
        Predicted shift, ppm.
    sigma : float
        Expected prediction error (one standard deviation), ppm. Large where the
        tables cover the environment poorly.
    hydrogens : int
        Attached H per carbon (0..3), what DEPT would tell.
    environment : str
        Short text naming the table class used, for reports (e.g. "CH2, alpha-Br").
    fallback : bool
        True if the environment was not covered and a nearest class was used.
    """

    atoms: tuple[int, ...]
    shift: float
    sigma: float
    hydrogens: int
    environment: str = ""
    fallback: bool = False


@dataclass(frozen=True)
class ProtonGroup:
    """A predicted 1H signal: one set of equivalent protons.

    Attributes
    ----------
    atoms : tuple of int
        Heavy atoms carrying these protons.
    shift : float
        Predicted shift, ppm.
    sigma : float
        Expected error, ppm.
    count : int
        Number of protons in the signal (the integral).
    multiplicity : str
        First-order multiplicity in the usual letters (s, d, t, q, quint, sext,
        sept, dd, dt, td, ddd, m, br s).
    j_hz : tuple of float
        Estimated coupling constants, Hz, largest first.
    exchangeable : bool
        OH (or other X-H) protons: broad, position depends on concentration and solvent.
    diastereotopic : bool
        One of two diastereotopic protons/groups predicted as separate signals.
    environment : str
        Short text naming the increment rule used.
    couplings : tuple of (int, float)
        First-order coupling partners for simulation: (number of equivalent
        partner protons, J in Hz) per partner set.
    """

    atoms: tuple[int, ...]
    shift: float
    sigma: float
    count: int
    multiplicity: str
    j_hz: tuple[float, ...] = ()
    exchangeable: bool = False
    diastereotopic: bool = False
    environment: str = ""
    couplings: tuple[tuple[int, float], ...] = ()


@dataclass(frozen=True)
class Prediction:
    """Predicted 1H and 13C spectra of one molecule."""

    smiles: str
    canonical_smiles: str
    carbons: tuple[CarbonShift, ...]
    protons: tuple[ProtonGroup, ...]
    warnings: tuple[str, ...] = ()
    tables_version: str = ""
    extra: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)

    def to_dict(self) -> dict[str, Any]:
        """The JSON form used by ``specmatch predict --json`` and ``--batch``.

        ``atoms`` are written 1-based (heavy atoms in the order of the SMILES as given),
        the numbering of every user-facing output; the objects keep RDKit's 0-based indices.
        """
        return {
            "smiles": self.smiles,
            "ok": True,
            "canonical_smiles": self.canonical_smiles,
            "carbons": [
                {
                    "atoms": [a + 1 for a in c.atoms],
                    "shift": round(c.shift, 2),
                    "sigma": round(c.sigma, 2),
                    "hydrogens": c.hydrogens,
                    "environment": c.environment,
                }
                for c in self.carbons
            ],
            "protons": [
                {
                    "atoms": [a + 1 for a in p.atoms],
                    "shift": round(p.shift, 3),
                    "sigma": round(p.sigma, 3),
                    "count": p.count,
                    "multiplicity": p.multiplicity,
                    "j_hz": [round(j, 1) for j in p.j_hz],
                    "exchangeable": p.exchangeable,
                    "diastereotopic": p.diastereotopic,
                }
                for p in self.protons
            ],
            "warnings": list(self.warnings),
        }
