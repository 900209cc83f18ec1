"""Spectra stage: read measured spectra and turn them into peak lists.

Every reader returns a :class:`Spectrum` (or a :class:`PeakList` for files that
hold peaks only); :func:`process_spectrum` turns a Spectrum into a PeakList. Heavy
modules (nmrglue, scipy) are imported only when a file needs them.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from .types import Multiplet, Peak, PeakList, Spectrum

if TYPE_CHECKING:  # pragma: no cover
    from .archive import extract_archive
    from .jcampdx import read_jcampdx, write_jcampdx
    from .peaklist_io import read_peak_csv
    from .processing import hydrogen_count, process_spectrum, scale_integrals
    from .reader import peaklist_to_dict, peaks_from_file, read_spectrum

__all__ = [
    "Multiplet", "Peak", "PeakList", "Spectrum",
    "extract_archive", "hydrogen_count", "peaklist_to_dict", "peaks_from_file", "process_spectrum",
    "scale_integrals",
    "read_jcampdx", "read_peak_csv", "read_spectrum", "write_jcampdx",
]

_LAZY = {
    "extract_archive": "archive",
    "read_jcampdx": "jcampdx",
    "write_jcampdx": "jcampdx",
    "read_peak_csv": "peaklist_io",
    "process_spectrum": "processing",
    "scale_integrals": "processing",
    "hydrogen_count": "processing",
    "peaklist_to_dict": "reader",
    "peaks_from_file": "reader",
    "read_spectrum": "reader",
}


def __getattr__(name: str) -> Any:
    mod = _LAZY.get(name)
    if mod is None:
        raise AttributeError(f"module 'specmatch.spectra' has no attribute {name!r}")
    import importlib

    value = getattr(importlib.import_module(f".{mod}", __name__), name)
    globals()[name] = value
    return value
