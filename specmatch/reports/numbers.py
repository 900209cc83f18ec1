"""Numbers as chemists report them (common practice in experimental sections).

13C shifts to 0.1 ppm, 1H shifts to 0.01 ppm, coupling constants to 0.1 Hz,
probabilities as percentages (whole percent in the middle of the range, one
decimal near the ends, "<0.1%" and ">99.9%" rather than 0.0% and 100.0%).
Missing values are empty strings, never "None".
"""

from __future__ import annotations

import math

# one percentage rule for the verdict text (identification) and every report
from ..identification.ranking import percent

__all__ = ["ppm", "hz", "percent", "sigma", "integral", "PPM_DIGITS"]

#: decimals of a reported shift per nucleus
PPM_DIGITS = {"13C": 1, "1H": 2}


def _missing(x) -> bool:
    return x is None or (isinstance(x, float) and not math.isfinite(x))


def ppm(x: float | None, nucleus: str) -> str:
    """A shift at the reporting precision of its nucleus."""
    if _missing(x):
        return ""
    return f"{float(x):.{PPM_DIGITS.get(nucleus, 2)}f}"


def hz(x: float | None) -> str:
    """A coupling constant to 0.1 Hz."""
    return "" if _missing(x) else f"{float(x):.1f}"


def sigma(x: float | None) -> str:
    """A deviation in units of the expected error, signed, one decimal."""
    return "" if _missing(x) else f"{float(x):+.1f}"


def integral(x: float | None) -> str:
    """A 1H integral in protons: one decimal, two below 1 H (small impurity multiplets)."""
    if _missing(x):
        return ""
    return f"{float(x):.2f}" if abs(float(x)) < 1 else f"{float(x):.1f}"
