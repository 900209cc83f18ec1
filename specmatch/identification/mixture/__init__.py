"""Quantification: the product ratio of a mixture from its 1H data.

One package for every way of turning 1H data into mole fractions:

- :mod:`.spectrum_fit`: whole-spectrum fit of the candidates' simulated spectra;
- :mod:`.integral_fit`: a peak list's multiplet integrals fitted by assignment;
- :mod:`.estimate`: the estimate a user sees (method choice, classical integral
  ratio, uncertainty, wording), :func:`estimate_mixture` and the file-level entry.
"""

from __future__ import annotations

from .estimate import (
    CarryingSignal,
    IntegralRatio,
    MixtureEstimate,
    estimate_mixture,
    mixture_from_files,
    ratio_text,
    selectivity_words,
)

__all__ = [
    "CarryingSignal",
    "IntegralRatio",
    "MixtureEstimate",
    "estimate_mixture",
    "mixture_from_files",
    "ratio_text",
    "selectivity_words",
]
