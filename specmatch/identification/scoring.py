"""Match one candidate's predicted spectra to the observed lines: log-likelihood and assignment.

13C
    The observed lines are explained by an optimal assignment (Hungarian algorithm,
    ``scipy.optimize.linear_sum_assignment``) of predicted signals to observed
    lines. The cost matrix has, per predicted signal, one column per observed line
    (first use of the line: Student-t density of the deviation), a second column per
    line (a second predicted signal on an explained line: accidental overlap, paid
    with ``overlap_logp``) and one private "not observed" column (missing signal,
    lenient for quaternary carbons). Observed lines nobody claims are paid as
    impurities. Every candidate therefore explains the *same* observed lines and
    the log-likelihoods are comparable; a candidate with fewer distinct carbons
    than observed lines pays for the leftovers, one with more pays for overlaps.
    DEPT information (attached-H count or DEPT-135 phase) turns a wrong H count into
    a large penalty.

1H
    With integrals, observed multiplets are cut into proton "slots" (integral scaled
    so the total equals the candidate's proton count, with or without its OH: the
    per-candidate scale) and the candidate's proton groups are placed on multiplets
    **as whole groups** within the slots (the shared
    :class:`~specmatch.identification.assignment.GroupAssignment`, solved exactly by
    :func:`~specmatch.identification.assignment.assign_whole_groups`). A group of n
    protons on a multiplet of n_k slots carries n/n_k of the multiplet's cost, so each
    observed multiplet contributes one density term whatever the candidate, and
    integrals constrain which groups can sit where. Multiplicity and J are compared
    where both sides know them; an OH/NH group gets a wide scale, may be absent and
    only takes a line without resolved couplings within its window. Without
    integrals, groups are assigned to multiplets like 13C signals to lines.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from typing import Any

import numpy as np

from ..errors import SpecmatchError
from ..prediction import Prediction, predict
from ..spectra.types import Multiplet, Peak, PeakList
from ..structures import parse_structure
from .assignment import GroupAssignment, assign_whole_groups, exchangeable_allowed
from .errormodel import NucleusModel, t_logpdf


def _load_assignment():
    """scipy's Hungarian-algorithm solver, loaded without the rest of ``scipy.optimize``.

    Importing ``scipy.optimize`` costs about 1-2 s (linear programming, interpolation,
    FFT modules); ``rank --batch`` needs only ``linear_sum_assignment``, a compiled module
    of its own. It is loaded by file when scipy ships it that way, else imported the
    ordinary way.
    """
    import importlib.machinery
    import importlib.util
    import os
    import sys

    import scipy

    name = "scipy.optimize._lsap"
    if "scipy.optimize" not in sys.modules:
        folder = os.path.join(os.path.dirname(scipy.__file__), "optimize")
        for suffix in importlib.machinery.EXTENSION_SUFFIXES:
            path = os.path.join(folder, "_lsap" + suffix)
            if os.path.exists(path):
                spec = importlib.util.spec_from_file_location(name, path)
                if spec is not None and spec.loader is not None:
                    module = importlib.util.module_from_spec(spec)
                    try:
                        spec.loader.exec_module(module)
                        return module.linear_sum_assignment
                    except (ImportError, AttributeError):
                        break
    from scipy.optimize import linear_sum_assignment as solver

    return solver


linear_sum_assignment = _load_assignment()

__all__ = [
    "ObservedC13", "ObservedH1", "PreparedCandidate", "SignalRow",
    "h1_assignment", "observed_c13", "observed_h1", "prepare", "prepare_c13", "score_c13", "score_h1",
]

_BIG = 1.0e6


# ----------------------------------------------------------------- observed data
@dataclass(frozen=True)
class ObservedC13:
    """Observed 13C lines. ``hydrogens`` is -1 where unknown; ``sign`` is the
    DEPT-135 phase (+1 CH/CH3, -1 CH2) or 0 where unknown."""

    shift: np.ndarray
    hydrogens: np.ndarray
    sign: np.ndarray
    intensity: np.ndarray | None = None  # peak heights, when every line has one

    @property
    def n(self) -> int:
        return int(self.shift.size)

    @property
    def has_dept(self) -> bool:
        return bool((self.hydrogens >= 0).any() or (self.sign != 0).any())


@dataclass(frozen=True)
class ObservedH1:
    """Observed 1H multiplets; ``integral`` is NaN where not given."""

    shift: np.ndarray
    integral: np.ndarray
    multiplicity: tuple[str, ...]
    j_hz: tuple[tuple[float, ...], ...]

    @property
    def n(self) -> int:
        return int(self.shift.size)

    @property
    def has_integrals(self) -> bool:
        return self.n > 0 and bool(np.isfinite(self.integral).all()) and float(self.integral.sum()) > 0


def _num(x: Any, what: str) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        raise SpecmatchError(f"{what}: {x!r} is not a number") from None
    if not math.isfinite(v):
        raise SpecmatchError(f"{what}: {x!r} is not a finite number")
    return v


def observed_c13(lines: Any) -> ObservedC13:
    """Normalise 13C input: ppm numbers, ``{"shift", "hydrogens"?, "sign"?}`` dicts,
    :class:`~specmatch.spectra.types.Peak` objects or a ``PeakList`` (flagged solvent
    and impurity lines are left out)."""
    if lines is None:
        lines = []
    if isinstance(lines, PeakList):
        lines = lines.compound_peaks()
    shifts, hyd, sign, inten = [], [], [], []
    for i, item in enumerate(lines):
        what = f"13C line {i + 1}"
        if isinstance(item, dict):
            if "shift" not in item:
                raise SpecmatchError(f"{what} has no 'shift' (give {{\"shift\": ppm, \"hydrogens\": n}})")
            s, h, sg, it = item["shift"], item.get("hydrogens"), item.get("sign"), item.get("intensity")
        elif isinstance(item, Peak):
            if item.flag:
                continue
            s, h, sg, it = item.shift, item.hydrogens, item.sign, item.intensity
        else:
            s, h, sg, it = item, None, None, None
        inten.append(float("nan") if it is None else abs(_num(it, what + " intensity")))
        v = _num(s, what)
        if not -50.0 <= v <= 260.0:
            raise SpecmatchError(f"{what}: {v} ppm is outside the 13C range (-50..260 ppm); "
                                 "is this a 1H list or a frequency in Hz?")
        shifts.append(v)
        if h is None:
            hyd.append(-1)
        else:
            hv = _num(h, what + " hydrogens")
            if hv not in (0, 1, 2, 3):
                raise SpecmatchError(f"{what}: hydrogens must be 0, 1, 2 or 3 (from DEPT), got {h!r}")
            hyd.append(int(hv))
        sign.append(0 if sg is None else int(np.sign(_num(sg, what + " sign"))))
    ia = np.asarray(inten, float)
    ok = ia.size > 0 and bool(np.isfinite(ia).all()) and bool((ia > 0).all())
    return ObservedC13(np.asarray(shifts, float), np.asarray(hyd, int), np.asarray(sign, int),
                       ia if ok else None)


def observed_h1(multiplets: Any) -> ObservedH1:
    """Normalise 1H input: ``{"shift", "integral", "multiplicity"?, "j_hz"?}`` dicts,
    :class:`~specmatch.spectra.types.Multiplet` objects or a ``PeakList``."""
    if multiplets is None:
        multiplets = []
    if isinstance(multiplets, PeakList):
        multiplets = multiplets.compound_multiplets()
    shifts, ints, mults, js = [], [], [], []
    for i, item in enumerate(multiplets):
        what = f"1H multiplet {i + 1}"
        if isinstance(item, dict):
            if "shift" not in item:
                raise SpecmatchError(f"{what} has no 'shift' (give {{\"shift\": ppm, \"integral\": n}})")
            s, it = item["shift"], item.get("integral")
            mu, j = item.get("multiplicity") or "", item.get("j_hz") or ()
        elif isinstance(item, Multiplet):
            if item.flag:
                continue
            s, it, mu, j = item.shift, item.integral, item.multiplicity or "", item.j_hz or ()
        elif isinstance(item, Peak):  # a picked line without multiplet analysis
            if item.flag:
                continue
            s, it, mu, j = item.shift, None, "", ()
        else:
            s, it, mu, j = item, None, "", ()
        v = _num(s, what)
        if not -2.0 <= v <= 16.0:
            raise SpecmatchError(f"{what}: {v} ppm is outside the 1H range (-2..16 ppm); "
                                 "is this a 13C list?")
        iv = float("nan") if it is None else _num(it, what + " integral")
        if iv < 0:
            raise SpecmatchError(f"{what}: negative integral {iv}")
        if isinstance(j, (int, float)):
            j = (j,)
        shifts.append(v)
        ints.append(iv)
        mults.append(str(mu).strip().lower())
        js.append(tuple(sorted((abs(_num(x, what + " J")) for x in j), reverse=True)))
    return ObservedH1(np.asarray(shifts, float), np.asarray(ints, float), tuple(mults), tuple(js))


# ------------------------------------------------------------ prepared candidate
@dataclass(frozen=True)
class PreparedCandidate:
    """A candidate's prediction as arrays, computed once per SMILES."""

    smiles: str
    prediction: Prediction
    # 13C rows (one per predicted signal, plus an optional row for the second of two
    # diastereotopic carbons that may give their own line)
    c_shift: np.ndarray
    c_sigma: np.ndarray
    c_h: np.ndarray
    c_optional: np.ndarray
    c_index: np.ndarray  # row -> index into prediction.carbons
    c_atoms: np.ndarray  # row -> number of equivalent carbons (line height)
    # 1H groups
    h_shift: np.ndarray
    h_sigma: np.ndarray
    h_count: np.ndarray
    h_exch: np.ndarray
    h_mult: tuple[str, ...]
    h_j: tuple[tuple[float, ...], ...]
    # 1H protons (group index per proton)
    p_group: np.ndarray

    @property
    def n_protons(self) -> int:
        return int(self.h_count.sum())

    @property
    def n_exchangeable(self) -> int:
        return int(self.h_count[self.h_exch].sum())


