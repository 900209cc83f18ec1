"""One :class:`Result` per analysis: inputs, versions, ranking, verdict, cautions.

The CLI, the app, the store and the reports consume this object and never reach
past it. Its dict form (:meth:`Result.to_dict`) is what ``identify --json``
prints and what the store saves; :meth:`Result.from_dict` reads it back.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any, Mapping

from ..errors import SpecmatchError
from ..spectra.types import Multiplet, Peak, PeakList, Spectrum
from .mixture.estimate import MixtureEstimate
from .ranking import ASSIGNMENT_COLUMNS, CandidateScore, DiscriminatingSignal, Hypothesis, Ranking, Verdict

if TYPE_CHECKING:
    from ..reactions.types import Enumeration

__all__ = ["ADVISORY_CAUTION", "RESULT_SCHEMA_VERSION", "Result", "peaklist_from_dict", "peaklist_to_dict"]

#: shown with every identification (CLI, app, report)
ADVISORY_CAUTION = (
    "Identification is advisory: it rests on predicted spectra and a statistical model. "
    "Confirm the structure with orthogonal data (an authentic sample, 2D NMR, MS) and have a "
    "qualified person check it before anything depends on it."
)

#: version of the dict layout written by Result.to_dict. 1: the layout before
#: hypotheses (no schema_version key); 2: hypotheses, p_present, verdict kind,
#: observed peak lists, full-precision numbers; 3: atom numbers in the per-signal
#: tables 1-based, as in every user-facing output (were RDKit's 0-based indices).
RESULT_SCHEMA_VERSION = 3


# ----------------------------------------------------------- peak-list codec
def _opt(x: Any, kind: type = float) -> Any:
    return None if x is None else kind(x)


def _peak_to_dict(p: Peak) -> dict[str, Any]:
    return {"shift": float(p.shift), "intensity": _opt(p.intensity), "flag": p.flag,
            "hydrogens": _opt(p.hydrogens, int), "sign": _opt(p.sign, int), "width_hz": _opt(p.width_hz)}


def _peak_from_dict(d: Mapping[str, Any]) -> Peak:
    return Peak(float(d["shift"]), _opt(d.get("intensity")), d.get("flag"), _opt(d.get("hydrogens"), int),
                _opt(d.get("sign"), int), _opt(d.get("width_hz")))


def peaklist_to_dict(pl: PeakList) -> dict[str, Any]:
    """Every field of a peak list as JSON-ready data (the inverse of :func:`peaklist_from_dict`)."""
    return {
        "nucleus": pl.nucleus,
        "peaks": [_peak_to_dict(p) for p in pl.peaks],
        "multiplets": [{"shift": float(m.shift), "range": [float(m.range[0]), float(m.range[1])],
                        "integral": _opt(m.integral), "multiplicity": m.multiplicity,
                        "j_hz": [float(j) for j in m.j_hz], "flag": m.flag,
                        "peaks": [_peak_to_dict(p) for p in m.peaks]} for m in pl.multiplets],
        "frequency_mhz": _opt(pl.frequency_mhz), "solvent": pl.solvent, "reference": pl.reference,
        "source": pl.source, "experiment": pl.experiment, "warnings": list(pl.warnings),
    }


def peaklist_from_dict(d: Mapping[str, Any]) -> PeakList:
    return PeakList(
        nucleus=d["nucleus"],
        peaks=tuple(_peak_from_dict(p) for p in d.get("peaks") or ()),
        multiplets=tuple(Multiplet(float(m["shift"]), (float(m["range"][0]), float(m["range"][1])),
                                   _opt(m.get("integral")), m.get("multiplicity") or "m",
                                   tuple(float(j) for j in m.get("j_hz") or ()), m.get("flag"),
                                   tuple(_peak_from_dict(p) for p in m.get("peaks") or ()))
                         for m in d.get("multiplets") or ()),
        frequency_mhz=_opt(d.get("frequency_mhz")), solvent=d.get("solvent"), reference=d.get("reference") or "",
        source=d.get("source") or "", experiment=d.get("experiment") or "1D",
        warnings=tuple(d.get("warnings") or ()),
    )


def _migrate_v1(d: Mapping[str, Any]) -> dict[str, Any]:
    """A version-1 dict (before hypotheses) in the version-2 layout.

    Version 1 rounded numbers and some writers left fields out; what is missing
    gets a neutral value: the spectra-only probability is the probability, log-
    likelihoods and scores are 0, the canonical SMILES is the SMILES, the verdict
    kind is "undecided" and there are no hypotheses (they were never computed).
    """
    out = dict(d)
    cands = []
    for c in d.get("candidates") or d.get("ranking") or ():
        c = dict(c)
        c.setdefault("canonical_smiles", c["smiles"])
        c.setdefault("probability_spectra", c.get("probability", 0.0))
        for k in ("log_likelihood_c13", "log_likelihood_h1", "score"):
            c.setdefault(k, 0.0)
        cands.append(c)
    out["candidates"] = cands
    v = dict(d["verdict"])
    v.setdefault("basis", "")
    v.setdefault("text", v.get("word", ""))
    v.setdefault("p_top", cands[0]["probability"] if cands else 0.0)
    v.setdefault("p_second", cands[1]["probability"] if len(cands) > 1 else 0.0)
    out["verdict"] = v
    out["ranking_cautions"] = []
    out["analysis_cautions"] = list(d.get("cautions") or ())
    return out


def _migrate_v2(d: Mapping[str, Any]) -> dict[str, Any]:
    """A version-2 dict in the version-3 layout: table atom numbers from 0 to 1-based."""
    out = dict(d)
    cands = []
    for c in d.get("candidates") or ():
        c = dict(c)
        for key in ("c13_table", "h1_table"):
            c[key] = [{**row, "atoms": [int(a) + 1 for a in row.get("atoms") or ()]}
                      for row in c.get(key) or ()]
        cands.append(c)
    out["candidates"] = cands
    return out


# ---------------------------------------------------------------------- Result
@dataclass(frozen=True)
class Result:
    """The outcome of :func:`specmatch.identify`.

    Attributes
    ----------
    ranking : Ranking
        Candidates with probabilities, hypotheses (pure and mixtures), per-signal
        tables, verdict, discriminating signals.
    inputs : dict
        substrate, reagent, reagent_name, alcohol, solvent, user_candidates,
        options (mixture, use_prior, max_shifts, max_components) and files
        (role -> {path, name, sha256}); JSON values only.
    versions : dict of str
        specmatch, prediction tables, error model, reaction model, libraries.
    safety_notes : tuple of str
        Hazards of the reagent (from the reagent catalogue).
    cautions : tuple of str
        Things to check: fit quality, enumeration and spectrum warnings.
    mixture : MixtureEstimate or None
        The product-ratio estimate (``identify(mixture=True)`` with a 1H spectrum).
    c13, h1, dept135 : PeakList or None
        The observed data as read (for overlays and reports).
    caution : str
        The advisory note shown with every identification.
    enumeration : Enumeration or None
        The enumeration stage's result; not part of the dict form, not compared.
    c13_spectrum, h1_spectrum : Spectrum or None
        The processed spectra when a full spectrum (not a peak list) was given;
        not part of the dict form (the store keeps the files), not compared.

    The dict form (``to_dict()``), keys in order::

        schema_version  int (RESULT_SCHEMA_VERSION)
        inputs, versions                      as above
        nuclei, dept                          list of "13C"/"1H", bool
        verdict         {word, text, basis, top, runner_up, p_top, p_second, advice,
                         kind ("pure"|"mixture"|"undecided"), components, fractions,
                         p_hypothesis, thresholds}
        candidates      [{smiles, canonical_smiles, probability, probability_spectra,
                          probability_with_prior, p_present, prior, label, pathway, role,
                          log_likelihood_c13, log_likelihood_h1, score, tables_version,
                          c13_table, h1_table, warnings}, ...]  best first
        hypotheses      [{components, fractions, probability, log_evidence, quantified}, ...]
        discriminating_signals, error_model
        cautions        the ranking's cautions followed by the analysis's
        ranking_cautions, analysis_cautions   the two parts (for from_dict)
        advisory, safety_notes
        mixture         MixtureEstimate.to_dict() or None
        observed        {c13, h1, dept135: peak list dict or None}

    ``Result.from_dict(r.to_dict()) == r`` holds (numbers are written at full
    precision). Atom numbers (``c13_table``/``h1_table`` ``atoms``) are 1-based in
    the dict, 0-based on the objects. Dicts of older schema versions are read by
    :meth:`from_dict` too (version 1: missing fields get neutral values; version 2:
    0-based atom numbers are shifted).
    """

    ranking: Ranking
    inputs: dict[str, Any] = field(default_factory=dict)
    versions: dict[str, str] = field(default_factory=dict)
    safety_notes: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    mixture: MixtureEstimate | None = None
    c13: PeakList | None = None
    h1: PeakList | None = None
    dept135: PeakList | None = None
    caution: str = ADVISORY_CAUTION
    enumeration: "Enumeration | None" = field(default=None, compare=False, repr=False)
    c13_spectrum: Spectrum | None = field(default=None, compare=False, repr=False)
    h1_spectrum: Spectrum | None = field(default=None, compare=False, repr=False)

    # ------------------------------------------------------------ shortcuts
    @property
    def candidates(self) -> tuple[CandidateScore, ...]:
        return self.ranking.candidates

    @property
    def hypotheses(self) -> tuple[Hypothesis, ...]:
        return self.ranking.hypotheses

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
        """JSON-ready dict (``specmatch identify --json``, the store); layout in the class docstring."""
        pl = lambda x: None if x is None else peaklist_to_dict(x)
        return {
            "schema_version": RESULT_SCHEMA_VERSION,
            "inputs": self.inputs,
            "versions": dict(self.versions),
            **self.ranking.to_dict(tables),
            "cautions": list(self.ranking.cautions) + list(self.cautions),
            "ranking_cautions": list(self.ranking.cautions),
            "analysis_cautions": list(self.cautions),
            "advisory": self.caution,
            "safety_notes": list(self.safety_notes),
            "mixture": None if self.mixture is None else self.mixture.to_dict(),
            "observed": {"c13": pl(self.c13), "h1": pl(self.h1), "dept135": pl(self.dept135)},
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Result":
        """Read a :meth:`to_dict` form back (any schema version up to the current one)."""
        if not isinstance(d, Mapping) or "verdict" not in d or not ("candidates" in d or "ranking" in d):
            raise SpecmatchError("this is not a saved identification result (no verdict or candidates)")
        version = int(d.get("schema_version", 1))
        if version > RESULT_SCHEMA_VERSION:
            raise SpecmatchError(f"this result was written by a newer specmatch (schema {version}); "
                                 "update specmatch to read it")
        if version < 2:
            d = _migrate_v1(d)
        if version < 3:
            d = _migrate_v2(d)
        rd = dict(d)
        rd["cautions"] = d["ranking_cautions"]
        analysis = tuple(d.get("analysis_cautions") or ())
        obs = d.get("observed") or {}
        pl = lambda k: None if obs.get(k) is None else peaklist_from_dict(obs[k])
        mix = d.get("mixture")
        try:
            return cls(
                ranking=Ranking.from_dict(rd), inputs=dict(d.get("inputs") or {}),
                versions=dict(d.get("versions") or {}), safety_notes=tuple(d.get("safety_notes") or ()),
                cautions=analysis, mixture=None if mix is None else MixtureEstimate.from_dict(mix),
                c13=pl("c13"), h1=pl("h1"), dept135=pl("dept135"),
                caution=d.get("advisory") or ADVISORY_CAUTION,
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise SpecmatchError(f"the saved result is incomplete or damaged ({type(exc).__name__}: {exc})") from None

    def to_frame(self):
        """Candidate table as a pandas DataFrame."""
        return self.ranking.to_frame()

    def assignments_frame(self):
        """Every candidate's per-signal table as one long pandas DataFrame."""
        import pandas as pd

        return pd.DataFrame(self.ranking.assignment_rows(), columns=list(ASSIGNMENT_COLUMNS))

    def _repr_html_(self) -> str:
        """A compact summary for notebooks: verdict and candidate table.

        Self-contained on purpose: the identification stage does not import the reports
        stage (the import graph runs one way); ``reports.html.report_html`` renders the
        full report.
        """
        from html import escape

        rows = "".join(
            f"<tr><td>{i}</td><td><code>{escape(c.smiles)}</code></td><td>{escape(c.label)}</td>"
            f"<td>{c.probability:.3f}</td><td>{c.p_present:.3f}</td></tr>"
            for i, c in enumerate(self.ranking.candidates, 1))
        return (f"<div><p><b>Verdict</b>: {escape(self.verdict.text)}</p>"
                "<table><tr><th>rank</th><th>SMILES</th><th>label</th><th>probability</th>"
                f"<th>present</th></tr>{rows}</table><p><i>{escape(self.caution)}</i></p></div>")

    def __repr__(self) -> str:
        return f"<specmatch Result: {self.verdict.text}>"
