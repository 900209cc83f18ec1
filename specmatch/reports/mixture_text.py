"""Readable text of a product-ratio estimate, for ``specmatch mixture``."""

from __future__ import annotations

from ..identification.mixture import MixtureEstimate


def _pct(x: float) -> str:
    return f"{100 * x:5.1f}%"


def _range(lo: float, hi: float) -> str:
    return f"{hi:.2f} ppm" if abs(hi - lo) < 0.005 else f"{hi:.2f}-{lo:.2f} ppm"


def mixture_text(estimate: MixtureEstimate) -> str:
    """The ratio, the wording, per-candidate fractions, carrying signals and warnings."""
    e = estimate
    names = e.names
    lines = [f"Product ratio ({' : '.join(names)}) = {e.ratio_text}",
             f"{names[e.major]} is the major product: {e.selectivity}."]
    if e.selectivity_note:
        lines.append(f"  note: {e.selectivity_note}")
    thr = ", ".join(f">= {100 * t:.0f}:{100 - 100 * t:.0f} {w}" for t, w in e.thresholds)
    lines.append(f"  wording thresholds on the major fraction (common practice): {thr}, otherwise not")
    lines += ["", f"  {'candidate':<34}{'fraction':>9}{'1 sd':>8}   95% interval"]
    for n, f, u, (lo, hi) in zip(names, e.fractions, e.uncertainties, e.interval_95):
        lines.append(f"  {n[:33]:<34}{_pct(f):>9}{100 * u:7.1f}%   {_pct(lo).strip()} - {_pct(hi).strip()}")
    lines += ["", f"Method: {e.method}", f"Uncertainty: {e.uncertainty_method}"]
    if e.carrying_signals:
        lines += ["", "Signals carrying the estimate (resolved, >= 95% from one candidate):"]
        for c in e.carrying_signals:
            lo, hi = c.range_ppm
            lines.append(f"  {names[c.candidate][:28]:<28} {_range(lo, hi):<16} {c.groups}")
    if e.integral_ratio is not None:
        ir = e.integral_ratio
        lines += ["", f"Integral ratio (diagnostic signals, per proton) = {ir.ratio_text}"
                      f"{'   DISAGREES with the fit' if e.disagreement else '   agrees with the fit'}"]
        for s in ir.signals:
            lo, hi = s.range_ppm
            lines.append(f"  {names[s.candidate][:28]:<28} {_range(lo, hi):<16} {s.protons}H: {s.groups}")
    if e.warnings:
        lines += ["", "Warnings:"]
        lines += [f"  - {w}" for w in e.warnings]
    lines += ["", "Advisory: confirm the ratio with an independent method (e.g. GC) before relying on it."]
    if e.source:
        lines.append(f"Source: {e.source}")
    return "\n".join(lines)
