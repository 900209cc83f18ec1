"""Readable terminal tables: a measured peak list (``specmatch peaks``) and a prediction
(``specmatch predict``). Journal-style peak text is in :mod:`.journal_text`."""

from __future__ import annotations

from ..prediction.types import Prediction
from ..spectra.types import PeakList
from .journal_text import predicted_peak_text

__all__ = ["peaklist_table", "prediction_table"]


def _fmt(v: float | None, spec: str) -> str:
    return "" if v is None else format(v, spec)


def peaklist_table(peaklist: PeakList) -> str:
    """Header (nucleus, frequency, solvent, reference), then multiplets (1H) or lines (13C).

    Flagged lines (solvent, water, TMS, grease, impurities) are listed with their
    flag so a chemist sees what was set aside and why.
    """
    freq = f"{peaklist.frequency_mhz:.2f} MHz" if peaklist.frequency_mhz else "frequency not given"
    exp = f", {peaklist.experiment}" if peaklist.experiment != "1D" else ""
    lines = [
        f"{peaklist.nucleus}{exp}  {freq}  solvent: {peaklist.solvent or 'not given'}",
        f"source: {peaklist.source}",
        f"reference: {peaklist.reference or 'not stated'}",
        "",
    ]
    if peaklist.multiplets:
        head = {"percent": "int/%", "H": "int/H"}.get(peaklist.integral_unit, "integral")
        lines.append(f"  {'shift/ppm':>9}  {'range/ppm':<15}{head:>9}  {'mult':<6}{'J/Hz':<20}flag")
        for m in peaklist.multiplets:
            rng = f"{m.range[1]:.3f}-{m.range[0]:.3f}" if m.range[0] != m.range[1] else ""
            js = ", ".join(f"{j:.1f}" for j in m.j_hz)
            lines.append(f"  {m.shift:>9.3f}  {rng:<15}{_fmt(m.integral, '>9.2f'):>9}  "
                         f"{m.multiplicity:<6}{js:<20}{m.flag or ''}")
        n_lines = len(peaklist.peaks)
        lines.append("")
        lines.append(f"  {len(peaklist.multiplets)} multiplets from {n_lines} lines")
    else:
        dept = any(p.sign is not None for p in peaklist.peaks)
        head = f"  {'shift/ppm':>9}  {'intensity':>9}"
        if dept:
            head += f"  {'DEPT-135':<10}"
        lines.append(head + "  flag")
        for p in peaklist.peaks:
            row = f"  {p.shift:>9.2f}  {_fmt(p.intensity, '>9.1f'):>9}"
            if dept:
                hint = {1: "up (CH/CH3)", -1: "down (CH2)"}.get(p.sign or 0, "")
                row += f"  {hint:<10}"
            lines.append(row + f"  {p.flag or ''}")
        lines.append("")
        lines.append(f"  {len(peaklist.peaks)} lines, {len(peaklist.compound_peaks())} not flagged")
    if peaklist.warnings:
        lines += ["", "Notes:"] + [f"  - {w}" for w in peaklist.warnings]
    return "\n".join(lines)


def _atoms(atoms: tuple[int, ...]) -> str:
    # users read atom numbers from 1 (the contract's indices are RDKit's, from 0)
    return ",".join(str(a + 1) for a in atoms)


def prediction_table(pred: Prediction, *, frequency_mhz: float = 400.0, solvent: str = "CDCl3") -> str:
    """Carbons and proton groups as aligned text, then the journal-style peak text."""
    lines = [f"Structure: {pred.smiles}   ({pred.canonical_smiles})", "", "13C (predicted)"]
    lines.append(f"  {'atoms':<12}{'shift/ppm':>10}{'sigma':>8}{'H':>4}  environment")
    for c in sorted(pred.carbons, key=lambda c: -c.shift):
        lines.append(f"  {_atoms(c.atoms):<12}{c.shift:>10.1f}{c.sigma:>8.1f}{c.hydrogens:>4}  "
                     f"{c.environment}{'  (fallback)' if c.fallback else ''}")
    lines += ["", "1H (predicted)"]
    lines.append(f"  {'atoms':<12}{'shift/ppm':>10}{'sigma':>8}{'nH':>4}  {'mult':<6}{'J/Hz':<16}note")
    for p in sorted(pred.protons, key=lambda p: -p.shift):
        note = "exchangeable" if p.exchangeable else ("diastereotopic" if p.diastereotopic else "")
        j = ", ".join(f"{x:.1f}" for x in p.j_hz)
        lines.append(f"  {_atoms(p.atoms):<12}{p.shift:>10.2f}{p.sigma:>8.2f}{p.count:>4}  "
                     f"{p.multiplicity:<6}{j:<16}{note}")
    lines += ["", predicted_peak_text(pred, nucleus="1H", frequency_mhz=frequency_mhz, solvent=solvent),
              predicted_peak_text(pred, nucleus="13C", frequency_mhz=frequency_mhz / 4, solvent=solvent)]
    if pred.warnings:
        lines += ["", "Warnings:"] + [f"  - {w}" for w in pred.warnings]
    return "\n".join(lines)