def _twin_rows(carbons, pairs) -> list[bool]:
    """Mark the second of two diastereotopic twin signals as optional: real spectra
    often show the twins as two lines, but they may coincide."""
    optional = [False] * len(carbons)
    seen: set[int] = set()
    for a, b in pairs:
        ia = next((i for i, c in enumerate(carbons) if a in c.atoms), None)
        ib = next((i for i, c in enumerate(carbons) if b in c.atoms), None)
        if ia is not None and ib is not None and ia != ib and ia not in seen and ib not in seen:
            optional[max(ia, ib)] = True
            seen.update((ia, ib))
    return optional


def _build(smiles: str, pred: Prediction) -> PreparedCandidate:
    pairs = parse_structure(smiles).diastereotopic_pairs
    twins = _twin_rows(pred.carbons, pairs) if pairs else [False] * len(pred.carbons)
    cs, sg, hh, opt, idx = [], [], [], [], []
    for i, c in enumerate(pred.carbons):
        cs.append(c.shift); sg.append(c.sigma); hh.append(c.hydrogens); opt.append(twins[i]); idx.append(i)
        atoms = set(c.atoms)
        if any(a in atoms and b in atoms for a, b in pairs):
            # twins predicted as one signal: allow a second line for them
            cs.append(c.shift); sg.append(c.sigma); hh.append(c.hydrogens); opt.append(True); idx.append(i)
    groups = [p for p in pred.protons if p.count > 0]
    counts = np.asarray([p.count for p in groups], int)
    return PreparedCandidate(
        smiles=smiles,
        prediction=pred,
        c_shift=np.asarray(cs, float), c_sigma=np.asarray(sg, float), c_h=np.asarray(hh, int),
        c_optional=np.asarray(opt, bool), c_index=np.asarray(idx, int),
        c_atoms=np.asarray([len(pred.carbons[i].atoms) for i in idx], float),
        h_shift=np.asarray([p.shift for p in groups], float),
        h_sigma=np.asarray([p.sigma for p in groups], float),
        h_count=counts,
        h_exch=np.asarray([p.exchangeable for p in groups], bool),
        h_mult=tuple(p.multiplicity.lower() for p in groups),
        h_j=tuple(tuple(sorted(p.j_hz, reverse=True)) for p in groups),
        p_group=np.repeat(np.arange(len(groups)), counts) if len(groups) else np.zeros(0, int),
    )


