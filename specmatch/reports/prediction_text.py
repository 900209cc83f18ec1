"""Readable table of a prediction, for ``specmatch predict``."""

from __future__ import annotations

from ..prediction.model import Prediction


def _atoms(atoms: tuple[int, ...]) -> str:
    return ",".join(str(a) for a in atoms)


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
    try:
        from .peaktext import predicted_peak_text

        lines += ["", predicted_peak_text(pred, nucleus="1H", frequency_mhz=frequency_mhz, solvent=solvent),
                  predicted_peak_text(pred, nucleus="13C", frequency_mhz=frequency_mhz / 4, solvent=solvent)]
    except ImportError:  # peak text lands with the 1H tables
        pass
    if pred.warnings:
        lines += ["", "Warnings:"] + [f"  - {w}" for w in pred.warnings]
    return "\n".join(lines)
