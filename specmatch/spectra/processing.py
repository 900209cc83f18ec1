"""From a processed 1D spectrum to a peak list: pure functions on arrays.

Steps of :func:`process_spectrum`: check that nucleus and range agree, baseline
correction, robust noise (MAD), peak picking in noise units with parabolic
interpolation, referencing (TMS, else the residual solvent line with its
multiplet pattern), flags for solvent / TMS / water / grease / impurities, and
for 1H multiplet grouping, integrals and first-order analysis.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import SpecmatchError
from .types import Multiplet, Peak, PeakList, Spectrum
from .solvents import SolventLine, canonical_solvent, lines_for, pattern_ppm

# Tolerances (ppm) for recognising table lines after referencing; common practice.
TOL_PPM = {"1H": 0.03, "13C": 0.12}
SOLVENT_TOL_PPM = {"1H": 0.02, "13C": 0.08}
REFERENCE_WINDOW_PPM = {"1H": 0.10, "13C": 1.0}
WATER_WINDOW_PPM = 0.06  # water moves with temperature and concentration
MAX_J_HZ = 22.0  # lines further apart than this are not one multiplet
MIN_SEPARATION_HZ = 8.0  # a resolved pattern this far from a complex multiplet stands alone
WEAK_FRACTION = 0.5  # impurity lines must be weaker than half the median signal

_SPAN = {"1H": (0.0, 35.0), "13C": (25.0, 400.0)}  # nuclei specmatch processes

# Real-data artefacts in 1H spectra (common practice unless a source is named).
#: 13C satellites sit at +-1J(CH)/2 around their parent line; 1J(CH) runs from about
#: 115 Hz (sp3) to 270 Hz (sp C-H) (Pretsch, Buehlmann, Badertscher, Structure
#: Determination of Organic Compounds, 4th ed. 2009, 1J(CH) table; from memory).
SATELLITE_HALF_J_HZ = (55.0, 135.0)
#: each satellite carries half of the 1.07% natural abundance of 13C: ~0.55% of
#: the parent line (wider window for line width and phase differences)
SATELLITE_FRACTION = (0.0015, 0.015)
#: the two satellites of a line are centred on it within this (13C isotope shift ~1 Hz)
SATELLITE_PAIR_TOL_HZ = 3.0
#: spinning sidebands: a few percent at most, at +-the spinning rate (5-60 Hz)
SIDEBAND_HZ = (5.0, 60.0)
SIDEBAND_FRACTION = 0.03
#: lines below FOOT_FRACTION of a line within FOOT_WINDOW_HZ (and below
#: FAR_FOOT_FRACTION of one within FAR_FOOT_WINDOW_HZ) are ripples on the foot of
#: that line (truncation wiggles, line-shape bumps), not signals of their own
FOOT_FRACTION = 0.015
FOOT_WINDOW_HZ = 25.0
FAR_FOOT_FRACTION = 0.004
FAR_FOOT_WINDOW_HZ = 150.0
#: a line must stand out from its flanking valleys by this fraction of its height
MIN_RELATIVE_PROMINENCE = 0.08
#: lines closer than this (Hz) are one unresolved line for first-order analysis
UNRESOLVED_HZ = 1.2
#: finest digitisation (Hz per point) at which 1H lines are picked on a lightly smoothed trace
SMOOTH_MAX_HZ_PER_POINT = 0.5
#: largest height ratio of neighbouring lines inside one multiplet (8:1 edge of a nonet, plus slack)
MAX_NEIGHBOUR_RATIO = 12.0
#: a named multiplet whose integral exceeds its lines' Lorentzian areas this many times is "m"
UNEXPLAINED_AREA_RATIO = 1.6
#: 1H multiplets below this share of the unflagged integral are flagged "trace"
TRACE_FRACTION = 0.003
#: most lines analysed per spectrum: the strongest are kept (a noise-picking limit)
MAX_LINES = 5000


# ------------------------------------------------------------------------- array steps
def baseline_correct(y: np.ndarray, *, segments: int = 64, order: int = 3) -> np.ndarray:
    """Subtract a smooth baseline: a polynomial through robust segment medians.

    The spectrum is cut into `segments` pieces; the median of each piece is a
    baseline estimate unless a signal fills most of it, and pieces whose median
    stands out (> 3 MAD from the fit) are dropped before the final fit.
    """
    n = len(y)
    if n < 4 * segments:
        return y - np.median(y)
    m = n // segments
    med = np.median(y[: m * segments].reshape(segments, m), axis=1)
    centres = (np.arange(segments) + 0.5) * m
    keep = np.ones(segments, dtype=bool)
    t = centres / n
    for _ in range(3):
        coef = np.polyfit(t[keep], med[keep], min(order, max(int(keep.sum()) - 1, 0)))
        resid = med - np.polyval(coef, t)
        mad = 1.4826 * np.median(np.abs(resid[keep] - np.median(resid[keep]))) + 1e-300
        new = np.abs(resid) <= 3 * mad
        if new.sum() < order + 2 or np.array_equal(new, keep):
            break
        keep = new
    return y - np.polyval(coef, np.arange(n) / n)


def noise_level(y: np.ndarray) -> float:
    """Robust noise standard deviation: 1.4826 x MAD, recomputed without signals."""
    med = np.median(y)
    sigma = 1.4826 * np.median(np.abs(y - med))
    quiet = np.abs(y - med) < 5 * sigma if sigma > 0 else np.ones(len(y), dtype=bool)
    if quiet.sum() > 16:
        sigma = 1.4826 * np.median(np.abs(y[quiet] - np.median(y[quiet])))
    return float(sigma)


@dataclass(frozen=True)
class PickedPeaks:
    """Peak positions and heights from :func:`pick_peaks` (index is fractional)."""

    index: np.ndarray  # fractional point index (interpolated)
    ppm: np.ndarray
    height: np.ndarray
    point: np.ndarray  # integer index of the maximum


def pick_peaks(ppm: np.ndarray, y: np.ndarray, *, threshold: float, sigma: float,
               negative: bool = False) -> PickedPeaks:
    """Local maxima above `threshold`, refined by parabolic interpolation.

    Maxima whose valley to a bigger neighbour is shallower than 3 noise units are
    noise on one line and are merged into it. With `negative`, minima below
    -`threshold` are returned as well (heights negative), for DEPT-135.
    """
    from scipy.signal import find_peaks

    idx_parts = []
    for sign in ((1.0, -1.0) if negative else (1.0,)):
        s = sign * y
        # Prominence (height above the higher of the two bounding valleys) keeps
        # noise bumps riding on the tail of a big line out of the list.
        idx, props = find_peaks(s, height=threshold, prominence=max(0.75 * threshold, 4.0 * sigma, 1e-12))
        # A maximum that stands out by only a few percent of its own height is a
        # ripple on the flank of a line (point-to-point wiggles of real data).
        idx = idx[props["prominences"] >= MIN_RELATIVE_PROMINENCE * s[idx]]
        idx = idx[(idx > 0) & (idx < len(s) - 1)]
        idx_parts.append(idx)
    idx = np.sort(np.concatenate(idx_parts)) if idx_parts else np.array([], dtype=int)
    if len(idx) == 0:
        e = np.array([], dtype=float)
        return PickedPeaks(e, e, e, np.array([], dtype=int))
    a, b, c = y[idx - 1], y[idx], y[idx + 1]
    den = a - 2 * b + c
    with np.errstate(divide="ignore", invalid="ignore"):
        p = np.where(den != 0, 0.5 * (a - c) / den, 0.0)
    p = np.clip(p, -0.5, 0.5)
    height = b - 0.25 * (a - c) * p
    frac = idx + p
    pos = np.interp(frac, np.arange(len(ppm)), ppm)
    return PickedPeaks(frac, pos, height, idx)


def _subset(p: PickedPeaks, sel: np.ndarray) -> PickedPeaks:
    return PickedPeaks(p.index[sel], p.ppm[sel], p.height[sel], p.point[sel])


# ------------------------------------------------------------------ real-data artefacts
def foot_lines(y: np.ndarray, point: np.ndarray, height: np.ndarray, hz_per_point: float) -> np.ndarray:
    """Mask of lines that are ripples on the foot of a much bigger line nearby.

    A line is a ripple when it is below FOOT_FRACTION of the tallest point within
    FOOT_WINDOW_HZ, or below FAR_FOOT_FRACTION of the tallest within
    FAR_FOOT_WINDOW_HZ. Linear time (running maximum over the points).
    """
    from scipy.ndimage import maximum_filter1d

    if len(point) == 0:
        return np.zeros(0, dtype=bool)
    hz = max(abs(hz_per_point), 1e-9)
    out = np.zeros(len(point), dtype=bool)
    for window, frac in ((FOOT_WINDOW_HZ, FOOT_FRACTION), (FAR_FOOT_WINDOW_HZ, FAR_FOOT_FRACTION)):
        half = int(min(max(1, round(window / hz)), len(y)))
        local = maximum_filter1d(y, size=2 * half + 1, mode="nearest")[point]
        out |= np.abs(height) < frac * local
    return out


def satellite_lines(hz: np.ndarray, height: np.ndarray, threshold: float) -> np.ndarray:
    """Mask of 13C satellites: line pairs at +-J(CH)/2 around a parent line, each
    SATELLITE_FRACTION of it (one side may hide under another line)."""
    n = len(hz)
    out = np.zeros(n, dtype=bool)
    if n < 3:
        return out
    order = np.argsort(hz)
    x, h = hz[order], np.abs(height[order])
    lo_j, hi_j = SATELLITE_HALF_J_HZ
    lo_f, hi_f = SATELLITE_FRACTION
    parents = np.flatnonzero(h * lo_f * 2 > threshold)
    parents = parents[np.argsort(-h[parents])][:400]
    for k in parents:
        hp = h[k]
        sides = []
        for sign in (-1.0, 1.0):
            a, b = sorted((x[k] + sign * lo_j, x[k] + sign * hi_j))
            i0, i1 = np.searchsorted(x, a), np.searchsorted(x, b, side="right")
            idx = np.arange(i0, i1)
            idx = idx[(h[idx] >= lo_f * hp) & (h[idx] <= hi_f * hp)]
            sides.append(idx)
        left, right = sides
        if len(left) and len(right):
            d = np.abs((x[right][None, :] - x[k]) - (x[k] - x[left][:, None]))
            r = h[left][:, None] / h[right][None, :]
            li, ri = np.nonzero((d <= SATELLITE_PAIR_TOL_HZ) & (r >= 0.4) & (r <= 2.5))
            if len(li):
                out[order[left[li]]] = True
                out[order[right[ri]]] = True
                continue
        # One satellite alone: its mirror image must lie under a clearly bigger line.
        for idx, sign in ((left, 1.0), (right, -1.0)):
            for i in idx:
                mirror = 2 * x[k] - x[i]
                m0, m1 = np.searchsorted(x, mirror - SATELLITE_PAIR_TOL_HZ), \
                    np.searchsorted(x, mirror + SATELLITE_PAIR_TOL_HZ, side="right")
                if m1 > m0 and np.max(h[m0:m1]) >= 3.0 * h[i] and not out[order[i]]:
                    out[order[i]] = True
    return out


def sideband_lines(hz: np.ndarray, height: np.ndarray, threshold: float) -> np.ndarray:
    """Mask of spinning sidebands: weak symmetric pairs at +-the spinning rate around
    strong lines; the rate must be seen around two or more parents."""
    n = len(hz)
    out = np.zeros(n, dtype=bool)
    if n < 5:
        return out
    order = np.argsort(hz)
    x, h = hz[order], np.abs(height[order])
    strong = np.flatnonzero(h * SIDEBAND_FRACTION > threshold)
    strong = strong[np.argsort(-h[strong])][:20]
    lo, hi = SIDEBAND_HZ
    found: list[tuple[float, int]] = []
    pairs: dict[int, list[tuple[float, int, int]]] = {}
    for k in strong:
        hp = h[k]
        i0, i1 = np.searchsorted(x, x[k] - hi), np.searchsorted(x, x[k] - lo, side="right")
        j0, j1 = np.searchsorted(x, x[k] + lo), np.searchsorted(x, x[k] + hi, side="right")
        left = np.arange(i0, i1)
        left = left[h[left] <= SIDEBAND_FRACTION * hp]
        right = np.arange(j0, j1)
        right = right[h[right] <= SIDEBAND_FRACTION * hp]
        if not (len(left) and len(right)):
            continue
        nu_l = x[k] - x[left][:, None]
        nu_r = x[right][None, :] - x[k]
        r = h[left][:, None] / h[right][None, :]
        li, ri = np.nonzero((np.abs(nu_l - nu_r) <= 0.6) & (r >= 1 / 3) & (r <= 3))
        for a, b in zip(li[:50], ri[:50]):
            i, j = int(left[a]), int(right[b])
            nu = 0.5 * (float(nu_l[a, 0]) + float(nu_r[0, b]))
            found.append((nu, int(k)))
            pairs.setdefault(int(k), []).append((nu, i, j))
    if not found:
        return out
    for nu, _ in sorted(found):
        parents = {k for v, k in found if abs(v - nu) <= 0.6}
        if len(parents) >= 2:
            for k in parents:
                for v, i, j in pairs[k]:
                    if abs(v - nu) <= 0.6:
                        out[order[i]] = out[order[j]] = True
    return out


# ------------------------------------------------------------------ first-order analysis
from ..prediction.multiplicity import LETTER_FOR_PARTNERS as _LETTER  # noqa: E402  (one owner of the letters)


def first_order(pos_hz: np.ndarray, height: np.ndarray, *, tol_hz: float = 0.5
                ) -> tuple[str, tuple[float, ...], float]:
    """First-order multiplicity and couplings of one multiplet (see :func:`_first_order`).

    When no coupling tree explains the lines, a run of equally spaced lines whose
    heights rise towards the centre is named as the apparent multiplet of that
    many lines (a "t" whose centre line is short or split by second-order effects).
    """
    got = _first_order(pos_hz, height, tol_hz=tol_hz)
    if got[0] != "m" or len(pos_hz) < 3:
        return got
    pos = np.asarray(pos_hz, dtype=float)
    h = np.abs(np.asarray(height, dtype=float))
    merged = _merge_unresolved(pos, h)
    if merged is not None and len(merged[0]) < len(pos):
        again = _first_order(merged[0], merged[1], tol_hz=tol_hz)
        if again[0] != "m":
            return again
        pos, h = merged
    apparent = _apparent_multiplet(pos, h, tol_hz)
    return apparent or got


def _merge_unresolved(pos: np.ndarray, h: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
    """Lines closer than UNRESOLVED_HZ merged into one (height-weighted centre, summed height)."""
    gaps = np.diff(pos)
    if not (gaps < UNRESOLVED_HZ).any():
        return None
    out_p, out_h = [pos[0]], [h[0]]
    for p, hh, g in zip(pos[1:], h[1:], gaps):
        if g < UNRESOLVED_HZ:
            tot = out_h[-1] + hh
            out_p[-1] = (out_p[-1] * out_h[-1] + p * hh) / tot
            out_h[-1] = tot
        else:
            out_p.append(p)
            out_h.append(hh)
    return np.array(out_p), np.array(out_h)


def _apparent_multiplet(pos: np.ndarray, h: np.ndarray, tol_hz: float
                        ) -> tuple[str, tuple[float, ...], float] | None:
    n = len(pos)
    if not 3 <= n <= 7:
        return None
    gaps = np.diff(pos)
    j = float(np.mean(gaps))
    if j < 2 * tol_hz or np.max(np.abs(gaps - j)) > max(tol_hz, 0.12 * j):
        return None
    hs = 0.5 * (h + h[::-1])  # the symmetric part (roofing tilts the rest)
    if np.max(np.abs(h - h[::-1]) / np.maximum(h, h[::-1])) > 0.5:
        return None
    half = hs[: (n + 1) // 2]
    if np.any(np.diff(half) < -0.1 * half[:-1]) or half[-1] < 1.15 * half[0]:
        return None
    # Heights within a factor of about 1.6 of the binomial pattern (second-order
    # effects shorten inner lines; a 1:5:1 is no triplet).
    from math import comb

    binom = np.array([comb(n - 1, i) for i in range(n)], dtype=float)
    ratio = (hs / hs[0]) / binom
    if np.any(ratio < 0.55) or np.any(ratio > 1.6):
        return None
    return _LETTER[n - 1], (round(j, 1),), 0.5 * float(pos[0] + pos[-1])


def _first_order(pos_hz: np.ndarray, height: np.ndarray, *, tol_hz: float = 0.5
                 ) -> tuple[str, tuple[float, ...], float]:
    """First-order multiplicity and couplings of one multiplet.

    The lines (ascending Hz) are split into intensity units of the outer line;
    couplings are then found one by one as the first unit not yet explained by
    the couplings found so far (each coupling doubles the set of line positions),
    and the pattern is accepted only if the rebuilt lines match all units.

    Returns
    -------
    (multiplicity, j_hz, centre_hz)
        e.g. ("q", (7.1, 7.1, 7.1) collapsed to (7.1,), centre); "m" and () when
        the pattern is not first order.
    """
    n = len(pos_hz)
    pos = np.asarray(pos_hz, dtype=float)
    h = np.abs(np.asarray(height, dtype=float))
    if n == 1:
        return "s", (), float(pos[0])
    centre = 0.5 * (pos[0] + pos[-1])
    if n > 64 or np.any(np.abs((pos - centre) + (pos[::-1] - centre)) > tol_hz):
        return "m", (), float(np.average(pos, weights=h))
    # Roofing tilts intensities; the symmetric mean removes the first-order tilt.
    hs = 0.5 * (h + h[::-1])
    ratio = np.max(np.abs(h - h[::-1]) / np.maximum(h, h[::-1]))
    if ratio > 0.5:
        return "m", (), float(np.average(pos, weights=h))
    w = hs / hs[0]
    wi = np.rint(w).astype(int)
    if np.any(wi < 1) or np.any(np.abs(w - wi) > 0.25 * np.maximum(wi, 1) + 0.1):
        return "m", (), float(np.average(pos, weights=h))
    total = int(wi.sum())
    if total & (total - 1) or total > 256:
        return "m", (), centre
    sym = centre + 0.5 * ((pos - centre) - (pos[::-1] - centre))
    units = np.repeat(sym - sym[0], wi)
    combo = np.array([0.0])
    js: list[float] = []
    while len(combo) < total:
        j = _first_unexplained(units, combo, tol_hz)
        if j is None or j < tol_hz:
            return "m", (), centre
        js.append(j)
        combo = np.sort(np.concatenate((combo, combo + j)))
    if len(combo) != len(units) or np.any(np.abs(np.sort(combo) - units) > tol_hz):
        return "m", (), centre
    js.sort(reverse=True)
    groups: list[list[float]] = []
    for j in js:
        if groups and abs(groups[-1][0] - j) <= tol_hz:
            groups[-1].append(j)
        else:
            groups.append([j])
    if len(groups) == 1:
        name = _LETTER.get(len(groups[0]), "m")
    elif len(groups) <= 4 and all(len(g) <= 3 for g in groups):
        name = "".join(_LETTER[len(g)] for g in groups)
    else:
        name = "m"
    if name == "m":
        return "m", (), centre
    return name, tuple(round(float(np.mean(g)), 1) for g in groups), centre


def _first_unexplained(units: np.ndarray, combo: np.ndarray, tol: float) -> float | None:
    """Smallest entry of the sorted multiset `units` not matched by `combo`."""
    i = k = 0
    c = np.sort(combo)
    while i < len(units):
        if k < len(c) and abs(units[i] - c[k]) <= tol:
            i += 1
            k += 1
        elif k < len(c) and c[k] < units[i] - tol:
            return None  # a predicted line that is not there
        else:
            return float(units[i])
    return None


# ---------------------------------------------------------------------------- pipeline
def check_nucleus_range(spectrum: Spectrum, claimed: str | None = None) -> None:
    """Raise if the spectrum's range does not fit its (claimed) nucleus."""
    nucleus = claimed or spectrum.nucleus
    if nucleus not in _SPAN:
        raise SpecmatchError(
            f"{spectrum.source}: nucleus '{nucleus}' is not supported; specmatch reads 1H and 13C spectra")
    if len(spectrum.ppm) == 0 or not np.all(np.isfinite(spectrum.ppm)):
        raise SpecmatchError(f"{spectrum.source}: the spectrum has no points or a broken ppm axis")
    lo_ppm, hi_ppm = float(np.min(spectrum.ppm)), float(np.max(spectrum.ppm))
    span = hi_ppm - lo_ppm
    if nucleus == "1H" and (span > 35.0 or lo_ppm > 25.0):
        raise SpecmatchError(
            f"{spectrum.source}: the spectrum runs from {lo_ppm:.0f} to {hi_ppm:.0f} ppm, outside any "
            "1H spectrum (about -1 to 14 ppm); is it a 13C spectrum? Give --nucleus 13C")
    # A 13C file zoomed to a region is fine; a full 1H window (about -1..14 ppm) is not.
    if nucleus == "13C" and 8.0 <= span < 25.0 and hi_ppm <= 20.0:
        raise SpecmatchError(
            f"{spectrum.source}: the spectrum runs from {lo_ppm:.1f} to {hi_ppm:.1f} ppm, the window of a "
            "1H spectrum, not 13C (about -10 to 230 ppm); is it a 1H spectrum? Give --nucleus 1H")


