"""Journal-style peak text for predicted or measured NMR lists.

Examples of the format (common practice in experimental sections)::

    1H NMR (400 MHz, CDCl3) δ 4.12 (q, J = 7.1 Hz, 2H), 1.25 (t, J = 7.1 Hz, 3H).
    13C NMR (101 MHz, CDCl3) δ 171.1, 60.4, 21.0, 14.2.

Signals are listed from high to low shift; 1H shifts with two decimals, 13C with
one; multiplets without a first-order analysis ("m") are given as a range.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from ..errors import SpecmatchError
from ..prediction.types import Prediction, ProtonGroup
from ..spectra.types import Multiplet, Peak, PeakList

__all__ = ["measured_peak_text", "predicted_peak_text"]

_NUCLEI = ("1H", "13C")
from ..prediction.multiplicity import NO_J_LETTERS as _NO_J  # noqa: E402  (one owner of the letters)


def _check_nucleus(nucleus: str) -> None:
    if nucleus not in _NUCLEI:
        raise SpecmatchError(f"peak text is written for '1H' or '13C', not '{nucleus}'")


def _header(nucleus: str, frequency_mhz: float | None, solvent: str | None) -> str:
    parts = []
    if frequency_mhz:
        parts.append(f"{frequency_mhz:.0f} MHz")
    if solvent:
        parts.append(solvent)
    inside = f" ({', '.join(parts)})" if parts else ""
    return f"{nucleus} NMR{inside} δ "


def _finish(head: str, items: list[str]) -> str:
    return head + (", ".join(items) if items else "no signals") + "."


def _j_text(j_hz: Iterable[float]) -> str:
    js = [f"{j:.1f}" for j in j_hz]
    return f"J = {', '.join(js)} Hz" if js else ""


def _signal(shift: float, multiplicity: str, j_hz: Sequence[float], n_h: int | None,
            shift_range: tuple[float, float] | None) -> str:
    mult = multiplicity or "m"
    fields = [mult]
    if mult not in _NO_J and j_hz:
        fields.append(_j_text(j_hz))
    if n_h:
        fields.append(f"{n_h}H")
    if mult == "m" and shift_range is not None:
        lo, hi = sorted(shift_range)
        if round(hi - lo, 2) >= 0.01:
            return f"{lo:.2f}-{hi:.2f} ({', '.join(fields)})"
    return f"{shift:.2f} ({', '.join(fields)})"


def _predicted_range(group: ProtonGroup, frequency_mhz: float) -> tuple[float, float]:
    from ..prediction.simulate import sticks_1h

    pos, _ = sticks_1h(group, frequency_mhz)
    return float(pos.min()), float(pos.max())


def predicted_peak_text(pred: Prediction, nucleus: str = "1H", frequency_mhz: float = 400.0,
                        solvent: str = "CDCl3") -> str:
    """Journal-style text of a prediction.

    Parameters
    ----------
    pred : Prediction
    nucleus : {"1H", "13C"}
    frequency_mhz : float
        Spectrometer frequency of this nucleus (e.g. 400 for 1H, 101 for 13C);
        sets the width of predicted multiplets given as ranges.
    solvent : str

    Returns
    -------
    str
        e.g. ``"1H NMR (400 MHz, CDCl3) δ 4.12 (q, J = 7.0 Hz, 2H), 1.26 (t, J = 7.0 Hz, 3H)."``
    """
    _check_nucleus(nucleus)
    head = _header(nucleus, frequency_mhz, solvent)
    if nucleus == "13C":
        return _finish(head, [f"{c.shift:.1f}" for c in sorted(pred.carbons, key=lambda c: -c.shift)])
    items = []
    for g in sorted(pred.protons, key=lambda g: -g.shift):
        rng = _predicted_range(g, frequency_mhz) if g.multiplicity == "m" else None
        items.append(_signal(g.shift, g.multiplicity, g.j_hz, g.count, rng))
    return _finish(head, items)


def measured_peak_text(multiplets_or_peaks: Sequence[Multiplet] | Sequence[Peak] | PeakList, nucleus: str,
                       frequency_mhz: float | None, solvent: str | None, *,
                       formula: str | None = None, total_h: float | None = None) -> str:
    """Journal-style text of a measured list (multiplets for 1H, peaks for 13C).

    Parameters
    ----------
    multiplets_or_peaks : sequence of Multiplet or Peak, or a PeakList
        Flagged entries (solvent, water, TMS, grease, impurities) are left out.
        Multiplets analysed as "m" are written as ranges (``1.20-1.35 (m, 4H)``);
        integrals are rounded to whole protons. Integrals of a processed spectrum are
        relative: they are written only when `formula` or `total_h` scales them.
    nucleus : {"1H", "13C"}
    frequency_mhz : float or None
    solvent : str or None
    formula, total_h : str or float, optional
        The compound's formula (or SMILES) or H count, to scale 1H integrals to protons
        (:func:`specmatch.spectra.scale_integrals`).
    """
    _check_nucleus(nucleus)
    items_in: Sequence = multiplets_or_peaks
    relative = False
    if isinstance(multiplets_or_peaks, PeakList):
        pl = multiplets_or_peaks
        if nucleus == "1H" and (formula or total_h):
            from ..spectra.processing import scale_integrals

            pl = scale_integrals(pl, total_h, formula=formula)
        # Relative integrals (percent of the signal) are not proton counts: left out
        # unless the compound's formula or H count scales them.
        relative = pl.integral_unit == "percent"
        items_in = pl.compound_multiplets() if (nucleus == "1H" and pl.multiplets) else pl.compound_peaks()
    for x in items_in:
        if not isinstance(x, (Multiplet, Peak)):
            raise SpecmatchError(
                f"peak text needs Multiplet or Peak entries, got {type(x).__name__}; "
                "pick peaks or analyse multiplets first"
            )
    items_in = [x for x in items_in if x.flag is None]
    head = _header(nucleus, frequency_mhz, solvent)
    items = []
    for x in sorted(items_in, key=lambda x: -x.shift):
        if nucleus == "13C" or isinstance(x, Peak):
            items.append(f"{x.shift:.1f}" if nucleus == "13C" else f"{x.shift:.2f}")
            continue
        n_h = int(round(x.integral)) if x.integral is not None and x.integral > 0 and not relative else None
        items.append(_signal(x.shift, x.multiplicity, x.j_hz, n_h, x.range))
    return _finish(head, items)
