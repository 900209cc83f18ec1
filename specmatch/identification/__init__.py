"""Identification stage: which candidate was made, with a calibrated probability.

- :func:`rank` scores candidate structures against observed 13C lines and 1H
  multiplets and returns a :class:`~.ranking.Ranking` (probabilities, verdict,
  per-signal tables, discriminating signals).
- :func:`identify` runs the whole job from a reaction and spectrum files and
  returns a :class:`~.result.Result` (with ``_repr_html_``, ``to_frame()``,
  ``to_dict()``).
- :func:`~.batch.rank_batch` is the ``specmatch rank --batch`` runner.

The error model and its fit are in ``data/error_model.toml``.
"""

from __future__ import annotations

from importlib import import_module
from typing import Any

_LAZY = {
    "rank": ".ranking",
    "Ranking": ".ranking",
    "CandidateScore": ".ranking",
    "Verdict": ".ranking",
    "THRESHOLDS": ".ranking",
    "identify": ".pipeline",
    "Result": ".result",
    "rank_batch": ".batch",
    "load_error_model": ".errormodel",
}

__all__ = list(_LAZY)


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(import_module(_LAZY[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
