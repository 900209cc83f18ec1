"""The spectra stage's contract: every reader returns a :class:`Spectrum`,
processing returns a :class:`PeakList`; nothing downstream knows the file format."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass(frozen=True)
class Spectrum:
    """A processed 1D spectrum, x descending like a printed spectrum."""

    nucleus: str  # "1H" or "13C"
    ppm: np.ndarray
    intensity: np.ndarray
    frequency_mhz: float | None
    solvent: str | None
    source: str  # file name and format, for the report
    experiment: str = "1D"  # "1D" or "DEPT-135"
    meta: dict = field(default_factory=dict, compare=False, repr=False)


@dataclass(frozen=True)
class Peak:
    """One line. `flag` is None for a compound line, else "solvent", "water",
    "TMS", "grease", "impurity:<name>", "13C satellite", "spinning sideband" or
    "trace" (a 1H multiplet below 0.3% of the compound signal). `hydrogens` is set when DEPT-135 (or a
    peak list) says how many H the carbon carries; `sign` is the DEPT-135 phase."""

    shift: float
    intensity: float | None = None
    flag: str | None = None
    hydrogens: int | None = None
    sign: int | None = None
    width_hz: float | None = None


@dataclass(frozen=True)
class Multiplet:
    """A 1H multiplet: centre, range, integral, first-order analysis."""

    shift: float
    range: tuple[float, float]
    integral: float | None = None
    multiplicity: str = "m"
    j_hz: tuple[float, ...] = ()
    flag: str | None = None
    peaks: tuple[Peak, ...] = ()


@dataclass(frozen=True)
class PeakList:
    """What a spectrum shows, ready for identification."""

    nucleus: str
    peaks: tuple[Peak, ...]
    multiplets: tuple[Multiplet, ...] = ()
    frequency_mhz: float | None = None
    solvent: str | None = None
    reference: str = ""
    source: str = ""
    experiment: str = "1D"
    warnings: tuple[str, ...] = ()
    #: what 1H multiplet integrals are: "" as given (typed lists), "percent" of the
    #: unflagged multiplets (processed spectra), or "H" (scaled to protons)
    integral_unit: str = ""

    def compound_peaks(self) -> tuple[Peak, ...]:
        """Peaks not flagged as solvent, water, TMS, grease or impurity."""
        return tuple(p for p in self.peaks if p.flag is None)

    def compound_multiplets(self) -> tuple[Multiplet, ...]:
        return tuple(m for m in self.multiplets if m.flag is None)
