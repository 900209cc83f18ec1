"""specmatch: which isomer did the carbocation reaction give?

Enumerate the plausible products of an electrophilic addition (or a related
carbocation reaction), predict each candidate's 1H and 13C NMR spectrum from
additive increment tables, and match the measured spectra to every candidate.

Heavy modules are imported lazily so that ``import specmatch`` stays cheap.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

from .errors import SpecmatchError

__version__ = "0.1.0"

# public name -> module that defines it (imported on first use)
_LAZY = {
    "parse_structure": "specmatch.structures",
    "Structure": "specmatch.structures",
    "predict": "specmatch.prediction",
    "Prediction": "specmatch.prediction",
    "enumerate_products": "specmatch.reactions",
    "read_spectrum": "specmatch.spectra",
    "identify": "specmatch.identification",
    "rank": "specmatch.identification",
}

__all__ = ["SpecmatchError", "__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'specmatch' has no attribute {name!r}")