def process_spectrum(spectrum: Spectrum, *, solvent: str | None = None, snr: float = 8.0,
                     dept135: bool = False, total_h: float | None = None) -> PeakList:
    """Peak list (and 1H multiplets) of a processed spectrum.

    Parameters
    ----------
    spectrum
        Processed spectrum, ppm descending.
    solvent
        NMR solvent (any common name); default: the one the file names, else
        detected from the 13C solvent pattern.
    snr
        Peak threshold in noise standard deviations.
    dept135
        The spectrum is a DEPT-135 (CH/CH3 up, CH2 down); also implied by
        ``spectrum.experiment == "DEPT-135"``.
    total_h
        Normalise 1H integrals so the compound's multiplets add up to this.

    Returns
    -------
    PeakList
    """
    nucleus = spectrum.nucleus
    check_nucleus_range(spectrum)
    warnings: list[str] = list(spectrum.meta.get("warnings", ()) if spectrum.meta else ())
    experiment = spectrum.experiment
    if dept135 and nucleus != "13C":
        raise SpecmatchError(f"{spectrum.source}: DEPT-135 is a 13C experiment but the spectrum is {nucleus}")
    if dept135 and experiment not in ("DEPT-135", "1D"):
        warnings.append(f"the file records a {experiment} experiment but DEPT-135 was given; read as DEPT-135")
    if dept135 and experiment == "1D" and spectrum.meta.get("pulse_program"):
        warnings.append(f"the pulse program '{spectrum.meta['pulse_program']}' is not a DEPT program "
                        "but DEPT-135 was given; read as DEPT-135")
    if dept135:
        experiment = "DEPT-135"
    if experiment in ("DEPT-90", "DEPT-45"):
        raise SpecmatchError(
            f"{spectrum.source}: this is a {experiment} spectrum; specmatch uses 13C and DEPT-135 "
            "spectra (give a DEPT-135, or --dept135 if the file is one)")
    dept = experiment == "DEPT-135"
    both_phases = experiment in ("DEPT-135", "DEPTQ-135")
    if experiment == "DEPTQ-135":
        warnings.append("DEPTQ spectrum: lines of both phases are listed; the phases are not used to "
                        "count H (CH2 and quaternary carbons both point down)")
    solv = canonical_solvent(solvent) if solvent else canonical_solvent(spectrum.solvent, strict=False)
    if spectrum.solvent and not solv and not solvent:
        warnings.append(f"solvent '{spectrum.solvent}' named in the file is not in the solvent table; "
                        "no solvent lines flagged")
    file_solv = canonical_solvent(spectrum.solvent, strict=False)
    if solvent and file_solv and file_solv != solv:
        warnings.append(f"the file says {spectrum.solvent} but {solv} was given; {solv} used")
    ppm = np.asarray(spectrum.ppm, dtype=float)
    raw = np.asarray(spectrum.intensity, dtype=float)
    if len(ppm) < 8 or len(raw) != len(ppm):
        raise SpecmatchError(f"{spectrum.source}: a spectrum needs at least 8 points with one intensity each")
    if not np.all(np.isfinite(raw)) or not np.all(np.isfinite(ppm)):
        bad = ~np.isfinite(raw)
        if not np.all(np.isfinite(ppm)):
            raise SpecmatchError(f"{spectrum.source}: the ppm axis holds non-finite values")
        warnings.append(f"{int(bad.sum()):,} non-finite intensities were set to 0")
        raw = np.where(bad, 0.0, raw)
    if ppm[0] < ppm[-1]:
        ppm, raw = ppm[::-1], raw[::-1]
    y = baseline_correct(raw)
    if not both_phases and -np.min(y) > 2.0 * np.max(y):
        # Mostly negative lines in a 1D spectrum: phased 180 degrees off.
        y = -y
        warnings.append("the spectrum's lines point down (phase 180 degrees off); it was inverted")
    sigma = noise_level(y)
    ymax = float(np.max(np.abs(y))) if len(y) else 0.0
    if ymax == 0.0:
        raise SpecmatchError(f"{spectrum.source}: the spectrum is empty (all intensities are zero)")
    threshold = max(snr * sigma, 1e-4 * ymax)
    freq = spectrum.frequency_mhz
    hz_per_point = abs(float(ppm[1] - ppm[0])) * (freq or 400.0)
    y_pick = y
    if nucleus == "1H" and hz_per_point <= SMOOTH_MAX_HZ_PER_POINT:
        # Real traces often alternate point to point (a Nyquist-frequency ripple
        # from processing); a [1, 2, 1]/4 kernel removes it and moves no line
        # centre, and at this digitisation it merges no resolved lines.
        y_pick = np.convolve(y, np.array([0.25, 0.5, 0.25]), mode="same")
        sigma_pick = noise_level(y_pick)
        threshold = max(snr * sigma_pick, 1e-4 * ymax)
        sigma = sigma_pick
    picked = pick_peaks(ppm, y_pick, threshold=threshold, sigma=sigma, negative=both_phases)
    if len(picked.ppm) == 0:
        raise SpecmatchError(
            f"{spectrum.source}: no peak rises {snr:g} times above the noise; check the file "
            "or lower the threshold")
    if nucleus == "1H":
        ripple = foot_lines(y_pick, picked.point, picked.height, hz_per_point)
        if ripple.any() and not ripple.all():
            picked = _subset(picked, ~ripple)
    if len(picked.ppm) > MAX_LINES:
        keep = np.sort(np.argsort(-np.abs(picked.height))[:MAX_LINES])
        warnings.append(f"{len(picked.ppm):,} lines rise above the threshold; the {MAX_LINES:,} "
                        "strongest were kept (raise the threshold to pick fewer)")
        picked = _subset(picked, keep)
    if solv is None and nucleus == "13C" and not solvent:
        solv = _detect_solvent_13c(picked.ppm, freq)
        if solv:
            warnings.append(f"solvent {solv} recognised from its 13C pattern")
    offset, reference = _reference(picked.ppm, picked.height, nucleus, solv, freq)
    ppm_ref = picked.ppm + offset
    peak_flags = _flag_peaks(ppm_ref, nucleus, solv, freq)
    if nucleus == "1H" and freq:
        hz = ppm_ref * freq
        for mask, label in ((satellite_lines(hz, picked.height, threshold), "13C satellite"),
                            (sideband_lines(hz, picked.height, threshold), "spinning sideband")):
            for k in np.flatnonzero(mask):
                peak_flags[k] = peak_flags[k] or label
    if nucleus == "13C":
        return _carbon_list(spectrum, ppm_ref, picked.height, peak_flags, solv, reference, dept,
                            warnings, experiment=experiment)
    return _proton_list(spectrum, ppm, y, sigma, picked, ppm_ref, offset, peak_flags, solv,
                        reference, total_h, warnings)


