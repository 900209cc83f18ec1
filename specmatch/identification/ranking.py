"""Rank candidates: DP4-style probabilities, the verdict and the discriminating signals.

For candidate i with log-likelihoods L_C(i) and L_H(i) (see :mod:`.scoring`), the
spectra-only probability is the softmax of ``L_C/T_C + L_H/T_H`` over the candidate
set (uniform prior, as in DP4, Smith & Goodman, J. Am. Chem. Soc. 2010, 132,
12946); the with-prior probability multiplies in the mechanism prior from the
enumeration stage. T_C and T_H are calibration temperatures fitted on the
development tasks (``data/error_model.toml``).

Verdict words and their thresholds (on the probability the verdict uses, p1 for
the top candidate, p2 for the runner-up):

=====================  ==========================================
"decisive"             p1 >= 0.95
"likely"               0.80 <= p1 < 0.95
"tentative"            p1 < 0.80 and p1 >= 3 * p2 (odds 3:1 or better)
"cannot tell apart"    otherwise (odds below 3:1 between the top two)
=====================  ==========================================

The thresholds are conventions of this tool (the probabilities are calibrated,
so "likely" means right about 8 to 9 times in 10 on the development tasks).

Pure or mixture (:mod:`.hypotheses`): besides the candidates, the ranking scores
hypotheses "pure A" and "A + B" (and "A + B + C" when asked). The verdict is
about the best *hypothesis*: its ``kind`` is "pure" or "mixture" when the words
above apply to that hypothesis's posterior, "undecided" when the top two
hypotheses are closer than 3:1 (or there are no data). ``CandidateScore.probability``
stays the probability that the candidate is the product *if the sample is pure*
(it sums to 1 over the candidates); ``CandidateScore.p_present`` is the
probability that the candidate is in the sample at all.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any, Mapping, Sequence

import numpy as np

from ..errors import SpecmatchError
from .errormodel import ErrorModel, load_error_model
from .hypotheses import HypothesisScore, score_hypotheses
from .scoring import (
    ObservedC13, ObservedH1, PreparedCandidate, SignalRow, c13_table, h1_table,
    observed_c13, observed_h1, prepare, score_c13, score_h1,
)

__all__ = [
    "CandidateScore", "DiscriminatingSignal", "Hypothesis", "Ranking", "Verdict",
    "THRESHOLDS", "VERDICT_KINDS", "rank", "log_likelihoods", "softmax", "percent",
]

#: verdict thresholds (see the module docstring)
THRESHOLDS = {"decisive": 0.95, "likely": 0.80, "tentative_odds": 3.0}

#: a top candidate whose own fit is this poor gets a "none may fit" caution
POOR_FIT_SIGMA = 4.0

#: what the verdict says about the sample
VERDICT_KINDS = ("pure", "mixture", "undecided")


#: columns of the per-signal assignment table (CSV export, ``assignments_frame``)
ASSIGNMENT_COLUMNS = (
    "rank", "smiles", "probability", "nucleus", "status", "observed_ppm", "predicted_ppm",
    "sigma_ppm", "deviation_sigma", "hydrogens", "protons", "observed_integral", "multiplicity",
    "atoms", "environment",
)

def percent(p: float | None) -> str:
    """A probability or fraction as a percentage for people, the one rule of every output
    (verdict text, tables, reports, app): whole percent in the middle of the range ("87%"),
    one decimal near the ends ("0.4%", "99.5%"), "<0.1%" and ">99.9%" rather than 0.0% and
    100.0% (common practice: no more digits than a calibrated probability carries)."""
    if p is None or not math.isfinite(float(p)):
        return ""
    v = 100.0 * float(p)
    if v < 0.1:
        return "<0.1%"
    if v > 99.9:
        return ">99.9%"
    if v < 1.0 or v > 99.0:
        return f"{v:.1f}%"
    return f"{v:.0f}%"


def _tuple(x: Any) -> tuple:
    return tuple(x) if x is not None else ()


@dataclass(frozen=True)
class Hypothesis:
    """One account of the sample: a pure candidate or a mixture of candidates.

    Attributes
    ----------
    components : tuple of str
        Canonical SMILES of the components (major first).
    fractions : tuple of float
        Mole fractions (sum 1), in the order of `components`; equal shares when
        the data carry no quantitative information (``quantified`` False).
    probability : float
        Posterior probability among all hypotheses scored.
    log_evidence : float
        Tempered log marginal likelihood plus log prior (nats, up to a constant
        shared by every hypothesis of the ranking).
    quantified : bool
        Whether the fractions come from the data (1H integrals, 13C heights).
    """

    components: tuple[str, ...]
    fractions: tuple[float, ...]
    probability: float
    log_evidence: float
    quantified: bool = True

    @property
    def kind(self) -> str:
        return "pure" if len(self.components) == 1 else "mixture"

    def to_dict(self) -> dict[str, Any]:
        return {"components": list(self.components), "fractions": [float(f) for f in self.fractions],
                "probability": float(self.probability), "log_evidence": float(self.log_evidence),
                "quantified": self.quantified}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Hypothesis":
        return cls(tuple(d["components"]), tuple(float(f) for f in d["fractions"]),
                   float(d["probability"]), float(d["log_evidence"]), bool(d.get("quantified", True)))


@dataclass(frozen=True)
class CandidateScore:
    """One candidate's evidence and probabilities."""

    smiles: str
    canonical_smiles: str
    probability: float
    probability_spectra: float
    probability_with_prior: float | None
    log_likelihood_c13: float
    log_likelihood_h1: float
    score: float  # tempered, combined log-likelihood
    prior: float | None = None
    label: str = ""
    pathway: str = ""
    role: str = ""
    c13_table: tuple[SignalRow, ...] = ()
    h1_table: tuple[SignalRow, ...] = ()
    warnings: tuple[str, ...] = ()
    tables_version: str = ""
    p_present: float = 0.0  # posterior probability that the candidate is in the sample

    @property
    def unexplained(self) -> int:
        return sum(r.status == "unexplained" for r in self.c13_table + self.h1_table)

    @property
    def worst_deviation_sigma(self) -> float:
        d = [abs(r.deviation_sigma) for r in self.c13_table + self.h1_table if r.deviation_sigma is not None]
        return max(d) if d else 0.0

    def to_dict(self, tables: bool = True) -> dict[str, Any]:
        # full precision: from_dict(to_dict()) gives the same object back
        d: dict[str, Any] = {
            "smiles": self.smiles, "canonical_smiles": self.canonical_smiles,
            "probability": self.probability,
            "probability_spectra": self.probability_spectra,
            "probability_with_prior": self.probability_with_prior,
            "p_present": self.p_present,
            "prior": self.prior, "label": self.label, "pathway": self.pathway, "role": self.role,
            "log_likelihood_c13": self.log_likelihood_c13,
            "log_likelihood_h1": self.log_likelihood_h1,
            "score": self.score,
            "tables_version": self.tables_version,
        }
        if tables:
            d["c13_table"] = [r.to_dict() for r in self.c13_table]
            d["h1_table"] = [r.to_dict() for r in self.h1_table]
            d["warnings"] = list(self.warnings)
        return d

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "CandidateScore":
        opt = lambda k: None if d.get(k) is None else float(d[k])
        return cls(
            smiles=d["smiles"], canonical_smiles=d["canonical_smiles"],
            probability=float(d["probability"]), probability_spectra=float(d["probability_spectra"]),
            probability_with_prior=opt("probability_with_prior"),
            log_likelihood_c13=float(d["log_likelihood_c13"]), log_likelihood_h1=float(d["log_likelihood_h1"]),
            score=float(d["score"]), prior=opt("prior"), label=d.get("label") or "",
            pathway=d.get("pathway") or "", role=d.get("role") or "",
            c13_table=tuple(SignalRow.from_dict(r) for r in d.get("c13_table") or ()),
            h1_table=tuple(SignalRow.from_dict(r) for r in d.get("h1_table") or ()),
            warnings=_tuple(d.get("warnings")), tables_version=d.get("tables_version") or "",
            p_present=float(d.get("p_present") or 0.0),
        )


