"""The error model behind the probabilities: Student-t per nucleus, fitted parameters.

Prediction errors of increment tables have heavier tails than a normal
distribution (a few environments are mispredicted by many sigma), which is why
DP4 (Smith & Goodman, J. Am. Chem. Soc. 2010, 132, 12946) models them with a
Student-t distribution. Here the t scale is the predictor's own per-signal sigma
times a fitted factor (per carbon class for 13C), so well-covered environments
weigh more than fallbacks.

All numbers live in ``data/error_model.toml``, written by
``benchmarks/fit_error_model.py``, which records what they were fitted on.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field, replace
from functools import lru_cache
from importlib import resources
from typing import Any

import numpy as np

__all__ = ["ErrorModel", "HypothesisModel", "NucleusModel", "load_error_model", "t_logpdf", "tables_digest"]


def _t_const(df: float) -> float:
    return math.lgamma((df + 1) / 2) - math.lgamma(df / 2) - 0.5 * math.log(df * math.pi)


def t_logpdf(z: np.ndarray, df: float) -> np.ndarray:
    """Log density of the standard Student-t distribution (vectorised, no scipy call)."""
    return _t_const(df) - (df + 1) / 2 * np.log1p(z * z / df)


@dataclass(frozen=True)
class NucleusModel:
    """Error model and assignment penalties for one nucleus.

    Log-likelihoods are in nats; densities in 1/ppm, so every candidate explains
    the same observed lines in the same units and the totals are comparable.

    Attributes
    ----------
    df : float
        Student-t degrees of freedom.
    scale : float
        Factor on the predictor's per-signal sigma.
    scale_by_hydrogens : tuple of float
        13C only: extra factor for C, CH, CH2, CH3 (index = attached H).
    sigma_floor_ppm : float
        Smallest scale used (the spread of repeated experimental measurements).
    temperature : float
        Divides the log-likelihood before the candidates are compared; fitted so
        that the probabilities are calibrated (errors of one table are correlated
        across the signals of a molecule, so the raw product is overconfident).
    impurity_logp : float
        Log density (1/ppm) of an observed line that no predicted signal explains.
    overlap_logp : float
        Log of the effective coincidence width (ppm) when a second predicted
        signal falls on an already explained line.
    missing_logp : float
        Log probability that a protonated carbon (or a non-exchangeable 1H group)
        gives no observed line.
    missing_quaternary_logp : float
        Same for a quaternary carbon (weak: long T1, no NOE).
    unresolved_logp : float
        Log probability that two diastereotopic carbons give one line.
    dept_mismatch_logp : float
        Penalty when DEPT says a line has a different number of attached H.
    exchangeable_sigma_ppm : float
        1H only: the scale for OH protons (position depends on concentration).
    exchangeable_missing_logp : float
        1H only: log probability that an OH is not listed.
    multiplicity_mismatch_logp : float
        1H only: penalty when observed and predicted multiplicities disagree.
    j_sigma_hz : float
        1H only: scale of the coupling-constant comparison.
    """

    df: float = 4.0
    scale: float = 1.0
    scale_by_hydrogens: tuple[float, float, float, float] = (1.0, 1.0, 1.0, 1.0)
    sigma_floor_ppm: float = 0.5
    temperature: float = 1.0
    impurity_logp: float = -8.0
    overlap_logp: float = -2.0
    missing_logp: float = -6.0
    missing_quaternary_logp: float = -3.0
    unresolved_logp: float = -0.7
    dept_mismatch_logp: float = -12.0
    exchangeable_sigma_ppm: float = 1.5
    exchangeable_missing_logp: float = -0.7
    multiplicity_mismatch_logp: float = -1.0
    j_sigma_hz: float = 1.5

    @property
    def t_const(self) -> float:
        return _t_const(self.df)


@dataclass(frozen=True)
class HypothesisModel:
    """Priors of the pure/mixture hypotheses (see :mod:`.hypotheses`).

    Attributes
    ----------
    prior_mixture : float
        Prior probability that a sample is a two-component mixture (the Occam
        factor of the second component).
    prior_three : float
        Prior probability of a three-component mixture (used only when asked).
    """

    prior_mixture: float = 0.2
    prior_three: float = 0.02


@dataclass(frozen=True)
class ErrorModel:
    """Both nuclei plus where the numbers came from."""

    c13: NucleusModel
    h1: NucleusModel
    version: str = "defaults"
    fitted_on: str = "not fitted (built-in defaults)"
    tables_version: str = ""
    tables_sha256: str = ""  # digest of the prediction tables the model was fitted with
    calibration: dict[str, Any] = field(default_factory=dict, compare=False)
    hypotheses: HypothesisModel = field(default_factory=HypothesisModel)

    def with_params(self, **kw: Any) -> "ErrorModel":
        """A copy with some parameters changed, e.g. ``c13_df=3``, ``h1_temperature=2`` or
        ``hypotheses_prior_mixture=0.1``."""
        c, h, hy = {}, {}, {}
        for k, v in kw.items():
            nuc, _, name = k.partition("_")
            {"c13": c, "h1": h, "hypotheses": hy}[nuc][name] = v
        return replace(self, c13=replace(self.c13, **c), h1=replace(self.h1, **h),
                       hypotheses=replace(self.hypotheses, **hy))


def _nucleus(d: dict[str, Any]) -> NucleusModel:
    known = NucleusModel.__dataclass_fields__
    kw = {k: (tuple(v) if isinstance(v, list) else v) for k, v in d.items() if k in known}
    return NucleusModel(**kw)


@lru_cache(maxsize=1)
def load_error_model() -> ErrorModel:
    """The fitted model shipped in ``specmatch/identification/data/error_model.toml``."""
    text = resources.files("specmatch.identification").joinpath("data/error_model.toml").read_text("utf-8")
    d = tomllib.loads(text)
    meta = d.get("meta", {})
    return ErrorModel(
        c13=_nucleus(d.get("c13", {})),
        h1=_nucleus(d.get("h1", {})),
        version=str(meta.get("version", "unversioned")),
        fitted_on=str(meta.get("fitted_on", "")),
        tables_version=str(meta.get("tables_version", "")),
        tables_sha256=str(meta.get("tables_sha256", "")),
        calibration=d.get("calibration", {}),
        hypotheses=HypothesisModel(**{k: float(v) for k, v in d.get("hypotheses", {}).items()
                                      if k in HypothesisModel.__dataclass_fields__}),
    )


@lru_cache(maxsize=1)
def tables_digest() -> str:
    """SHA-256 over the prediction stage's table files (names and contents, the gzip
    code tables and neighbour layer included): tells whether the error model was
    fitted with the tables now installed."""
    import hashlib

    h = hashlib.sha256()
    folder = resources.files("specmatch.prediction").joinpath("tables")
    for entry in sorted(folder.iterdir(), key=lambda e: e.name):
        if entry.name.endswith((".csv", ".csv.gz", ".toml")):
            h.update(entry.name.encode())
            h.update(entry.read_bytes())
    return h.hexdigest()