def _reference(pos: np.ndarray, height: np.ndarray, nucleus: str, solvent: str | None,
               freq: float | None) -> tuple[float, str]:
    win = REFERENCE_WINDOW_PPM[nucleus]
    hmax = float(np.max(np.abs(height)))
    near0 = np.flatnonzero((np.abs(pos) <= win) & (np.abs(height) >= 0.02 * hmax))
    # TMS: the singlet nearest 0 ppm; in 1H it is the highest-field line.
    # (Compared with the significant lines only: TMS's own 13C satellites and
    # traces lie further upfield.)
    significant = pos[np.abs(height) >= 0.02 * hmax]
    if len(near0) and (nucleus == "13C" or pos[near0].min() <= significant.min() + 1e-9):
        k = near0[np.argmin(np.abs(pos[near0]))]
        off = -float(pos[k])
        return off, f"TMS at 0.00 ppm (axis moved by {off:+.3f} ppm)"
    if solvent:
        rows = [r for r in lines_for(solvent, nucleus) if r.kind == "solvent"]
        if nucleus == "1H":
            rows = [r for r in rows if r.group != "OH"] or rows
        best = None
        for row in rows:
            pat = pattern_ppm(row, freq)
            cand = np.flatnonzero((np.abs(pos - row.shift_ppm) <= win)
                                  & (np.abs(height) >= 0.005 * hmax))
            for k in cand:
                shift = row.shift_ppm - pos[k]
                if len(pat) > 1 and nucleus == "13C":
                    hits = sum(np.any(np.abs(pos + shift - p) <= 0.02) for p in pat)
                    if hits < (len(pat) + 1) // 2 + (1 if len(pat) > 2 else 0):
                        continue
                else:
                    hits = 1
                score = (hits, -abs(shift), abs(height[k]))
                if best is None or score > best[0]:
                    best = (score, float(shift), row)
            if best is not None:
                break
        if best is not None:
            _, off, row = best
            return off, (f"residual {row.compound} at {row.shift_ppm:.2f} ppm in {solvent} "
                         f"(Fulmer et al. 2010; axis moved by {off:+.3f} ppm)")
    return 0.0, "as in the file (no TMS or residual solvent line found)"


