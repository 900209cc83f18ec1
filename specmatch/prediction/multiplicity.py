"""Multiplicity letters: the one place that knows the trade's vocabulary.

Everything that writes, reads or counts multiplicity letters (the 1H predictor,
peak picking, peak-list readers, solvent patterns, scoring, mixture analysis,
reports) takes them from here:

- :data:`LETTER_FOR_PARTNERS` — n equivalent partners -> letter (n + 1 lines),
- :data:`PARTNERS_FOR_LETTER` and :data:`N_LINES` — the reverse, with the common
  alternative spellings found in users' files (hept, p, pent),
- :data:`NO_J_LETTERS` — letters that carry no coupling constant,
- :func:`normalise` and :func:`partners_of` for observed text,
- :func:`multiplicity` — coupling partner sets -> letters (first-order analysis).

The n+1 rule with equal-J merging: partner sets whose coupling constants agree
within a tolerance are merged (their proton counts add), then each remaining
coupling contributes one letter. Patterns outside the usual vocabulary (s, d, t,
q, quint, sext, sept, dd, dt, td, tt, dq, qd, tq, qt, ddd) are reported as "m".
"""

from __future__ import annotations

import re
from collections.abc import Sequence

#: merge couplings closer than this (Hz); at 400 MHz lines 1 Hz apart are rarely resolved
#: inside a multiplet (common practice)
MERGE_TOLERANCE_HZ = 1.5

#: couplings smaller than this are not resolved as splittings (common practice)
MIN_RESOLVED_J_HZ = 0.8

#: n equivalent partners -> the trade's letter (n + 1 lines)
LETTER_FOR_PARTNERS: dict[int, str] = {0: "s", 1: "d", 2: "t", 3: "q", 4: "quint", 5: "sext", 6: "sept"}
#: other spellings met in peak lists and papers -> our letters
ALIASES: dict[str, str] = {"hept": "sept", "p": "quint", "pent": "quint", "brs": "br s", "bs": "br s"}
#: letter (our spelling or an alias) -> number of equivalent partners
PARTNERS_FOR_LETTER: dict[str, int] = {
    **{v: k for k, v in LETTER_FOR_PARTNERS.items()},
    **{a: {v: k for k, v in LETTER_FOR_PARTNERS.items()}[t] for a, t in ALIASES.items() if t != "br s"},
}
#: letter -> number of lines of a first-order multiplet
N_LINES: dict[str, int] = {letter: n + 1 for letter, n in PARTNERS_FOR_LETTER.items()}
#: letters that carry no coupling constant
NO_J_LETTERS = frozenset({"s", "br s", "m", "br", "br m"})
#: two- and three-letter first-order patterns we write
_TWO = {(1, 1): "dd", (1, 2): "dt", (2, 1): "td", (2, 2): "tt", (1, 3): "dq", (3, 1): "qd",
        (2, 3): "tq", (3, 2): "qt"}
_BY_LENGTH = tuple(sorted(PARTNERS_FOR_LETTER.items(), key=lambda kv: -len(kv[0])))


def normalise(text: str) -> str:
    """Observed multiplicity text in our spelling (``"Hept"`` -> ``"sept"``, ``"brs"`` -> ``"br s"``)."""
    m = re.sub(r"\s+", " ", text.strip().lower())
    if m.replace(" ", "") in ALIASES:
        return ALIASES[m.replace(" ", "")]
    return re.sub(r"hept|pent", lambda g: ALIASES[g.group(0)], m)


def partners_of(text: str) -> int | None:
    """Total equivalent partners of a first-order letter string (``"dq"`` -> 4); None for m / br."""
    m = (text or "").strip().lower()
    if not m or "m" in m or "br" in m:
        return None
    n = 0
    while m:
        for letters, partners in _BY_LENGTH:
            if m.startswith(letters):
                n += partners
                m = m[len(letters):]
                break
        else:
            return None
    return n


def merge_couplings(
    couplings: Sequence[tuple[int, float]], tolerance_hz: float = MERGE_TOLERANCE_HZ
) -> list[tuple[int, float]]:
    """Merge partner sets with nearly equal J.

    Parameters
    ----------
    couplings : sequence of (n_partner_protons, j_hz)
        First-order coupling partners.
    tolerance_hz : float
        Couplings whose J differ by less than this from the running cluster mean merge.

    Returns
    -------
    list of (n, j_hz)
        Largest J first; J of a merged set is the count-weighted mean.
    """
    items = sorted(((n, abs(j)) for n, j in couplings if n > 0 and abs(j) >= MIN_RESOLVED_J_HZ),
                   key=lambda t: -t[1])
    merged: list[list[float]] = []  # [n, weighted j sum]
    for n, j in items:
        if merged and abs(merged[-1][1] / merged[-1][0] - j) < tolerance_hz:
            merged[-1][0] += n
            merged[-1][1] += n * j
        else:
            merged.append([n, n * j])
    return [(int(n), s / n) for n, s in merged]


def multiplicity(
    couplings: Sequence[tuple[int, float]], *, exchangeable: bool = False,
    tolerance_hz: float = MERGE_TOLERANCE_HZ,
) -> tuple[str, tuple[float, ...]]:
    """Multiplicity letters and the J values that the letters stand for.

    Parameters
    ----------
    couplings : sequence of (n_partner_protons, j_hz)
    exchangeable : bool
        Exchange-broadened protons (OH) are reported as "br s" whatever the partners.

    Returns
    -------
    (str, tuple of float)
        e.g. ``("q", (7.0,))``, ``("dd", (17.0, 10.0))``; ``("m", ())`` when too complex.

    Examples
    --------
    >>> multiplicity([(3, 7.0), (2, 7.0)])
    ('sext', (7.0,))
    >>> multiplicity([(1, 17.0), (1, 10.0)])
    ('dd', (17.0, 10.0))
    """
    if exchangeable:
        return "br s", ()
    merged = merge_couplings(couplings, tolerance_hz)
    js = tuple(round(j, 1) for _, j in merged)
    ns = tuple(n for n, _ in merged)
    if len(merged) == 0:
        return "s", ()
    if len(merged) == 1:
        letter = LETTER_FOR_PARTNERS.get(ns[0])
        return (letter, js) if letter else ("m", ())
    if len(merged) == 2 and ns in _TWO:
        return _TWO[ns], js
    if len(merged) == 3 and ns == (1, 1, 1):
        return "ddd", js
    return "m", ()
