#!/usr/bin/env python3
"""Probe of the exact whole-spectrum fit's search on a demo spectrum (diagnostics, not a fit).

The exact fit of ``estimate_mixture`` reaches the noise on demo (a) when polished from the
shifts the demo was made with (``bench_spin.py --demo-fit a --from-table``), not from the
predicted shifts. This script measures where the search loses it, on the model the fit
uses (``spectrum_fit._ExactModel``), from starts whose distance to those shifts is known:

* ``basin``: the table shifts moved by uniform noise of +-P ppm (fixed seed), then, at each
  extra line broadening of the continuation (``EXACT_STAGES_HZ``), (i) the exact polish
  (``_exact_polish``, 4 rounds) and (ii) the rigid-template relaxation below (Gauss-Newton
  on per-group templates, re-simulated exactly between rounds). Printed: cost per point
  (the data smoothed at that stage; the table shifts' own cost beside it), largest and
  median shift error, groups more than 5 mppm off, CPU seconds.
* ``order``: the groups placed in the table's order (or the predicted order) by slots of
  the cumulative data area, the amounts held in the proportions of the peak-list integral
  fit (``integral_fit.fit_integrals`` on the picked multiplets, trace ones included), then
  the exact polish at each stage: what the fit reaches when only the order is given.

The rigid-template surrogate (:class:`TemplateSearch`) shares each exact line among the
groups of its candidate by the lines' shift derivatives (Hellmann-Feynman; they sum to one)
and moves every group's share rigidly: one relaxation costs ~0.1 s where the exact polish
costs ~10 s, but the templates keep the strongly coupled shapes of where they were built.

    python benchmarks/probe_spin_search.py basin --demo a --perturb 0.01,0.03
    python benchmarks/probe_spin_search.py order --demo a [--predicted-order]

Figures depend on the demo files (regenerated when the tables change) and on the seed.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Sequence
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # small matrices: threads only cost on a shared machine
ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from specmatch.identification.mixture import spectrum_fit as sf  # noqa: E402
from specmatch.identification.mixture.spectrum_fit import (  # noqa: E402
    _ExactModel,
    _gram,
    _line_windows,
    _stick_curve,
)

SEED = 20261203
STAGES_HZ = sf.EXACT_STAGES_HZ

#: template surrogate (:class:`TemplateSearch`): a line's intensity is shared among the
#: groups of its candidate by its shift derivatives; shares below this are dropped
TEMPLATE_MIN_SHARE = 1e-3
#: ... and each template reaches this many half widths beyond its outer lines
TEMPLATE_TAIL_HWHM = 40.0
#: Gauss-Newton steps of :meth:`TemplateSearch.relax` (joint moves of all groups)
TEMPLATE_RELAX_STEPS = 8


class TemplateSearch:
    """Rigid per-group templates of the candidates' exact spectra: a cheap surrogate of the exact model.

    Each line of a candidate's exact spectrum is shared among the candidate's groups
    by its Hellmann-Feynman derivatives (they sum to one for every line: moving all
    shifts together moves every line), so the candidate's spectrum is the sum of one
    template per group. Moving a group then moves its template rigidly (interpolated
    on the grid), with no diagonalisation. The shape a strongly coupled pattern takes
    at its new place is not seen here; the caller re-simulates exactly at the places
    found and rebuilds the templates there.

    Amounts (or, with ``tie``, their common scale), baseline and free-line heights are
    linear and re-solved (non-negative); the first ``n_oh`` free lines (exchangeable OH)
    take part in the slot placement like groups.
    """

    def __init__(self, em: _ExactModel, theta: np.ndarray, lo: np.ndarray, hi: np.ndarray, n_oh: int,
                 tie: np.ndarray | None = None):
        from scipy.signal import correlate

        self._corr = correlate
        self.em = em
        b = em.b
        self.x = x = b.x_all
        self.h = float(x[1] - x[0])
        self.noise = float(b.noise)
        self.t = theta.copy()
        self.t[em.i_c] = em.ref
        self.lo, self.hi = lo, hi
        self.active = hi[em.i_w] > 0
        self.tie = None if tie is None else np.asarray(tie, float) * self.active
        self.n_oh = n_oh
        hw = float(self.t[em.i_wd]) / em.f / 2.0
        groups = b.groups
        self.tx, self.tv, self.td = [], [], []
        for j, g in enumerate(groups):
            p, a, D = em.parts[g.component]
            own = [i for i, gg in enumerate(groups) if gg.component == g.component]
            share = np.clip(D[:, own], 0.0, None)
            tot = share.sum(axis=1)
            share = share[:, own.index(j)] / np.where(tot > 0, tot, 1.0)
            keep = share > TEMPLATE_MIN_SHARE
            offs = p[keep] - float(em.ref[j])
            amps = a[keep] * share[keep]
            if offs.size == 0:
                offs, amps = np.zeros(1), np.zeros(1)
            u0 = np.floor((offs.min() - TEMPLATE_TAIL_HWHM * hw) / self.h) - 1
            u1 = np.ceil((offs.max() + TEMPLATE_TAIL_HWHM * hw) / self.h) + 1
            tx = np.arange(u0, u1 + 1) * self.h
            tv = _stick_curve(tx, offs, amps, hw, _line_windows(amps, em.f))
            tv[0] = tv[-1] = 0.0
            self.tx.append(tx)
            self.tv.append(tv)
            self.td.append(np.gradient(tv, self.h))
        self.c = em.ref.copy()
        self.clo, self.chi = lo[em.i_c].copy(), hi[em.i_c].copy()
        self.shift0 = np.array([g.shift0 for g in groups])
        self.sigma = np.array([g.sigma for g in groups])
        self.comp = np.array([g.component for g in groups], int)
        self.used = b.used
        self.y = b.y_all
        self._linear()

    # -- model pieces
    def curve(self, j: int, c: float, deriv: bool = False):
        """(index slice, values[, d values / d c]) of group j's template centred at ``c``."""
        tx = self.tx[j]
        a = max(int(np.ceil((c + tx[0] - self.x[0]) / self.h)), 0)
        z = min(int(np.floor((c + tx[-1] - self.x[0]) / self.h)) + 1, len(self.x))
        if z <= a:
            return slice(0, 0), np.zeros(0), np.zeros(0)
        d = self.x[a:z] - c
        v = np.interp(d, tx, self.tv[j])
        if not deriv:
            return slice(a, z), v
        return slice(a, z), v, -np.interp(d, tx, self.td[j])

    def _component_curves(self) -> np.ndarray:
        C = np.zeros((self.em.K, len(self.x)))
        for j in range(len(self.c)):
            sl, v = self.curve(j, self.c[j])
            C[self.comp[j], sl] += v
        return C

    def _free(self) -> np.ndarray:
        return self.em.free_lines(self.t, self.x)

    def _linear(self) -> None:
        """Amounts (>= 0), baseline and free-line heights (>= 0) for the current places."""
        from scipy.optimize import lsq_linear

        em, b = self.em, self.em.b
        C = self._component_curves()[:, b.used] * self.active[:, None]
        if self.tie is not None:
            C = (self.tie @ C)[None, :]
        nk = C.shape[0]
        F = em.free_lines(self.t, b.xu)
        A = np.hstack([C.T, b.leg, F.T]) / self.noise
        lbv = np.concatenate([np.zeros(nk), np.full(em.nb, -np.inf), np.zeros(em.L)])
        sol = lsq_linear(A, b.yu / self.noise, bounds=(lbv, np.full(lbv.shape, np.inf)), method="bvls")
        t = self.t
        t[em.i_w] = sol.x[0] * self.tie if self.tie is not None else sol.x[: em.K]
        t[em.i_b] = sol.x[nk: nk + em.nb]
        t[em.i_free[:, 0]] = sol.x[nk + em.nb:]
        self._total()

    def _total(self) -> None:
        em, t = self.em, self.t
        w = t[em.i_w] * self.active
        M = em.b.leg_all @ t[em.i_b]
        for j in range(len(self.c)):
            sl, v = self.curve(j, self.c[j])
            M[sl] += w[self.comp[j]] * v
        if em.L:
            M = M + t[em.i_free[:, 0]] @ self._free()
        self.M = M

    def cost(self) -> float:
        r = (self.y - self.M)[self.used]
        return float(r @ r) / self.noise**2 + float(np.sum(((self.c - self.shift0) / self.sigma) ** 2))

    def relax(self, steps: int = TEMPLATE_RELAX_STEPS) -> float:
        """Joint Gauss-Newton moves of all group places (Levenberg-Marquardt damping, bounds
        by clipping), linear parameters re-solved after each accepted step; the cost."""
        em, b = self.em, self.em.b
        G = len(self.c)
        used = b.used
        cost = self.cost()
        lam = 1e-3
        for _ in range(steps):
            w = self.t[em.i_w] * self.active
            N = len(self.x)
            Jc = np.zeros((N, G))
            for j in range(G):
                sl, _, dv = self.curve(j, self.c[j], deriv=True)
                Jc[sl, j] = w[self.comp[j]] * dv
            C = self._component_curves() * self.active[:, None]
            if self.tie is not None:
                C = (self.tie @ C)[None, :]
            A = np.hstack([Jc[used], C[:, used].T, b.leg, em.free_lines(self.t, b.xu).T]) / self.noise
            r = (self.y - self.M)[used] / self.noise
            pr = (self.c - self.shift0) / self.sigma
            JTJ = _gram(A)
            JTJ[:G, :G] += np.diag(1.0 / self.sigma**2)
            g = A.T @ r
            g[:G] -= pr / self.sigma
            improved = False
            for _try in range(4):
                Hm = JTJ + lam * np.diag(np.diag(JTJ) + 1e-12)
                try:
                    step = np.linalg.solve(Hm, g)
                except np.linalg.LinAlgError:
                    break
                old = (self.c.copy(), self.t.copy(), self.M)
                self.c = np.clip(self.c + step[:G], self.clo, self.chi)
                self._linear()
                c_new = self.cost()
                if c_new < cost - 1e-9:
                    cost, improved = c_new, True
                    lam = max(lam / 10.0, 1e-6)
                    break
                self.c, self.t, self.M = old
                lam *= 10.0
            if not improved:
                break
        return cost

    def shifts(self) -> np.ndarray:
        return self.c.copy()

    # -- order search
    def _items(self) -> list[tuple[float, int]]:
        """(place, item) of every group (item j) and exchangeable line (item G + q), sorted."""
        em = self.em
        G = len(self.c)
        items = [(float(self.c[j]), j) for j in range(G) if self.active[self.comp[j]]]
        items += [(float(self.t[em.i_free[q][1]]), G + q) for q in range(self.n_oh)]
        return sorted(items)

    def _slot_data(self) -> tuple[np.ndarray, np.ndarray]:
        """Cumulative area and first moment of the data less baseline and the fixed free
        lines (masked points: the model), per grid point."""
        em = self.em
        b = em.b
        t = self.t
        other = b.leg_all @ t[em.i_b]
        if em.L > self.n_oh:
            other = other + t[em.i_free[self.n_oh:, 0]] @ self._free()[self.n_oh:]
        yy = np.clip(np.where(b.used, self.y, self.M) - other, 0.0, None)
        return np.concatenate([[0.0], np.cumsum(yy)]), np.concatenate([[0.0], np.cumsum(yy * self.x)])

    def _areas(self, order: Sequence[int]) -> np.ndarray:
        em = self.em
        G = len(self.c)
        w = self.t[em.i_w]
        # the q-th exchangeable line stands for the exchangeable protons of the q-th candidate
        # that has any (one line per such candidate, see _fit_spectrum)
        ex = [(k, sum(g.count for g in em.preds[k].protons if g.exchangeable)) for k in range(em.K)]
        ex = [(k, n) for k, n in ex if n > 0]
        return np.array([w[self.comp[i]] * em.b.groups[i].count if i < G
                         else (w[ex[i - G][0]] * ex[i - G][1] if i - G < len(ex) else self.t[em.i_free[i - G][0]])
                         for i in order])

    def slot_places(self, order: Sequence[int], cum: np.ndarray, mom: np.ndarray) -> np.ndarray:
        """Places of the items in ``order`` (ascending): each the first moment of its slot of
        the cumulative data area, slots in the given order sized by the items' areas (scaled
        to the data's total)."""
        a = self._areas(order)
        tot = float(a.sum())
        if tot <= 0 or cum[-1] <= 0:
            return np.array([self._items_place(i) for i in order])
        a = a * cum[-1] / tot
        edges = np.concatenate([[0.0], np.cumsum(a)])
        m_at = np.interp(edges, cum, mom)
        return np.diff(m_at) / np.where(a > 0, a, 1.0)

    def _items_place(self, i: int) -> float:
        G = len(self.c)
        return float(self.c[i]) if i < G else float(self.t[self.em.i_free[i - G][1]])

    def set_places(self, order: Sequence[int], places: np.ndarray) -> None:
        em = self.em
        G = len(self.c)
        for i, c in zip(order, places):
            if i < G:
                self.c[i] = float(np.clip(c, self.clo[i], self.chi[i]))
            else:
                ic = em.i_free[i - G][1]
                self.t[ic] = float(np.clip(c, self.lo[ic], self.hi[ic]))
        self._linear()


