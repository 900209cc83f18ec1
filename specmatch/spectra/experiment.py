"""What experiment a spectrum is, and which solvent it was run in, from what the file records.

The experiment comes from the pulse program (JCAMP-DX ``.PULSE SEQUENCE``,
``$PULPROG``, or the instrument's parameter files), the nucleus and the data
themselves (a DEPT-135 has negative CH2 lines); a title is only a hint, because
titles are free text ("1H, DEPT planned", "(no DEPT run)"). Where the records
disagree the result says so in a warning instead of refusing the file.
"""

from __future__ import annotations

import re

import numpy as np

__all__ = ["classify_experiment", "has_negative_lines", "resolve_solvent"]

# Pulse-program names: DEPT variants carry 'dept' (often with the angle, e.g.
# deptsp135, dept135, deptqgpsp); 1D programs are zg*, s2pul, presat ... (common practice).
_DEPT_RE = re.compile(r"dept", re.I)
_DEPTQ_RE = re.compile(r"deptq", re.I)
_ANGLE_RE = re.compile(r"dept\D{0,6}(45|90|135)", re.I)
_TITLE_NEGATED = re.compile(r"\b(no|without|not|non|skip(ped)?)\W{0,3}(a\W+)?dept", re.I)


def has_negative_lines(y: np.ndarray) -> bool:
    """True when the trace holds real negative lines (beyond noise and baseline).

    A line counts when it reaches below the median by more than 10 noise units and
    5% of the tallest positive line (common practice for a phased spectrum).
    """
    y = np.asarray(y, dtype=float)
    y = y[np.isfinite(y)]
    if len(y) < 8:
        return False
    s = y - np.median(y)
    noise = 1.4826 * float(np.median(np.abs(s))) + 1e-300
    return bool(-s.min() > max(10.0 * noise, 0.05 * max(float(s.max()), 0.0)))


def classify_experiment(nucleus: str | None, pulse_program: str | None, title: str | None,
                        intensity: np.ndarray | None) -> tuple[str, list[str]]:
    """The experiment ("1D", "DEPT-135", "DEPTQ-135", "DEPT-90", "DEPT-45") and notes.

    Parameters
    ----------
    nucleus
        Observed nucleus ("1H", "13C", ...).
    pulse_program
        The recorded pulse program or sequence name, if any.
    title
        The file's title (a hint only).
    intensity
        The spectrum's ordinates, to look for negative lines.

    Returns
    -------
    (experiment, notes)
        Notes become warnings in the result (conflicts, guesses).
    """
    notes: list[str] = []
    prog = (pulse_program or "").strip().strip("<>").strip()
    title_txt = (title or "").strip()
    title_dept = bool(_DEPT_RE.search(title_txt)) and not _TITLE_NEGATED.search(title_txt)
    negative = has_negative_lines(intensity) if intensity is not None else None
    if prog:
        if _DEPT_RE.search(prog):
            if nucleus != "13C":
                notes.append(f"the pulse program '{prog}' is a DEPT program but the observed nucleus "
                             f"is {nucleus}; read as a 1D {nucleus} spectrum")
                return "1D", notes
            if _DEPTQ_RE.search(prog):
                return "DEPTQ-135", notes
            m = _ANGLE_RE.search(prog)
            angle = m.group(1) if m else "135"
            if not m:
                notes.append(f"the pulse program '{prog}' is a DEPT program without its angle; "
                             "DEPT-135 assumed")
            return f"DEPT-{angle}", notes
        if title_dept:
            notes.append(f"the title mentions DEPT but the pulse program '{prog}' is not a DEPT "
                         f"program; read as a 1D {nucleus} spectrum")
        return "1D", notes
    # No pulse program recorded: the nucleus and the data decide, the title hints.
    if title_dept:
        if nucleus != "13C":
            notes.append(f"the title mentions DEPT but the spectrum is {nucleus}; read as 1D")
            return "1D", notes
        if negative:
            notes.append("no pulse program recorded; DEPT-135 taken from the title and the "
                         "negative lines")
            return "DEPT-135", notes
        notes.append("the title mentions DEPT but no pulse program is recorded and no line "
                     "points down; read as a 1D 13C spectrum (give --dept135 if it is a DEPT-135)")
    return "1D", notes


_NUMERIC = re.compile(r"^\s*[+-]?\d+(\.\d*)?\s*$")


def resolve_solvent(declared: str | None, explained: str | None) -> tuple[str | None, list[str]]:
    """The solvent name from the header value and, for numeric codes, from what the
    file itself says elsewhere (an embedded parameter file naming the solvent).

    Returns
    -------
    (solvent or None, notes)
    """
    notes: list[str] = []
    raw = (declared or "").strip().strip("<>").strip()
    expl = (explained or "").strip().strip("<>").strip() or None
    if expl and _NUMERIC.match(expl):
        expl = None
    if raw and _NUMERIC.match(raw):
        if expl:
            notes.append(f"the solvent is recorded as the code '{raw}'; the file's parameter "
                         f"block names it {expl}")
            return expl, notes
        notes.append(f"the solvent is recorded as the code '{raw}', which the file does not "
                     "explain; no solvent lines flagged (give --solvent)")
        return None, notes
    if raw:
        return raw, notes
    return expl, notes
