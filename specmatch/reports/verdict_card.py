"""The answer in a chemist's words: what the app's verdict card and the report's top show.

One place turns a :class:`~specmatch.identification.result.Result` into the short
summary a chemist reads first: the answer's name, the verdict words, the probability
with what it means, the mixture when there is one, and the two or three signals that
decided it, in ppm rather than in statistics. Everything here is wording and
rounding; the numbers come from the identification stage.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from ..identification.ranking import THRESHOLDS
from . import numbers as fmt
from .naming import CandidateName, candidate_names

__all__ = ["VerdictCard", "verdict_card", "names_for_result", "signal_words", "fit_words", "threshold_words"]

#: how far a measured signal may sit from a prediction and still "fit" (in units of the
#: expected error of that prediction; common practice: within about 2 sigma)
FITS_WITHIN_SIGMA = 2.0


@dataclass(frozen=True)
class VerdictCard:
    """The top of the results view.

    Attributes
    ----------
    answer : str
        SMILES of the structure the verdict names (None-free: "" when there is none).
    answer_name : str
        Its display name (code, class, pathway).
    word : str
        The verdict word from the identification stage ("decisive", "likely", ...).
    headline : str
        One line: the verdict word and the answer's name.
    probability : str
        The probability as a percentage ("87%", "<0.1%").
    meaning : str
        What the probability means, in one sentence.
    mixture : str
        The product ratio line when the sample is a mixture, else "".
    deciding : tuple of str
        The two or three signals that decided it, in words.
    deciding_title : str
        The heading for ``deciding``.
    advice : str
        What to record next, when the verdict is weak.
    strong : bool
        True for "decisive" and "likely" (the card is drawn as settled).
    """

    answer: str
    answer_name: str
    word: str
    headline: str
    probability: str
    meaning: str
    mixture: str
    deciding: tuple[str, ...]
    deciding_title: str
    advice: str
    strong: bool


def threshold_words() -> str:
    """The verdict thresholds in words, from ``identification.ranking.THRESHOLDS`` (never
    retyped: the text, the HTML report and the app say what the ranking applies)."""
    t = THRESHOLDS
    return (f"thresholds: decisive at {fmt.percent(t['decisive'])} or more, likely at "
            f"{fmt.percent(t['likely'])} or more, tentative at odds of {t['tentative_odds']:g}:1 or better "
            "over the runner-up, otherwise cannot tell apart")


def names_for_result(result: Any) -> dict[str, CandidateName]:
    """Display names for every candidate of ``result``.

    Codes follow the enumeration's order (then the user's own candidates), so a
    candidate keeps its code when the spectra change the ranking.
    """
    ranked = {c.smiles: c for c in result.ranking.candidates}
    order: list[str] = []
    if result.enumeration is not None:
        order = [c.smiles for c in result.enumeration.candidates if c.smiles in ranked]
    order += [s for s in sorted(ranked, key=lambda s: (-(ranked[s].prior or 0.0), s)) if s not in order]
    return candidate_names((s, ranked[s].label) for s in order)


def fit_words(deviation_sigma: float | None, predicted: float | None, observed: float | None,
              nucleus: str) -> str:
    """'fits (0.4 ppm off)' or '4.2 ppm off' for one prediction against one measured line."""
    if predicted is None:
        return "has no signal there"
    if observed is None:
        return f"expects {fmt.ppm(predicted, nucleus)} ppm"
    diff = abs(predicted - observed)
    off = f"{fmt.ppm(diff, nucleus)} ppm off"
    if deviation_sigma is not None and abs(deviation_sigma) <= FITS_WITHIN_SIGMA:
        return f"expects {fmt.ppm(predicted, nucleus)} ppm, fits ({off})"
    return f"expects {fmt.ppm(predicted, nucleus)} ppm, {off}"


def signal_words(d: Any, top: str, second: str) -> str:
    """One discriminating signal in words, without statistics."""
    nucleus = d.nucleus
    if d.observed_ppm is None:  # a predicted signal with no measured line
        who, where = (top, d.top_predicted_ppm) if d.top_predicted_ppm is not None else (
            second, d.second_predicted_ppm)
        return (f"{nucleus}: {who} expects a signal at {fmt.ppm(where, nucleus)} ppm that is not "
                "in the spectrum")
    a = fit_words(d.top_deviation_sigma, d.top_predicted_ppm, d.observed_ppm, nucleus)
    b = fit_words(d.second_deviation_sigma, d.second_predicted_ppm, d.observed_ppm, nucleus)
    return f"{nucleus} {fmt.ppm(d.observed_ppm, nucleus)} ppm: {top} {a}; {second} {b}"


def _mixture_line(result: Any, names: dict[str, CandidateName], by_canonical: dict[str, str]) -> str:
    """The ratio in words: from the 1H estimate when there is one, else the verdict's mixture."""
    mix = result.mixture
    if mix is not None:
        shown = sorted(((f, s) for s, f in zip(mix.candidates, mix.fractions) if f >= 0.005), reverse=True)
        source = f"from the 1H spectrum; {mix.selectivity}"
    else:
        v = result.ranking.verdict
        if v.kind != "mixture":
            return ""
        shown = sorted(((f, by_canonical.get(c, c)) for c, f in zip(v.components, v.fractions)), reverse=True)
        source = "from the fit of the signals"
    if len(shown) < 2:
        return ""
    ratio = ":".join(f"{100 * f:.0f}" for f, _ in shown)
    who = " : ".join(names[s].code if s in names else s for _, s in shown)
    return f"{ratio} ({who}) {source}"


