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
from .model import Multiplet, Peak, PeakList, Spectrum
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
        idx, _ = find_peaks(s, height=threshold, prominence=max(0.75 * threshold, 4.0 * sigma, 1e-12))
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


def _merge_shallow(s: np.ndarray, idx: np.ndarray, depth: float) -> np.ndarray:
    """Drop maxima that are noise on a bigger line: the valley between a maximum and
    its kept neighbour must be at least `depth` below the smaller of the two."""
    if len(idx) < 2:
        return idx
    # Fast path: consecutive valleys all deep -> nothing to merge.
    valleys = np.minimum.reduceat(s, idx)[:-1]
    if not ((np.minimum(s[idx[:-1]], s[idx[1:]]) - valleys) < depth).any():
        return idx
    keep: list[int] = [int(idx[0])]
    for j in idx[1:]:
        j = int(j)
        while keep:
            a = keep[-1]
            valley = float(s[a:j].min())
            if min(s[a], s[j]) - valley >= depth:
                keep.append(j)
                break
            if s[j] <= s[a]:
                break  # j is noise on a's line
            keep.pop()  # a is noise on j's line; compare j with the one before
        else:
            keep.append(j)
    return np.asarray(keep, dtype=int)


# ------------------------------------------------------------------ first-order analysis
from ..prediction.multiplicity import LETTER_FOR_PARTNERS as _LETTER  # noqa: E402  (one owner of the letters)


def first_order(pos_hz: np.ndarray, height: np.ndarray, *, tol_hz: float = 0.5
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
    dept = dept135 or spectrum.experiment == "DEPT-135"
    if dept and nucleus != "13C":
        raise SpecmatchError(f"{spectrum.source}: DEPT-135 is a 13C experiment but the spectrum is {nucleus}")
    warnings: list[str] = list(spectrum.meta.get("warnings", ()) if spectrum.meta else ())
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
    if not dept and -np.min(y) > 2.0 * np.max(y):
        # Mostly negative lines in a 1D spectrum: phased 180 degrees off.
        y = -y
        warnings.append("the spectrum's lines point down (phase 180 degrees off); it was inverted")
    sigma = noise_level(y)
    ymax = float(np.max(np.abs(y))) if len(y) else 0.0
    if ymax == 0.0:
        raise SpecmatchError(f"{spectrum.source}: the spectrum is empty (all intensities are zero)")
    threshold = max(snr * sigma, 1e-4 * ymax)
    picked = pick_peaks(ppm, y, threshold=threshold, sigma=sigma, negative=dept)
    if len(picked.ppm) == 0:
        raise SpecmatchError(
            f"{spectrum.source}: no peak rises {snr:g} times above the noise; check the file "
            "or lower the threshold")
    freq = spectrum.frequency_mhz
    if solv is None and nucleus == "13C" and not solvent:
        solv = _detect_solvent_13c(picked.ppm, freq)
        if solv:
            warnings.append(f"solvent {solv} recognised from its 13C pattern")
    offset, reference = _reference(picked.ppm, picked.height, nucleus, solv, freq)
    ppm_ref = picked.ppm + offset
    peak_flags = _flag_peaks(ppm_ref, nucleus, solv, freq)
    if nucleus == "13C":
        return _carbon_list(spectrum, ppm_ref, picked.height, peak_flags, solv, reference, dept,
                            warnings)
    return _proton_list(spectrum, ppm, y, sigma, picked, ppm_ref, offset, peak_flags, solv,
                        reference, total_h, warnings)


def _reference(pos: np.ndarray, height: np.ndarray, nucleus: str, solvent: str | None,
               freq: float | None) -> tuple[float, str]:
    win = REFERENCE_WINDOW_PPM[nucleus]
    hmax = float(np.max(np.abs(height)))
    near0 = np.flatnonzero((np.abs(pos) <= win) & (np.abs(height) >= 0.02 * hmax))
    # TMS: the singlet nearest 0 ppm; in 1H it is the highest-field line.
    if len(near0) and (nucleus == "13C" or pos[near0].min() <= pos.min() + 1e-9):
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
    if not any(r.kind == "TMS" for r in lines_for(solvent, nucleus)):
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
        weak = [k for k in hit if abs(sizes[k]) <= WEAK_FRACTION * median]
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
                 solvent: str | None, reference: str, dept: bool, warnings: list[str]) -> PeakList:
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
                    experiment="DEPT-135" if dept else "1D", warnings=tuple(warnings + notes))


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
    basis = ""
    if compound.any():
        if total_h:
            scale = total_h / float(np.sum(ints_a[compound]))
            basis = f"integrals scaled to {total_h:g} H for the unflagged multiplets"
        else:
            # Unit: the smallest unflagged multiplet that is not a trace (>= 2% of the total).
            comp = np.abs(ints_a[compound])
            big = comp[comp >= 0.02 * comp.sum()]
            scale = 1.0 / float(np.min(big if len(big) else comp))
            basis = ("integrals relative: the smallest unflagged multiplet above 2% of the total is 1 "
                     "(give the H count to scale them)")
    else:
        scale = 1.0 / float(np.max(np.abs(ints_a)))
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
                    reference=reference, source=spectrum.source, warnings=tuple(warnings))


def _group(pos: np.ndarray, height: np.ndarray, flags: list[str | None], freq: float,
           tol_hz: float) -> list[list[int]]:
    """Lines (ppm descending) into candidate multiplets: split at gaps > MAX_J_HZ and
    around lines already flagged as solvent or TMS."""
    groups: list[list[int]] = []
    for k in range(len(pos)):
        if groups:
            prev = groups[-1][-1]
            gap_hz = (pos[prev] - pos[k]) * freq
            if gap_hz <= MAX_J_HZ and flags[prev] == flags[k]:
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