@lru_cache(maxsize=16384)
def prepare(smiles: str) -> PreparedCandidate:
    """Predict a candidate once (both nuclei) and lay the prediction out as arrays (cached)."""
    return _build(smiles, predict(smiles))


@lru_cache(maxsize=16384)
def prepare_c13(smiles: str) -> PreparedCandidate:
    """Like :func:`prepare` but 13C only (no 1H prediction): for batches without 1H,
    where the 1H prediction would be a third of the work for nothing."""
    from ..prediction.c13.predictor import TABLES_VERSION, predict_carbons

    st = parse_structure(smiles)
    carbons, warn = predict_carbons(st)
    pred = Prediction(smiles=st.smiles, canonical_smiles=st.canonical_smiles, carbons=tuple(carbons),
                      protons=(), warnings=tuple(warn), tables_version=f"13C {TABLES_VERSION}")
    return _build(smiles, pred)


# ------------------------------------------------------------------------ result
@dataclass(frozen=True)
class SignalRow:
    """One line of a per-signal table.

    ``status``: "assigned", "overlap" (second predicted signal on one observed
    line), "not observed" (predicted signal without a line), "unexplained" (an
    observed line no predicted signal claims: impurity or wrong candidate).
    """

    nucleus: str
    observed_ppm: float | None
    predicted_ppm: float | None
    sigma_ppm: float | None
    deviation_sigma: float | None
    atoms: tuple[int, ...] = ()
    hydrogens: int | None = None
    environment: str = ""
    status: str = "assigned"
    observed_index: int | None = None
    protons: int | None = None
    observed_integral: float | None = None
    multiplicity: str = ""
    log_likelihood: float = 0.0

    def __post_init__(self) -> None:
        # a multiplet without an integral is None, never NaN: NaN is not JSON and
        # is not equal to itself (the Result round trip compares rows)
        if self.observed_integral is not None and not math.isfinite(self.observed_integral):
            object.__setattr__(self, "observed_integral", None)

    def to_dict(self) -> dict[str, Any]:
        """JSON form; ``atoms`` 1-based as in every user-facing output (Result schema 3)."""
        r = lambda x: None if x is None else float(x)
        i = lambda x: None if x is None else int(x)
        return {
            "nucleus": self.nucleus, "status": self.status,
            "observed_ppm": r(self.observed_ppm), "predicted_ppm": r(self.predicted_ppm),
            "sigma_ppm": r(self.sigma_ppm), "deviation_sigma": r(self.deviation_sigma),
            "atoms": [int(a) + 1 for a in self.atoms], "hydrogens": i(self.hydrogens), "protons": i(self.protons),
            "observed_integral": r(self.observed_integral), "multiplicity": self.multiplicity,
            "environment": self.environment, "observed_index": i(self.observed_index),
            "log_likelihood": float(self.log_likelihood),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "SignalRow":
        r = lambda k: None if d.get(k) is None else float(d[k])
        i = lambda k: None if d.get(k) is None else int(d[k])
        return cls(d["nucleus"], r("observed_ppm"), r("predicted_ppm"), r("sigma_ppm"), r("deviation_sigma"),
                   tuple(int(a) - 1 for a in d.get("atoms") or ()), i("hydrogens"), d.get("environment") or "",
                   d.get("status") or "assigned", i("observed_index"), i("protons"), r("observed_integral"),
                   d.get("multiplicity") or "", float(d.get("log_likelihood") or 0.0))


# ---------------------------------------------------------------------- 13C score
def _c13_sigma(cand: PreparedCandidate, m: NucleusModel) -> np.ndarray:
    by_h = np.asarray(m.scale_by_hydrogens, float)[np.clip(cand.c_h, 0, 3)]
    return np.maximum(cand.c_sigma * m.scale * by_h, m.sigma_floor_ppm)


def _c13_costs(cand: PreparedCandidate, obs: ObservedC13, m: NucleusModel):
    s = _c13_sigma(cand, m)
    z = (obs.shift[None, :] - cand.c_shift[:, None]) / s[:, None]
    nll = np.log(s)[:, None] - t_logpdf(z, m.df)
    if obs.has_dept:
        h = cand.c_h[:, None]
        bad = (obs.hydrogens[None, :] >= 0) & (obs.hydrogens[None, :] != h)
        bad |= (obs.sign[None, :] > 0) & ((h == 0) | (h == 2))
        bad |= (obs.sign[None, :] < 0) & (h != 2)
        nll = nll - np.where(bad, m.dept_mismatch_logp, 0.0)
    return s, z, nll


def _line_assignment(nll: np.ndarray, miss: np.ndarray, m: NucleusModel,
                     impurity: np.ndarray | float | None = None):
    """Optimal assignment of rows (predicted) to observed lines with overlap, missing
    and impurity options. Returns (log-likelihood, rows, cols) with cols >= k meaning
    second use of line cols-k, cols >= 2k meaning not observed. `impurity` is the log
    density of leaving each line unexplained (default ``m.impurity_logp``)."""
    n, k = nll.shape
    imp = np.broadcast_to(np.asarray(m.impurity_logp if impurity is None else impurity, float), (k,))
    cost = np.full((n, 2 * k + n), _BIG)
    cost[:, :k] = nll + imp[None, :]
    cost[:, k:2 * k] = nll - m.overlap_logp
    cost[np.arange(n), 2 * k + np.arange(n)] = miss
    r, c = linear_sum_assignment(cost)
    total = float(cost[r, c].sum()) - float(imp.sum())
    return -total, r, c


#: 13C intensities are not quantitative (NOE, relaxation), but they say two things:
#: a strong line is unlikely to be an impurity, and the lines of one compound have
#: roughly equal height per carbon. A line left unexplained pays
#: IMPURITY_INTENSITY_SLOPE nats per e-fold of its height above
#: IMPURITY_INTENSITY_FRACTION of the candidate's height per carbon; an assigned protonated line pays
#: 0.5 * (log(height / (n_carbons * level)) / INTENSITY_SIGMA_LOG)^2 (at most
#: INTENSITY_CAP), a quaternary one only if it is taller than expected. Common
#: practice choices, not fitted (the development tasks carry no intensities).
#: Heights that are all equal (a typed list) are ignored. The height per carbon is
#: profiled: the best of the levels in :func:`_intensity_levels`.
IMPURITY_INTENSITY_FRACTION = 0.5
IMPURITY_INTENSITY_SLOPE = 2.0
#: ... and a weaker line is more plausibly an impurity or a minor component: it gains
#: the same slope below that height, up to WEAK_LINE_BONUS nats
WEAK_LINE_BONUS = 3.0
INTENSITY_SIGMA_LOG = 0.7
INTENSITY_CAP = 8.0


def _intensity_levels(inten: np.ndarray) -> np.ndarray:
    """Candidate heights per carbon to try: every line's height over 1, 2 or 3 carbons,
    thinned to 10 % steps (a profile over the candidate's share of the sample)."""
    vals = np.sort(np.concatenate([inten, inten / 2, inten / 3]))
    keep = [vals[0]]
    for v in vals[1:]:
        if v > 1.1 * keep[-1]:
            keep.append(v)
    return np.asarray(keep)


def _c13_intensity_terms(cand: PreparedCandidate, inten: np.ndarray, m: NucleusModel, level: float):
    """(per-line impurity log density, per-pair height cost) for a height per carbon."""
    n_atoms = cand.c_atoms
    excess = np.log(inten / (IMPURITY_INTENSITY_FRACTION * level))
    imp = (m.impurity_logp - IMPURITY_INTENSITY_SLOPE * np.maximum(excess, 0.0)
           + np.minimum(IMPURITY_INTENSITY_SLOPE * np.maximum(-excess, 0.0), WEAK_LINE_BONUS))
    d = np.log(inten[None, :] / (n_atoms[:, None] * level))
    d = np.where(cand.c_h[:, None] == 0, np.maximum(d, 0.0), d)
    cons = np.minimum(0.5 * (d / INTENSITY_SIGMA_LOG) ** 2, INTENSITY_CAP)
    return imp, cons


def _c13_solve(cand: PreparedCandidate, obs: ObservedC13, m: NucleusModel, nll: np.ndarray):
    """Assignment, refined with line heights when they are known (the candidate's
    height per carbon is profiled over :func:`_intensity_levels`). Returns
    (log-likelihood, rows, cols, per-line impurity log density or None, cost matrix)."""
    miss = _c13_missing(cand, m)
    best = _line_assignment(nll, miss, m) + (None, nll)
    inten = obs.intensity
    if inten is None or float(inten.max()) < 1.05 * float(inten.min()):
        return best
    best = None
    for level in _intensity_levels(inten):
        imp, cons = _c13_intensity_terms(cand, inten, m, float(level))
        nll2 = nll + cons
        ll, r, c = _line_assignment(nll2, miss, m, imp)
        if best is None or ll > best[0]:
            best = (ll, r, c, imp, nll2)
    return best


def _c13_missing(cand: PreparedCandidate, m: NucleusModel) -> np.ndarray:
    return np.where(cand.c_optional, -m.unresolved_logp,
                    np.where(cand.c_h == 0, -m.missing_quaternary_logp, -m.missing_logp))


def score_c13(cand: PreparedCandidate, obs: ObservedC13, m: NucleusModel) -> float:
    """Log-likelihood (nats, before temperature) of the observed 13C lines under a candidate."""
    if obs.n == 0:
        return 0.0
    if cand.c_shift.size == 0:
        return obs.n * m.impurity_logp
    _, _, nll = _c13_costs(cand, obs, m)
    return _c13_solve(cand, obs, m, nll)[0]


def c13_table(cand: PreparedCandidate, obs: ObservedC13, m: NucleusModel) -> list[SignalRow]:
    """The per-signal table behind :func:`score_c13` (observed order, then missing)."""
    carbons = cand.prediction.carbons
    if obs.n == 0:
        return []
    if cand.c_shift.size == 0:
        return [SignalRow("13C", float(o), None, None, None, status="unexplained", observed_index=j,
                          log_likelihood=m.impurity_logp) for j, o in enumerate(obs.shift)]
    s, z, nll = _c13_costs(cand, obs, m)
    _, rows, cols, imp, nll = _c13_solve(cand, obs, m, nll)
    imp_of = (lambda j: m.impurity_logp) if imp is None else (lambda j: float(imp[j]))
    k = obs.n
    out: list[SignalRow] = []
    used = set()
    for r, c in zip(rows, cols):
        cs = carbons[cand.c_index[r]]
        if c < 2 * k:
            j = c if c < k else c - k
            used.add(j)
            status = "assigned" if c < k else "overlap"
            ll = -float(nll[r, j]) + (0.0 if c < k else m.overlap_logp)
            out.append(SignalRow("13C", float(obs.shift[j]), float(cand.c_shift[r]), float(s[r]),
                                 float(z[r, j]), cs.atoms, cs.hydrogens, cs.environment, status, j,
                                 log_likelihood=ll))
        else:
            if cand.c_optional[r]:
                continue  # diastereotopic partner on the same line as its twin: nothing to show
            out.append(SignalRow("13C", None, float(cand.c_shift[r]), float(s[r]), None, cs.atoms,
                                 cs.hydrogens, cs.environment, "not observed",
                                 log_likelihood=-float(_c13_missing(cand, m)[r])))
    for j in range(k):
        if j not in used:
            out.append(SignalRow("13C", float(obs.shift[j]), None, None, None, status="unexplained",
                                 observed_index=j, log_likelihood=imp_of(j)))
    out.sort(key=lambda row: (row.observed_ppm is None, -(row.observed_ppm or row.predicted_ppm or 0.0)))
    return out


# ----------------------------------------------------------------------- 1H score
def _mult_compatible(obs: str, pred: str) -> bool:
    if not obs or not pred or obs.startswith("m") or pred.startswith("m") or "br" in obs or "br" in pred:
        return True
    return obs.replace(" ", "") == pred.replace(" ", "")


#: log-probability that an exchangeable proton shows a resolved multiplet (it
#: exchanges fast in routine CDCl3 samples and gives a singlet; common practice)
EXCHANGEABLE_SPLIT_LOGP = -8.0


def _resolved_pattern(multiplicity: str, j_hz: tuple[float, ...]) -> bool:
    """A multiplet with resolved couplings: a J listed, or d/t/q/quint/sept... letters."""
    m = multiplicity.replace(" ", "")
    if any(j > 0 for j in j_hz):
        return True
    return bool(m) and not (m.startswith("m") or "br" in m or m == "s")


def _h1_group_costs(cand: PreparedCandidate, obs: ObservedH1, m: NucleusModel):
    """Per (group, multiplet): scale, z, negative log density plus multiplicity/J terms."""
    s = np.where(cand.h_exch, m.exchangeable_sigma_ppm,
                 np.maximum(cand.h_sigma * m.scale, m.sigma_floor_ppm))
    z = (obs.shift[None, :] - cand.h_shift[:, None]) / s[:, None]
    nll = np.log(s)[:, None] - t_logpdf(z, m.df)
    if any(obs.multiplicity) or any(obs.j_hz):
        extra = np.zeros_like(nll)
        for g in range(cand.h_shift.size):
            if cand.h_exch[g]:
                # an exchanging OH/NH gives a singlet (broad or sharp): a multiplet with
                # resolved couplings is a C-H signal, not this group's
                for k in range(obs.n):
                    if _resolved_pattern(obs.multiplicity[k], obs.j_hz[k]):
                        extra[g, k] -= EXCHANGEABLE_SPLIT_LOGP
                continue
            for k in range(obs.n):
                if not _mult_compatible(obs.multiplicity[k], cand.h_mult[g]):
                    extra[g, k] -= m.multiplicity_mismatch_logp
                if obs.j_hz[k] and cand.h_j[g]:
                    dj = (obs.j_hz[k][0] - cand.h_j[g][0]) / m.j_sigma_hz
                    extra[g, k] += min(0.5 * dj * dj, 4.0)
        nll = nll + extra
    return s, z, nll


def _slots(integral: np.ndarray, total: int) -> np.ndarray:
    """Largest-remainder rounding of integrals to whole protons summing to `total`."""
    x = integral * (total / integral.sum())
    n = np.floor(x).astype(int)
    rest = total - int(n.sum())
    if rest > 0:
        n[np.argsort(-(x - n), kind="stable")[:rest]] += 1
    return n


#: an exchangeable group may take a multiplet at most this many of its (wide) sigmas
#: from its predicted shift, and only one without resolved couplings (its position
#: and width allow it; assignment.exchangeable_allowed)
EXCHANGEABLE_WINDOW_SIGMAS = 3.0


def _h1_group_assignment(cand: PreparedCandidate, obs: ObservedH1, nll: np.ndarray, m: NucleusModel,
                         target: int, s: np.ndarray):
    """Whole groups on multiplets with integral capacity (the shared assignment object).

    The integrals are rounded to ``target`` proton slots; a group of n protons on a
    multiplet of n_k slots carries n/n_k of that multiplet's density term, so each
    observed multiplet contributes one density term whatever the candidate, a full
    multiplet its (count-weighted) mean, an empty one the impurity density. Returns
    (log-likelihood, GroupAssignment, slots per multiplet).
    """
    # every multiplet offers at least one slot: a small integral (or a candidate that
    # is only part of the sample) must not make a multiplet unreachable
    n_k = np.maximum(_slots(obs.integral, target), 1)
    cost = (nll + m.impurity_logp) / n_k[None, :]
    resolved = [_resolved_pattern(obs.multiplicity[k], obs.j_hz[k]) for k in range(obs.n)]
    for g in np.flatnonzero(cand.h_exch):
        ok = exchangeable_allowed(float(cand.h_shift[g]), float(s[g]), obs.shift, resolved,
                                  EXCHANGEABLE_WINDOW_SIGMAS)
        cost[g, ~ok] = _BIG
    miss = np.where(cand.h_exch, -m.exchangeable_missing_logp, -m.missing_logp)
    total, where = assign_whole_groups(cost, cand.h_count, n_k, miss)
    ga = GroupAssignment(tuple((0, int(g)) for g in range(cand.h_shift.size)),
                         tuple(int(c) for c in cand.h_count), tuple(bool(x) for x in cand.h_exch),
                         tuple(int(w) for w in where), obs.n, cost=float(total))
    return -(total - obs.n * m.impurity_logp), ga, n_k


def h1_assignment(cand: PreparedCandidate, obs: ObservedH1, m: NucleusModel,
                  shares: tuple[float, ...] | None = None) -> tuple[float, GroupAssignment | None]:
    """The 1H log-likelihood and the assignment behind it (None without integrals).

    ``shares``: the share of the total integral the candidate may account for (the
    best is taken; default :data:`H1_SHARES`).
    """
    if obs.n == 0:
        return 0.0, None
    if cand.h_shift.size == 0:
        return obs.n * m.impurity_logp, None
    s, _, nll = _h1_group_costs(cand, obs, m)
    if obs.has_integrals:
        best = None
        for t in _h1_hypotheses(cand, H1_SHARES if shares is None else shares):
            if t <= 0:
                continue
            ll, ga, _ = _h1_group_assignment(cand, obs, nll, m, t, s)
            if best is None or ll > best[0]:
                best = (ll, ga)
        return best
    miss = np.where(cand.h_exch, -m.exchangeable_missing_logp, -m.missing_logp)
    return _line_assignment(nll, miss, m)[0], None


#: integral scale hypotheses: the candidate accounts for this share of the total
#: integral (1 = pure sample; less when other compounds contribute multiplets)
H1_SHARES = (1.0, 0.7, 0.5)


def _h1_hypotheses(cand: PreparedCandidate, shares: tuple[float, ...] = H1_SHARES) -> list[int]:
    """Candidate proton totals the observed integrals are scaled to (the per-candidate
    integral scale): with and without its OH, times the share hypotheses."""
    n, x = cand.n_protons, cand.n_exchangeable
    base = [n] if x == 0 else [n, n - x]
    return sorted({int(round(b / f)) for b in base for f in shares if b > 0}, reverse=True)


def score_h1(cand: PreparedCandidate, obs: ObservedH1, m: NucleusModel,
             shares: tuple[float, ...] = H1_SHARES) -> float:
    """Log-likelihood (nats, before temperature) of the observed 1H multiplets.

    ``shares``: the share of the total integral the candidate may account for (the
    best is taken); a mixture hypothesis's union candidate accounts for the whole
    sample and is scored with ``(1.0,)``.
    """
    return h1_assignment(cand, obs, m, shares)[0]


def h1_table(cand: PreparedCandidate, obs: ObservedH1, m: NucleusModel) -> list[SignalRow]:
    """Per-group table behind :func:`score_h1`: each predicted group with the
    multiplet(s) it was assigned to; unexplained multiplets at the end."""
    groups = [p for p in cand.prediction.protons if p.count > 0]
    if obs.n == 0:
        return []
    if cand.h_shift.size == 0:
        return [SignalRow("1H", float(o), None, None, None, status="unexplained", observed_index=k,
                          observed_integral=float(obs.integral[k]), log_likelihood=m.impurity_logp)
                for k, o in enumerate(obs.shift)]
    s, z, nll = _h1_group_costs(cand, obs, m)
    out: list[SignalRow] = []
    used: set[int] = set()
    if obs.has_integrals:
        best = None
        for t in _h1_hypotheses(cand):
            if t > 0:
                res = _h1_group_assignment(cand, obs, nll, m, t, s)
                if best is None or res[0] > best[0]:
                    best = res
        _, ga, n_slots = best
        first_seen: set[int] = set()
        order = sorted(range(len(ga.groups)), key=lambda q: (ga.multiplet[q] < 0, -obs.shift[ga.multiplet[q]]
                                                           if ga.multiplet[q] >= 0 else 0.0))
        for q in order:
            g, k = ga.groups[q][1], ga.multiplet[q]
            p = groups[g]
            if k < 0:
                out.append(SignalRow("1H", None, p.shift, float(s[g]), None, p.atoms, None, p.environment,
                                     "not observed", None, p.count, None, p.multiplicity))
                continue
            status = "assigned" if k not in first_seen else "overlap"
            first_seen.add(k)
            used.add(k)
            out.append(SignalRow("1H", float(obs.shift[k]), p.shift, float(s[g]), float(z[g, k]), p.atoms,
                                 None, p.environment, status, k, p.count, float(obs.integral[k]),
                                 p.multiplicity, -float(nll[g, k]) * p.count / max(1, int(n_slots[k]))))
    else:
        miss = np.where(cand.h_exch, -m.exchangeable_missing_logp, -m.missing_logp)
        _, rows, cols = _line_assignment(nll, miss, m)
        k_n = obs.n
        for g, c in zip(rows, cols):
            p = groups[g]
            if c < 2 * k_n:
                k = int(c if c < k_n else c - k_n)
                used.add(k)
                out.append(SignalRow("1H", float(obs.shift[k]), p.shift, float(s[g]), float(z[g, k]),
                                     p.atoms, None, p.environment, "assigned" if c < k_n else "overlap",
                                     k, p.count, None, p.multiplicity, -float(nll[g, k])))
            else:
                out.append(SignalRow("1H", None, p.shift, float(s[g]), None, p.atoms, None, p.environment,
                                     "not observed", None, p.count, None, p.multiplicity))
    for k in range(obs.n):
        if k not in used:
            out.append(SignalRow("1H", float(obs.shift[k]), None, None, None, status="unexplained",
                                 observed_index=k, observed_integral=float(obs.integral[k]),
                                 log_likelihood=m.impurity_logp))
    out.sort(key=lambda row: (row.observed_ppm is None, -(row.observed_ppm or row.predicted_ppm or 0.0)))
    return out