def verdict_card(result: Any, names: dict[str, CandidateName] | None = None, limit: int = 3) -> VerdictCard:
    """The chemist-facing summary of ``result`` (see :class:`VerdictCard`).

    Built on the verdict's hypothesis: "pure" names one candidate, "mixture" its
    components with their shares, "undecided" the top two candidates.
    """
    names = names if names is not None else names_for_result(result)
    v = result.ranking.verdict
    cands = result.ranking.candidates
    by_canonical = {c.canonical_smiles: c.smiles for c in cands}
    parts = [by_canonical.get(c, c) for c in v.components]
    full = lambda s: names[s].full if s in names else s  # noqa: E731
    code = lambda s: names[s].code if s in names else s  # noqa: E731
    n = len(cands)
    basis = "these spectra and the reaction mechanism" if "prior" in v.basis else "these spectra alone"
    word = v.word.capitalize()
    if v.kind == "mixture" and len(parts) >= 2:
        answer = parts[0]
        short = lambda s: names[s].short if s in names else s  # noqa: E731
        shares = " and ".join(f"{short(s)} (about {100 * f:.0f}%)" for s, f in zip(parts, v.fractions))
        headline = f"{word}: a mixture of {shares}"
        meaning = (f"the chance, judged from {basis}, that the sample is this mixture rather than one "
                   f"pure product or another mix of the {n} candidates")
        p = v.p_hypothesis
    elif v.kind == "pure" and parts:
        answer = parts[0]
        headline = f"{word}: {full(answer)}"
        meaning = (f"the chance, judged from {basis}, that the sample is {code(answer)} alone, "
                   f"if the product is among the {n} candidates and their mixtures")
        p = v.p_hypothesis
    else:
        answer = v.top or ""
        second = f" or {full(v.runner_up)}" if v.runner_up else ""
        headline = f"{word}: {full(answer)}{second}" if answer else v.text
        meaning = (f"the chance, judged from {basis}, that {code(answer)} is the product if the sample "
                   f"is one pure candidate of the {n}") if answer and n > 1 else ""
        p = v.p_top
    deciding: tuple[str, ...] = ()
    title = "What decided it"
    if v.top and v.runner_up:
        title = (f"Signals that tell {code(v.top)} from {code(v.runner_up)}" if v.kind == "mixture"
                 else "What decided it")
        deciding = tuple(signal_words(d, code(v.top), code(v.runner_up))
                         for d in result.ranking.discriminating[:limit])
    return VerdictCard(answer=answer, answer_name=full(answer) if answer else "", word=v.word, headline=headline,
                   probability=fmt.percent(p) if answer and n > 1 else "", meaning=meaning,
                   mixture=_mixture_line(result, names, by_canonical), deciding=deciding, deciding_title=title,
                   advice=v.advice or "", strong=v.word in ("decisive", "likely"))
