"""First-order multiplicity: coupling partner sets -> the trade's letters.

The n+1 rule with equal-J merging: partner sets whose coupling constants agree
within a tolerance are merged (their proton counts add), then each remaining
coupling contributes one letter. Patterns outside the usual vocabulary (s, d, t,
q, quint, sext, sept, dd, dt, td, tt, dq, qd, tq, qt, ddd) are reported as "m".
"""

from __future__ import annotations

from collections.abc import Sequence

#: merge couplings closer than this (Hz); at 400 MHz lines 1 Hz apart are rarely resolved
#: inside a multiplet (common practice)
MERGE_TOLERANCE_HZ = 1.5

#: couplings smaller than this are not resolved as splittings (common practice)
MIN_RESOLVED_J_HZ = 0.8

_SIMPLE = {0: "s", 1: "d", 2: "t", 3: "q", 4: "quint", 5: "sext", 6: "sept"}
_TWO = {(1, 1): "dd", (1, 2): "dt", (2, 1): "td", (2, 2): "tt", (1, 3): "dq", (3, 1): "qd",
        (2, 3): "tq", (3, 2): "qt"}


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
        letter = _SIMPLE.get(ns[0])
        return (letter, js) if letter else ("m", ())
    if len(merged) == 2 and ns in _TWO:
        return _TWO[ns], js
    if len(merged) == 3 and ns == (1, 1, 1):
        return "ddd", js
    return "m", ()