def _detect_solvent_13c(pos: np.ndarray, freq: float | None) -> str | None:
    from .solvents import SOLVENTS

    best, best_hits = None, 0
    for s in SOLVENTS:
        for row in lines_for(s, "13C"):
            if row.kind != "solvent" or row.multiplicity == "s":
                continue
            pat = pattern_ppm(row, freq)
            if len(pat) < 3:
                continue
            # Unreferenced spectra: try each line near the centre as the centre.
            for k in np.flatnonzero(np.abs(pos - row.shift_ppm) <= 0.5):
                sh = row.shift_ppm - pos[k]
                hits = sum(np.any(np.abs(pos + sh - p) <= 0.02) for p in pat)
                if hits == len(pat) and hits > best_hits:
                    best, best_hits = s, hits
    return best


def _flag_peaks(pos: np.ndarray, nucleus: str, solvent: str | None, freq: float | None) -> list[str | None]:
    """Peak-level flags: residual solvent lines (with pattern) and TMS."""
    flags: list[str | None] = [None] * len(pos)
    tol = SOLVENT_TOL_PPM[nucleus]
    for row in lines_for(solvent, nucleus):
        if row.kind not in ("solvent", "TMS"):
            continue
        for p in pattern_ppm(row, freq):
            for k in np.flatnonzero(np.abs(pos - p) <= tol):
                flags[k] = "solvent" if row.kind == "solvent" else "TMS"
    # A line at 0.00 is TMS whatever the table says for the solvent (spectra are
    # often referenced to TMS itself).
    for k in np.flatnonzero(np.abs(pos) <= tol):
        flags[k] = flags[k] or "TMS"
    return flags


