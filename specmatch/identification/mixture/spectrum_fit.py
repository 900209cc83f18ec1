"""Full-spectrum fit of a 1H spectrum as a non-negative mixture of candidate spectra.

Model (on a uniform, cropped ppm axis):

    y(x) = sum_k w_k * sum_{g in k} P_g(x; c_g, width) + baseline(x) + a_OH * P_OH(x) + noise

* ``P_g`` is the first-order multiplet of proton group ``g`` (sticks from
  :func:`specmatch.prediction.simulate.sticks_1h`) drawn with area-normalised
  Lorentzian lines, area = the group's proton count; so ``w_k`` is the amount of
  molecule ``k`` and the mole fraction is ``w_k / sum(w)``.
* every group centre ``c_g`` moves within ``BOUND_SIGMAS`` prediction sigmas of the
  predicted shift, with a Gaussian prior of that sigma (the refinement absorbs the
  difference between predicted and real shifts);
* coupling constants refined within ``J_BOUND_HZ`` of the predicted ones (prior
  ``J_SIGMA_HZ``); one line width (Hz) for all non-exchangeable lines, fitted;
* a Legendre polynomial baseline (degree ``BASELINE_DEGREE``);
* exchangeable (OH) protons are not tied to any candidate: OH protons of the
  components exchange with each other (and with water), so one broad line with
  free height, position and width stands in for them;
* flagged solvent, water, TMS and impurity lines are masked (points left out), and
  each also gets a free Lorentzian so that its tails outside the mask are explained.

Procedure (several starts, the lowest chi-square wins): candidates are added one
at a time (each candidate first in turn); each newcomer's groups are placed by 1D
grid searches of the shift on the residual (cross-correlation at the newcomer's
estimated height), then all groups are re-searched, pairs of groups (and a group
and the OH line) are exchanged where that helps, coupling constants are scanned
in scale, and everything is polished by a bounded Levenberg-Marquardt fit on the
normal equations with an analytic Jacobian. Minor candidates must then pass a
detection test (a fresh fit without them must be clearly worse), else they are
put back at their predicted shifts. Uncertainties come from the covariance at the
solution, inflated for excess residual (reduced chi-square over the signal
points) and for the correlation of neighbouring residuals (model misfit is
smooth, noise is not).

With the candidates' predictions the same model is built on their exact (second-order)
spectra instead (:func:`exact_fit`, no coupling parameters: the predicted network at
the field), searched from several starts and polished with
``scipy.optimize.least_squares``; see the section at the end of this module.

Pure functions on arrays; no file access.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ...errors import SpecmatchError
from ...prediction.types import ProtonGroup

#: groups may move this many prediction sigmas from the predicted shift
BOUND_SIGMAS = 3.0
#: ... but at least / at most this far (ppm)
MIN_BOUND_PPM = 0.03
MAX_BOUND_PPM = 1.0
BASELINE_DEGREE = 2
#: working grid spacing (Hz); finer input is thinned to this (every n-th point)
GRID_HZ = 0.2
#: line-width bounds (Hz) for the non-exchangeable lines
WIDTH_BOUNDS_HZ = (0.2, 8.0)
#: exchangeable (OH) line width bounds (Hz): exchange-broadened, 5-60 Hz is common practice
OH_WIDTH_BOUNDS_HZ = (3.0, 80.0)
#: where an OH line may be searched (ppm, CDCl3-like solvents; common practice)
OH_RANGE_PPM = (0.5, 6.0)
#: coupling constants move at most this far (Hz) from the predicted ones, with a
#: Gaussian prior of J_SIGMA_HZ (vicinal 3J in alkyl chains spans ~6-8 Hz; common practice)
J_BOUND_HZ = 1.5
J_SIGMA_HZ = 0.7
#: multiplets are evaluated this many half-widths beyond their outer lines (the
#: Lorentzian area left outside is 2/(pi*TAIL_HWHM), 0.16%, alike for every group)
TAIL_HWHM = 400.0
#: detection test for minor candidates (see _detection_test)
DETECT_MAX_FRACTION = 0.15
DETECT_DCHI2 = 25.0
DETECT_DCHI2_PER_GROUP = 10.0
#: restart from the resolved signals' amounts when they imply fractions this far off
RESTART_FRACTION = 0.03
#: a signal "carries" a component when that component makes at least this share of
#: the fitted intensity over the signal's range
PURITY_MIN = 0.95
#: an exact (second-order) fit this good (reduced chi-square over the signal points) is
#: taken as it is; a worse one is compared with the first-order fit (data chi-square)
EXACT_GOOD_CHI2 = 3.0


@dataclass(frozen=True)
class GroupModel:
    """One proton group as the fit sees it: a first-order coupling tree.

    Stick ``s`` sits at ``centre + coef[s] @ j_hz / frequency`` with relative
    intensity ``rel[s]`` (binomial, sum 1); lines are not merged so that every
    coupling constant can be refined.
    """

    component: int
    index: int  # index in the component's group list
    shift0: float
    sigma: float
    count: int
    coef: np.ndarray  # (sticks, couplings): spin-quantum offsets m_i per partner set
    rel: np.ndarray  # (sticks,)
    j0_hz: np.ndarray  # (couplings,) predicted J
    label: str = ""

    @property
    def bound(self) -> float:
        return float(np.clip(BOUND_SIGMAS * self.sigma, MIN_BOUND_PPM, MAX_BOUND_PPM))

    def offsets_ppm(self, j_hz: np.ndarray, frequency_mhz: float) -> np.ndarray:
        return self.coef @ np.asarray(j_hz, float) / frequency_mhz if self.coef.size else np.zeros(len(self.rel))

    def half_span_hz(self) -> float:
        return float(np.sum(np.abs(self.coef).max(axis=0) * (self.j0_hz + J_BOUND_HZ))) if self.coef.size else 0.0


@dataclass
class SignalRegion:
    """A stretch of the spectrum covering one or more groups of a single component."""

    component: int
    groups: tuple[int, ...]  # indices into SpectrumFit.groups
    lo_ppm: float
    hi_ppm: float
    protons: int
    purity: float
    integral: float | None = None  # measured over the window, baseline removed
    amount: float | None = None  # molecules (weight units): integral less others, tail-corrected, per proton
    amount_sd: float | None = None
    own_groups: tuple[int, ...] = ()  # the candidate's own group indices (set by the caller)


@dataclass
class SpectrumFit:
    """The result of :func:`fit_spectrum` (all arrays ascending in ppm)."""

    groups: list[GroupModel]
    weights: np.ndarray
    weights_cov: np.ndarray
    shifts_ppm: np.ndarray
    j_hz: list[np.ndarray]
    width_hz: float
    baseline: np.ndarray  # coefficients
    oh: tuple[float, float, float] | None  # (amplitude, shift_ppm, width_hz)
    extra_lines: dict[str, tuple[float, float, float]]  # free lines incl. OH, same form
    x: np.ndarray
    y: np.ndarray
    used: np.ndarray  # bool mask of points entering the fit
    fitted: np.ndarray
    component_curves: np.ndarray  # (K, N)
    baseline_curve: np.ndarray
    noise_sd: float
    chi2_red: float
    inflation: float
    regions: list[SignalRegion] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    undetected: dict[int, float] = field(default_factory=dict)  # candidate -> fraction before the test

    @property
    def fractions(self) -> np.ndarray:
        tot = self.weights.sum()
        return self.weights / tot if tot > 0 else np.full(self.weights.shape, np.nan)

    @property
    def fractions_sd(self) -> np.ndarray:
        return _fraction_sd(self.weights, self.weights_cov)


def _fraction_sd(w: np.ndarray, cov: np.ndarray) -> np.ndarray:
    tot = w.sum()
    if tot <= 0:
        return np.full(w.shape, np.nan)
    f = w / tot
    d = (np.eye(len(w)) - f[:, None]) / tot  # d f_k / d w_j = (delta_kj - f_k)/W
    return np.sqrt(np.clip(np.diag(d @ cov @ d.T), 0.0, None))


# ----------------------------------------------------------------------------- lines
def _profile(x: np.ndarray, centre: float, offsets: np.ndarray, amps: np.ndarray, hw: float,
             deriv: bool = False):
    """Area-normalised Lorentzian multiplet (area = sum(amps)).

    With ``deriv``: also the per-stick derivative wrt the centre (N x sticks; sum
    it for d/dcentre, contract it with offsets' derivatives for d/dJ) and d/dhw.
    """
    d = x[:, None] - (centre + offsets)[None, :]
    den = d * d + hw * hw
    p = (amps * (hw / np.pi) / den).sum(axis=1)
    if not deriv:
        return p
    dstick = amps * (hw / np.pi) * 2.0 * d / (den * den)
    dhw = (amps / np.pi * (d * d - hw * hw) / (den * den)).sum(axis=1)
    return p, dstick, dhw


def _coupling_tree(couplings: Sequence[tuple[int, float]]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Unmerged first-order tree: (coef, rel, j0) for partner sets (n, J)."""
    from math import comb

    sets = [(int(n), abs(float(j))) for n, j in couplings if int(n) > 0 and float(j) != 0.0]
    coef = np.zeros((1, 0))
    rel = np.ones(1)
    for n, _ in sets:
        m = np.arange(n + 1) - n / 2.0
        b = np.array([comb(n, k) for k in range(n + 1)], float) / 2.0**n
        coef = np.hstack([np.repeat(coef, n + 1, axis=0), np.tile(m, len(rel))[:, None]])
        rel = (rel[:, None] * b[None, :]).ravel()
    return coef, rel, np.array([j for _, j in sets], float)


def group_models(components: Sequence[Sequence[ProtonGroup]]) -> list[GroupModel]:
    """Non-exchangeable groups of every component, as coupling trees."""
    out: list[GroupModel] = []
    for k, groups in enumerate(components):
        for i, g in enumerate(groups):
            if g.exchangeable or g.count <= 0:
                continue
            coef, rel, j0 = _coupling_tree(g.couplings)
            out.append(GroupModel(k, i, float(g.shift), max(float(g.sigma), 1e-3), int(g.count),
                                  coef, rel, j0, g.environment or f"{g.count}H {g.multiplicity}"))
    return out


# -------------------------------------------------------------------- preprocessing
def prepare_axis(ppm: np.ndarray, intensity: np.ndarray, frequency_mhz: float,
                 lo_ppm: float, hi_ppm: float) -> tuple[np.ndarray, np.ndarray, float]:
    """Ascending, cropped, uniform (thinned to ~GRID_HZ) copy of the spectrum, and the noise sd.

    The noise (:func:`noise_sd`) is taken over the whole input (not only the cropped
    range), whose signal-free stretches give it.
    """
    x = np.asarray(ppm, float)
    y = np.asarray(intensity, float)
    if x[0] > x[-1]:
        x, y = x[::-1], y[::-1]
    step_in = float(np.median(np.diff(x)))
    factor = max(1, int(np.ceil(GRID_HZ / frequency_mhz / step_in - 1e-9)))

    def binned(a):
        # every factor-th point, not the bin mean: a bin mean is not the line shape at the
        # bin centre (2.9% low at the top of a 0.9 Hz line averaged over 0.3 Hz), which a
        # high signal-to-noise spectrum shows as misfit far above the noise
        return a[::factor]

    # noise from the whole input (thinned alike): mostly baseline, whereas inside the fitted
    # range the steep flanks of crowded multiplets would inflate the spread of differences
    noise = noise_sd(binned(y))
    keep = (x >= lo_ppm) & (x <= hi_ppm)
    x, y = binned(x[keep]), binned(y[keep])
    if not noise > 0:
        noise = 1e-6 * max(float(np.max(np.abs(y))), 1e-12)
    return x, y, noise


#: points per block of the noise estimate (:func:`noise_sd`)
NOISE_BLOCK = 128


def noise_sd(y: np.ndarray) -> float:
    """Noise sd of a spectrum from its signal-free stretches.

    The robust (MAD) spread of first differences is taken per block of
    ``NOISE_BLOCK`` points and the median over the blocks is reported: one MAD over
    the whole spectrum lets the steep flanks of the lines in (a tenth of the points
    on lines made it ~9% high on the 400 MHz demo), whereas most blocks hold
    baseline only and the median block is one of them. Spectra too short for eight
    blocks fall back to the single MAD.
    """
    dy = np.diff(np.asarray(y, float))
    n = dy.size // NOISE_BLOCK
    if n >= 8:
        blocks = dy[: n * NOISE_BLOCK].reshape(n, NOISE_BLOCK)
        mad = np.median(np.abs(blocks - np.median(blocks, axis=1)[:, None]), axis=1)
        spread = float(np.median(mad))
    else:
        spread = float(np.median(np.abs(dy - np.median(dy)))) if dy.size else 0.0
    return 1.4826 * spread / np.sqrt(2.0)


def estimate_width_hz(x: np.ndarray, y: np.ndarray, used: np.ndarray, frequency_mhz: float) -> float:
    """FWHM of the tallest used point's line (an upper bound for a multiplet line)."""
    yy = np.where(used, y, -np.inf)
    i = int(np.argmax(yy))
    half = (y[i] + np.median(y)) / 2.0
    lo = i
    while lo > 0 and y[lo] > half:
        lo -= 1
    hi = i
    while hi < len(y) - 1 and y[hi] > half:
        hi += 1
    fwhm_hz = (x[hi] - x[lo]) * frequency_mhz
    return float(np.clip(fwhm_hz, 0.5, 3.0))


# ---------------------------------------------------------------------------- fit
class _Model:
    """Evaluates the mixture model, its residuals and Jacobian for a parameter vector.

    Layout of theta: group centres (G), coupling constants (all groups, in order),
    line width (Hz), component weights (K), baseline coefficients, then the
    exchangeable line (height, centre, width in Hz) if any.
    """

    def __init__(self, x, y, used, groups, n_comp, frequency_mhz, noise, free_lines):
        self.x_all = x
        self.y_all = y
        self.used = used
        self.xu = x[used]
        self.yu = y[used]
        self.groups = groups
        self.K = n_comp
        self.G = len(groups)
        self.f = frequency_mhz
        self.noise = noise
        self._cache: dict = {}
        self.free = list(free_lines)
        self.L = len(self.free)
        t = 2.0 * (x - x[0]) / (x[-1] - x[0]) - 1.0
        self.leg_all = np.polynomial.legendre.legvander(t, BASELINE_DEGREE)
        self.leg = self.leg_all[used]
        self.nb = BASELINE_DEGREE + 1
        self.i_c = np.arange(self.G)
        pos = self.G
        self.i_j = []
        for g in groups:
            self.i_j.append(np.arange(pos, pos + len(g.j0_hz)))
            pos += len(g.j0_hz)
        self.n_j = pos - self.G
        self.i_wd = pos
        self.i_w = pos + 1 + np.arange(self.K)
        self.i_b = pos + 1 + self.K + np.arange(self.nb)
        # free lines: (height, centre, width_hz) each
        self.i_free = (pos + 1 + self.K + self.nb + np.arange(3 * self.L)).reshape(self.L, 3)
        self.n = pos + 1 + self.K + self.nb + 3 * self.L

    def offsets(self, j: int, theta) -> np.ndarray:
        return self.groups[j].offsets_ppm(theta[self.i_j[j]], self.f)

    def group_profile(self, j: int, theta, x=None, deriv=False):
        """Group j on an ascending axis, evaluated within TAIL_HWHM half-widths of its lines."""
        g = self.groups[j]
        x = self.xu if x is None else x
        c = theta[self.i_c[j]]
        key = None
        if not deriv:
            # searches re-evaluate unchanged groups many times: keep the last one per axis
            key = (j, id(x), float(c), float(theta[self.i_wd]), tuple(theta[self.i_j[j]]))
            hit = self._cache.get(key[:2])
            if hit is not None and hit[0] == key:
                return hit[1]
        off = self.offsets(j, theta)
        hw = theta[self.i_wd] / self.f / 2.0
        a, b = np.searchsorted(x, [c + off.min() - TAIL_HWHM * hw, c + off.max() + TAIL_HWHM * hw])
        res = _profile(x[a:b], c, off, g.rel * g.count, hw, deriv)
        if not deriv:
            out = np.zeros(len(x))
            out[a:b] = res
            out.setflags(write=False)
            self._cache[key[:2]] = (key, out)
            return out
        p, dstick, dhw = res
        P = np.zeros(len(x))
        P[a:b] = p
        D = np.zeros((len(x), dstick.shape[1]))
        D[a:b] = dstick
        H = np.zeros(len(x))
        H[a:b] = dhw
        return P, D, H

    def component_matrix(self, theta, x=None):
        x = self.xu if x is None else x
        S = np.zeros((self.K, len(x)))
        for j, g in enumerate(self.groups):
            S[g.component] += self.group_profile(j, theta, x)
        return S

    def free_profile(self, q: int, theta, x=None, deriv=False):
        _, c, wd = theta[self.i_free[q]]
        x = self.xu if x is None else x
        if deriv:
            return _profile(x, c, np.zeros(1), np.ones(1), wd / self.f / 2.0, True)
        # the searches re-solve heights many times with the free lines where they are
        key = ("free", q, id(x))
        hit = self._cache.get(key)
        if hit is not None and hit[0] == (float(c), float(wd)):
            return hit[1]
        out = _profile(x, c, np.zeros(1), np.ones(1), wd / self.f / 2.0)
        out.setflags(write=False)
        self._cache[key] = ((float(c), float(wd)), out)
        return out

    def free_total(self, theta, x=None):
        x = self.xu if x is None else x
        out = np.zeros(len(x))
        for q in range(self.L):
            out += theta[self.i_free[q][0]] * self.free_profile(q, theta, x)
        return out

    def evaluate(self, theta, x=None, leg=None):
        x = self.xu if x is None else x
        leg = self.leg if leg is None else leg
        m = theta[self.i_w] @ self.component_matrix(theta, x) + leg @ theta[self.i_b]
        if self.L:
            m = m + self.free_total(theta, x)
        return m

    def priors(self, theta) -> np.ndarray:
        pc = [(theta[self.i_c[j]] - g.shift0) / g.sigma for j, g in enumerate(self.groups)]
        pj = [(theta[self.i_j[j]] - g.j0_hz) / J_SIGMA_HZ for j, g in enumerate(self.groups)]
        return np.concatenate([np.array(pc, float), *pj]) if self.groups else np.zeros(0)

    def residuals(self, theta):
        return np.concatenate([(self.evaluate(theta) - self.yu) / self.noise, self.priors(theta)])

    def jacobian(self, theta):
        N = len(self.xu)
        J = np.zeros((N + self.G + self.n_j, self.n))
        dwd = np.zeros(N)
        row = N + self.G
        for j, g in enumerate(self.groups):
            p, dstick, dhw = self.group_profile(j, theta, deriv=True)
            wk = theta[self.i_w[g.component]]
            J[:N, self.i_c[j]] = wk * dstick.sum(axis=1)
            if len(self.i_j[j]):
                J[:N, self.i_j[j]] = wk * (dstick @ g.coef) / self.f
                J[row + np.arange(len(self.i_j[j])), self.i_j[j]] = 1.0 / J_SIGMA_HZ
                row += len(self.i_j[j])
            J[:N, self.i_w[g.component]] += p
            dwd += wk * dhw / self.f / 2.0
            J[N + j, self.i_c[j]] = 1.0 / g.sigma
        J[:N, self.i_wd] = dwd
        J[:N, self.i_b] = self.leg
        for q in range(self.L):
            ia, ic, iw = self.i_free[q]
            p, dstick, dhw = self.free_profile(q, theta, deriv=True)
            J[:N, ia] = p
            J[:N, ic] = theta[ia] * dstick.sum(axis=1)
            J[:N, iw] = theta[ia] * dhw / self.f / 2.0
        J[:N] /= self.noise
        return J

    def cost(self, theta) -> float:
        return float(np.sum(self.residuals(theta) ** 2))

    def linear_solve(self, theta, active: np.ndarray | None = None) -> np.ndarray:
        """Best weights, baseline and free-line heights (non-negative where physical) for fixed shapes.

        ``active`` (bool per component) holds the other components at zero weight.
        """
        from scipy.optimize import lsq_linear

        S = self.component_matrix(theta)
        if active is not None:
            S = S * active[:, None]
        cols = [S.T, self.leg]
        for q in range(self.L):
            cols.append(self.free_profile(q, theta)[:, None])
        A = np.hstack(cols) / self.noise
        lb = np.concatenate([np.zeros(self.K), np.full(self.nb, -np.inf), np.zeros(self.L)])
        # solve on the Cholesky factor of the small normal matrix: same minimiser,
        # and no factorisation of the tall matrix
        G = _gram(A)
        G[np.diag_indices_from(G)] += 1e-12 * max(float(np.max(np.diag(G))), 1e-300)
        R = np.linalg.cholesky(G).T
        d = np.linalg.solve(R.T, np.einsum("ij,i->j", A, self.yu / self.noise))
        sol = lsq_linear(R, d, bounds=(lb, np.full(lb.shape, np.inf)), method="bvls")
        out = theta.copy()
        out[self.i_w] = sol.x[: self.K]
        out[self.i_b] = sol.x[self.K: self.K + self.nb]
        for q in range(self.L):
            out[self.i_free[q][0]] = sol.x[self.K + self.nb + q]
        return out


#: set while :func:`_single_threaded_blas` holds BLAS to one thread (then BLAS products are safe)
_BLAS_SINGLE = [False]


def _gram(A: np.ndarray) -> np.ndarray:
    """A^T A: by BLAS when it is held to one thread (about 9x faster than the loop for a
    7,000 x 28 matrix), else without a BLAS call: on a busy machine threading a tall,
    thin product costs far more than it saves."""
    if _BLAS_SINGLE[0]:
        return A.T @ A
    return np.einsum("ij,ik->jk", A, A)


def _search_shift(model: _Model, theta: np.ndarray, j: int, free_amplitude: bool,
                  window_ppm: float | None = None) -> float:
    """Best centre of group j on the grid, others fixed (cross-correlation with the residual)."""
    from scipy.signal import correlate

    g = model.groups[j]
    x, used = model.x_all, model.used
    h = x[1] - x[0]
    # residual without this group, on the full grid (unused points get weight 0)
    full_model = model.evaluate(theta, x, model.leg_all)
    wk = theta[model.i_w[g.component]]
    own = model.group_profile(j, theta, x)
    r0 = np.where(used, model.y_all - full_model + wk * own, 0.0)
    m = used.astype(float)
    offsets = model.offsets(j, theta)
    span = float(np.max(np.abs(offsets))) if offsets.size else 0.0
    half_pts = int(np.ceil((span + 40.0 * theta[model.i_wd] / model.f) / h))
    tx = (np.arange(-half_pts, half_pts + 1)) * h
    t = _profile(tx, 0.0, offsets, g.rel * g.count, theta[model.i_wd] / model.f / 2.0)
    lo_c = g.shift0 - g.bound
    hi_c = g.shift0 + g.bound
    if window_ppm is not None:  # local refinement around the current place
        lo_c = max(lo_c, theta[model.i_c[j]] - window_ppm)
        hi_c = min(hi_c, theta[model.i_c[j]] + window_ppm)
    i_lo = int(np.ceil((lo_c - x[0]) / h))
    i_hi = int(np.floor((hi_c - x[0]) / h))
    i_lo, i_hi = max(i_lo, 0), min(i_hi, len(x) - 1)
    if i_hi <= i_lo:
        return float(np.clip(theta[model.i_c[j]], lo_c, hi_c))
    pad = half_pts
    rp = np.pad(r0, pad)
    mp = np.pad(m, pad)
    seg = slice(i_lo, i_hi + 2 * pad + 1)
    corr = correlate(rp[seg], t, mode="valid")
    norm = correlate(mp[seg], t * t, mode="valid")
    centres = x[i_lo:i_hi + 1]
    # Gaussian prior on the shift, in the same chi-square units as the data
    prior = ((centres - g.shift0) / g.sigma) ** 2 * model.noise**2
    if free_amplitude or wk <= 0:
        with np.errstate(divide="ignore", invalid="ignore"):
            gain = np.where((corr > 0) & (norm > 0), corr * corr / norm, 0.0)
        cost = -gain + prior
    else:
        cost = -2.0 * wk * corr + wk * wk * norm + prior
    i = int(np.argmin(cost))
    c = centres[i]
    if 0 < i < len(cost) - 1:  # parabolic refinement between grid points
        a, b, cc = cost[i - 1], cost[i], cost[i + 1]
        den = a - 2 * b + cc
        if den > 0:
            c += 0.5 * (a - cc) / den * h
    return float(np.clip(c, lo_c, hi_c))


def _swap_moves(model: _Model, theta: np.ndarray, with_oh: bool, active: np.ndarray,
                max_passes: int = 3) -> np.ndarray:
    """Exchange the places of two groups (or a group and the OH line) when that lowers the cost.

    Per-group searches get stuck when two groups sit on each other's multiplets (a
    septet on a triplet and the triplet on the septet, a 3H doublet on two 1H
    multiplets, a quintet on the broad OH line); moving one at a time cannot undo
    that, exchanging them can.
    """
    cost = model.cost
    best = cost(theta)
    groups = model.groups
    G = len(groups)
    oh = G if with_oh else None  # pseudo-index of the OH line

    def centre(t, j):
        return t[model.i_free[0][1]] if j == oh else t[model.i_c[j]]

    def fits(j, c):
        if j == oh:
            return OH_RANGE_PPM[0] <= c <= OH_RANGE_PPM[1]
        return abs(c - groups[j].shift0) <= groups[j].bound

    members = [j for j in range(G) if active[groups[j].component]] + ([oh] if with_oh else [])
    for _ in range(max_passes):
        improved = False
        for a_i, j1 in enumerate(members):
            for j2 in members[a_i + 1:]:
                if j1 != oh and j2 != oh and groups[j1].component == groups[j2].component and \
                        groups[j1].count == groups[j2].count and groups[j1].coef.shape == groups[j2].coef.shape:
                    continue  # same candidate, same pattern: exchanging changes nothing
                c1, c2 = centre(theta, j1), centre(theta, j2)
                if abs(c1 - c2) < 1e-3 or not fits(j1, c2) or not fits(j2, c1):
                    continue
                trial = theta.copy()
                for j, c in ((j1, c2), (j2, c1)):
                    trial[model.i_free[0][1] if j == oh else model.i_c[j]] = c
                trial = model.linear_solve(trial, active)
                for j in (j1, j2):
                    if j != oh:
                        trial[model.i_c[j]] = _search_shift(model, trial, j, free_amplitude=False, window_ppm=0.03)
                trial = model.linear_solve(trial, active)
                c = cost(trial)
                if c < best:
                    best, theta, improved = c, trial, True
        if not improved:
            break
    return theta


def _broad_line_place(x: np.ndarray, r: np.ndarray, used: np.ndarray, f: float):
    """(height, centre, width Hz) of the broad line that best explains the positive
    residual ``r`` within OH_RANGE_PPM (widths 5, 15, 40 Hz tried), or None."""
    from scipy.signal import correlate

    h = x[1] - x[0]
    m = used.astype(float)
    r = np.where(used, r, 0.0)
    lo, hi = max(OH_RANGE_PPM[0], x[0]), min(OH_RANGE_PPM[1], x[-1])
    best, best_gain = None, 0.0
    for wd in (5.0, 15.0, 40.0):
        hw = wd / f / 2.0
        half_pts = int(np.ceil(30 * hw / h))
        tx = np.arange(-half_pts, half_pts + 1) * h
        t = _profile(tx, 0.0, np.zeros(1), np.ones(1), hw)
        corr = correlate(np.pad(r, half_pts), t, mode="valid")
        norm = correlate(np.pad(m, half_pts), t * t, mode="valid")
        ok = (x >= lo) & (x <= hi) & (corr > 0) & (norm > 0)
        if not ok.any():
            continue
        gain = np.where(ok, corr * corr / np.where(norm > 0, norm, 1.0), 0.0)
        i = int(np.argmax(gain))
        if gain[i] > best_gain:
            best_gain = gain[i]
            best = (corr[i] / norm[i], x[i], wd)
    return best


def _search_oh(model: _Model, theta: np.ndarray, q: int) -> np.ndarray:
    """Place the free exchangeable line where the residual has a broad positive hump."""
    x = model.x_all
    theta = theta.copy()
    theta[model.i_free[q][0]] = 0.0
    r = model.y_all - model.evaluate(theta, x, model.leg_all)
    best = _broad_line_place(x, r, model.used, model.f)
    lo, hi = max(OH_RANGE_PPM[0], x[0]), min(OH_RANGE_PPM[1], x[-1])
    theta[model.i_free[q]] = best if best is not None else (0.0, 0.5 * (lo + hi), 10.0)
    return theta


def fit_spectrum(
    ppm: np.ndarray,
    intensity: np.ndarray,
    components: Sequence[Sequence[ProtonGroup]],
    *,
    frequency_mhz: float,
    masks_ppm: Sequence[tuple[float, float]] = (),
    extra_lines_ppm: Sequence[tuple[str, float]] = (),
    sweeps: int = 3,
    predictions: Sequence | None = None,
    start_shifts: Sequence[Sequence[float]] | None = None,
    relocate: bool = False,
    anchor_fractions: Sequence[float] | None = None,
) -> SpectrumFit:
    """Fit a 1H spectrum as a non-negative combination of candidate spectra.

    Parameters
    ----------
    ppm, intensity : ndarray
        The measured spectrum (either order; any uniform spacing).
    components : sequence of sequences of ProtonGroup
        Per candidate its predicted proton groups (``shift``, ``sigma``, ``count``,
        ``couplings``; exchangeable groups are modelled by one shared free line).
    frequency_mhz : float
        Spectrometer 1H frequency.
    masks_ppm : sequence of (lo, hi)
        Ranges left out of the fit (solvent, water, TMS, impurities).
    extra_lines_ppm : sequence of (name, shift_ppm)
        Known non-compound lines (solvent, water, TMS) near the fitted range: each
        gets a free Lorentzian (height, position within +-0.03 ppm, width) so that
        its tails outside the mask do not leak into a candidate.
    sweeps : int
        Rounds of per-group shift search before the non-linear polish.
    predictions : sequence of Prediction, optional
        One per component, the predictions the groups come from (same order). When
        given, the fit is made on the exact second-order spectra at ``frequency_mhz``
        (:func:`exact_fit`); if that leaves a reduced chi-square above
        ``EXACT_GOOD_CHI2``, the first-order fit runs too and the lower data
        chi-square wins.
    start_shifts : sequence of sequences of float, optional
        With ``predictions``: per candidate one shift per group of ``components``
        (exchangeable ones ignored). The exact fit is then only polished from these
        shifts, no search, no detection test and no first-order comparison: a
        diagnostic that tells the model's reach (from the shifts a demo spectrum was
        made with) from the search's (``benchmarks/bench_spin.py --from-table``).
    relocate : bool
        With ``start_shifts``: after the polish, the residual-guided relocation of single
        groups (:func:`_relocate`, as in the search) when the polish leaves more than
        ``EXACT_RELOCATE_MIN_CHI2`` per point: a start with a group far off its place.
    anchor_fractions : sequence of float, optional
        With ``predictions``: one non-negative number per candidate, the proportions of
        the amounts from an independent reading (the multiplet integrals of the peak
        list). When the exact fit's continuation ends far from the noise, its search runs
        with the amounts held in these proportions, then polishes them free
        (:func:`_anchored_run`); ignored when not finite or all zero.

    Returns
    -------
    SpectrumFit
    """
    with _single_threaded_blas():
        return _fit_spectrum(ppm, intensity, components, frequency_mhz=frequency_mhz, masks_ppm=masks_ppm,
                             extra_lines_ppm=extra_lines_ppm, sweeps=sweeps, predictions=predictions,
                             start_shifts=start_shifts, relocate=relocate, anchor_fractions=anchor_fractions)


def _single_threaded_blas():
    """BLAS held to one thread (``threadpoolctl`` when installed, else unchanged).

    The fit diagonalises thousands of small spin Hamiltonians and solves small normal
    equations: a threaded BLAS only adds hand-over costs, and on a busy machine its
    spinning threads cost far more (demo (b): 91 s CPU with two threads, 7 s with one).
    """
    from contextlib import contextmanager, nullcontext

    try:
        from threadpoolctl import threadpool_limits
    except ImportError:  # optional: without it the fit is the same, only slower on a busy machine
        return nullcontext()

    @contextmanager
    def limited():
        before = _BLAS_SINGLE[0]
        with threadpool_limits(limits=1, user_api="blas"):
            _BLAS_SINGLE[0] = True
            try:
                yield
            finally:
                _BLAS_SINGLE[0] = before

    return limited()


def _fit_spectrum(ppm, intensity, components, *, frequency_mhz, masks_ppm, extra_lines_ppm, sweeps,
                  predictions, start_shifts=None, relocate=False, anchor_fractions=None) -> SpectrumFit:
    f = float(frequency_mhz)
    groups = group_models(components)
    K = len(components)
    has_oh = any(g.exchangeable for comp in components for g in comp)
    spans = [(g.shift0 - g.bound - g.half_span_hz() / f, g.shift0 + g.bound + g.half_span_hz() / f)
             for g in groups]
    lo = min(s[0] for s in spans) - 0.15
    hi = max(s[1] for s in spans) + 0.15
    x, y, noise = prepare_axis(ppm, intensity, f, lo, hi)
    # points far from any place a group can reach only anchor the baseline: keep 1 in 8
    near = np.zeros(len(x), bool)
    for a, b in spans:
        near |= (x >= a - 0.03) & (x <= b + 0.03)
    used = near | (np.arange(len(x)) % 8 == 0)
    for a, b in masks_ppm:
        used &= ~((x >= min(a, b)) & (x <= max(a, b)))
    with_oh = has_oh and (x[0] < OH_RANGE_PPM[1]) and (x[-1] > OH_RANGE_PPM[0])
    # free lines: (name, start centre, centre bounds, width bounds Hz, start width Hz)
    extra = [(name, float(c), (c - 0.03, c + 0.03), (0.3, 12.0), 2.0)
             for name, c in extra_lines_ppm if x[0] - 0.05 <= c <= x[-1] + 0.05]
    oh_line = ("OH", 2.0, OH_RANGE_PPM, OH_WIDTH_BOUNDS_HZ, 15.0)
    free = ([oh_line] if with_oh else []) + extra
    model, theta, lb, ub = _setup(x, y, used, groups, K, f, noise, free)

    exact = None
    if predictions is not None and len(predictions) == K:
        # exact fit: one free broad line per candidate with OH (slow exchange between the
        # alcohols gives one line each; fast exchange makes them coincide, which the
        # free lines can do as well)
        n_oh = sum(1 for comp in components if any(g.exchangeable for g in comp)) if with_oh else 0
        free_x = [(f"OH{i + 1}" if i else "OH", *oh_line[1:]) for i in range(n_oh)] + extra
        model_x, theta_x, lb_x, ub_x = _setup(x, y, used, groups, K, f, noise, free_x)
        if start_shifts is not None:
            if len(start_shifts) != K:
                raise SpecmatchError(f"start_shifts: {len(start_shifts)} candidates, the fit has {K}")
            theta_x[model_x.i_c] = np.clip([float(start_shifts[g.component][g.index]) for g in groups],
                                           lb_x[model_x.i_c], ub_x[model_x.i_c])
            return _exact_polish_only(model_x, theta_x, lb_x, ub_x, predictions, free_x, n_oh, relocate)
        anchor = None
        if anchor_fractions is not None:
            a = np.asarray(anchor_fractions, float)
            if a.shape == (K,) and np.all(np.isfinite(a)) and np.all(a >= 0) and a.sum() > 0:
                anchor = a / a.sum()
        try:
            exact = exact_fit(model_x, theta_x, lb_x, ub_x, predictions, free_x, n_oh, anchor=anchor)
        except SpecmatchError:
            exact = None  # groups that do not match a structure: first order only
        if exact is not None and exact.chi2_red <= EXACT_GOOD_CHI2:
            return exact
    fit = _first_order_fit(model, theta, lb, ub, groups, free, with_oh, sweeps)
    if exact is not None and _data_chi2(exact) <= _data_chi2(fit):
        return exact
    return fit


def _setup(x, y, used, groups, K, f, noise, free):
    """The first-order model, its start vector and bounds."""
    model = _Model(x, y, used, groups, K, f, noise, free)
    theta = np.zeros(model.n)
    theta[model.i_c] = [g.shift0 for g in groups]
    for j, g in enumerate(groups):
        theta[model.i_j[j]] = g.j0_hz
    theta[model.i_wd] = estimate_width_hz(x, y, used, f)
    for q, (_, c, _, _, wd) in enumerate(free):
        theta[model.i_free[q]] = (0.0, c, wd)
    lb = np.full(model.n, -np.inf)
    ub = np.full(model.n, np.inf)
    for j, g in enumerate(groups):
        lb[j], ub[j] = g.shift0 - g.bound, g.shift0 + g.bound
        lb[model.i_j[j]] = np.maximum(0.3, g.j0_hz - J_BOUND_HZ)
        ub[model.i_j[j]] = g.j0_hz + J_BOUND_HZ
    lb[model.i_wd], ub[model.i_wd] = WIDTH_BOUNDS_HZ
    lb[model.i_w] = 0.0
    for q, (_, _, (clo, chi), (wlo, whi), _) in enumerate(free):
        lb[model.i_free[q]] = (0.0, clo, wlo)
        ub[model.i_free[q]] = (np.inf, chi, whi)
    return model, theta, lb, ub


def _data_chi2(fit: SpectrumFit) -> float:
    r = (fit.y - fit.fitted)[fit.used] / fit.noise_sd
    return float(r @ r)


def _first_order_fit(model: _Model, theta: np.ndarray, lb: np.ndarray, ub: np.ndarray, groups, free,
                     with_oh: bool, sweeps: int) -> SpectrumFit:
    """Staged searches on first-order multiplets, detection test, restart from the resolved signals."""
    K = model.K
    theta, best_cost = _fit_starts(model, theta, lb, ub, list(range(K)), sweeps, with_oh)
    theta, undetected = _detection_test(model, theta, best_cost, lb, ub, sweeps, with_oh)

    fit = _assemble(model, theta, undetected, groups, free, with_oh)
    # the fitted shares of overlapped regions can sit in a local minimum while the
    # resolved signals say otherwise: restart from the amounts the resolved signals
    # integrate to, keep whichever fit is better
    amounts = {}
    for r in fit.regions:
        if r.purity >= PURITY_MIN and r.amount is not None and r.component not in undetected:
            if r.component not in amounts or r.protons > amounts[r.component][1]:
                amounts[r.component] = (max(r.amount, 0.0), r.protons)
    present = [k for k in range(K) if fit.weights[k] > 0.01 * fit.weights.sum()]
    if present and all(k in amounts for k in present):
        trial = theta.copy()
        for k in present:
            trial[model.i_w[k]] = amounts[k][0]
        f_int = trial[model.i_w] / trial[model.i_w].sum()
        if np.max(np.abs(f_int - fit.fractions)) > RESTART_FRACTION:
            # place every candidate's groups afresh at the heights the resolved signals give
            comps = [k for k in range(K) if k not in undetected]
            trial, c_trial = _fit_starts(model, theta, lb, ub, comps, sweeps, with_oh, w_init=trial[model.i_w])
            if c_trial < model.cost(theta):
                fit = _assemble(model, trial, undetected, groups, free, with_oh)
    return fit


def _assemble(model: _Model, theta: np.ndarray, undetected: dict[int, float], groups, free, with_oh
              ) -> SpectrumFit:
    """Covariance, per-component models and signal regions at a solution."""
    x, y, used, noise = model.x_all, model.y_all, model.used, model.noise
    # covariance over the parameters that are not pinned (weights at zero stay in:
    # their sd is what says "absent within the uncertainty")
    Jm = model.jacobian(theta)
    rd = model.residuals(theta)[:len(model.xu)]
    cov, chi2_sig, inflation = _uncertainty(Jm, rd, theta[model.i_w] @ model.component_matrix(theta), noise, model.n)
    wcov = cov[np.ix_(model.i_w, model.i_w)]

    full_comp = model.component_matrix(theta, x)
    w = theta[model.i_w]
    fit = SpectrumFit(
        groups=groups,
        weights=w.copy(),
        weights_cov=wcov,
        shifts_ppm=theta[model.i_c].copy(),
        j_hz=[theta[ij].copy() for ij in model.i_j],
        width_hz=float(theta[model.i_wd]),
        baseline=theta[model.i_b].copy(),
        oh=tuple(float(v) for v in theta[model.i_free[0]]) if with_oh else None,
        extra_lines={name: tuple(float(v) for v in theta[model.i_free[q]]) for q, (name, *_) in enumerate(free)},
        x=x, y=y, used=used,
        fitted=model.evaluate(theta, x, model.leg_all),
        component_curves=w[:, None] * full_comp,
        baseline_curve=model.leg_all @ theta[model.i_b],
        noise_sd=noise,
        chi2_red=chi2_sig,
        inflation=float(inflation),
        undetected=undetected,
    )
    fit.regions = signal_regions(fit, model, theta)
    return fit


def _search_phase(model: _Model, theta: np.ndarray, comp_order: Sequence[int], sweeps: int,
                  with_oh: bool, big_first: bool = True, w_init: np.ndarray | None = None) -> np.ndarray:
    """Grid searches of the group shifts, adding candidates one at a time in ``comp_order``.

    Groups are placed largest first (``big_first``) or smallest first: with equal
    couplings the lines of different groups coincide (a 3H doublet matches the two
    central lines of a 4H methylene envelope), and which order untangles that
    depends on the molecule; the caller tries both.
    """
    groups = model.groups
    active = np.zeros(model.K, bool)
    h = model.x_all[1] - model.x_all[0]
    theta[model.i_w] = 0.0
    for k in comp_order:
        # first guess of the newcomer's amount: the unexplained area over its proton count.
        # Its groups are then placed at that fixed height, so a 3H doublet goes where
        # 3H of doublet are, not onto the biggest multiplet around
        resid = (model.yu - model.evaluate(theta))
        area = float(np.sum(resid[resid > 3.0 * model.noise]) * h)
        protons = sum(g.count for g in groups if g.component == k)
        active[k] = True
        theta[model.i_w[k]] = max(area / max(protons, 1), 0.0) if w_init is None else w_init[k]
        # most protons first: big groups find their place most reliably
        order = sorted((j for j, g in enumerate(groups) if active[g.component]),
                       key=lambda j: (-groups[j].count if big_first else groups[j].count))
        for sweep in range(sweeps):
            if with_oh:  # one strong broad line: place it before the groups take its place
                theta = _search_oh(model, theta, 0)
            for j in order:
                if sweep == 0 and groups[j].component != k:
                    continue
                theta[model.i_c[j]] = _search_shift(model, theta, j, free_amplitude=False)
            if with_oh:
                theta = _search_oh(model, theta, 0)
            theta = model.linear_solve(theta, active)
    theta = _swap_moves(model, theta, with_oh, active)
    for j in sorted(range(len(groups)), key=lambda j: -groups[j].count):
        if active[groups[j].component]:
            theta[model.i_c[j]] = _search_shift(model, theta, j, free_amplitude=False)
            theta = _search_j_scale(model, theta, j)
    return model.linear_solve(theta, active)


def _search_j_scale(model: _Model, theta: np.ndarray, j: int) -> np.ndarray:
    """Stretch or shrink group j's couplings together (a few per cent) if that fits better.

    The outer lines of a septet with J 0.4 Hz off sit 1.2 Hz away: with 1 Hz lines
    the gradient cannot see them, a coarse scan can.
    """
    if not len(model.i_j[j]):
        return theta
    g = model.groups[j]
    best, best_cost = theta, model.cost(theta)
    for scale in (0.88, 0.92, 0.96, 1.04, 1.08, 1.12):
        trial = theta.copy()
        trial[model.i_j[j]] = np.clip(theta[model.i_j[j]] * scale, np.maximum(0.3, g.j0_hz - J_BOUND_HZ),
                                      g.j0_hz + J_BOUND_HZ)
        trial[model.i_c[j]] = _search_shift(model, trial, j, free_amplitude=False, window_ppm=0.01)
        c = model.cost(trial)
        if c < best_cost:
            best, best_cost = trial, c
    return best


def _levenberg_marquardt(fun, jac, theta, lb, ub, *, max_iter: int = 40, tol: float = 1e-8) -> np.ndarray:
    """Bounded Levenberg-Marquardt on the normal equations.

    The Jacobian is tall and thin (spectrum points x a few dozen parameters), so
    the n x n normal equations are far cheaper than factorising it. Parameters at
    a bound whose gradient pushes outward are held for that step (active set);
    steps are projected onto the bounds.
    """
    r = fun(theta)
    cost = float(r @ r)
    lam = 1e-3
    for _ in range(max_iter):
        J = jac(theta)
        g = np.einsum("ij,i->j", J, r)
        H = _gram(J)
        with np.errstate(invalid="ignore"):
            at_lo = np.isfinite(lb) & (theta <= lb + 1e-12 * (1 + np.abs(lb))) & (g > 0)
            at_hi = np.isfinite(ub) & (theta >= ub - 1e-12 * (1 + np.abs(ub))) & (g < 0)
        free = ~(at_lo | at_hi)
        d = np.diag(H).copy()
        d[d <= 0] = 1.0
        improved = False
        for _ in range(12):
            A = H[np.ix_(free, free)] + lam * np.diag(d[free])
            try:
                step_free = -np.linalg.solve(A, g[free])
            except np.linalg.LinAlgError:
                lam *= 10.0
                continue
            step = np.zeros_like(theta)
            step[free] = step_free
            trial = np.clip(theta + step, lb, ub)
            r_t = fun(trial)
            c_t = float(r_t @ r_t)
            if c_t < cost:
                rel = (cost - c_t) / max(cost, 1e-300)
                theta, r, cost = trial, r_t, c_t
                lam = max(lam / 3.0, 1e-9)
                improved = True
                break
            lam *= 4.0
        if not improved or rel < tol:
            break
    return theta


def _fit_starts(model: _Model, theta0: np.ndarray, lb: np.ndarray, ub: np.ndarray, comps: Sequence[int],
                sweeps: int, with_oh: bool, w_init: np.ndarray | None = None,
                rotations: bool = True) -> tuple[np.ndarray, float]:
    """Staged searches + polish from several starts; the lowest cost wins.

    One start per choice of the candidate placed first (it explains what it can, the
    next ones the residual), each with big-groups-first and small-groups-first
    placement (with more than two candidates: small-first for the given order only).
    ``rotations=False``: the given order only. Candidates not in ``comps`` are held
    at zero weight.
    """
    comps = list(comps)
    lb, ub = lb.copy(), ub.copy()
    for k in range(model.K):
        if k not in comps:
            lb[model.i_w[k]] = ub[model.i_w[k]] = 0.0
    n = len(comps)
    orders = [comps[r:] + comps[:r] for r in range(n)] if (rotations and n <= 4) else [comps]
    starts = [(o, True) for o in orders] + [(orders[0], False)]
    if n <= 2:
        starts += [(o, False) for o in orders[1:]]
    best = None
    for comp_order, big in starts:
        t = _search_phase(model, theta0.copy(), comp_order, sweeps, with_oh, big_first=big, w_init=w_init)
        t = _levenberg_marquardt(model.residuals, model.jacobian, np.clip(t, lb, ub), lb, ub)
        c = model.cost(t)
        if best is None or c < best[1]:
            best = (t, c)
    return best


def _detection_test(model: _Model, theta: np.ndarray, cost: float, lb: np.ndarray, ub: np.ndarray,
                    sweeps: int, with_oh: bool) -> tuple[np.ndarray, dict[int, float]]:
    """Refit without each minor candidate; keep it only if the data need it.

    With free shifts a candidate that is not in the sample still finds noise, line
    tails, the broad OH line or the misfit of another candidate's multiplet to
    explain, which biases its fraction upwards. A minor candidate (below
    ``DETECT_MAX_FRACTION``) counts as detected only if the best fit without it
    (searched afresh) is worse by more than ``DETECT_DCHI2 +
    DETECT_DCHI2_PER_GROUP`` x its groups in chi-square (a look-elsewhere allowance
    for the free shifts). Otherwise the refit is kept, with the candidate's groups at
    the predicted shifts and J and its weight re-solved there (that gives the
    "absent" candidate its uncertainty). Returns the solution and, per candidate
    found not needed, the fraction it had before (an upper limit for the report).
    """
    undetected: dict[int, float] = {}
    theta0 = theta.copy()
    for k in range(model.K):
        w = theta[model.i_w]
        tot = w.sum()
        if model.K < 2 or tot <= 0 or w[k] / tot >= DETECT_MAX_FRACTION:
            continue
        # the others, biggest first, searched afresh
        others = sorted((q for q in range(model.K) if q != k and q not in undetected), key=lambda q: -w[q])
        start = theta0.copy()
        for j, g in enumerate(model.groups):
            if g.component == k:
                start[model.i_c[j]] = g.shift0
                start[model.i_j[j]] = g.j0_hz
        trial, c0 = _fit_starts(model, start, lb, ub, others, sweeps, with_oh, rotations=len(others) <= 2)
        n_groups = sum(1 for g in model.groups if g.component == k)
        if c0 - cost > DETECT_DCHI2 + DETECT_DCHI2_PER_GROUP * n_groups:
            continue
        undetected[k] = float(w[k] / tot)
        active = np.ones(model.K, bool)
        active[list(undetected)] = False
        active[k] = True
        theta = model.linear_solve(trial, active)
        cost = model.cost(theta)
    return theta, undetected


def _autocorr_time(r: np.ndarray, mask: np.ndarray) -> float:
    """Integrated autocorrelation of the residuals over the signal points (>= 1).

    Smooth misfit (wrong J, second-order effects) makes neighbouring residuals
    correlated; the effective number of independent points shrinks by this factor.
    """
    if mask.sum() < 20:
        return 1.0
    rr = np.where(mask, r, 0.0)
    rr = rr - rr[mask].mean() * mask
    v = float(np.sum(rr * rr))
    if v <= 0:
        return 1.0
    tau = 1.0
    for lag in range(1, 200):
        rho = float(np.sum(rr[:-lag] * rr[lag:])) / v
        if rho < 0.05:
            break
        tau += 2.0 * rho
    return tau


def signal_regions(fit: SpectrumFit, model: _Model, theta: np.ndarray) -> list[SignalRegion]:
    """Stretches of the spectrum where one component makes >= PURITY_MIN of the fitted lines.

    For every component, each of its groups defines a window (the multiplet's extent
    plus 3 line widths on both sides); overlapping windows of the same component merge.
    Absent components (weight ~0) are judged as if present at the mean weight of the
    others, so that "nothing there" is a measurement.
    """
    x = fit.x
    f = model.f
    hw_ppm = fit.width_hz / f / 2.0
    w = fit.weights
    w_ref = np.where(w > 0.02 * max(w.max(), 1e-300), w, max(float(w[w > 0].mean()) if (w > 0).any() else 1.0, 1e-300))
    own_unit = {}
    unit = theta.copy()
    for j, g in enumerate(fit.groups):
        own_unit[j] = model.group_profile(j, unit, x)
    comp_unit = np.zeros((model.K, len(x)))
    for j, g in enumerate(fit.groups):
        comp_unit[g.component] += own_unit[j]
    oh_line = model.free_total(theta, x)
    regions: list[SignalRegion] = []
    h = x[1] - x[0]
    for k in range(model.K):
        wins = []
        for j, g in enumerate(fit.groups):
            if g.component != k:
                continue
            c = fit.shifts_ppm[j]
            off = model.offsets(j, theta)
            wins.append([c + off.min() - 6 * hw_ppm, c + off.max() + 6 * hw_ppm, [j]])
        wins.sort()
        merged: list[list] = []
        for a, b, js in wins:
            if merged and a <= merged[-1][1]:
                merged[-1][1] = max(merged[-1][1], b)
                merged[-1][2] += js
            else:
                merged.append([a, b, js])
        for a, b, js in merged:
            sel = (x >= a) & (x <= b)
            if sel.sum() < 3:
                continue
            own = w_ref[k] * comp_unit[k][sel].sum()
            others = sum(w[q] * comp_unit[q][sel].sum() for q in range(model.K) if q != k) + oh_line[sel].sum()
            purity = own / (own + others) if own + others > 0 else 0.0
            masked_share = 1.0 - fit.used[sel].mean()
            protons = sum(fit.groups[j].count for j in js)
            reg = SignalRegion(k, tuple(js), float(a), float(b), protons, float(purity))
            if masked_share < 0.02:
                # measured integral over the window, baseline removed, corrected for
                # the Lorentzian tails outside the window (using the fitted shape)
                data = float(np.sum(fit.y[sel] - fit.baseline_curve[sel]) * h)
                # unit-amount area of this component's groups inside the window
                inside = float(sum(own_unit[j][sel].sum() * h for j in js))
                # the other components' (small) share in the window is subtracted
                other_area = float(sum(w[q] * comp_unit[q][sel].sum() for q in range(model.K) if q != k) * h
                                   + oh_line[sel].sum() * h)
                reg.integral = data
                reg.amount = (data - other_area) / inside
                reg.amount_sd = float(fit.noise_sd * np.sqrt(sel.sum()) * h / inside)
            regions.append(reg)
    return regions


# ------------------------------------------------------------ exact (second-order) fit
#: lines of a candidate are evaluated within this many Hz of their centre (the
#: Lorentzian value there is below 1e-4 of the peak for lines narrower than 1.2 Hz)
EXACT_WINDOW_HZ = 60.0
#: ... and a line k times weaker than the candidate's strongest within EXACT_WINDOW_HZ /
#: sqrt(k), at least EXACT_MIN_WINDOW_HZ: its cut-off tail is then no larger than the
#: strongest line's (the Lorentzian tail falls as amplitude / distance**2)
EXACT_MIN_WINDOW_HZ = 6.0
#: rounds of (exact simulation at the current shifts -> least squares with the lines
#: moved to first order in the shift changes); stops earlier when shifts settle (ppm)
EXACT_ROUNDS = 3
EXACT_SETTLE_PPM = 2e-4
#: function evaluations per least-squares round (the searches have placed the groups)
EXACT_MAX_NFEV = 15
#: for the fit, exact lines weaker than this (share of one proton) are dropped and lines
#: closer than EXACT_MERGE_HZ merged: with lines >= 0.2 Hz wide neither shows above the noise
EXACT_MIN_INTENSITY = 1e-5
EXACT_MERGE_HZ = 0.01
#: places tried per group and sweep (the best separated minima of the grid correlation)
EXACT_TRIALS = 3
#: sweeps of per-group searches per start
EXACT_SWEEPS = 2
#: starts: the predicted shifts, then shifts drawn within one prediction sigma (fixed
#: seed), EXACT_MAX_STARTS in all
EXACT_MAX_STARTS = 3
EXACT_SEED = 20260419
#: chi-square per point after the first start's searches beyond which the exact fit
#: stops there (the first-order fit is compared with it instead of more starts)
EXACT_HOPELESS_CHI2 = 50.0
#: trust-region polish (:func:`_exact_polish`): rounds, and the starting step radius (Hz)
#: of the shifts per round (about half a vicinal coupling: within it a strongly coupled
#: pattern keeps its shape well enough for the linearised step)
EXACT_POLISH_ROUNDS = 8
EXACT_POLISH_RADIUS_HZ = 4.0
#: extra Lorentzian broadening (Hz) of the stages of :func:`_exact_continuation`
EXACT_STAGES_HZ = (8.0, 3.0, 0.0)
#: a continuation ending at or below this cost per point is taken without further starts
EXACT_CONTINUATION_OK = 3.0
#: the continuation stops after two polish rounds of its first (broadest) stage when they
#: leave more than this cost per point (noise of the smoothed data): demo (c) leaves 5, the crowded envelope of
#: demo (a) thousands, where the sharper stages cost minutes and do not recover
EXACT_STAGE_GIVE_UP = 50.0
#: the continuation with the candidates placed one at a time runs for at most this many
#: candidates (one first stage per candidate order)
EXACT_ORDERED_MAX_CANDIDATES = 3
#: ... and at most this many proton groups in all: its searches and swaps grow with the
#: groups (squared for the swaps); demo (b) has 11 (7 s CPU), the two alcohols of demo (a)
#: 17 (45 s CPU, and still far from the noise in their crowded ring envelope)
EXACT_ORDERED_MAX_GROUPS = 14
#: after exchanging two groups' places (:meth:`_ExactSearch.swap_pairs`) each is searched
#: this far (Hz) around its new place (about one vicinal coupling: the centres of a triplet
#: and a doublet on each other's lines differ by up to half a coupling)
EXACT_SWAP_WINDOW_HZ = 8.0
#: residual-guided relocation (:func:`_relocate`), run when a solution leaves more than
#: EXACT_RELOCATE_MIN_CHI2 per point (noise: 1) and less than EXACT_HOPELESS_CHI2: the
#: residual smoothed by EXACT_RELOCATE_SMOOTH_HZ (about a multiplet's width), its
#: EXACT_RELOCATE_TARGETS largest separated positive humps (unexplained intensity) as
#: targets, per target the EXACT_RELOCATE_GROUPS groups that can reach it sitting where the
#: model most exceeds the data, at most EXACT_RELOCATE_ROUNDS accepted moves
EXACT_RELOCATE_MIN_CHI2 = 1.5
EXACT_RELOCATE_SMOOTH_HZ = 6.0
EXACT_RELOCATE_TARGETS = 3
EXACT_RELOCATE_GROUPS = 4
EXACT_RELOCATE_ROUNDS = 3
#: anchored search (:func:`_anchored_run`, when the caller gives amounts from the multiplet
#: integrals): rounds of per-group searches and pair exchanges with the amounts held in
#: those proportions (stops earlier when nothing moves). In a crowded envelope freely
#: re-solved amounts follow the misplaced groups (demo (a): the 4% substrate rose to 15%
#: to cover the misfit, the search then ended at 280 per point; held: 164 after three
#: rounds, 193 after two. Whole fit (bench_spin.py --demo-fit a): two rounds 76 s CPU,
#: fractions 0.664/0.284/0.053 (truth 0.673/0.288/0.038), three rounds 110 s CPU and
#: 0.631/0.278/0.091 (reduced chi-square 1071 and 858): two kept)
EXACT_ANCHOR_ROUNDS = 2


#: exact lines are drawn as exact Lorentzians within EXACT_NEAR_POINTS grid steps (at
#: least EXACT_NEAR_HWHM half widths) of their centre, handed over by a smooth switch to
#: a far part computed by FFT for all lines at once (see :class:`_LineShape`): the whole
#: Lorentzian, so the model is the line shape the spectrum has out to its far tails
#: (cut tails of thousands of crowded lines add up to several noise sd)
EXACT_NEAR_POINTS = 20
EXACT_NEAR_HWHM = 8.0


def _smoothstep(a: np.ndarray) -> np.ndarray:
    a = np.clip(a, 0.0, 1.0)
    return a * a * (3.0 - 2.0 * a)


class _LineShape:
    """Area-normalised Lorentzian lines (half width ``hw``) on a uniform ascending axis.

    Each line is ``L(d) * (1 - s(|d|))`` evaluated exactly within ``w2`` of its centre
    plus ``L(d) * s(|d|)`` from the far part, where ``s`` switches smoothly from 0 at
    ``w1`` to 1 at ``w2 = 2 w1``. The far part is the line amplitudes spread linearly
    onto the grid nodes, convolved (FFT) with the smooth far kernel: linear spreading
    errs by ``h**2/8`` times the kernel's curvature, which is below 2e-5 of a line's
    height with ``w1 >= 20`` grid steps. Sums of the two parts are the full Lorentzian.
    """

    def __init__(self, x: np.ndarray, hw: float):
        self.x = x
        self.M = len(x)
        self.h = float(x[1] - x[0]) if len(x) > 1 else 1.0
        self.hw = float(hw)
        self.w1 = max(EXACT_NEAR_POINTS * self.h, EXACT_NEAR_HWHM * self.hw)
        self.w2 = 2.0 * self.w1
        self.pad = max(self.M // 4, 1)
        from scipy.fft import next_fast_len, rfft

        reach = self.M - 1 + self.pad
        d = np.arange(-reach, reach + 1) * self.h
        kern = self._lorentz(d) * _smoothstep((np.abs(d) - self.w1) / (self.w2 - self.w1))
        self.n_hist = self.M + 2 * self.pad
        self.nfft = next_fast_len(self.n_hist + kern.size - 1, real=True)
        self.kfft = rfft(kern, self.nfft)
        self.out0 = self.M - 1 + 2 * self.pad

    def _lorentz(self, d: np.ndarray) -> np.ndarray:
        return (self.hw / np.pi) / (d * d + self.hw * self.hw)

    def near(self, centres: np.ndarray):
        """(line, point, d) of every grid point within ``w2`` of a line."""
        x = self.x
        lo = np.searchsorted(x, centres - self.w2)
        hi = np.searchsorted(x, centres + self.w2)
        cnt = hi - lo
        line = np.repeat(np.arange(centres.size), cnt)
        pt = np.repeat(lo - np.concatenate([[0], np.cumsum(cnt)[:-1]]), cnt) + np.arange(cnt.sum())
        return line, pt, x[pt] - centres[line]

    def curves(self, centres: np.ndarray, amps: np.ndarray, comp: np.ndarray | None = None,
               n_comp: int = 1) -> np.ndarray:
        """(n_comp, M) curves, one row per component (``comp``: component of each line)."""
        from scipy.fft import irfft, rfft

        comp = np.zeros(centres.size, int) if comp is None else comp
        M = self.M
        line, pt, d = self.near(centres)
        v = amps[line] * self._lorentz(d) * (1.0 - _smoothstep((np.abs(d) - self.w1) / (self.w2 - self.w1)))
        out = np.bincount(comp[line] * M + pt, weights=v, minlength=n_comp * M).reshape(n_comp, M)
        pos = np.clip((centres - self.x[0]) / self.h + self.pad, 0.0, self.n_hist - 1.000001)
        i = np.floor(pos).astype(int)
        u = pos - i
        hist = np.bincount(np.concatenate([comp * self.n_hist + i, comp * self.n_hist + i + 1]),
                           weights=np.concatenate([amps * (1.0 - u), amps * u]),
                           minlength=n_comp * self.n_hist).reshape(n_comp, self.n_hist)
        far = irfft(rfft(hist, self.nfft, axis=1) * self.kfft[None, :], self.nfft, axis=1)
        return out + far[:, self.out0:self.out0 + M]


def _exact_lines(pred, shifts_ppm, f):
    from ...prediction.simulate import prediction_lines
    from ...prediction.spin import merge_lines

    lines = prediction_lines(pred, f, shifts=shifts_ppm, cached=False)
    keep = lines.intensity > EXACT_MIN_INTENSITY
    hz, a, d = merge_lines(lines.hz[keep], lines.intensity[keep], lines.dhz_dshift[keep], EXACT_MERGE_HZ)
    return hz / f, a, d


def _line_windows(amps: np.ndarray, f: float) -> np.ndarray:
    """Per line, the half range (ppm) over which it is evaluated (see EXACT_MIN_WINDOW_HZ)."""
    if amps.size == 0:
        return np.zeros(0)
    rel = np.sqrt(amps / float(amps.max()))
    return np.clip(rel * EXACT_WINDOW_HZ, EXACT_MIN_WINDOW_HZ, EXACT_WINDOW_HZ) / f


def _stick_curve(x: np.ndarray, centres: np.ndarray, amps: np.ndarray, hw: float, win: float,
                 comp: np.ndarray | None = None, n_comp: int = 1) -> np.ndarray:
    """Area-normalised Lorentzians (half width ``hw``) on an ascending axis, each evaluated
    within ``win`` (scalar or per line) of its centre; with ``comp`` one row per component."""
    lo = np.searchsorted(x, centres - win)
    hi = np.searchsorted(x, centres + win)
    cnt = hi - lo
    line = np.repeat(np.arange(centres.size), cnt)
    pt = np.repeat(lo - np.concatenate([[0], np.cumsum(cnt)[:-1]]), cnt) + np.arange(cnt.sum())
    d = x[pt] - centres[line]
    v = amps[line] * (hw / np.pi) / (d * d + hw * hw)
    if comp is None:
        return np.bincount(pt, weights=v, minlength=len(x))
    return np.bincount(comp[line] * len(x) + pt, weights=v, minlength=n_comp * len(x)).reshape(n_comp, len(x))


class _ExactModel:
    """The mixture model on exact stick spectra, linearised in the shifts around a reference.

    theta: group shifts (G), width (Hz), weights (K), baseline, free lines (height,
    centre, width) as in :class:`_Model`; no coupling parameters (couplings are the
    predicted network). Each candidate's lines (``parts[k]``: ppm, intensity,
    d ppm / d shift per fit group) come from the exact simulation at ``ref``.
    """

    def __init__(self, base: _Model, predictions, ref_shifts: np.ndarray):
        self.b = base
        self.preds = predictions
        self.G, self.K, self.L, self.f = base.G, base.K, base.L, base.f
        self.nb = base.nb
        self.i_c = np.arange(self.G)
        self.i_wd = self.G
        self.i_w = self.G + 1 + np.arange(self.K)
        self.i_b = self.G + 1 + self.K + np.arange(self.nb)
        self.i_free = (self.G + 1 + self.K + self.nb + np.arange(3 * self.L)).reshape(self.L, 3)
        self.n = self.G + 1 + self.K + self.nb + 3 * self.L
        self.parts: list = [None] * self.K
        self.relinearise(ref_shifts)

    def simulate(self, k: int, shifts: np.ndarray):
        """Exact lines of candidate k with its groups at ``shifts`` (one per fit group)."""
        pred = self.preds[k]
        sh = np.array([g.shift for g in pred.protons], float)
        cols = {}
        for j, g in enumerate(self.b.groups):
            if g.component == k:
                sh[g.index] = shifts[j]
                cols[g.index] = j
        p, a, d = _exact_lines(pred, sh, self.f)
        Dj = np.zeros((p.size, self.G))
        for idx, j in cols.items():
            Dj[:, j] = d[:, idx]
        return p, a, Dj

    def set_part(self, k: int, part, shifts: np.ndarray) -> None:
        self.parts[k] = part
        own = [j for j, g in enumerate(self.b.groups) if g.component == k]
        self.ref[own] = np.asarray(shifts, float)[own]
        self._join()

    def relinearise(self, shifts: np.ndarray) -> None:
        """Exact simulation of every candidate at ``shifts`` (one per fit group)."""
        self.ref = np.array(shifts, float)
        for k in range(self.K):
            self.parts[k] = self.simulate(k, self.ref)
        self._join()

    def _join(self) -> None:
        self.ppm0 = np.concatenate([p for p, _, _ in self.parts])
        self.amp = np.concatenate([a for _, a, _ in self.parts])
        self.comp = np.concatenate([np.full(p.size, k) for k, (p, _, _) in enumerate(self.parts)])
        self.D = np.vstack([D for _, _, D in self.parts])
        self._memo = None

    def centres(self, theta) -> np.ndarray:
        return self.ppm0 + self.D @ (theta[self.i_c] - self.ref)

    def shape(self, theta) -> _LineShape:
        hw = float(theta[self.i_wd]) / self.f / 2.0
        sh = getattr(self, "_shape", None)
        if sh is None or sh.hw != hw:
            sh = self._shape = _LineShape(self.b.x_all, hw)
        return sh

    def full_components(self, theta) -> np.ndarray:
        """(K, len(x_all)) candidate curves at unit amounts (memo of the last theta)."""
        key = (theta[self.i_c].tobytes(), float(theta[self.i_wd]))
        if self._memo is not None and self._memo[0] == key:
            return self._memo[1]
        out = self.shape(theta).curves(self.centres(theta), self.amp, self.comp, self.K)
        self._memo = (key, out)
        return out

    def components(self, theta, x=None):
        full = self.full_components(theta)
        if x is not None and x is self.b.x_all:
            return full
        return full[:, self.b.used]

    def free_lines(self, theta, x):
        """Unit-height free-line profiles (L, N)."""
        out = np.zeros((self.L, len(x)))
        for q in range(self.L):
            _, c, wd = theta[self.i_free[q]]
            out[q] = _profile(x, c, np.zeros(1), np.ones(1), wd / self.f / 2.0)
        return out

    def evaluate(self, theta, x=None, leg=None):
        x = self.b.xu if x is None else x
        leg = self.b.leg if leg is None else leg
        m = theta[self.i_w] @ self.components(theta, x) + leg @ theta[self.i_b]
        if self.L:
            m = m + theta[self.i_free[:, 0]] @ self.free_lines(theta, x)
        return m

    def priors(self, theta):
        return np.array([(theta[j] - g.shift0) / g.sigma for j, g in enumerate(self.b.groups)], float)

    def residuals(self, theta):
        return np.concatenate([(self.evaluate(theta) - self.b.yu) / self.b.noise, self.priors(theta)])

    def cost(self, theta) -> float:
        return float(np.sum(self.residuals(theta) ** 2))

    def jacobian(self, theta):
        from scipy.sparse import csr_matrix

        x = self.b.xu
        N = len(x)
        w = theta[self.i_w]
        amp_w = self.amp * w[self.comp]
        J = np.zeros((N + self.G, self.n))
        # line derivatives of the exact Lorentzian over the near windows (beyond them the
        # derivative falls as 1/d**3: left out)
        shape = self.shape(theta)
        line, pt, d = shape.near(self.centres(theta))
        col = np.full(len(self.b.x_all), -1)
        col[self.b.used] = np.arange(N)
        keep = col[pt] >= 0
        line, pt, d = line[keep], col[pt[keep]], d[keep]
        hw = shape.hw
        den = d * d + hw * hw
        dc = (hw / np.pi) * 2.0 * d / (den * den)  # d value / d centre, per unit amplitude
        M = csr_matrix((dc, (pt, line)), shape=(N, self.ppm0.size))
        J[:N, self.i_c] = M @ (amp_w[:, None] * self.D)
        dhw = (d * d - hw * hw) / (np.pi * den * den)
        J[:N, self.i_wd] = np.bincount(pt, weights=amp_w[line] * dhw, minlength=N) / self.f / 2.0
        J[:N, self.i_w] = self.components(theta).T
        J[:N, self.i_b] = self.b.leg
        for q in range(self.L):
            ia, ic, iw = self.i_free[q]
            p, dstick, dh = _profile(x, theta[ic], np.zeros(1), np.ones(1), theta[iw] / self.f / 2.0, True)
            J[:N, ia] = p
            J[:N, ic] = theta[ia] * dstick.sum(axis=1)
            J[:N, iw] = theta[ia] * dh / self.f / 2.0
        J[:N] /= self.b.noise
        J[N + np.arange(self.G), self.i_c] = [1.0 / g.sigma for g in self.b.groups]
        return J


class _ExactSearch:
    """Global search of the group shifts on exact candidate spectra.

    Per group, the grid correlation of its own lines (those whose position follows its
    shift, Hellmann-Feynman derivative > 0.5) with the residual proposes the
    ``EXACT_TRIALS`` best places within its bounds; each is judged by simulating the
    candidate exactly there and re-solving amounts, baseline and free-line heights
    (linear, non-negative), so a strongly coupled pattern that changes shape as its
    groups move is judged as it really looks. Shifts always equal the simulation's
    reference here (no linearisation).
    """

    def __init__(self, em: _ExactModel, theta: np.ndarray, hi: np.ndarray, n_oh: int,
                 shares: np.ndarray | None = None):
        self.em = em
        b = em.b
        self.x, self.y, self.used = b.x_all, b.y_all, b.used
        self.h = self.x[1] - self.x[0]
        self.t = theta.copy()
        self.t[em.i_c] = em.ref
        self.active = hi[em.i_w] > 0
        self.n_oh = n_oh
        # amounts held in these proportions (one common scale solved): see _anchor_shares
        self.shares = None if shares is None else np.asarray(shares, float) * self.active
        # with shares: None (their common scale solved) or the scale held fixed
        self.scale: float | None = None
        self.curves = self._curves()
        self.t, self.c = self.solve(self.curves, self.t)

    # -- model pieces on the full grid
    def _hw(self, t=None) -> float:
        return float((self.t if t is None else t)[self.em.i_wd]) / self.em.f / 2.0

    def _curve(self, part, t=None) -> np.ndarray:
        p, a, _ = part
        return self.em.shape(self.t if t is None else t).curves(p, a)[0]

    def _curves(self, t=None) -> np.ndarray:
        return np.vstack([self._curve(part, t) for part in self.em.parts])

    def total(self, curves=None, t=None) -> np.ndarray:
        em, t = self.em, (self.t if t is None else t)
        curves = self.curves if curves is None else curves
        m = t[em.i_w] @ curves + em.b.leg_all @ t[em.i_b]
        if em.L:
            m = m + t[em.i_free[:, 0]] @ em.free_lines(t, self.x)
        return m

    def prior_cost(self, t) -> float:
        return float(np.sum(self.em.priors(t) ** 2))

    def solve(self, curves: np.ndarray, t: np.ndarray) -> tuple[np.ndarray, float]:
        """Best amounts (>= 0), baseline and free-line heights (>= 0) for fixed shapes; (theta, cost)."""
        from scipy.optimize import lsq_linear

        em, b = self.em, self.em.b
        u = self.used
        C = curves[:, u] * self.active[:, None]
        nk = em.K
        yfit = b.yu
        if self.shares is not None:
            C = (self.shares @ C)[None, :]
            nk = 1
            if self.scale is not None:  # amounts fixed: only baseline and free lines solved
                yfit = b.yu - self.scale * C[0]
                C = C[:0]
                nk = 0
        F = em.free_lines(t, b.xu)
        A = np.hstack([C.T, b.leg, F.T]) / b.noise
        lbv = np.concatenate([np.zeros(nk), np.full(em.nb, -np.inf), np.zeros(em.L)])
        Gm = _gram(A)
        Gm[np.diag_indices_from(Gm)] += 1e-12 * max(float(np.max(np.diag(Gm))), 1e-300)
        R = np.linalg.cholesky(Gm).T
        rhs = np.einsum("ij,i->j", A, yfit / b.noise)
        d = np.linalg.solve(R.T, rhs)
        sol = lsq_linear(R, d, bounds=(lbv, np.full(lbv.shape, np.inf)), method="bvls")
        out = t.copy()
        if self.shares is None:
            out[em.i_w] = sol.x[: em.K]
        else:
            out[em.i_w] = (sol.x[0] if self.scale is None else self.scale) * self.shares
        out[em.i_b] = sol.x[nk: nk + em.nb]
        out[em.i_free[:, 0]] = sol.x[nk + em.nb:]
        r = A @ sol.x - yfit / b.noise
        return out, float(r @ r) + self.prior_cost(out)

    # -- moves
    def search_group(self, j: int, window_ppm: float | None = None) -> bool:
        """Try the best grid places of group j (within ``window_ppm`` of where it is, if
        given); keep the best exact one. True if it moved."""
        from scipy.signal import correlate

        em, t = self.em, self.t
        g = em.b.groups[j]
        k = g.component
        if not self.active[k]:
            return False
        p, a, D = em.parts[k]
        own = D[:, j] > 0.5
        if not own.any():
            return False
        hw = self._hw()
        win = _line_windows(a, em.f)[own]
        offs = p[own] - t[j]
        amps = a[own]
        wk = float(t[em.i_w[k]])
        own_curve = _stick_curve(self.x, p[own], amps, hw, win)
        r0 = np.where(self.used, self.y - self.total() + wk * own_curve, 0.0)
        m = self.used.astype(float)
        h = self.h
        half_pts = int(np.ceil((float(np.max(np.abs(offs))) + 40.0 * 2 * hw) / h))
        tx = np.arange(-half_pts, half_pts + 1) * h
        tmpl = _stick_curve(tx, offs, amps, hw, win)
        lo_c, hi_c = g.shift0 - g.bound, g.shift0 + g.bound
        if window_ppm is not None:
            lo_c, hi_c = max(lo_c, t[j] - window_ppm), min(hi_c, t[j] + window_ppm)
        x = self.x
        i_lo = max(int(np.ceil((lo_c - x[0]) / h)), 0)
        i_hi = min(int(np.floor((hi_c - x[0]) / h)), len(x) - 1)
        if i_hi <= i_lo:
            return False
        seg = slice(i_lo, i_hi + 2 * half_pts + 1)
        corr = correlate(np.pad(r0, half_pts)[seg], tmpl, mode="valid")
        norm = correlate(np.pad(m, half_pts)[seg], tmpl * tmpl, mode="valid")
        centres = x[i_lo:i_hi + 1]
        prior = ((centres - g.shift0) / g.sigma) ** 2 * em.b.noise**2
        if wk > 0:
            cost = -2.0 * wk * corr + wk * wk * norm + prior
        else:
            with np.errstate(divide="ignore", invalid="ignore"):
                cost = -np.where((corr > 0) & (norm > 0), corr * corr / norm, 0.0) + prior
        # separated local minima, best first
        order = np.argsort(cost)
        sep = max(4.0 * hw, 2 * h)
        picks: list[float] = []
        for i in order:
            c = centres[i]
            if any(abs(c - q) < sep for q in picks):
                continue
            if 0 < i < len(cost) - 1:
                aa, bb, cc = cost[i - 1], cost[i], cost[i + 1]
                den = aa - 2 * bb + cc
                if den > 0:
                    c += float(np.clip(0.5 * (aa - cc) / den, -1.0, 1.0)) * h
            picks.append(float(np.clip(c, lo_c, hi_c)))
            if len(picks) >= EXACT_TRIALS:
                break
        best = None
        for c in picks:
            if abs(c - t[j]) < 0.2 * hw:
                continue
            sh = em.ref.copy()
            sh[j] = c
            part = em.simulate(k, sh)
            curves = self.curves.copy()
            curves[k] = self._curve(part)
            trial = t.copy()
            trial[j] = c
            trial, cst = self.solve(curves, trial)
            if cst < self.c and (best is None or cst < best[0]):
                best = (cst, trial, part, curves, sh)
        if best is None:
            return False
        self.c, self.t, part, self.curves, sh = best
        em.set_part(k, part, sh)
        return True

    def swap_pairs(self) -> int:
        """Exchange the places of two groups of equal proton count (of one candidate or of
        two) when each place is within the other group's bounds and the exchange, with both
        groups then searched within ``EXACT_SWAP_WINDOW_HZ`` of their new places, lowers the
        cost. Per-group searches cannot undo a triplet sitting on a doublet and the doublet
        on the triplet: moving either one alone makes things worse. Returns the swaps made."""
        em = self.em
        groups = em.b.groups
        win = EXACT_SWAP_WINDOW_HZ / em.f
        done = 0
        for j1 in range(em.G):
            for j2 in range(j1 + 1, em.G):
                g1, g2 = groups[j1], groups[j2]
                if g1.count != g2.count or not (self.active[g1.component] and self.active[g2.component]):
                    continue
                c1, c2 = float(self.t[j1]), float(self.t[j2])
                if abs(c1 - c2) < 2.0 * win or abs(c2 - g1.shift0) > g1.bound or abs(c1 - g2.shift0) > g2.bound:
                    continue
                saved = (self.t.copy(), self.c, self.curves.copy(), list(em.parts), em.ref.copy())
                sh = em.ref.copy()
                sh[j1], sh[j2] = c2, c1
                for k in {g1.component, g2.component}:
                    em.set_part(k, em.simulate(k, sh), sh)
                trial = self.t.copy()
                trial[j1], trial[j2] = c2, c1
                self.curves = self._curves(trial)
                self.t, self.c = self.solve(self.curves, trial)
                self.search_group(j1, win)
                self.search_group(j2, win)
                if self.c < saved[1]:
                    done += 1
                    continue
                self.t, self.c, self.curves, em.parts, em.ref = saved
                em._join()
        return done

    def search_oh(self) -> None:
        """Place each free exchangeable line (the first ``n_oh`` free lines) in turn on the
        broadest positive residual hump left by the others."""
        em = self.em
        for q in range(self.n_oh):
            t = self.t.copy()
            t[em.i_free[q][0]] = 0.0
            best = _broad_line_place(self.x, self.y - self.total(t=t), self.used, em.f)
            if best is None:
                continue
            t[em.i_free[q]] = best
            trial, cst = self.solve(self.curves, t)
            if cst < self.c:
                self.t, self.c = trial, cst

    def search_width(self) -> None:
        em = self.em
        w0 = float(self.t[em.i_wd])
        for factor in (0.7, 0.85, 1.2, 1.45):
            t = self.t.copy()
            t[em.i_wd] = float(np.clip(w0 * factor, *WIDTH_BOUNDS_HZ))
            curves = self._curves(t)
            trial, cst = self.solve(curves, t)
            if cst < self.c:
                self.t, self.c, self.curves = trial, cst, curves

    def sweep(self, order: Sequence[int]) -> int:
        self.search_oh()
        moved = sum(self.search_group(j) for j in order)
        self.search_width()
        return moved

    def refresh(self, t: np.ndarray) -> None:
        """Adopt a polished solution: simulate at its shifts, re-solve the linear part."""
        self.em.relinearise(t[self.em.i_c])
        self.curves = self._curves(t)
        self.t, self.c = self.solve(self.curves, t)


def _shared_index(model: _Model, em: _ExactModel) -> tuple[np.ndarray, np.ndarray]:
    """Positions of the shared parameters (shifts, width, amounts, baseline, free lines) in
    the first-order and in the exact parameter vector; the couplings are first-order only."""
    fo = np.concatenate([model.i_c, [model.i_wd], model.i_w, model.i_b, model.i_free.ravel()]).astype(int)
    ex = np.concatenate([em.i_c, [em.i_wd], em.i_w, em.i_b, em.i_free.ravel()]).astype(int)
    return fo, ex


def _exact_bounds(model: _Model, em: _ExactModel, lb: np.ndarray, ub: np.ndarray):
    fo, ex = _shared_index(model, em)
    lo = np.full(em.n, -np.inf)
    hi = np.full(em.n, np.inf)
    lo[ex], hi[ex] = lb[fo], ub[fo]
    return lo, hi


def _exact_theta(model: _Model, em: _ExactModel, theta: np.ndarray) -> np.ndarray:
    """First-order parameter vector -> exact layout (couplings dropped)."""
    fo, ex = _shared_index(model, em)
    t = np.zeros(em.n)
    t[ex] = theta[fo]
    return t


def _first_order_theta(model: _Model, em: _ExactModel, t: np.ndarray) -> np.ndarray:
    """Exact solution -> first-order layout (predicted couplings), for the signal regions."""
    fo, ex = _shared_index(model, em)
    theta = np.zeros(model.n)
    theta[fo] = t[ex]
    for j, g in enumerate(model.groups):
        theta[model.i_j[j]] = g.j0_hz
    return theta


def _exact_least_squares(em: _ExactModel, t: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """Bounded least squares on the exact model (``scipy.optimize.least_squares``, trust-region
    reflective, analytic Jacobian: lines move with the shifts through their Hellmann-Feynman
    derivatives); the candidates are re-simulated exactly at the new shifts between rounds."""
    from scipy.optimize import least_squares

    span = np.where(np.isfinite(hi - lo), np.abs(hi - lo), 1.0)
    eps = 1e-9 * np.maximum(1.0, span)
    t = t.copy()
    for _ in range(EXACT_ROUNDS):
        t = np.clip(t, lo + np.where(np.isfinite(lo), eps, 0), hi - np.where(np.isfinite(hi), eps, 0))
        free = (hi - lo) > 0  # weights pinned at zero (absent candidates) stay there
        t[~free] = lo[~free]

        def fun(v, t=t, free=free):
            full = t.copy()
            full[free] = v
            return em.residuals(full)

        def jac(v, t=t, free=free):
            full = t.copy()
            full[free] = v
            return em.jacobian(full)[:, free]

        sol = least_squares(fun, t[free], jac=jac, bounds=(lo[free], hi[free]), method="trf",
                            x_scale="jac", max_nfev=EXACT_MAX_NFEV)
        t[free] = sol.x
        moved = float(np.max(np.abs(t[em.i_c] - em.ref))) if em.G else 0.0
        em.relinearise(t[em.i_c])
        if moved < EXACT_SETTLE_PPM:
            break
    return t


def _exact_polish(em: _ExactModel, t: np.ndarray, lo: np.ndarray, hi: np.ndarray, *,
                  rounds: int = EXACT_POLISH_ROUNDS, radius: float = EXACT_POLISH_RADIUS_HZ,
                  max_nfev: int = 40) -> tuple[np.ndarray, float]:
    """Trust-region polish on the exact model; (theta, cost).

    Each round solves the bounded least squares of the model linearised at the current
    shifts (lines moved by their Hellmann-Feynman derivatives; ``scipy.optimize.least_squares``,
    analytic Jacobian) with every shift kept within ``radius`` Hz of where the simulation
    was made, re-simulates the candidates whose shifts moved and keeps the step only if
    the exact cost went down; otherwise the radius shrinks fourfold. A strongly coupled
    pattern changes shape as its groups move, so a long linearised step is not trusted.
    """
    from scipy.optimize import least_squares

    span = np.where(np.isfinite(hi - lo), np.abs(hi - lo), 1.0)
    eps = 1e-9 * np.maximum(1.0, span)
    t = np.clip(t.copy(), lo + np.where(np.isfinite(lo), eps, 0), hi - np.where(np.isfinite(hi), eps, 0))
    free = (hi - lo) > 0  # weights pinned at zero (absent candidates) stay there
    t[~free] = lo[~free]
    if np.any(np.abs(t[em.i_c] - em.ref) > 1e-12):
        em.relinearise(t[em.i_c])
    cost = em.cost(t)
    r_ppm = radius / em.f
    for _ in range(rounds):
        lo_r, hi_r = lo.copy(), hi.copy()
        lo_r[em.i_c] = np.maximum(lo[em.i_c], em.ref - r_ppm)
        hi_r[em.i_c] = np.minimum(hi[em.i_c], em.ref + r_ppm)
        x0 = np.clip(t, lo_r + np.where(np.isfinite(lo_r), eps, 0), hi_r - np.where(np.isfinite(hi_r), eps, 0))

        def fun(v, x0=x0):
            full = x0.copy()
            full[free] = v
            return em.residuals(full)

        def jac(v, x0=x0):
            full = x0.copy()
            full[free] = v
            return em.jacobian(full)[:, free]

        sol = least_squares(fun, x0[free], jac=jac, bounds=(lo_r[free], hi_r[free]), method="trf",
                            x_scale="jac", max_nfev=max_nfev)
        trial = x0.copy()
        trial[free] = sol.x
        moved = np.abs(trial[em.i_c] - em.ref)
        old_parts, old_ref = list(em.parts), em.ref.copy()
        for k in range(em.K):
            own = [j for j, g in enumerate(em.b.groups) if g.component == k]
            if own and np.max(moved[own]) > 1e-9:
                em.set_part(k, em.simulate(k, trial[em.i_c]), trial[em.i_c])
        c_new = em.cost(trial)
        if c_new < cost:
            step = float(np.max(moved)) if moved.size else 0.0
            t, cost = trial, c_new
            if step < EXACT_SETTLE_PPM:
                break
            if step > 0.5 * r_ppm:
                r_ppm = min(2.0 * r_ppm, radius / em.f * 4.0)
        else:
            em.parts, em.ref = old_parts, old_ref
            em._join()
            r_ppm /= 4.0
            if r_ppm * em.f < 0.05:
                break
    return t, cost


def _smoothed(x: np.ndarray, y: np.ndarray, fwhm_hz: float, f: float) -> tuple[np.ndarray, float]:
    """``y`` convolved with an area-normalised Lorentzian of ``fwhm_hz`` (FFT; edges
    renormalised), and the factor the white-noise sd shrinks by."""
    from scipy.fft import irfft, next_fast_len, rfft

    h = x[1] - x[0]
    g = fwhm_hz / f / 2.0
    n = len(y)
    d = np.arange(-n, n + 1) * h
    k = (g / np.pi) / (d * d + g * g) * h
    nfft = next_fast_len(n + k.size - 1, real=True)
    kf = rfft(k, nfft)

    def conv(v):
        return irfft(rfft(v, nfft) * kf, nfft)[n:2 * n]

    return conv(y) / conv(np.ones(n)), float(np.sqrt(np.sum(k * k)))


def _stage_model(model: _Model, y_s: np.ndarray, shrink: float, width_hz: float, delta: float) -> _Model:
    """The model on data smoothed by ``delta`` Hz, thinned to about five points per line width."""
    x, used, f = model.x_all, model.used, model.f
    h_hz = (x[1] - x[0]) * f
    m = max(1, int((width_hz + delta) / 5.0 / h_hz))
    return _Model(x[::m], y_s[::m], used[::m], model.groups, model.K, f, model.noise * shrink, model.free)


def _exact_continuation(model: _Model, em: _ExactModel, theta0: np.ndarray, lo: np.ndarray,
                        hi: np.ndarray, n_oh: int, orders: Sequence[Sequence[int]] = ()
                        ) -> np.ndarray | None:
    """Polish from the predicted shifts on progressively less smoothed data (``EXACT_STAGES_HZ``).

    A Lorentzian convolved with a Lorentzian is a Lorentzian with the widths added, so
    the data convolved with a Lorentzian of width ``delta`` are fitted exactly by the
    same model with every line ``delta`` wider: on smoothed data a multiplet is one
    broad hump and the cost has few local minima; each stage starts from the last.

    With ``orders`` (candidate orders, e.g. each candidate first in turn) the first
    stage places the candidates one at a time instead (:func:`_ordered_stage`), every
    stage adds per-group searches before its polish, and only the order whose first
    stage ends lowest is carried on: a minor candidate's groups searched together with
    the major's take the major's multiplets (a 3H doublet on the major's crowded CH2
    envelope), searched after them they go to the residual the major leaves.
    """
    x, y, f = model.x_all, model.y_all, model.f
    t = _exact_theta(model, em, theta0)
    prev = 0.0
    for n_stage, delta in enumerate(EXACT_STAGES_HZ):
        if delta > 0:
            ys, shrink = _smoothed(x, y, delta, f)
            b = _stage_model(model, ys, shrink, float(t[em.i_wd]) - prev, delta)
        else:
            b = model
        es = _ExactModel(b, em.preds, t[em.i_c])
        lo_s, hi_s = lo.copy(), hi.copy()
        widths = [es.i_wd] + [int(es.i_free[q][2]) for q in range(es.L)]
        lo_s[widths] += delta
        hi_s[widths] += delta
        t = t.copy()
        t[widths] = np.clip(t[widths] - prev + delta, lo_s[widths], hi_s[widths])
        radius = EXACT_POLISH_RADIUS_HZ * (1.0 + delta / 2.0)
        if orders and n_stage == 0:
            best = None
            for order in orders:
                tt, c = _ordered_stage(es, t, lo_s, hi_s, n_oh, order, radius)
                if best is None or c < best[1]:
                    best = (tt, c)
            t = best[0]
            es.relinearise(t[es.i_c])
            prev = delta
            continue
        s = _ExactSearch(es, t, hi_s, n_oh)
        s.search_oh()
        if orders:
            order = sorted(range(es.G), key=lambda j: -es.b.groups[j].count)
            for _ in range(EXACT_SWEEPS):
                if not s.sweep(order):
                    break
            if s.swap_pairs():
                s.sweep(order)
        t = s.t
        if prev == 0.0 and delta > 0 and not orders:
            t, c = _exact_polish(es, t, lo_s, hi_s, radius=radius, rounds=2)
            if c / max(1, len(b.xu)) > EXACT_STAGE_GIVE_UP:
                return None  # far from the data already on smoothed lines: sharper stages only cost time
        t, _ = _exact_polish(es, t, lo_s, hi_s, radius=radius)
        prev = delta
    return t


def _ordered_stage(es: _ExactModel, t: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_oh: int,
                   order: Sequence[int], radius: float) -> tuple[np.ndarray, float]:
    """Candidates added one at a time in ``order``: each newcomer's groups searched (largest
    first, ``EXACT_SWEEPS`` sweeps over every group placed so far) on what the ones before
    leave, the rest held at zero amount; then all polished together. (theta, cost)."""
    t = t.copy()
    for n in range(1, len(order) + 1):
        act = set(order[:n])
        hi_a = hi.copy()
        for k in range(es.K):
            if k not in act:
                hi_a[es.i_w[k]] = 0.0
                t[es.i_w[k]] = 0.0
        es.relinearise(t[es.i_c])
        s = _ExactSearch(es, t, hi_a, n_oh)
        groups = sorted((j for j in range(es.G) if es.b.groups[j].component in act),
                        key=lambda j: -es.b.groups[j].count)
        for _ in range(EXACT_SWEEPS):
            if not s.sweep(groups):
                break
        t = s.t.copy()
    es.relinearise(t[es.i_c])
    return _exact_polish(es, t, lo, hi, radius=radius)


def _relocate(em: _ExactModel, t: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_oh: int
              ) -> tuple[np.ndarray, float]:
    """Residual-guided relocation of single groups; (theta, cost), never worse than ``t``.

    A polished solution can hold a group where the model puts intensity the data lack
    while intensity elsewhere stays unexplained, out of reach of the per-group searches:
    e.g. both halves of a diastereotopic CH2 on one place form a near-A2 pair whose lines
    follow each half's shift by about one half (no line is the group's own), and moving
    one half alone across the gap first makes things worse. Here the data residual,
    smoothed over about a multiplet's width, gives the unexplained humps (targets); each
    group that may reach a target is tried there, ranked by how far the model exceeds the
    data where it sits now: the candidate simulated exactly with the group moved, amounts
    re-solved, the group searched within ``EXACT_SWAP_WINDOW_HZ`` of the target. The best
    trials are polished (:func:`_exact_polish`, a few rounds) and the first that lowers the
    cost is kept; repeated up to ``EXACT_RELOCATE_ROUNDS`` times.
    """
    groups = em.b.groups
    f = em.f
    win = EXACT_SWAP_WINDOW_HZ / f
    sep = 2.0 * EXACT_RELOCATE_SMOOTH_HZ / f
    em.relinearise(t[em.i_c])
    cost = em.cost(t)
    for _ in range(EXACT_RELOCATE_ROUNDS):
        s = _ExactSearch(em, t, hi, n_oh)
        s.t[em.i_c] = t[em.i_c]
        x = s.x
        r = np.where(s.used, s.y - s.total(), 0.0)
        rs, shrink = _smoothed(x, r, EXACT_RELOCATE_SMOOTH_HZ, f)
        level = 3.0 * em.b.noise * shrink
        # separated local maxima of the smoothed residual above its noise, largest first
        peak = np.zeros(len(x), bool)
        peak[1:-1] = (rs[1:-1] >= rs[:-2]) & (rs[1:-1] > rs[2:]) & (rs[1:-1] > level)
        targets: list[float] = []
        for i in np.argsort(-np.where(peak, rs, -np.inf)):
            if not peak[i] or len(targets) >= EXACT_RELOCATE_TARGETS:
                break
            if all(abs(x[i] - c) >= sep for c in targets):
                targets.append(float(x[i]))
        trials = []
        for c in targets:
            able = [j for j, g in enumerate(groups)
                    if s.active[g.component] and abs(c - g.shift0) <= g.bound and abs(t[j] - c) >= sep]
            # over-explained places first: the smoothed residual where the group sits
            able.sort(key=lambda j: float(np.interp(t[j], x, rs)))
            for j in able[:EXACT_RELOCATE_GROUPS]:
                k = groups[j].component
                saved = (s.t.copy(), s.c, s.curves.copy(), list(em.parts), em.ref.copy())
                sh = em.ref.copy()
                sh[j] = c
                em.set_part(k, em.simulate(k, sh), sh)
                trial = s.t.copy()
                trial[j] = c
                s.curves = s._curves(trial)
                s.t, s.c = s.solve(s.curves, trial)
                s.search_group(j, win)
                trials.append((s.c, s.t.copy()))
                s.t, s.c, s.curves, em.parts, em.ref = saved
                em._join()
        moved = False
        for c_trial, tt in sorted(trials, key=lambda a: a[0])[:2]:
            em.relinearise(tt[em.i_c])
            tp, cp = _exact_polish(em, tt, lo, hi, rounds=4)
            if cp < cost:
                t, cost, moved = tp, cp, True
                break
        em.relinearise(t[em.i_c])
        if not moved or cost / max(1, len(em.b.xu)) <= EXACT_RELOCATE_MIN_CHI2:
            break
    return t, cost


def _exact_run(em: _ExactModel, start: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_oh: int,
               sweeps: int = EXACT_SWEEPS, polish: bool = True) -> tuple[np.ndarray, float]:
    """One start: per-group searches (largest groups first), then (``polish``) least squares,
    a last search round and least squares again if a group moved; (theta, cost)."""
    em.relinearise(start[em.i_c])
    s = _ExactSearch(em, start, hi, n_oh)
    order = sorted(range(em.G), key=lambda j: -em.b.groups[j].count)
    for _ in range(sweeps):
        if not s.sweep(order):
            break
    if polish:
        s.refresh(_exact_least_squares(em, s.t, lo, hi))
        if s.sweep(order):
            s.refresh(_exact_least_squares(em, s.t, lo, hi))
    return s.t.copy(), em.cost(s.t)


def _anchored_run(em: _ExactModel, start: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_oh: int,
                  shares: np.ndarray) -> tuple[np.ndarray, float]:
    """Per-group searches and pair exchanges with the amounts held in the proportions
    ``shares`` (their common scale solved), ``EXACT_ANCHOR_ROUNDS`` rounds at most, then the
    exact polish with the amounts free; (theta, cost).

    The proportions come from the multiplet integrals of the peak list
    (``integral_fit.fit_integrals``, see ``fit_spectrum(anchor_fractions=...)``): they do
    not depend on where the groups sit in an overlapped envelope, whereas amounts re-solved
    for every trial place let a misplaced major's misfit be covered by a minor candidate.
    """
    em.relinearise(start[em.i_c])
    s = _ExactSearch(em, start, hi, n_oh, shares=shares)
    order = sorted(range(em.G), key=lambda j: -em.b.groups[j].count)
    for _ in range(EXACT_ANCHOR_ROUNDS):
        moved = s.sweep(order)
        moved += s.swap_pairs()
        if not moved:
            break
    return _exact_polish(em, s.t, lo, hi, rounds=4)


def _exact_starts(model: _Model, em: _ExactModel, theta0: np.ndarray, hi: np.ndarray) -> list[np.ndarray]:
    """The predicted shifts, then shifts drawn uniformly within one prediction sigma (fixed seed).

    Amounts need no starts of their own: the search re-solves them (linear, non-negative)
    for every place it tries.
    """
    groups = model.groups
    t0 = _exact_theta(model, em, theta0)
    starts = [t0]
    rng = np.random.default_rng(EXACT_SEED)
    sig = np.array([g.sigma for g in groups])
    bound = np.array([g.bound for g in groups])
    shift0 = np.array([g.shift0 for g in groups])
    while len(starts) < max(EXACT_MAX_STARTS, 1):
        t = t0.copy()
        t[em.i_c] = shift0 + np.clip(rng.uniform(-1.0, 1.0, em.G) * sig, -bound, bound)
        starts.append(t)
    return starts


def _uncertainty(Jm: np.ndarray, rd: np.ndarray, shape_total: np.ndarray, noise: float, n: int):
    """Covariance of all parameters, reduced chi-square over the signal points and the
    inflation applied (excess residual x residual correlation), at a solution.

    ``rd``: the data residuals (in noise units), ``shape_total``: the fitted compound
    lines at the same points. Parameters the data do not touch (zero diagonal) get
    zero variance instead of breaking the inverse.
    """
    N = rd.size
    signal = shape_total > 3.0 * noise
    dof = max(1, int(signal.sum()) - n) if signal.any() else max(1, N - n)
    chi2_sig = float(np.sum(rd[signal] ** 2) / dof) if signal.any() else float(np.mean(rd**2))
    tau = _autocorr_time(rd, signal)
    inflation = max(1.0, chi2_sig) * tau
    JTJ = _gram(Jm)
    keep = np.where(np.abs(np.diag(JTJ)) > 1e-12 * max(1.0, float(np.max(np.diag(JTJ)))))[0]
    cov = np.zeros((n, n))
    cov[np.ix_(keep, keep)] = np.linalg.pinv(JTJ[np.ix_(keep, keep)]) * inflation
    return cov, chi2_sig, float(inflation)


def _assemble_exact(model: _Model, em: _ExactModel, t: np.ndarray, undetected: dict[int, float], free,
                    n_oh: int) -> SpectrumFit:
    """SpectrumFit at an exact solution (covariance on the exact model)."""
    x, noise = model.x_all, model.noise
    N = len(model.xu)
    Jm = em.jacobian(t)
    rd = em.residuals(t)[:N]
    cov, chi2_sig, inflation = _uncertainty(Jm, rd, t[em.i_w] @ em.components(t), noise, em.n)
    w = t[em.i_w]
    comp_full = em.components(t, x)
    fit = SpectrumFit(
        groups=model.groups,
        weights=w.copy(),
        weights_cov=cov[np.ix_(em.i_w, em.i_w)],
        shifts_ppm=t[em.i_c].copy(),
        j_hz=[g.j0_hz.copy() for g in model.groups],
        width_hz=float(t[em.i_wd]),
        baseline=t[em.i_b].copy(),
        oh=max((tuple(float(v) for v in t[em.i_free[q]]) for q in range(n_oh)), default=None),
        extra_lines={name: tuple(float(v) for v in t[em.i_free[q]]) for q, (name, *_) in enumerate(free)},
        x=x, y=model.y_all, used=model.used,
        fitted=em.evaluate(t, x, model.leg_all),
        component_curves=w[:, None] * comp_full,
        baseline_curve=model.leg_all @ t[em.i_b],
        noise_sd=noise,
        chi2_red=chi2_sig,
        inflation=inflation,
        undetected=undetected,
    )
    # signal windows and integrals: the first-order coupling trees at the exact shifts
    # span the same ranges (areas are exact either way)
    fit.regions = signal_regions(fit, model, _first_order_theta(model, em, t))
    fit.notes.append(f"exact second-order candidate spectra at {model.f:g} MHz "
                     f"(reduced chi-square {chi2_sig:.2f} over the signal points)")
    return fit


def _exact_polish_only(model: _Model, theta0: np.ndarray, lb: np.ndarray, ub: np.ndarray, predictions, free,
                       n_oh: int, relocate: bool = False) -> SpectrumFit:
    """The exact fit polished from the shifts in ``theta0`` (exchangeable lines and width
    searched first, then :func:`_exact_polish`, then with ``relocate`` :func:`_relocate`
    if the polish leaves a misfit); see ``fit_spectrum(start_shifts=...)``."""
    em = _ExactModel(model, predictions, theta0[model.i_c])
    lo, hi = _exact_bounds(model, em, lb, ub)
    s = _ExactSearch(em, _exact_theta(model, em, theta0), hi, n_oh)
    s.search_oh()
    s.search_width()
    t, cost = _exact_polish(em, s.t, lo, hi)
    relocated = relocate and cost / max(1, len(model.xu)) > EXACT_RELOCATE_MIN_CHI2
    if relocated:
        t, cost = _relocate(em, t, lo, hi, n_oh)
    em.relinearise(t[em.i_c])
    fit = _assemble_exact(model, em, t, {}, free, n_oh)
    fit.notes.insert(0, "polished from the given start shifts, then residual-guided relocation" if relocated
                     else "polished from the given start shifts (no search)")
    return fit


def exact_fit(model: _Model, theta0: np.ndarray, lb: np.ndarray, ub: np.ndarray, predictions, free,
              n_oh: int, anchor: np.ndarray | None = None) -> SpectrumFit:
    """Whole-spectrum fit on the exact (second-order) spectra of the candidates.

    Starts (:func:`_exact_starts`) from the predicted shifts: per-group searches on
    exact spectra (:class:`_ExactSearch`), width and exchangeable line searched too,
    then ``scipy.optimize.least_squares`` with bounds (shifts within their prediction
    bounds, amounts and heights >= 0, widths within their ranges) and the analytic
    Jacobian; the lowest cost wins. Minor candidates then face the detection test of
    the first-order fit (a refit without them must be clearly worse). Raises
    SpecmatchError when a candidate's groups do not match its structure.

    ``anchor`` (mole-fraction-like proportions of the candidates' amounts, e.g. from the
    multiplet integrals): when the continuation ends far from the noise, the searched
    starts are replaced by one search from the predicted shifts with the amounts held in
    these proportions (:func:`_anchored_run`).
    """
    em = _ExactModel(model, predictions, theta0[model.i_c])
    lo, hi = _exact_bounds(model, em, lb, ub)
    # every start searched; the best one polished. A first start that leaves a misfit far
    # beyond what polishing can remove (a crowded envelope the search could not untangle)
    # ends the exact attempt early: the first-order fit is then compared with it
    n_pts = max(1, len(model.xu))
    # first the continuation from the predicted shifts (smoothed data, then sharper); the
    # searched starts run only when it ends far from the noise
    tc = _exact_continuation(model, em, theta0, lo, hi, n_oh)
    cc = np.inf
    if tc is not None:
        em.relinearise(tc[em.i_c])
        cc = em.cost(tc)
    if cc / n_pts > EXACT_CONTINUATION_OK and 1 < em.K <= EXACT_ORDERED_MAX_CANDIDATES \
            and em.G <= EXACT_ORDERED_MAX_GROUPS:
        # candidates placed one at a time, each first in turn (see _exact_continuation)
        orders = [list(range(em.K))[r:] + list(range(em.K))[:r] for r in range(em.K)]
        to = _exact_continuation(model, em, theta0, lo, hi, n_oh, orders=orders)
        em.relinearise(to[em.i_c])
        co = em.cost(to)
        if co < cc:
            tc, cc = to, co
    if cc / n_pts <= EXACT_CONTINUATION_OK:
        t, cost = tc, cc
    elif anchor is not None:
        t, cost = _anchored_run(em, _exact_theta(model, em, theta0), lo, hi, n_oh, anchor)
        if cc < cost:
            t, cost = tc, cc
        em.relinearise(t[em.i_c])
    else:
        best = None
        hopeless = False
        for i, start in enumerate(_exact_starts(model, em, theta0, hi)):
            t, c = _exact_run(em, start, lo, hi, n_oh, polish=False)
            if best is None or c < best[1]:
                best = (t, c)
            if i == 0 and c / n_pts > EXACT_HOPELESS_CHI2:
                hopeless = True
                break
        if not hopeless:
            best = _exact_run(em, best[0], lo, hi, n_oh, sweeps=1)
        t, cost = best
        if cc < cost:
            t, cost = tc, cc
        elif hopeless:
            em.relinearise(t[em.i_c])
            return _assemble_exact(model, em, t, {}, free, n_oh)
        em.relinearise(t[em.i_c])
    if EXACT_RELOCATE_MIN_CHI2 < cost / n_pts <= EXACT_HOPELESS_CHI2:
        t, cost = _relocate(em, t, lo, hi, n_oh)
    undetected: dict[int, float] = {}
    for k in range(em.K):
        w = t[em.i_w]
        tot = w.sum()
        if em.K < 2 or tot <= 0 or w[k] / tot >= DETECT_MAX_FRACTION or hi[em.i_w[k]] <= 0:
            continue
        lo2, hi2 = lo.copy(), hi.copy()
        for q in list(undetected) + [k]:
            lo2[em.i_w[q]] = hi2[em.i_w[q]] = 0.0
        start = t.copy()
        start[em.i_w[k]] = 0.0
        trial, c0 = _exact_run(em, start, lo2, hi2, n_oh, sweeps=1)
        n_groups = sum(1 for g in model.groups if g.component == k)
        if c0 - cost > DETECT_DCHI2 + DETECT_DCHI2_PER_GROUP * n_groups:
            continue
        undetected[k] = float(w[k] / tot)
        # the absent candidate at its predicted shifts, its amount re-solved there (that
        # gives "absent" its uncertainty)
        own = [j for j, g in enumerate(model.groups) if g.component == k]
        trial[own] = [model.groups[j].shift0 for j in own]
        hi3 = hi2.copy()
        hi3[em.i_w[k]] = np.inf
        em.relinearise(trial[em.i_c])
        s = _ExactSearch(em, trial, hi3, n_oh)
        t, cost = s.t, em.cost(s.t)
    em.relinearise(t[em.i_c])
    return _assemble_exact(model, em, t, undetected, free, n_oh)