# ----------------------------------------------------------------------------- set-up
class _Captured(Exception):
    pass


def demo_inputs(key: str):
    """The exact fit's inputs for a demo 1H spectrum with every compound in the tube as a
    candidate (as ``bench_spin.py --demo-fit``), the table shifts per fit group, the true
    fractions and the peak-list integral fractions. The inputs are caught at ``exact_fit``
    so that the set-up is the one ``fit_spectrum`` makes, not a copy of it."""
    sys.path.insert(0, str(ROOT / "sample_spectra"))
    import make_demo

    from specmatch.demo import demo_case
    from specmatch.identification.mixture.estimate import _masks, _prepare_candidates, _try_process
    from specmatch.identification.mixture.integral_fit import fit_integrals
    from specmatch.spectra import read_jcampdx

    case = demo_case(key)
    spec = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    truth = {**case.truth, **case.impurities}
    cands = list(truth)
    cs = _prepare_candidates(cands, None)
    pl = _try_process(spec, "CDCl3", [])
    masks, _, lines = _masks(pl, "CDCl3", [], cs)
    got = {}

    def catch(*args, **kwargs):
        got["args"] = args
        raise _Captured

    real, sf.exact_fit = sf.exact_fit, catch
    try:
        sf.fit_spectrum(spec.ppm, spec.intensity, [c.groups for c in cs], frequency_mhz=spec.frequency_mhz,
                        masks_ppm=masks, extra_lines_ppm=lines, predictions=[c.pred for c in cs])
    except _Captured:
        pass
    finally:
        sf.exact_fit = real
    model = got["args"][0]
    rows = make_demo.read_table()
    table = [make_demo.group_shifts(smi, rows)[1] for smi in cands]
    shifts = np.array([table[g.component][g.index] for g in model.groups])
    mults = [m for m in pl.multiplets if m.integral and m.integral > 0 and m.flag in (None, "trace")]
    ifit = fit_integrals(mults, [c.groups for c in cs])
    tot = sum(truth.values())
    return (got["args"], shifts, np.array([truth[c] / tot for c in cands]), np.array(ifit.fractions), cands,
            f"{case.h1.name} ({spec.frequency_mhz} MHz)")