def _impurity_matches(centres: np.ndarray, mults: list[str], sizes: np.ndarray, nucleus: str,
                      solvent: str | None, taken: list[str | None]) -> tuple[dict[int, str], list[str]]:
    """Flags for grease and impurities: every table line of the compound must be
    present (multiplicity compatible) and weak; strong matches only warn."""
    out: dict[int, str] = {}
    notes: list[str] = []
    if solvent is None:
        return out, notes
    tol = TOL_PPM[nucleus]
    free = np.array([t is None for t in taken])
    if not free.any():
        return out, notes
    median = float(np.median(np.abs(sizes[free])))
    by_compound: dict[str, list[SolventLine]] = {}
    for row in lines_for(solvent, nucleus):
        if row.kind in ("impurity", "grease"):
            by_compound.setdefault(row.compound, []).append(row)
    for compound, rows in by_compound.items():
        hit: list[int] = []
        missing = 0
        for row in rows:
            ok = np.flatnonzero(free & (np.abs(centres - row.shift_ppm) <= tol))
            if nucleus == "1H" and row.multiplicity != "m":
                want = {"s": ("s", "br s"), "br s": ("s", "br s", "m")}.get(row.multiplicity, (row.multiplicity,))
                ok = np.array([k for k in ok if mults[k] in want], dtype=int)
            if len(ok) == 0:
                missing += 1
                continue
            hit.append(int(ok[np.argmin(np.abs(centres[ok] - row.shift_ppm))]))
        if not hit:
            continue
        # Weak compared with the other signals (the candidate impurity's own lines
        # must not set the scale they are compared with).
        others = free.copy()
        others[hit] = False
        ref = float(np.median(np.abs(sizes[others]))) if others.any() else median
        weak = [k for k in hit if abs(sizes[k]) <= WEAK_FRACTION * ref]
        # With three or more lines, one may hide under (or merge with) a compound signal.
        allowance = 1 if len(rows) >= 3 else 0
        if missing + (len(hit) - len(weak)) <= allowance and weak:
            label = "grease" if rows[0].kind == "grease" else f"impurity:{compound}"
            for k in weak:
                out[k] = label
        elif missing == 0 and len(rows) > 1:
            notes.append(f"lines at {', '.join(f'{centres[k]:.2f}' for k in sorted(set(hit)))} ppm "
                         f"fit {compound} but are strong; not flagged")
    return out, notes


