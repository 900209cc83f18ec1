"""Simulated spectra from a prediction: stick spectra -> Lorentzian lines.

1H spectra are exact (second order at the given field): the prediction's proton
groups become individual spins with the couplings of
:mod:`specmatch.prediction.couplings`, simulated by :mod:`specmatch.prediction.spin`
(:func:`prediction_lines`). :func:`sticks_1h` keeps the first-order pattern of one
group for text reports and quick looks. Pure functions on arrays (no state, no file
access), used for overlays and for mixture fitting. Axes are in ppm; a printed spectrum runs from high to low ppm,
and :func:`default_axis` returns such a descending axis, but every function here
accepts an axis in either order.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from functools import lru_cache

from .types import CarbonShift, Prediction, ProtonGroup
from .spin import SpinLines

__all__ = ["default_axis", "lorentzian_sum", "prediction_lines", "simulate_13c", "simulate_1h", "sticks_1h"]

#: exchange-broadened lines (OH, NH) are drawn this many times wider than the
#: others (common practice: OH signals are typically 5-20 Hz wide in CDCl3)
EXCHANGE_BROADENING = 10.0

# sticks closer than this (Hz) are merged; keeps long coupling trees small
_STICK_GRID_HZ = 1e-3

# memory bound for one broadcast block (axis points x lines)
_BLOCK = 2_000_000

_AXIS = {"1H": (12.0, -0.5, 16384), "13C": (220.0, -5.0, 65536)}


def default_axis(nucleus: str, n_points: int | None = None) -> np.ndarray:
    """A descending ppm axis covering the usual range of the nucleus.

    Parameters
    ----------
    nucleus : {"1H", "13C"}
    n_points : int, optional
        Number of points (default 16384 for 1H, 12 to -0.5 ppm; 65536 for 13C,
        220 to -5 ppm).
    """
    from ..errors import SpecmatchError

    if nucleus not in _AXIS:
        raise SpecmatchError(f"nucleus '{nucleus}' is not simulated; use '1H' or '13C'")
    hi, lo, n_default = _AXIS[nucleus]
    n = int(n_points or n_default)
    if n < 2:
        raise SpecmatchError(f"an axis needs at least 2 points, got {n}")
    return np.linspace(hi, lo, n)


def sticks_1h(group: ProtonGroup, frequency_mhz: float) -> tuple[np.ndarray, np.ndarray]:
    """First-order stick spectrum of one proton group.

    Each partner set of ``n`` equivalent protons with coupling ``J`` splits every
    line into ``n + 1`` lines spaced ``J`` apart with binomial intensities.

    Parameters
    ----------
    group : ProtonGroup
        Uses ``shift``, ``count`` and ``couplings`` (exchangeable groups give one line).
    frequency_mhz : float
        Spectrometer 1H frequency; converts J (Hz) into ppm.

    Returns
    -------
    (positions_ppm, intensities)
        Intensities sum to ``group.count``.
    """
    offsets_hz = np.zeros(1)
    weights = np.ones(1)
    couplings = () if group.exchangeable else group.couplings
    for n, j_hz in couplings:
        n = int(n)
        if n <= 0 or j_hz == 0:
            continue
        k = np.arange(n + 1)
        # binomial coefficients C(n, k) / 2**n, exact for the small n that occur
        binom = np.array([_comb(n, int(i)) for i in k], dtype=float) / 2.0**n
        split = (k - n / 2.0) * abs(j_hz)
        offsets_hz = (offsets_hz[:, None] + split[None, :]).ravel()
        weights = (weights[:, None] * binom[None, :]).ravel()
        # merge coincident lines so the tree stays small
        keys = np.round(offsets_hz / _STICK_GRID_HZ).astype(np.int64)
        uniq, inv = np.unique(keys, return_inverse=True)
        weights = np.bincount(inv.ravel(), weights=weights, minlength=len(uniq))
        offsets_hz = uniq * _STICK_GRID_HZ
    positions = group.shift + offsets_hz / float(frequency_mhz)
    return positions, weights * group.count


def _comb(n: int, k: int) -> int:
    from math import comb

    return comb(n, k)


def lorentzian_sum(
    ppm_axis: np.ndarray, centres_ppm: np.ndarray, heights: np.ndarray, width_ppm: float | np.ndarray
) -> np.ndarray:
    """Sum of Lorentzian lines evaluated on an axis.

    Parameters
    ----------
    ppm_axis : ndarray, shape (m,)
    centres_ppm, heights : ndarray, shape (k,)
        Line positions and peak heights.
    width_ppm : float or ndarray of shape (k,)
        Full width at half height, ppm (one for all lines or one per line).

    Returns
    -------
    ndarray, shape (m,)
        ``sum_i h_i * g_i**2 / ((x - c_i)**2 + g_i**2)`` with ``g = width/2``;
        the area of line i is ``pi * h_i * g_i``.
    """
    x = np.asarray(ppm_axis, dtype=float)
    c = np.atleast_1d(np.asarray(centres_ppm, dtype=float))
    h = np.atleast_1d(np.asarray(heights, dtype=float))
    g2 = (np.broadcast_to(np.asarray(width_ppm, dtype=float), c.shape) / 2.0) ** 2
    out = np.zeros_like(x)
    if c.size == 0:
        return out
    step = max(1, _BLOCK // max(1, x.size))
    for s in range(0, c.size, step):
        d = x[:, None] - c[None, s:s + step]
        out += (h[s:s + step] * g2[s:s + step] / (d * d + g2[s:s + step])).sum(axis=1)
    return out


def prediction_lines(
    prediction: Prediction,
    frequency_mhz: float,
    *,
    shifts: Sequence[float] | np.ndarray | None = None,
    j_scale: float = 1.0,
    geometric=None,
    cached: bool = True,
) -> SpinLines:
    """Exact 1H stick spectrum of the non-exchangeable protons of a prediction.

    Parameters
    ----------
    prediction : Prediction
    frequency_mhz : float
        Spectrometer 1H frequency.
    shifts : array-like, optional
        One shift (ppm) per entry of ``prediction.protons`` replacing the predicted ones.
    j_scale : float
        Factor on every H-H coupling (the mixture fit refines it).
    geometric : mapping or True, optional
        Geometric vicinal couplings (``True``: from the 3D layer where it applies), see
        :func:`specmatch.prediction.couplings.coupling_network`.
    cached : bool
        Keep the result (per prediction, shifts, field and J scale; overlays redraw the
        same spectrum often). A fit that tries many shift sets passes ``False`` so the
        cache does not fill with spectra it never asks for again.

    Returns
    -------
    SpinLines
        Intensities sum to the number of non-exchangeable protons; ``dhz_dshift`` has
        one column per proton group (derivative of each line with respect to that
        group's offset in Hz).
    """
    groups = prediction.protons
    if shifts is None:
        sh = tuple(float(g.shift) for g in groups)
    else:
        arr = np.asarray(shifts, dtype=float)
        if arr.shape != (len(groups),):
            from ..errors import SpecmatchError

            raise SpecmatchError(
                f"{len(groups)} proton groups but {arr.size} shifts given; give one shift per group")
        sh = tuple(float(x) for x in arr)
    if geometric or not cached:
        return _lines(prediction, sh, float(frequency_mhz), float(j_scale), geometric)
    return _cached_lines(prediction, sh, float(frequency_mhz), float(j_scale))


@lru_cache(maxsize=128)
def _cached_lines(prediction: Prediction, shifts: tuple[float, ...], f: float, j_scale: float) -> SpinLines:
    return _lines(prediction, shifts, f, j_scale, None)


def _lines(prediction, shifts, f, j_scale, geometric) -> SpinLines:
    from math import comb

    from .couplings import coupling_network
    from .spin import simulate_spins

    net = coupling_network(prediction, geometric=geometric)
    n_groups = len(prediction.protons)
    # which couplings are strong, and where large clusters are cut, is decided at the
    # predicted shifts whatever shifts are drawn: a fit moving the shifts then sees a
    # continuous spectrum, and a spectrum made at other shifts (the demo generator) is
    # cut the way the fit cuts it
    predicted = tuple(float(g.shift) for g in prediction.protons)
    sim = simulate_spins(net.shifts(shifts), net.j_matrix(j_scale), f, cluster_shifts_ppm=net.shifts(predicted))
    # per-spin derivative -> per-group derivative
    member = np.zeros((net.n_spins, n_groups))
    if net.n_spins:
        member[np.arange(net.n_spins), np.asarray(net.group_of_spin)] = 1.0
    hz, inten, d_spin = sim.hz, sim.intensity, sim.dhz_dshift
    # 19F partners: always weakly coupled to 1H, so first order on each line, through
    # the share of the coupled spin in the line (its derivative)
    for spin, n_f, j_hf in net.hetero:
        m = np.arange(n_f + 1) - n_f / 2.0
        p = np.array([comb(n_f, k) for k in range(n_f + 1)], float) / 2.0**n_f
        hz = (hz[:, None] + d_spin[:, [spin]] * (j_hf * m)[None, :]).ravel()
        inten = (inten[:, None] * p[None, :]).ravel()
        d_spin = np.repeat(d_spin, n_f + 1, axis=0)
    order = np.argsort(hz, kind="stable")
    return SpinLines(f, hz[order], inten[order], (d_spin @ member)[order])


def simulate_1h(
    prediction: Prediction,
    ppm_axis: np.ndarray,
    frequency_mhz: float = 400.0,
    line_width_hz: float = 1.0,
    shifts: Sequence[float] | np.ndarray | None = None,
    *,
    exact: bool = True,
    geometric=None,
) -> np.ndarray:
    """Simulated 1H spectrum of one molecule (exact, second order, at ``frequency_mhz``).

    Parameters
    ----------
    prediction : Prediction
    ppm_axis : ndarray
    frequency_mhz : float
        Spectrometer 1H frequency: sets where strong coupling distorts the multiplets
        and the multiplet widths in ppm.
    line_width_hz : float
        Full width at half height of each line; exchangeable groups are drawn
        ``EXCHANGE_BROADENING`` times wider with the same area.
    shifts : array-like, optional
        One shift (ppm) per entry of ``prediction.protons`` replacing the
        predicted one (mixture fitting moves groups within their sigma).
    exact : bool
        ``False`` draws the first-order multiplets of :func:`sticks_1h` instead.
    geometric : mapping or True, optional
        Geometric vicinal couplings by pair of proton-group indices (``True``: from the
        3D layer where it applies).

    Returns
    -------
    ndarray
        Intensity on ``ppm_axis``; the area of each group is proportional to its
        proton count (1 proton = area ``pi * width_ppm / 2``).
    """
    groups = prediction.protons
    if shifts is not None:
        shifts = np.asarray(shifts, dtype=float)
        if shifts.shape != (len(groups),):
            from ..errors import SpecmatchError

            raise SpecmatchError(
                f"{len(groups)} proton groups but {shifts.size} shifts given; give one shift per group"
            )
    f = float(frequency_mhz)
    if not np.isfinite(f) or f <= 0:
        from ..errors import SpecmatchError

        raise SpecmatchError(f"spectrometer frequency must be a positive number of MHz, got {frequency_mhz}")
    width = line_width_hz / f
    lines = None
    if exact and any(not g.exchangeable for g in groups):
        from ..errors import SpecmatchError

        try:
            lines = prediction_lines(prediction, f, shifts=shifts, geometric=geometric)
        except SpecmatchError:
            # hand-made groups that do not fit the structure: first order is all we have
            exact = False
    centres, heights, widths = [], [], []
    for i, g in enumerate(groups):
        if exact and not g.exchangeable:
            continue
        pos, inten = sticks_1h(g, f)
        if shifts is not None:
            pos = pos + (shifts[i] - g.shift)
        w = width * (EXCHANGE_BROADENING if g.exchangeable else 1.0)
        centres.append(pos)
        # same area whatever the width: scale height by width ratio
        heights.append(inten * (width / w))
        widths.append(np.full(pos.shape, w))
    if exact and lines is not None:
        centres.append(lines.ppm)
        heights.append(lines.intensity)
        widths.append(np.full(lines.hz.shape, width))
    if not centres:
        return np.zeros(np.shape(ppm_axis), dtype=float)
    return lorentzian_sum(ppm_axis, np.concatenate(centres), np.concatenate(heights), np.concatenate(widths))


def simulate_13c(
    prediction: Prediction,
    ppm_axis: np.ndarray,
    line_width_hz: float = 1.5,
    frequency_mhz: float = 100.0,
    *,
    shifts: Sequence[float] | np.ndarray | None = None,
) -> np.ndarray:
    """Simulated proton-decoupled 13C spectrum: one line per set of equivalent carbons.

    Parameters
    ----------
    prediction : Prediction
    ppm_axis : ndarray
    line_width_hz : float
        Full width at half height.
    frequency_mhz : float
        Spectrometer 13C frequency.
    shifts : array-like, optional
        One shift per entry of ``prediction.carbons`` replacing the predicted one.

    Returns
    -------
    ndarray
        Line heights proportional to the number of carbons in each set (no NOE or
        relaxation weighting).
    """
    carbons: tuple[CarbonShift, ...] = prediction.carbons
    centres = np.array([c.shift for c in carbons], dtype=float)
    if shifts is not None:
        shifts = np.asarray(shifts, dtype=float)
        if shifts.shape != centres.shape:
            from ..errors import SpecmatchError

            raise SpecmatchError(
                f"{len(carbons)} carbon sets but {shifts.size} shifts given; give one shift per set"
            )
        centres = shifts
    heights = np.array([len(c.atoms) for c in carbons], dtype=float)
    return lorentzian_sum(ppm_axis, centres, heights, line_width_hz / float(frequency_mhz))
