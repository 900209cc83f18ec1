"""Readable table of an enumeration, for ``specmatch enumerate``."""

from __future__ import annotations

from ..reactions.types import Enumeration


def enumeration_table(result: Enumeration, *, pathways: bool = True) -> str:
    """Candidates as aligned text (prior, role, SMILES, label), then each pathway and the notes."""
    r = result.reagent
    typed = result.substrate_input or result.substrate
    stereo = f"; {', '.join(result.substrate_stereo)}" if result.substrate_stereo else ""
    shown = typed if typed == result.substrate else f"{typed} (canonical {result.substrate})"
    lines = [f"Substrate: {shown}{stereo}    Reagent: {r.name} ({r.description})",
             "Atom numbers C1, C2, ... count the heavy atoms of the substrate SMILES as typed, from 1."]
    if result.alcohol:
        lines.append(f"Alcohol: {result.alcohol}")
    lines.append(f"Ranked by: {result.ranked_by}")
    lines.append("")
    width = max([len(c.smiles) for c in result.candidates] + [6])
    lines.append(f"  {'#':>2}  {'prior':>6}  {'role':<14}{'SMILES':<{width + 2}}{'config':<7}label")
    for i, c in enumerate(result.candidates, 1):
        role = "not expected" if c.role.startswith("not expected") else c.role
        config = "meso" if c.configuration == "meso" else "rac" if c.racemic else ""
        lines.append(f"  {i:>2}  {c.prior:>6.3f}  {role:<14}{c.smiles:<{width + 2}}{config:<7}{c.label}")
    if any(c.racemic or c.configuration for c in result.candidates):
        lines.append("  (config: rac = racemic, the SMILES shows one enantiomer of the pair; meso = achiral "
                     "diastereomer)")
    if any(c.role.startswith("not expected") for c in result.candidates):
        lines.append("  ('not expected' = not expected under these conditions; listed for contrast)")
    if pathways:
        lines += ["", "Pathways (cation energies in kcal/mol, 0 = tert-alkyl cation, ring strain included;",
                  "atom numbers as in the header):"]
        for i, c in enumerate(result.candidates, 1):
            lines.append(f"  {i:>2}. {c.smiles}  [{c.label}]")
            for step in c.pathway:
                lines.append(f"        - {step}")
            for note in c.notes:
                lines.append(f"        note: {note}")
    if result.warnings:
        lines += ["", "Warnings:"] + [f"  - {w}" for w in result.warnings]
    lines += ["", "Safety (reminders, not a risk assessment):"] + [f"  - {s}" for s in r.safety]
    lines += ["", "The priors come from a mechanism model; the spectra decide. Any identification is advisory "
                  "and must be confirmed by a qualified person with orthogonal data."]
    return "\n".join(lines)
