"""One :class:`Result` per analysis: inputs, versions, ranking, verdict, cautions.

The CLI, the app, the store and the reports consume this object and never reach
past it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from .ranking import CandidateScore, DiscriminatingSignal, Ranking, Verdict

__all__ = ["ADVISORY_CAUTION", "Result"]

#: shown with every identification (CLI, app, report)
ADVISORY_CAUTION = (
    "Identification is advisory: it rests on predicted spectra and a statistical model. "
    "Confirm the structure with orthogonal data (an authentic sample, 2D NMR, MS) and have a "
    "qualified person check it before anything depends on it."
)


@dataclass
class Result:
    """The outcome of :func:`specmatch.identify`.

    Attributes
    ----------
    ranking : Ranking
        Candidates with probabilities, per-signal tables, verdict, discriminating signals.
    inputs : dict
        substrate, reagent, alcohol, solvent, options and the input files with
        their SHA-256 checksums.
    versions : dict
        specmatch, prediction tables, error model, reaction model, libraries.
    safety_notes : tuple of str
        Hazards of the reagent (from the reagent catalogue).
    cautions : tuple of str
        Things to check: fit quality, enumeration and spectrum warnings.
    mixture : object or None
        HOOK for the product-ratio estimate: None unless ``identify(mixture=True)``;
        then whatever ``specmatch.identification.mixture.estimate_mixture`` returned
        (or None with a caution when that module is not available).
    c13, h1, dept135 : PeakList or None
        The observed data as read (for overlays and reports).
    c13_spectrum, h1_spectrum : Spectrum or None
        The processed spectra when a full spectrum (not a peak list) was given.
    enumeration : object or None
        The enumeration stage's result (candidates, warnings, model).
    """

    ranking: Ranking
    inputs: dict[str, Any] = field(default_factory=dict)
    versions: dict[str, str] = field(default_factory=dict)
    safety_notes: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    mixture: Any = None
    c13: Any = None
    h1: Any = None
    dept135: Any = None
    enumeration: Any = None
    caution: str = ADVISORY_CAUTION
    c13_spectrum: Any = None
    h1_spectrum: Any = None

    # ------------------------------------------------------------ shortcuts
    @property
    def candidates(self) -> tuple[CandidateScore, ...]:
        return self.ranking.candidates

    @property
    def verdict(self) -> Verdict:
        return self.ranking.verdict

    @property
    def best(self) -> CandidateScore:
        return self.ranking.candidates[0]

    @property
    def discriminating(self) -> tuple[DiscriminatingSignal, ...]:
        return self.ranking.discriminating

    def prediction(self, smiles: str):
        """The Prediction used for a candidate."""
        from .scoring import prepare

        return prepare(smiles).prediction

    # ------------------------------------------------------------ exports
    def to_dict(self, tables: bool = True) -> dict[str, Any]:
        """JSON-ready dict (``specmatch identify --json``)."""
        mix = self.mixture
        if mix is not None and hasattr(mix, "to_dict"):
            mix = mix.to_dict()
        d = {
            "inputs": self.inputs,
            "versions": self.versions,
            **self.ranking.to_dict(tables),
            "cautions": list(self.ranking.cautions) + list(self.cautions),
            "advisory": self.caution,
            "safety_notes": list(self.safety_notes),
            "mixture": mix,
        }
        return d

    def to_frame(self):
        """Candidate table as a pandas DataFrame."""
        return self.ranking.to_frame()

    def assignments_frame(self):
        """Every candidate's per-signal table as one long pandas DataFrame."""
        from ..reports.exports import assignment_rows
        import pandas as pd

        return pd.DataFrame(assignment_rows(self))

    def _repr_html_(self) -> str:
        from ..reports.html import report_html

        return report_html(self, fragment=True)

    def __repr__(self) -> str:
        return f"<specmatch Result: {self.verdict.text}>"