def start_theta(args, shifts: np.ndarray) -> np.ndarray:
    model, theta0, lb, ub, preds, _, _ = args
    em = _ExactModel(model, preds, theta0[model.i_c])
    t = sf._exact_theta(model, em, theta0)
    lo, hi = sf._exact_bounds(model, em, lb, ub)
    t[em.i_c] = np.clip(shifts, lo[em.i_c], hi[em.i_c])
    return t


class Stage:
    """The continuation's model at one extra broadening ``delta`` (Hz), built as
    ``_exact_continuation`` builds it; ``t`` carries its widths from the stage before (``prev``)."""

    def __init__(self, args, delta: float, t: np.ndarray, prev: float):
        model, theta0, lb, ub, preds, _, n_oh = args
        self.n_oh = n_oh
        em0 = _ExactModel(model, preds, t[model.i_c])
        lo, hi = sf._exact_bounds(model, em0, lb, ub)
        if delta > 0:
            ys, shrink = sf._smoothed(model.x_all, model.y_all, delta, model.f)
            self.b = sf._stage_model(model, ys, shrink, float(t[em0.i_wd]) - prev, delta)
        else:
            self.b = model
        self.es = es = _ExactModel(self.b, preds, t[em0.i_c])
        widths = [es.i_wd] + [int(es.i_free[q][2]) for q in range(es.L)]
        self.lo, self.hi = lo.copy(), hi.copy()
        self.lo[widths] += delta
        self.hi[widths] += delta
        self.t = t.copy()
        self.t[widths] = np.clip(t[widths] - prev + delta, self.lo[widths], self.hi[widths])
        self.radius = sf.EXACT_POLISH_RADIUS_HZ * (1.0 + delta / 2.0)
        self.npts = max(1, len(self.b.xu))

    def exact(self, t: np.ndarray) -> tuple[np.ndarray, float]:
        """Linear parameters re-solved on the exact spectra at t's shifts; (theta, cost)."""
        self.es.relinearise(t[self.es.i_c])
        s = sf._ExactSearch(self.es, t, self.hi, self.n_oh)
        return s.t, s.c

    def settle(self, t: np.ndarray) -> tuple[np.ndarray, float]:
        """Exchangeable lines and width searched at fixed shifts (as the from-table polish)."""
        self.es.relinearise(t[self.es.i_c])
        s = sf._ExactSearch(self.es, t, self.hi, self.n_oh)
        s.search_oh()
        s.search_width()
        return s.t, s.c

    def polish(self, t: np.ndarray, pin_amounts: bool = False) -> tuple[np.ndarray, float]:
        lo, hi = self.lo.copy(), self.hi.copy()
        if pin_amounts:
            lo[self.es.i_w] = hi[self.es.i_w] = t[self.es.i_w]
        return sf._exact_polish(self.es, t, lo, hi, radius=self.radius, rounds=4)

    def relax(self, t: np.ndarray, rounds: int = 4) -> tuple[np.ndarray, float]:
        """Template relaxation, re-simulated exactly after each round; the best exact state."""
        best_t, best_c = self.exact(t)
        for _ in range(rounds):
            ts = TemplateSearch(self.es, best_t, self.lo, self.hi, self.n_oh)
            ts.relax(20)
            trial = ts.t.copy()
            trial[self.es.i_c] = ts.shifts()
            trial, c = self.exact(trial)
            if c >= best_c * 0.99:
                break
            best_t, best_c = trial, c
        self.es.relinearise(best_t[self.es.i_c])
        return best_t, best_c

    def sweep(self, t: np.ndarray) -> tuple[np.ndarray, float]:
        """One round of the exact per-group searches and pair exchanges of ``_ExactSearch``."""
        self.es.relinearise(t[self.es.i_c])
        s = sf._ExactSearch(self.es, t, self.hi, self.n_oh)
        s.sweep(sorted(range(self.es.G), key=lambda j: -self.es.b.groups[j].count))
        s.swap_pairs()
        return s.t, s.c