@dataclass(frozen=True)
class DiscriminatingSignal:
    """An observed signal that weighs between the top two candidates."""

    nucleus: str
    observed_ppm: float | None
    top_predicted_ppm: float | None
    top_deviation_sigma: float | None
    second_predicted_ppm: float | None
    second_deviation_sigma: float | None
    weight: float  # tempered log-likelihood difference, nats, > 0 favours the top candidate
    text: str

    def to_dict(self) -> dict[str, Any]:
        r = lambda x: None if x is None else float(x)
        return {"nucleus": self.nucleus, "observed_ppm": r(self.observed_ppm),
                "top_predicted_ppm": r(self.top_predicted_ppm),
                "top_deviation_sigma": r(self.top_deviation_sigma),
                "second_predicted_ppm": r(self.second_predicted_ppm),
                "second_deviation_sigma": r(self.second_deviation_sigma),
                "weight": float(self.weight), "text": self.text}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "DiscriminatingSignal":
        r = lambda k: None if d.get(k) is None else float(d[k])
        return cls(d["nucleus"], r("observed_ppm"), r("top_predicted_ppm"), r("top_deviation_sigma"),
                   r("second_predicted_ppm"), r("second_deviation_sigma"), float(d["weight"]), d["text"])


@dataclass(frozen=True)
class Verdict:
    """The verdict in words and what it rests on."""

    word: str
    text: str
    basis: str  # "spectra only" or "spectra and mechanism prior"
    top: str | None
    runner_up: str | None
    p_top: float
    p_second: float
    advice: str = ""
    kind: str = "undecided"  # one of VERDICT_KINDS
    components: tuple[str, ...] = ()  # canonical SMILES of the best hypothesis
    fractions: tuple[float, ...] = ()  # its mole fractions (the 1H ratio when one was estimated)
    p_hypothesis: float = 0.0  # posterior of the best hypothesis

    def to_dict(self) -> dict[str, Any]:
        return {"word": self.word, "text": self.text, "basis": self.basis, "top": self.top,
                "runner_up": self.runner_up, "p_top": float(self.p_top),
                "p_second": float(self.p_second), "advice": self.advice,
                "kind": self.kind, "components": list(self.components),
                "fractions": [float(f) for f in self.fractions], "p_hypothesis": float(self.p_hypothesis),
                "thresholds": dict(THRESHOLDS)}

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Verdict":
        return cls(d["word"], d["text"], d["basis"], d.get("top"), d.get("runner_up"),
                   float(d["p_top"]), float(d["p_second"]), d.get("advice") or "",
                   d.get("kind") or "undecided", _tuple(d.get("components")),
                   tuple(float(f) for f in d.get("fractions") or ()), float(d.get("p_hypothesis") or 0.0))