def _carbon_list(spectrum: Spectrum, pos: np.ndarray, height: np.ndarray, flags: list[str | None],
                 solvent: str | None, reference: str, dept: bool, warnings: list[str],
                 experiment: str = "1D") -> PeakList:
    imp, notes = _impurity_matches(pos, ["s"] * len(pos), np.abs(height), "13C", solvent, flags)
    compound = [abs(h) for h, f in zip(height, flags) if f is None] or [float(np.max(np.abs(height)))]
    scale = 100.0 / max(compound)
    peaks = []
    for k in np.argsort(-pos):
        flag = flags[k] or imp.get(int(k))
        sign = hyd = None
        if dept:
            sign = 1 if height[k] > 0 else -1
            hyd = 2 if sign < 0 else None  # up: CH or CH3 (odd number of H)
        peaks.append(Peak(shift=round(float(pos[k]), 3), intensity=round(float(height[k]) * scale, 2),
                          flag=flag, hydrogens=hyd, sign=sign))
    return PeakList(nucleus="13C", peaks=tuple(peaks), multiplets=(), frequency_mhz=spectrum.frequency_mhz,
                    solvent=solvent or spectrum.solvent, reference=reference, source=spectrum.source,
                    experiment="DEPT-135" if dept else experiment, warnings=tuple(warnings + notes))