def _errors(t: np.ndarray, es: _ExactModel, shifts: np.ndarray) -> str:
    err = np.abs(t[es.i_c] - shifts)
    return (f"shift error max {err.max():.3f} median {np.median(err):.4f} ppm, "
            f"{int((err > 0.005).sum())}/{err.size} groups > 5 mppm")


def _fractions(t: np.ndarray, es: _ExactModel) -> str:
    w = t[es.i_w]
    return str(np.round(w / w.sum(), 3)) if w.sum() > 0 else "-"


def table_costs(args, shifts: np.ndarray) -> dict[float, float]:
    """Cost per point of the table shifts at each stage (exchangeable lines and width searched)."""
    t, prev, out = start_theta(args, shifts), 0.0, {}
    for delta in STAGES_HZ:
        st = Stage(args, delta, t, prev)
        t, c = st.settle(st.t)
        out[delta] = c / st.npts
        prev = delta
    return out


def basin(args, shifts: np.ndarray, perturb: Sequence[float], methods: Sequence[str]) -> None:
    ref = table_costs(args, shifts)
    for p in perturb:
        moved = shifts + np.random.default_rng(SEED).uniform(-p, p, shifts.size)
        for how in methods:
            t, prev, c0 = start_theta(args, moved), 0.0, time.process_time()
            for delta in STAGES_HZ:
                st = Stage(args, delta, t, prev)
                t, _ = st.settle(st.t)
                if how == "template relax":
                    t, c = st.relax(t)
                else:
                    t, c = st.polish(t)
                    if how == "polish+searches":  # then the exact per-group searches and exchanges
                        t, c = st.sweep(t)
                        t, c = st.polish(t)
                print(f"  +-{p:.3f} ppm, {how:<14} +{delta:g} Hz: cost/point {c / st.npts:8.1f} (table shifts "
                      f"unpolished {ref[delta]:6.1f}); {_errors(t, st.es, shifts)}; {time.process_time() - c0:.1f} s CPU",
                      flush=True)
                prev = delta