@dataclass(frozen=True)
class Ranking:
    """All candidates ranked against the observed spectra."""

    candidates: tuple[CandidateScore, ...]
    verdict: Verdict
    discriminating: tuple[DiscriminatingSignal, ...]
    nuclei: tuple[str, ...]
    has_dept: bool
    error_model_version: str
    cautions: tuple[str, ...] = ()
    hypotheses: tuple[Hypothesis, ...] = ()  # best first: pure candidates and mixtures

    @property
    def best(self) -> CandidateScore:
        return self.candidates[0]

    def to_dict(self, tables: bool = True) -> dict[str, Any]:
        return {
            "nuclei": list(self.nuclei), "dept": self.has_dept,
            "verdict": self.verdict.to_dict(),
            "candidates": [c.to_dict(tables) for c in self.candidates],
            "hypotheses": [h.to_dict() for h in self.hypotheses],
            "discriminating_signals": [d.to_dict() for d in self.discriminating],
            "cautions": list(self.cautions),
            "error_model": self.error_model_version,
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "Ranking":
        """The inverse of :meth:`to_dict` (with tables)."""
        return cls(
            candidates=tuple(CandidateScore.from_dict(c) for c in d["candidates"]),
            verdict=Verdict.from_dict(d["verdict"]),
            discriminating=tuple(DiscriminatingSignal.from_dict(x) for x in d.get("discriminating_signals") or ()),
            nuclei=_tuple(d.get("nuclei")), has_dept=bool(d.get("dept")),
            error_model_version=d.get("error_model") or "",
            cautions=_tuple(d.get("cautions")),
            hypotheses=tuple(Hypothesis.from_dict(h) for h in d.get("hypotheses") or ()),
        )

    def to_frame(self):
        """The candidate table as a pandas DataFrame (one row per candidate)."""
        import pandas as pd

        rows = []
        for i, c in enumerate(self.candidates, 1):
            rows.append({
                "rank": i, "smiles": c.smiles, "label": c.label, "pathway": c.pathway,
                "prior": c.prior, "probability": c.probability, "p_present": c.p_present,
                "probability_spectra": c.probability_spectra,
                "probability_with_prior": c.probability_with_prior,
                "log_likelihood_c13": c.log_likelihood_c13, "log_likelihood_h1": c.log_likelihood_h1,
                "unexplained_signals": c.unexplained,
                "worst_deviation_sigma": round(c.worst_deviation_sigma, 2),
            })
        return pd.DataFrame(rows).set_index("rank")

    def assignment_rows(self) -> list[dict]:
        """One row per candidate and signal (13C then 1H), candidates in rank order.

        Columns are :data:`ASSIGNMENT_COLUMNS`; atoms are 1-based and space separated, as a
        chemist counts (the numbering of every text output).
        """
        rows = []
        for i, c in enumerate(self.candidates, 1):
            for r in c.c13_table + c.h1_table:
                d = r.to_dict()
                rows.append({
                    "rank": i, "smiles": c.smiles, "probability": round(c.probability, 6),
                    **{k: d[k] for k in ASSIGNMENT_COLUMNS[3:] if k != "atoms"},
                    "atoms": " ".join(str(a + 1) for a in r.atoms),
                })
        return rows


# ------------------------------------------------------------------ fast numbers
def softmax(x: np.ndarray) -> np.ndarray:
    x = np.asarray(x, float)
    e = np.exp(x - x.max())
    return e / e.sum()


def log_likelihoods(prepared: Sequence[PreparedCandidate], c13: ObservedC13, h1: ObservedH1,
                    model: ErrorModel) -> tuple[np.ndarray, np.ndarray]:
    """Raw 13C and 1H log-likelihoods per candidate (nats)."""
    lc = np.array([score_c13(p, c13, model.c13) for p in prepared]) if c13.n else np.zeros(len(prepared))
    lh = np.array([score_h1(p, h1, model.h1) for p in prepared]) if h1.n else np.zeros(len(prepared))
    return lc, lh


def combined_score(lc: np.ndarray, lh: np.ndarray, model: ErrorModel) -> np.ndarray:
    return lc / model.c13.temperature + lh / model.h1.temperature


# --------------------------------------------------------------------- rank
def _candidate_type() -> type:
    # imported here: the reactions stage (enumeration) is not needed to rank given SMILES
    from ..reactions.types import Candidate

    return Candidate


def _candidate_fields(item: Any) -> tuple[str, dict[str, Any]]:
    if isinstance(item, str):
        return item, {}
    if isinstance(item, Mapping):
        if not isinstance(item.get("smiles"), str):
            raise SpecmatchError("a candidate given as a dict needs a 'smiles' string")
        f = {k: item.get(k) for k in ("label", "pathway", "role", "prior")}
    elif isinstance(item, _candidate_type()):
        f = {"label": item.label, "pathway": item.pathway, "role": item.role, "prior": item.prior}
        item = {"smiles": item.smiles}
    else:
        raise SpecmatchError(f"a candidate is a SMILES string, a dict with 'smiles' or an enumerated "
                             f"Candidate, not {type(item).__name__}")
    if isinstance(f.get("pathway"), (list, tuple)):
        f["pathway"] = " -> ".join(str(x) for x in f["pathway"])
    return str(item["smiles"]), f


def _normalise_priors(priors: Any, smiles: list[str], from_items: list[float | None]) -> np.ndarray | None:
    if priors is None:
        if all(p is None for p in from_items):
            return None
        vals = list(from_items)
    elif isinstance(priors, Mapping):
        vals = [priors.get(s) for s in smiles]
    else:
        if isinstance(priors, (str, bytes)) or not hasattr(priors, "__len__"):
            raise SpecmatchError("priors must be a list with one number per candidate")
        vals = list(priors)
        if len(vals) != len(smiles):
            raise SpecmatchError(f"{len(vals)} priors for {len(smiles)} candidates; give one per candidate")
    try:
        known = [float(v) for v in vals if v is not None]
    except (TypeError, ValueError):
        raise SpecmatchError("priors must be numbers (one per candidate)") from None
    if any(v < 0 or not math.isfinite(v) for v in known):
        raise SpecmatchError("priors must be non-negative numbers")
    # candidates without a mechanism prior (e.g. added by the user) get the mean of the others
    fill = float(np.mean(known)) if known and sum(known) > 0 else 1.0
    arr = np.array([fill if v is None else float(v) for v in vals], float)
    if arr.sum() <= 0:
        return None
    # a zero prior would make the spectra powerless; floor it at 1e-4 of the largest
    arr = np.maximum(arr, 1e-4 * arr.max())
    return arr / arr.sum()


def _dept_pattern(p: PreparedCandidate) -> tuple[int, ...]:
    return tuple(sorted(int(h) for h in p.c_h[~p.c_optional]))


def _same_prediction(a: PreparedCandidate, b: PreparedCandidate) -> bool:
    ca = sorted(zip(np.round(a.c_shift, 3), a.c_h)); cb = sorted(zip(np.round(b.c_shift, 3), b.c_h))
    ha = sorted(zip(np.round(a.h_shift, 3), a.h_count)); hb = sorted(zip(np.round(b.h_shift, 3), b.h_count))
    return ca == cb and ha == hb


def _advice(nuclei: tuple[str, ...], has_dept: bool, a: PreparedCandidate, b: PreparedCandidate) -> str:
    """What to record next when the top two cannot be told apart."""
    if _same_prediction(a, b):
        return ("these candidates have the same predicted spectra (stereoisomers, or the same "
                "constitution written twice): 1H/13C shifts of this kind cannot tell them apart")
    dept_differs = _dept_pattern(a) != _dept_pattern(b)
    if nuclei == ("13C",) and not has_dept:
        return "cannot tell these apart with 13C alone: record a 1H or DEPT-135 spectrum" + (
            " (their carbons carry different numbers of H, which DEPT-135 shows)" if dept_differs else "")
    if nuclei == ("13C",):
        return "cannot tell these apart with 13C and DEPT: record a 1H spectrum"
    if nuclei == ("1H",):
        return "cannot tell these apart with 1H alone: record a 13C spectrum" + (
            " with DEPT-135" if dept_differs else "")
    if not has_dept and dept_differs:
        return "cannot tell these apart with the spectra given: record a DEPT-135 spectrum"
    return ("cannot tell these apart with the spectra given: record 2D correlation spectra "
            "(HSQC/HMBC) or compare with an authentic sample")


def _describe(h: Hypothesis, names: Mapping[str, str], percentages: bool = True) -> str:
    """ "pure A", "mixture of A (about 70%) and B", "mixture of A and B (no ratio from these data)"."""
    if len(h.components) == 1:
        return f"pure {names[h.components[0]]}"
    parts = [names[c] for c in h.components]
    if percentages and h.quantified:
        head = f"{parts[0]} (about {5 * round(20 * h.fractions[0]):.0f}%)"
        if len(parts) == 2:
            return f"mixture of {head} and {parts[1]}"
        rest = ", ".join(f"{p} (about {5 * round(20 * f):.0f}%)" for p, f in zip(parts[1:-1], h.fractions[1:-1]))
        return f"mixture of {head}, {rest} and {parts[-1]}"
    return "mixture of " + ", ".join(parts[:-1]) + f" and {parts[-1]}" + (
        "" if h.quantified else " (no ratio from these data: 1H integrals give one)")


def _verdict(scores: list[CandidateScore], prepared: list[PreparedCandidate], basis: str,
             nuclei: tuple[str, ...], has_dept: bool, hyps: Sequence[Hypothesis]) -> Verdict:
    names = {c.canonical_smiles: _name(c) for c in reversed(scores)}
    top = scores[0]
    if not nuclei:
        return Verdict("no data", "no spectra given: the ranking is the mechanism prior alone"
                       if basis != "spectra only" else "no spectra given: nothing to decide on",
                       basis, top.smiles, scores[1].smiles if len(scores) > 1 else None,
                       top.probability, scores[1].probability if len(scores) > 1 else 0.0, kind="undecided")
    if len(scores) == 1:
        return Verdict("only candidate", f"{_name(top)} is the only candidate; its fit is shown below",
                       basis, top.smiles, None, 1.0, 0.0, kind="pure", components=(top.canonical_smiles,),
                       fractions=(1.0,), p_hypothesis=1.0)
    sec = scores[1]
    h1, h2 = hyps[0], hyps[1]
    q1, q2 = h1.probability, h2.probability
    common = dict(basis=basis, top=top.smiles, runner_up=sec.smiles, p_top=top.probability,
                  p_second=sec.probability, components=h1.components, fractions=h1.fractions,
                  p_hypothesis=q1)
    d1, d2 = _describe(h1, names), _describe(h2, names)
    kind = h1.kind
    if q1 >= THRESHOLDS["decisive"]:
        return Verdict("decisive", f"decisive: {d1} (p = {percent(q1)}, {basis})", kind=kind, **common)
    if q1 >= THRESHOLDS["likely"]:
        return Verdict("likely", f"likely {d1} (p = {percent(q1)}, {basis}); next {d2} (p = {percent(q2)})",
                       kind=kind, **common)
    if q2 <= 0 or q1 / q2 >= THRESHOLDS["tentative_odds"]:
        return Verdict("tentative", f"tentative: {d1} (p = {percent(q1)}, {basis}) ahead of {d2} "
                       f"(p = {percent(q2)}); more data advisable", kind=kind, **common)
    # the two leading accounts differ in a candidate: advise on the first two distinct ones
    index = {c.canonical_smiles: i for i, c in reversed(list(enumerate(scores)))}
    ia = index[h1.components[0]]
    other = [c for c in h2.components if c not in h1.components] or \
        [c for c in h1.components[1:]] or [sec.canonical_smiles]
    ib = index.get(other[0], 1)
    if ib == ia:
        ib = 1 if ia == 0 else 0
    advice = _advice(nuclei, has_dept, prepared[ia], prepared[ib])
    if h1.kind == h2.kind == "pure":
        text = f"{names[h1.components[0]]} (p = {percent(q1)}) and {names[h2.components[0]]} (p = {percent(q2)}): {advice}"
    else:
        text = (f"cannot tell pure from mixture: {d1} (p = {percent(q1)}) or {d2} (p = {percent(q2)}): "
                f"{advice}")
    return Verdict("cannot tell apart", text, advice=advice, kind="undecided", **common)


def _name(c: CandidateScore) -> str:
    return f"{c.label} ({c.smiles})" if c.label else c.smiles


def _per_line(table: tuple[SignalRow, ...]) -> dict[int, tuple[float, SignalRow | None]]:
    """Observed index -> (log-likelihood share, the main predicted row)."""
    out: dict[int, tuple[float, SignalRow | None]] = {}
    for r in table:
        if r.observed_index is None:
            continue
        ll, main = out.get(r.observed_index, (0.0, None))
        if r.status == "unexplained":
            out[r.observed_index] = (ll + r.log_likelihood, main)
        else:
            out[r.observed_index] = (ll + r.log_likelihood, main if main is not None else r)
    return out


def _discriminating(a: CandidateScore, b: CandidateScore, model: ErrorModel,
                    limit: int = 6) -> tuple[DiscriminatingSignal, ...]:
    out: list[DiscriminatingSignal] = []
    for nucleus, ta, tb, temp in (("13C", a.c13_table, b.c13_table, model.c13.temperature),
                                  ("1H", a.h1_table, b.h1_table, model.h1.temperature)):
        la, lb = _per_line(ta), _per_line(tb)
        for j in sorted(set(la) | set(lb)):
            lla, ra = la.get(j, (0.0, None))
            llb, rb = lb.get(j, (0.0, None))
            w = (lla - llb) / temp
            if abs(w) < 0.5:
                continue
            obs = (ra or rb).observed_ppm if (ra or rb) else None
            if obs is None:
                obs = next((r.observed_ppm for r in ta + tb if r.observed_index == j), None)
            fmt = lambda smi, r: (f"{smi} leaves it unexplained" if r is None else
                                  f"{smi} predicts {r.predicted_ppm:.1f} ppm ({r.deviation_sigma:+.1f} sigma)"
                                  if nucleus == "13C" else
                                  f"{smi} predicts {r.predicted_ppm:.2f} ppm ({r.deviation_sigma:+.1f} sigma)")
            unit = "%.1f" if nucleus == "13C" else "%.2f"
            text = (f"{nucleus} {unit % obs} ppm: {fmt(a.smiles, ra)}, {fmt(b.smiles, rb)}; "
                    f"favours {a.smiles if w > 0 else b.smiles} by {abs(w):.1f} nats")
            out.append(DiscriminatingSignal(
                nucleus, obs, ra.predicted_ppm if ra else None, ra.deviation_sigma if ra else None,
                rb.predicted_ppm if rb else None, rb.deviation_sigma if rb else None, w, text))
        # predicted signals with no line at all weigh too
        for cand, other, sgn in ((a, b, 1.0), (b, a, -1.0)):
            table = cand.c13_table if nucleus == "13C" else cand.h1_table
            for r in table:
                if r.status == "not observed":
                    w = sgn * r.log_likelihood / temp
                    if abs(w) >= 0.5:
                        out.append(DiscriminatingSignal(
                            nucleus, None, r.predicted_ppm if sgn > 0 else None, None,
                            r.predicted_ppm if sgn < 0 else None, None, w,
                            f"{nucleus}: {cand.smiles} predicts a signal at {r.predicted_ppm:.1f} ppm "
                            f"that is not observed; favours {other.smiles} by {abs(w):.1f} nats"))
    out.sort(key=lambda d: -abs(d.weight))
    return tuple(out[:limit])


def _mixture_hint(ranked: list[CandidateScore]) -> str | None:
    """If lines the best candidate leaves unexplained fit another candidate well, say so."""
    top = ranked[0]
    left = {r.observed_index: r.observed_ppm for r in top.c13_table if r.status == "unexplained"}
    if len(left) < 2:
        return None
    for other in ranked[1:6]:
        fits = sorted({r.observed_index for r in other.c13_table
                       if r.observed_index in left and r.status == "assigned"
                       and r.deviation_sigma is not None and abs(r.deviation_sigma) <= 2.0})
        if len(fits) >= 2 and 2 * len(fits) >= len(left):
            ppm = ", ".join(f"{left[j]:.1f}" for j in sorted(fits, key=lambda j: -left[j]))
            name = f"{other.label} ({other.smiles})" if other.label else other.smiles
            return (f"{len(fits)} of the {len(left)} 13C lines the best candidate leaves unexplained "
                    f"({ppm} ppm) fit {name}: the sample may be a mixture of the two; estimate the "
                    "ratio from the 1H spectrum (--mixture)")
    return None


def _cautions(top: CandidateScore, nuclei: tuple[str, ...]) -> list[str]:
    out = []
    if top.unexplained:
        out.append(f"the best candidate leaves {top.unexplained} observed signal(s) unexplained: an "
                   "impurity, a second product, or a product that is not among the candidates")
    if top.worst_deviation_sigma > POOR_FIT_SIGMA:
        out.append(f"the best candidate has a signal {top.worst_deviation_sigma:.1f} sigma from its "
                   "prediction: check the assignment table; the product may be none of the candidates")
    if any("fallback" in w or "not covered" in w for w in top.warnings):
        out.append("some environments of the best candidate are outside the increment tables; "
                   "their predictions are wide")
    if nuclei == ("1H",):
        out.append("1H only: shifts of alkyl protons overlap heavily; a 13C spectrum is much more telling")
    return out


def hypothesis_posterior(raw: Sequence[HypothesisScore], canonical: Sequence[str]
                         ) -> tuple[tuple[Hypothesis, ...], np.ndarray]:
    """Normalised hypotheses (best first, components major first) and p_present per candidate."""
    ev = np.array([h.log_evidence for h in raw])
    post = softmax(ev)
    present = np.zeros(len(canonical))
    out = []
    for h, p in zip(raw, post):
        present[list(h.members)] += p
        order = sorted(range(len(h.members)), key=lambda k: (-h.fractions[k], k))
        out.append(Hypothesis(tuple(canonical[h.members[k]] for k in order),
                              tuple(float(h.fractions[k]) for k in order), float(p), float(h.log_evidence),
                              h.quantified))
    out.sort(key=lambda h: (-h.probability, len(h.components)))
    return tuple(out), np.minimum(present, 1.0)


def rank(candidates: Sequence[Any], c13: Any = None, h1: Any = None, priors: Any = None, *,
         use_prior: bool = True, model: ErrorModel | None = None, details: bool = True,
         max_components: int = 2) -> Ranking:
    """Rank candidate structures against observed spectra.

    Parameters
    ----------
    candidates : sequence
        SMILES strings, dicts with ``smiles`` (and optional ``label``, ``pathway``,
        ``role``, ``prior``) or enumeration ``Candidate`` objects.
    c13 : sequence or PeakList, optional
        Observed 13C lines: ppm numbers, ``{"shift": ppm, "hydrogens": n}`` dicts
        (hydrogens from DEPT) or peaks.
    h1 : sequence or PeakList, optional
        Observed 1H multiplets: ``{"shift", "integral", "multiplicity", "j_hz"}``.
    priors : sequence or mapping, optional
        Mechanism prior per candidate (normalised here); taken from the candidate
        objects when not given.
    use_prior : bool
        Base the verdict on the with-prior probability (when priors exist).
    model : ErrorModel, optional
        Defaults to the fitted model shipped with specmatch.
    details : bool
        Build per-signal tables and discriminating signals (False for speed).
    max_components : int
        Largest mixture scored as a hypothesis: 1 (pure samples only), 2 or 3.

    Returns
    -------
    Ranking
    """
    items = list(candidates)
    if not items:
        raise SpecmatchError("no candidate structures to rank; give at least one SMILES")
    model = model or load_error_model()
    parsed = [_candidate_fields(x) for x in items]
    smiles = [s for s, _ in parsed]
    prepared = [prepare(s) for s in smiles]
    oc, oh = observed_c13(c13), observed_h1(h1)
    nuclei = tuple(n for n, o in (("13C", oc), ("1H", oh)) if o.n)
    lc, lh = log_likelihoods(prepared, oc, oh, model)
    score = combined_score(lc, lh, model)
    p_spec = softmax(score)
    pri = _normalise_priors(priors, smiles, [f.get("prior") for _, f in parsed])
    p_prior = softmax(score + np.log(pri)) if pri is not None else None
    with_prior = use_prior and p_prior is not None
    p_use = p_prior if with_prior else p_spec
    basis = "spectra and mechanism prior" if with_prior else "spectra only"
    canonical = [pr.prediction.canonical_smiles for pr in prepared]
    raw = score_hypotheses(prepared, score, pri if with_prior else None, oc, oh, model,
                           max_components=max_components if nuclei else 1)
    hyps, present = hypothesis_posterior(raw, canonical)
    rows = []
    for i, (s, f) in enumerate(parsed):
        pr = prepared[i]
        rows.append(CandidateScore(
            smiles=s, canonical_smiles=pr.prediction.canonical_smiles,
            probability=float(p_use[i]), probability_spectra=float(p_spec[i]),
            probability_with_prior=None if p_prior is None else float(p_prior[i]),
            log_likelihood_c13=float(lc[i]), log_likelihood_h1=float(lh[i]), score=float(score[i]),
            prior=None if pri is None else float(pri[i]),
            label=f.get("label") or "", pathway=f.get("pathway") or "", role=f.get("role") or "",
            c13_table=tuple(c13_table(pr, oc, model.c13)) if details else (),
            h1_table=tuple(h1_table(pr, oh, model.h1)) if details else (),
            warnings=pr.prediction.warnings, tables_version=pr.prediction.tables_version,
            p_present=float(present[i]),
        ))
    order = sorted(range(len(rows)), key=lambda i: (-rows[i].probability, -rows[i].score, i))
    ranked = [rows[i] for i in order]
    prep_sorted = [prepared[i] for i in order]
    verdict = _verdict(ranked, prep_sorted, basis, nuclei, oc.has_dept, hyps)
    disc = _discriminating(ranked[0], ranked[1], model) if details and len(ranked) > 1 and nuclei else ()
    cautions: tuple[str, ...] = ()
    if details and nuclei:
        # the hint names leftover lines another candidate explains; when the verdict
        # already says "mixture" it would only repeat it
        hint = _mixture_hint(ranked) if "13C" in nuclei and verdict.kind != "mixture" else None
        cautions = tuple(_cautions(ranked[0], nuclei) + ([hint] if hint else []))
    return Ranking(tuple(ranked), verdict, disc, nuclei, oc.has_dept, model.version, cautions, hyps)


def reconciled_verdict(ranking: Ranking, mix: Any, present_fraction: float) -> Verdict:
    """The verdict made consistent with a measured 1H ratio (see ``pipeline.reconcile``).

    ``mix`` is a :class:`~specmatch.identification.mixture.MixtureEstimate` over
    some of the ranking's candidates (SMILES as given).
    """
    v = ranking.verdict
    canon = {c.smiles: c.canonical_smiles for c in ranking.candidates}
    names = {c.canonical_smiles: _name(c) for c in reversed(ranking.candidates)}
    frac = {canon[s]: float(f) for s, f in zip(mix.candidates, mix.fractions) if s in canon}
    lows = {canon[s]: float(lo) for s, (lo, _) in zip(mix.candidates, mix.interval_95) if s in canon}
    present = sorted((c for c, f in frac.items() if f >= present_fraction), key=lambda c: -frac[c])
    if not present:
        return v
    tot = sum(frac[c] for c in present)
    comps = tuple(present)
    fracs = tuple(frac[c] / tot for c in comps)
    same = next((h for h in ranking.hypotheses if set(h.components) == set(comps)), None)
    q = same.probability if same is not None else 0.0
    h = Hypothesis(comps, fracs, q, same.log_evidence if same is not None else float("-inf"), True)
    desc = _describe(h, names)
    ratio = f"1H ratio {mix.ratio_text}" if len(comps) == len(frac) else "1H ratio"
    if len(comps) == 1:
        if v.kind == "mixture":
            # the lines suggest a mixture that the 1H integrals do not show
            return Verdict("cannot tell apart",
                           f"cannot tell pure from mixture: the {ratio} shows only {names[comps[0]]}, the lines "
                           f"favour {_describe(ranking.hypotheses[0], names, False)} (p = {percent(v.p_hypothesis)})",
                           v.basis, v.top, v.runner_up, v.p_top, v.p_second, v.advice, "undecided",
                           comps, (1.0,), v.p_hypothesis)
        return v
    detected = all(lows.get(c, 0.0) > 0.0 for c in comps)
    if set(v.components) == set(comps) and v.kind == "mixture":
        word = v.word
        text = f"{word}: {desc} (p = {percent(q)}, {v.basis}; {ratio})" if word != "likely" else \
            f"likely {desc} (p = {percent(q)}, {v.basis}; {ratio})"
    elif detected:
        word = ("decisive" if q >= THRESHOLDS["decisive"] else "likely" if q >= THRESHOLDS["likely"]
                else "tentative")
        text = (f"{word}: {desc} ({ratio}; the line evidence alone gives this mixture p = {percent(q)}, "
                f"{v.basis})")
    else:
        return replace(v, kind="undecided", components=comps, fractions=fracs, word="cannot tell apart",
                       text=f"cannot tell pure from mixture: the {ratio} puts {desc[len('mixture of '):]} "
                       "but the minor component's 95% interval reaches 0")
    return replace(v, word=word, text=text, kind="mixture", components=comps, fractions=fracs, p_hypothesis=q)