def _proton_list(spectrum: Spectrum, ppm: np.ndarray, y: np.ndarray, sigma: float, picked: PickedPeaks,
                 pos: np.ndarray, offset: float, flags: list[str | None], solvent: str | None,
                 reference: str, total_h: float | None, warnings: list[str]) -> PeakList:
    freq = spectrum.frequency_mhz or 400.0
    if spectrum.frequency_mhz is None:
        warnings.append("no spectrometer frequency in the file; J values assume 400 MHz")
    dppm = abs(float(ppm[1] - ppm[0])) if len(ppm) > 1 else 1.0
    tol_hz = max(0.5, 1.5 * dppm * freq)
    order = np.argsort(picked.point)  # ppm descending == index ascending
    pts = picked.point[order]
    groups = _group(pos[order], picked.height[order], [flags[k] for k in order], freq, tol_hz)
    multiplets: list[tuple[list[int], str, tuple[float, ...], float]] = []
    # Lowest intensity between neighbouring lines (index order == ppm descending).
    valley = np.minimum.reduceat(y, pts)[:-1] if len(pts) > 1 else np.array([])
    valley = np.append(valley, np.inf)
    for g in groups:
        multiplets.extend(_analyse(g, pos[order], picked.height[order], freq, tol_hz, valley))
    # Integration limits: out to where the signal meets the noise, not past the
    # midpoint to the neighbouring multiplet.
    ints = []
    bounds = []
    first_pts = [int(pts[m[0][0]]) for m in multiplets]
    last_pts = [int(pts[m[0][-1]]) for m in multiplets]
    for i, (members, _, _, _) in enumerate(multiplets):
        a, b = first_pts[i], last_pts[i]
        top = float(np.max(picked.height[order][members]))
        thr = max(2.0 * sigma, 0.005 * top)
        left_lim = (last_pts[i - 1] + a) // 2 if i > 0 else 0
        right_lim = (b + first_pts[i + 1]) // 2 if i + 1 < len(multiplets) else len(y) - 1
        seg = y[left_lim:a + 1][::-1]
        below = np.flatnonzero(seg < thr)
        lo = a - (int(below[0]) if len(below) else len(seg) - 1)
        seg = y[b:right_lim + 1]
        below = np.flatnonzero(seg < thr)
        hi = b + (int(below[0]) if len(below) else len(seg) - 1)
        ints.append(float(np.sum(y[lo:hi + 1])) * dppm)
        bounds.append((lo, hi))
    ints_a = np.array(ints)
    # A first-order name needs the lines to carry the intensity: much more area
    # than the picked lines explain means unresolved lines (shoulders) -> "m".
    hts = picked.height[order]
    for i, (members, mult, js, c) in enumerate(multiplets):
        if mult == "m" or len(members) < 2:
            continue
        explained = sum(_line_area(y, int(pts[k]), float(hts[k])) for k in members)
        if explained > 0 and ints_a[i] > UNEXPLAINED_AREA_RATIO * explained * dppm:
            multiplets[i] = (members, "m", (), float(np.average(pos[order][members],
                                                                weights=np.abs(hts[members]))))
    centres = np.array([m[3] for m in multiplets])
    mults = [m[1] for m in multiplets]
    mflags: list[str | None] = [flags[int(order[m[0][0]])] for m in multiplets]
    # Water: the one singlet nearest the table value, within the window.
    for row in lines_for(solvent, "1H"):
        if row.kind != "water":
            continue
        cands = [i for i, m in enumerate(multiplets) if mflags[i] is None and m[1] in ("s", "br s")
                 and abs(m[3] - row.shift_ppm) <= WATER_WINDOW_PPM]
        if cands:
            mflags[min(cands, key=lambda i: abs(multiplets[i][3] - row.shift_ppm))] = "water"
    imp, notes = _impurity_matches(centres, mults, ints_a, "1H", solvent, mflags)
    for k, f in imp.items():
        mflags[k] = f
    compound = np.array([f is None for f in mflags])
    if compound.sum() > 1:
        # Traces: far below any proton of the compound (and below what a ratio is quoted for).
        total = float(np.sum(np.abs(ints_a[compound])))
        for i in np.flatnonzero(compound & (np.abs(ints_a) < TRACE_FRACTION * total)):
            mflags[i] = "trace"
        compound = np.array([f is None for f in mflags])
    unit = "percent"
    basis = ""
    comp_total = float(np.sum(ints_a[compound])) if compound.any() else 0.0
    if compound.any() and comp_total > 0 and np.isfinite(comp_total):
        if total_h:
            scale = total_h / comp_total
            unit = "H"
            basis = f"integrals scaled to {total_h:g} H for the unflagged multiplets"
        else:
            # Relative: the unflagged multiplets add up to 100. Whole protons need
            # the H count of the compound (scale_integrals, --total-h); the smallest
            # multiplet is not a safe unit (it may be a trace or an OH).
            scale = 100.0 / comp_total
            basis = ("integrals relative: percent of the unflagged multiplets (give the compound's "
                     "H count, --total-h, to scale them to protons)")
    else:
        whole = float(np.sum(np.abs(ints_a)))
        scale = 100.0 / whole if whole > 0 and np.isfinite(whole) else 1.0
    heights = picked.height[order]
    compound_h = [abs(h) for h, f in zip(heights, [flags[k] for k in order]) if f is None]
    hscale = 100.0 / (max(compound_h) if compound_h else float(np.max(np.abs(heights))))
    out_m = []
    all_peaks: list[Peak] = []
    for (members, mult, js, c), integral, f, (lo, hi) in zip(multiplets, ints_a, mflags, bounds):
        mp = tuple(Peak(shift=round(float(pos[order][k]), 4),
                        intensity=round(float(heights[k]) * hscale, 2),
                        flag=f) for k in members)
        all_peaks.extend(mp)
        lines = [p.shift for p in mp]
        out_m.append(Multiplet(shift=round(float(c), 4),
                               range=(round(min(lines), 4), round(max(lines), 4)),
                               integral=round(float(integral) * scale, 3), multiplicity=mult,
                               j_hz=js, flag=f, peaks=mp))
    warnings = warnings + notes
    if basis:
        warnings.append(basis)
    return PeakList(nucleus="1H", peaks=tuple(all_peaks), multiplets=tuple(out_m),
                    frequency_mhz=spectrum.frequency_mhz, solvent=solvent or spectrum.solvent,
                    reference=reference, source=spectrum.source, warnings=tuple(warnings),
                    integral_unit=unit)


def hydrogen_count(formula_or_smiles: str) -> int:
    """Number of H atoms of a molecular formula ("C2H5ClO") or a SMILES string.

    Deuterium (D) is not counted: it gives no 1H signal.
    """
    import re

    text = formula_or_smiles.strip()
    if re.fullmatch(r"(?:[A-Z][a-z]?\d*)+", text) and not re.search(r"[a-z]{2}|\(|=|#", text):
        n = sum(int(c or 1) for c in re.findall(r"H(?![a-z])(\d*)", text))
        if n:
            return n
    from ..structures.molecule import parse_structure

    formula = parse_structure(text).formula
    return sum(int(c or 1) for c in re.findall(r"H(?![a-z])(\d*)", formula))


def scale_integrals(peaklist: PeakList, total_h: float | None = None, *,
                    formula: str | None = None) -> PeakList:
    """The peak list with 1H integrals in protons: the unflagged multiplets add up
    to `total_h`, or to the H count of `formula` (a formula or a SMILES).

    Used by the journal-style peak text for the candidate being shown. Integrals
    that cannot be scaled (no compound multiplet with an integral) are returned as
    they are.
    """
    from dataclasses import replace

    if total_h is None and formula:
        total_h = hydrogen_count(formula)
    if total_h is None:
        return peaklist
    if not (np.isfinite(total_h) and 0 < total_h <= 10000):
        raise SpecmatchError(f"the H count {total_h:g} should be a positive number of protons")
    comp = [m for m in peaklist.multiplets if m.flag is None and m.integral is not None]
    total = float(sum(m.integral for m in comp))
    if not comp or total <= 0:
        return peaklist
    k = total_h / total
    mults = tuple(replace(m, integral=round(m.integral * k, 3)) if m.integral is not None else m
                  for m in peaklist.multiplets)
    return replace(peaklist, multiplets=mults, integral_unit="H",
                   warnings=tuple(w for w in peaklist.warnings if not w.startswith("integrals "))
                   + (f"integrals scaled to {total_h:g} H for the unflagged multiplets",))