def order(args, shifts: np.ndarray, integral: np.ndarray, predicted: bool) -> None:
    """Groups placed in a given order by slots of the cumulative data area (amounts in the
    integral proportions, held during the first stage), then polish and exact searches."""
    model, theta0 = args[0], args[1]
    ref = table_costs(args, shifts)
    pred = np.array([g.shift0 for g in model.groups])
    t, prev, c0 = start_theta(args, pred), 0.0, time.process_time()
    for n, delta in enumerate(STAGES_HZ):
        st = Stage(args, delta, t, prev)
        t, _ = st.settle(st.t)
        es = st.es
        if n == 0:
            ts = TemplateSearch(es, t, st.lo, st.hi, st.n_oh, tie=integral)
            cum, mom = ts._slot_data()
            place = pred if predicted else shifts
            G = es.G
            oh = [float(t[es.i_free[q][1]]) for q in range(st.n_oh)]
            items = sorted([(place[j], j) for j in range(G)] + [(oh[q], G + q) for q in range(st.n_oh)])
            seq = [i for _, i in items]
            ts.set_places(seq, ts.slot_places(seq, cum, mom))
            t = ts.t.copy()
            t[es.i_c] = ts.shifts()
            t, c = st.exact(t)
            t[es.i_w] = integral * t[es.i_w].sum()
            print(f"  slots in the {'predicted' if predicted else 'table'} order: cost/point {c / st.npts:.1f}; "
                  f"{_errors(t, es, shifts)}", flush=True)
        t, c = st.polish(t, pin_amounts=(n == 0))
        print(f"  +{delta:g} Hz polish: cost/point {c / st.npts:8.1f} (table shifts unpolished {ref[delta]:6.1f}); "
              f"{_errors(t, es, shifts)}; fractions {_fractions(t, es)}; {time.process_time() - c0:.1f} s CPU",
              flush=True)
        t, c = st.sweep(t)
        t, c = st.polish(t)
        print(f"  +{delta:g} Hz exact searches + polish: cost/point {c / st.npts:8.1f}; {_errors(t, es, shifts)}; "
              f"fractions {_fractions(t, es)}; {time.process_time() - c0:.1f} s CPU", flush=True)
        prev = delta


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("mode", choices=("basin", "order"))
    ap.add_argument("--demo", default="a", help="demo case key (a, b or c)")
    ap.add_argument("--perturb", default="0.01,0.03", help="basin: +- ppm of the uniform start noise")
    ap.add_argument("--predicted-order", action="store_true", help="order: the predicted shifts' order")
    ap.add_argument("--stages", help="extra broadenings (Hz) instead of EXACT_STAGES_HZ, e.g. 30,15,8,3,0")
    ap.add_argument("--methods", default="exact polish,polish+searches,template relax",
                    help="basin: which relaxations (comma-separated)")
    a = ap.parse_args(argv)
    global STAGES_HZ
    if a.stages:
        STAGES_HZ = tuple(float(v) for v in a.stages.split(","))
    with sf._single_threaded_blas():  # as the fit itself runs
        args, shifts, truth, integral, cands, name = demo_inputs(a.demo)
        print(f"inputs: {name}, candidates {cands}, true fractions {np.round(truth, 4)}, peak-list integral "
              f"fractions {np.round(integral, 4)}; {args[0].G} groups, {len(args[0].xu)} points, stages "
              f"{STAGES_HZ} Hz, seed {SEED}")
        if a.mode == "basin":
            basin(args, shifts, [float(v) for v in a.perturb.split(",")], a.methods.split(","))
        else:
            order(args, shifts, integral, a.predicted_order)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
