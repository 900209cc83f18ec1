"""Readable text of an identification (``specmatch identify`` without ``--json``)."""

from __future__ import annotations

from ..identification.ranking import Ranking, percent
from ..identification.result import Result
from .verdict_card import threshold_words

__all__ = ["result_text", "signal_table_text"]


def _f(x: float | None, fmt: str) -> str:
    return "-" if x is None else format(x, fmt)


def signal_table_text(rows, nucleus: str) -> str:
    """A per-signal table: observed, predicted, deviation in sigma units, status."""
    if not rows:
        return ""
    ppm = ".1f" if nucleus == "13C" else ".2f"
    head = f"  {'observed':>9} {'predicted':>9} {'sigma':>6} {'dev/sigma':>9}  {'H' if nucleus == '13C' else 'nH':>2}  status        environment"
    out = [head]
    for r in rows:
        h = r.hydrogens if nucleus == "13C" else r.protons
        out.append(f"  {_f(r.observed_ppm, ppm):>9} {_f(r.predicted_ppm, ppm):>9} {_f(r.sigma_ppm, '.2f'):>6} "
                   f"{_f(r.deviation_sigma, '+.1f'):>9}  {'-' if h is None else h:>2}  {r.status:<13} {r.environment}")
    return "\n".join(out)


def result_text(result: Result | Ranking) -> str:
    """The verdict, the candidate table, the evidence and the cautions as plain text.

    Accepts a :class:`~specmatch.identification.result.Result` or a bare ``Ranking``
    (``specmatch.rank``), which has no inputs, mixture, safety notes or versions.
    """
    full = result if isinstance(result, Result) else None
    ranking = full.ranking if full is not None else result
    v = ranking.verdict
    lines = [f"Verdict: {v.text}"]
    lines.append(f"  (verdict uses the {v.basis} probability; {threshold_words()})")
    inputs = full.inputs if full is not None else {}
    if inputs.get("substrate"):
        lines.append(f"Reaction: {inputs['substrate']} + {inputs.get('reagent_name') or inputs.get('reagent')}"
                     + (f" (alcohol {inputs['alcohol']})" if inputs.get("alcohol") else ""))
    lines.append(f"Data: {', '.join(ranking.nuclei) or 'none'}{' + DEPT' if ranking.has_dept else ''}")
    lines.append("")
    if ranking.hypotheses:
        names = {c.canonical_smiles: (c.label or c.smiles) for c in reversed(ranking.candidates)}
        lines.append("What the sample is (posterior over pure samples and mixtures):")
        for h in ranking.hypotheses[:5]:
            if len(h.components) == 1:
                what = f"pure {names.get(h.components[0], h.components[0])}"
            else:
                what = " + ".join(names.get(c, c) + (f" ({100 * f:.0f}%)" if h.quantified else "")
                                  for c, f in zip(h.components, h.fractions))
            lines.append(f"  {percent(h.probability):>7}  {what}")
        lines.append("")
    lines.append(f"{'#':>2} {'present':>8} {'p if pure':>9} {'p spectra':>9} {'prior':>6}  candidate")
    for i, c in enumerate(ranking.candidates, 1):
        pr = "-" if c.prior is None else f"{c.prior:.3f}"
        label = f"{c.label}: " if c.label else ""
        lines.append(f"{i:>2} {percent(c.p_present):>8} {percent(c.probability):>9} "
                     f"{percent(c.probability_spectra):>9} {pr:>6}  {label}{c.smiles}")
    lines.append("  (present: probability that the candidate is in the sample; p if pure: that it is "
                 "the product if the sample is one compound)")
    if ranking.discriminating:
        lines += ["", "Signals that tell the top two apart:"]
        lines += [f"  - {d.text}" for d in ranking.discriminating]
    best = ranking.candidates[0]
    for nucleus, rows in (("13C", best.c13_table), ("1H", best.h1_table)):
        if rows:
            lines += ["", f"{nucleus} assignment for the top candidate {best.smiles}:",
                      signal_table_text(rows, nucleus)]
    mix = full.mixture if full is not None else None
    if mix is not None:
        from .mixture_text import mixture_text

        lines += ["", "Mixture estimate:", mixture_text(mix)]
    cautions = list(ranking.cautions) + (list(full.cautions) if full is not None else [])
    if cautions:
        lines += ["", "Cautions:"] + [f"  - {c}" for c in cautions]
    safety = full.safety_notes if full is not None else ()
    if safety:
        lines += ["", "Safety (reagent):"] + [f"  - {s}" for s in safety]
    adv = full.caution if full is not None else None
    if adv:
        lines += ["", adv]
    files = inputs.get("files") or {}
    if files:
        lines += ["", "Input files (SHA-256):"]
        lines += [f"  {k}: {f['name']}  {f['sha256']}" for k, f in files.items()]
    vers = full.versions if full is not None else None
    if vers:
        lines.append("Versions: " + "; ".join(f"{k} {v}" for k, v in vers.items()
                                              if v and k not in ("error_model_fitted_on", "prediction_tables_sha256")))
    return "\n".join(lines)