def _line_area(y: np.ndarray, k: int, height: float, max_walk: int = 400) -> float:
    """Area (in point units) of a Lorentzian line of this height and the half width
    measured on its cleaner side (a side that meets a valley before half height
    is not used); 0 when neither side reaches half height."""
    half = 0.5 * height
    widths = []
    for step in (-1, 1):
        j, prev = k, height
        for _ in range(max_walk):
            nxt = j + step
            if nxt < 0 or nxt >= len(y):
                break
            v = float(y[nxt])
            if v < half:
                # interpolate the crossing between j and nxt
                frac = (float(y[j]) - half) / max(float(y[j]) - v, 1e-300)
                widths.append(abs(j - k) + frac)
                break
            if v > prev * 1.02:
                break  # climbing again: a valley before half height
            j, prev = nxt, v
    if not widths:
        return 0.0
    return float(np.pi * height * min(widths))  # pi/2 x height x FWHM, FWHM = 2 x half width


def _group(pos: np.ndarray, height: np.ndarray, flags: list[str | None], freq: float,
           tol_hz: float) -> list[list[int]]:
    """Lines (ppm descending) into candidate multiplets: split at gaps > MAX_J_HZ and
    around lines already flagged as solvent or TMS."""
    groups: list[list[int]] = []
    h = np.abs(height)
    for k in range(len(pos)):
        if groups:
            prev = groups[-1][-1]
            gap_hz = (pos[prev] - pos[k]) * freq
            # Neighbouring lines of one first-order multiplet differ at most n-fold
            # (binomial n:1 at the edge of an (n+1)-line pattern); a far bigger step
            # is a weak signal beside a strong one.
            step = max(h[prev], h[k]) / max(min(h[prev], h[k]), 1e-300)
            if gap_hz <= MAX_J_HZ and flags[prev] == flags[k] and step <= MAX_NEIGHBOUR_RATIO:
                groups[-1].append(k)
                continue
        groups.append([k])
    return groups


def _analyse(members: list[int], pos: np.ndarray, height: np.ndarray, freq: float, tol_hz: float,
             valley: np.ndarray | None = None, depth: int = 0
             ) -> list[tuple[list[int], str, tuple[float, ...], float]]:
    """First-order analysis of a group of lines (ppm descending).

    A group that is not first order is split into two first-order halves when
    they do not interleave (two overlapping multiplets); failing that, resolved
    first-order patterns are peeled off its edges (a singlet or doublet beside a
    complex multiplet), and the rest is reported as 'm'. `valley[k]` is the
    lowest intensity between line k and line k+1.
    """
    hz = -pos[members] * freq  # ascending Hz
    mult, js, centre_hz = first_order(hz, height[members], tol_hz=tol_hz)
    if mult != "m" or len(members) < 2:
        return [(members, mult, js, -centre_hz / freq)]
    fo = {}

    def fo_of(sub: list[int]):
        key = (sub[0], sub[-1])
        if key not in fo:
            fo[key] = first_order(-pos[sub] * freq, height[sub], tol_hz=tol_hz)
        return fo[key]

    if len(members) <= 40:
        for cut in range(1, len(members)):
            left, right = members[:cut], members[cut:]
            ml, mr = fo_of(left), fo_of(right)
            # Two halves that do not interleave: the gap exceeds each half's largest J.
            gap_hz = (pos[left[-1]] - pos[right[0]]) * freq
            if (ml[0] != "m" and mr[0] != "m" and (len(left) > 1 or len(right) > 1)
                    and gap_hz > max(ml[1] + mr[1] + (0.0,)) + tol_hz):
                return [(left, ml[0], ml[1], -ml[2] / freq), (right, mr[0], mr[1], -mr[2] / freq)]
    if valley is not None and depth < 12:
        n = len(members)
        for size in range(min(8, n - 1), 0, -1):
            for side in ("right", "left"):
                if side == "right":
                    part, rest = members[n - size:], members[:n - size]
                    a, b = rest[-1], part[0]
                else:
                    part, rest = members[:size], members[size:]
                    a, b = part[-1], rest[0]
                mp = fo_of(part)
                if mp[0] == "m":
                    continue
                gap_hz = (pos[a] - pos[b]) * freq
                resolved = valley[a] < 0.05 * min(abs(height[a]), abs(height[b]))
                if gap_hz >= max(MIN_SEPARATION_HZ, max(mp[1] + (0.0,)) + tol_hz) and resolved:
                    peeled = [(part, mp[0], mp[1], -mp[2] / freq)]
                    others = _analyse(rest, pos, height, freq, tol_hz, valley, depth + 1)
                    return others + peeled if side == "right" else peeled + others
    w = np.abs(height[members])
    return [(members, "m", (), float(np.average(pos[members], weights=w)))]


def flag_peaklist(peaklist: PeakList, solvent: str | None) -> PeakList:
    """Add solvent / TMS / water flags to a typed peak list's unflagged lines.

    Peak lists carry no line shapes, so only the table positions are used
    (residual solvent lines with their pattern, TMS, and for 1H water singlets).
    """
    from dataclasses import replace

    solv = canonical_solvent(solvent) if solvent else canonical_solvent(peaklist.solvent, strict=False)
    if solv is None:
        return peaklist
    nucleus = peaklist.nucleus
    pos = np.array([p.shift for p in peaklist.peaks], dtype=float)
    flags = _flag_peaks(pos, nucleus, solv, peaklist.frequency_mhz) if len(pos) else []
    peaks = tuple(p if p.flag or not f else replace(p, flag=f) for p, f in zip(peaklist.peaks, flags))
    mults = []
    tol = SOLVENT_TOL_PPM[nucleus]
    rows = lines_for(solv, nucleus)
    for m in peaklist.multiplets:
        f = m.flag
        if f is None:
            for row in rows:
                if row.kind in ("solvent", "TMS") and abs(m.shift - row.shift_ppm) <= tol:
                    f = "solvent" if row.kind == "solvent" else "TMS"
                elif (row.kind == "water" and m.multiplicity in ("s", "br s")
                      and abs(m.shift - row.shift_ppm) <= WATER_WINDOW_PPM):
                    f = "water"
        mults.append(m if f == m.flag else replace(m, flag=f))
    return replace(peaklist, peaks=peaks, multiplets=tuple(mults), solvent=solv)
