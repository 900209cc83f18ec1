"""Product ratio (regioselectivity) from a crude 1H spectrum.

Two estimates, compared with each other:

1. **Full-spectrum fit** (:mod:`.spectrum_fit`): the measured 1H spectrum is fitted
   as a non-negative combination of the candidates' simulated first-order spectra,
   each proton group moving within its prediction uncertainty (shift and coupling
   constants refined), with a polynomial baseline, solvent/water/TMS/impurity lines
   masked and exchangeable OH protons modelled by one free broad line (they
   exchange between the components). Mole fraction of candidate k =
   ``w_k / sum(w)`` with ``w`` the fitted amounts (each candidate's spectrum has
   area = its proton count, so ``w`` counts molecules). Uncertainty: the fit
   covariance, inflated for excess residual and residual correlation, plus
   ``MODEL_SD_FLOOR`` in quadrature; 95% interval = fraction +- 1.96 sd, clipped
   to [0, 1]. A minor candidate the data do not need (a fresh fit without it is
   not clearly worse) is put back at its predicted shifts, so noise does not
   become a few per cent of a product that is not there.
2. **Classical integral ratio**: for every candidate the best well-separated
   signal (>= 95% of the fitted intensity over its range from that candidate, no
   masked points; an X-CH signal on the carbon bearing the heteroatom is
   preferred, as a chemist would pick it), integrated over its range with the fitted baseline removed,
   corrected for Lorentzian tails outside the range, per proton. The two estimates
   *disagree* when some fraction differs by more than ``DISAGREE_MIN`` (5
   percentage points) and by more than twice their combined uncertainty.

With a peak list with integrals instead of a spectrum (:mod:`.integral_fit`),
multiplet integrals are fitted by an assignment of groups to multiplets; the
classical ratio then uses the multiplets that belong to one candidate only.

13C intensities are not quantitative under routine conditions (nuclear Overhauser
enhancement and unequal relaxation): a ratio is never computed from 13C; asking
for one raises :class:`~specmatch.errors.SpecmatchError` saying so.

Wording (common practice; thresholds on the major product's mole fraction):

======================  ===========================
major fraction          wording
======================  ===========================
>= 0.99  (>= 99:1)      completely regioselective
>= 0.90  (>= 90:10)     highly regioselective
>= 0.70  (>= 70:30)     moderately regioselective
< 0.70                  not regioselective
======================  ===========================

1H integrals give mole ratios only when every signal is fully relaxed (recycle
delay >= 5 T1, common practice); the uncertainty here is statistical and does not
include that. An estimate is advisory, like every identification.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np

from ...errors import SpecmatchError
from ...prediction.multiplicity import partners_of

if TYPE_CHECKING:  # the fit module is heavy; only its type is needed here
    from ...prediction.types import ProtonGroup
    from ...structures import Structure
    from .spectrum_fit import SpectrumFit

#: (minimum major fraction, word), checked in order; common practice
SELECTIVITY_THRESHOLDS: tuple[tuple[float, str], ...] = (
    (0.99, "completely"),
    (0.90, "highly"),
    (0.70, "moderately"),
)
#: the two estimates disagree above this difference in any fraction ...
DISAGREE_MIN = 0.05
#: ... when it is also more than this many combined sd
DISAGREE_SIGMAS = 2.0
#: the full fit grows quickly with the number of candidates (multi-start searches)
MAX_CANDIDATES = 6
#: a candidate below this fraction counts as absent when choosing carrying signals
ABSENT_FRACTION = 0.01
Z95 = 1.959964
#: sd added in quadrature to every fraction for what the statistical covariance does
#: not see (first-order line shapes, binning, truncated tails, baseline model).
#: Set by hand (a round value) from the synthetic benchmark (benchmarks/bench_mixture.py,
#: six nmrshiftdb2 isomer pairs, development data, 2026-12-01): without it the
#: statistical sd (~0.05 pp at SNR 500) is smaller than the 0.1-0.2 pp errors of the
#: line-shape model; with it the 95% interval covers 98% of the well-resolved cases.
MODEL_SD_FLOOR = 0.002
#: a present candidate with no resolved signal: this share of its fraction is added
#: to every sd in quadrature (set by hand, a round value: the line-shape model of an
#: overlapped envelope is good to a few tens of per cent at best, demo case (a))
NO_RESOLVED_REL_SD = 0.2
#: ... when the fit's reduced chi-square over the signals exceeds this (the same
#: threshold as the "structured residual" warning; on first-order synthetic spectra it
#: stays near 1 and overlapped-only shares are then as good as the resolved ones)
MISFIT_CHI2_RED = 4.0
#: with a spectrum: when more than this share of the signal intensity is left unexplained
#: (the same threshold as the warning about it)
UNEXPLAINED_MAX = 0.1

_SOLVENT_HALF_WIDTH_PPM = 0.02
_WATER_HALF_WIDTH_PPM = 0.03  # water moves with concentration and temperature


# ------------------------------------------------------------------------ results
@dataclass(frozen=True)
class CarryingSignal:
    """A resolved signal that carries the estimate for one candidate."""

    candidate: int
    range_ppm: tuple[float, float]
    protons: int
    groups: str  # e.g. "1H sept at 4.11 (predicted 4.02)"
    purity: float  # share of the fitted intensity over the range from this candidate
    amount: float | None  # integral per proton (weight units)

    def to_dict(self) -> dict[str, Any]:
        return {
            "candidate": int(self.candidate),
            "range_ppm": [float(self.range_ppm[0]), float(self.range_ppm[1])],
            "protons": int(self.protons),
            "groups": self.groups,
            "purity": float(self.purity),
            "amount": None if self.amount is None else float(self.amount),
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "CarryingSignal":
        lo, hi = d["range_ppm"]
        return cls(int(d["candidate"]), (float(lo), float(hi)), int(d["protons"]), d["groups"],
                   float(d["purity"]), None if d.get("amount") is None else float(d["amount"]))


@dataclass(frozen=True)
class IntegralRatio:
    """The classical ratio from integrals of diagnostic signals, per proton."""

    fractions: tuple[float, ...]
    uncertainties: tuple[float, ...]
    ratio_text: str
    signals: tuple[CarryingSignal, ...]  # one per candidate

    def to_dict(self) -> dict[str, Any]:
        return {
            "fractions": [float(f) for f in self.fractions],
            "uncertainties": [float(u) for u in self.uncertainties],
            "ratio_text": self.ratio_text,
            "signals": [s.to_dict() for s in self.signals],
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "IntegralRatio":
        return cls(tuple(float(f) for f in d["fractions"]), tuple(float(u) for u in d["uncertainties"]),
                   d["ratio_text"], tuple(CarryingSignal.from_dict(x) for x in d["signals"]))


@dataclass(frozen=True)
class MixtureEstimate:
    """Mole fractions of the candidates in a sample, from its 1H spectrum.

    Attributes
    ----------
    candidates : tuple of str
        SMILES as given, in input order; every per-candidate tuple follows it.
    names : tuple of str
        Display names (the SMILES if none was given).
    fractions : tuple of float
        Mole fractions (sum 1).
    uncertainties : tuple of float
        One standard deviation of each fraction.
    interval_95 : tuple of (float, float)
        95% intervals (fraction +- 1.96 sd, clipped to [0, 1]; from a peak list also
        reaching the fractions of other assignments the data cannot exclude).
    ratio_text : str
        The ratio in candidate order, e.g. "78:22".
    selectivity : str
        e.g. "highly regioselective" (thresholds in SELECTIVITY_THRESHOLDS).
    major : int
        Index of the major candidate.
    method, uncertainty_method : str
        What was fitted and how the uncertainty was obtained.
    carrying_signals : tuple of CarryingSignal
        The resolved signals that carry the estimate.
    integral_ratio : IntegralRatio or None
        The classical estimate, when every candidate has a diagnostic signal.
    disagreement : bool
        True if the two estimates disagree (see module docstring).
    warnings : tuple of str
    source : str
        The spectrum or peak list used.
    details : dict
        Fit statistics (numbers and words only: width, reduced chi-square, ...).
    fit : SpectrumFit or None
        The whole-spectrum fit itself (for overlays), when one was made; not
        part of the dict form and not compared.
    """

    candidates: tuple[str, ...]
    names: tuple[str, ...]
    fractions: tuple[float, ...]
    uncertainties: tuple[float, ...]
    interval_95: tuple[tuple[float, float], ...]
    ratio_text: str
    selectivity: str
    major: int
    method: str
    uncertainty_method: str
    carrying_signals: tuple[CarryingSignal, ...] = ()
    integral_ratio: IntegralRatio | None = None
    disagreement: bool = False
    warnings: tuple[str, ...] = ()
    source: str = ""
    selectivity_note: str = ""
    thresholds: tuple[tuple[float, str], ...] = SELECTIVITY_THRESHOLDS
    details: dict[str, Any] = field(default_factory=dict, compare=False, repr=False)
    fit: "SpectrumFit | None" = field(default=None, compare=False, repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON form used by ``specmatch mixture --json`` (full precision; see :meth:`from_dict`)."""
        return {
            "candidates": [
                {
                    "smiles": s,
                    "name": n,
                    "fraction": float(f),
                    "uncertainty": float(u),
                    "interval_95": [float(lo), float(hi)],
                }
                for s, n, f, u, (lo, hi) in zip(self.candidates, self.names, self.fractions,
                                                self.uncertainties, self.interval_95)
            ],
            "ratio_text": self.ratio_text,
            "selectivity": self.selectivity,
            "selectivity_note": self.selectivity_note,
            "thresholds": [{"major_fraction_min": t, "word": w} for t, w in self.thresholds],
            "major": self.major,
            "method": self.method,
            "uncertainty_method": self.uncertainty_method,
            "carrying_signals": [c.to_dict() for c in self.carrying_signals],
            "integral_ratio": self.integral_ratio.to_dict() if self.integral_ratio else None,
            "disagreement": self.disagreement,
            "warnings": list(self.warnings),
            "source": self.source,
            "details": {k: (float(v) if isinstance(v, (float, np.floating)) else v)
                        for k, v in self.details.items() if isinstance(v, (int, float, str, bool, np.floating))},
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> "MixtureEstimate":
        """The inverse of :meth:`to_dict` (the fit itself is not kept)."""
        cands = d["candidates"]
        ir = d.get("integral_ratio")
        return cls(
            candidates=tuple(c["smiles"] for c in cands), names=tuple(c["name"] for c in cands),
            fractions=tuple(float(c["fraction"]) for c in cands),
            uncertainties=tuple(float(c["uncertainty"]) for c in cands),
            interval_95=tuple((float(c["interval_95"][0]), float(c["interval_95"][1])) for c in cands),
            ratio_text=d["ratio_text"], selectivity=d["selectivity"], major=int(d["major"]),
            method=d["method"], uncertainty_method=d["uncertainty_method"],
            carrying_signals=tuple(CarryingSignal.from_dict(x) for x in d.get("carrying_signals") or ()),
            integral_ratio=None if ir is None else IntegralRatio.from_dict(ir),
            disagreement=bool(d.get("disagreement")), warnings=tuple(d.get("warnings") or ()),
            source=d.get("source") or "", selectivity_note=d.get("selectivity_note") or "",
            thresholds=tuple((float(t["major_fraction_min"]), t["word"]) for t in d["thresholds"])
            if d.get("thresholds") else SELECTIVITY_THRESHOLDS,
            details=dict(d.get("details") or {}),
        )


# ------------------------------------------------------------------------ wording
def ratio_text(fractions: Sequence[float]) -> str:
    """Integer percentages summing to 100 (largest remainder), e.g. "78:22".

    A minor component below 0.5% is written "<1" (two candidates: ">99:1", the
    usual way of writing an essentially single-isomer result).
    """
    f = np.clip(np.asarray(fractions, float), 0.0, None)
    if f.sum() <= 0:
        return ":".join("?" for _ in f)
    p = 100.0 * f / f.sum()
    base = np.floor(p).astype(int)
    rem = p - base
    for i in np.argsort(-rem)[: 100 - int(base.sum())]:
        base[i] += 1
    if (base == 100).any() and len(base) == 2:
        return ">99:1" if base[0] == 100 else "1:>99"
    if (base == 100).any() and len(base) > 2:
        return ":".join(">99" if b == 100 else "<1" for b in base)
    if (base == 0).any() and len(base) > 1:
        parts = []
        for b, q in zip(base, p):
            parts.append("<1" if b == 0 else str(b))
        return ":".join(parts)
    return ":".join(str(int(b)) for b in base)


def selectivity_words(major_fraction: float) -> str:
    """"completely / highly / moderately / not regioselective" by SELECTIVITY_THRESHOLDS."""
    for threshold, word in SELECTIVITY_THRESHOLDS:
        if major_fraction >= threshold - 1e-12:
            return f"{word} regioselective"
    return "not regioselective"


def _selectivity_note(lo: float, hi: float) -> str:
    lo_w, hi_w = selectivity_words(lo), selectivity_words(hi)
    if lo_w == hi_w:
        return ""
    return (f"the 95% interval of the major fraction ({100 * lo:.1f}-{100 * hi:.1f}%) spans more than one "
            f"wording: from '{lo_w}' to '{hi_w}'")


# ------------------------------------------------------------ fallback couplings
#: typical vicinal 3J(H,H) in freely rotating alkyl chains, Hz (common practice)
VICINAL_J_HZ = 7.0


def first_order_couplings(structure: "Structure", atoms: Sequence[int],
                          j_hz: float = VICINAL_J_HZ) -> tuple[tuple[int, float], ...]:
    """Vicinal coupling partners of the protons on ``atoms[0]``.

    Partners are the H on neighbouring carbons, one partner set per class of
    equivalent neighbours; H on O (fast exchange) and on equivalent neighbours
    (no visible splitting) do not count.
    """
    mol = structure.mol
    a = mol.GetAtomWithIdx(int(atoms[0]))
    if a.GetSymbol() != "C":
        return ()
    own = structure.symmetry_classes[a.GetIdx()]
    per_class: dict[int, int] = {}
    for nb in a.GetNeighbors():
        if nb.GetSymbol() != "C" or nb.GetTotalNumHs() == 0:
            continue
        cls = structure.symmetry_classes[nb.GetIdx()]
        if cls == own:
            continue
        per_class[cls] = per_class.get(cls, 0) + nb.GetTotalNumHs()
    return tuple((n, float(j_hz)) for _, n in sorted(per_class.items()))


def with_couplings(structure: "Structure", groups: Sequence["ProtonGroup"]) -> tuple["ProtonGroup", ...]:
    """Fill in first-order couplings for groups that should split but carry none."""
    from dataclasses import replace

    out = []
    for g in groups:
        if not g.couplings and not g.exchangeable and g.multiplicity not in ("s", "br s"):
            g = replace(g, couplings=first_order_couplings(structure, g.atoms))
        out.append(g)
    return tuple(out)


# ---------------------------------------------------------------------- internals
@dataclass
class _Candidate:
    smiles: str
    name: str
    groups: tuple  # ProtonGroup with couplings
    placeholder: bool
    pred: object = None  # the Prediction (exact second-order spectra in the full-spectrum fit)


#: geminal 2J between diastereotopic twins is left out of the fitted multiplets when
#: at least this large (Hz): their shift difference is unknown, and when it is small
#: the pair is a second-order AB pattern that looks much like no splitting
GEMINAL_MIN_J_HZ = 10.0


def _fit_groups(groups: Sequence) -> tuple:
    """The groups as fitted: diastereotopic twins without their mutual geminal coupling."""
    from dataclasses import replace

    out = []
    for g in groups:
        twins = [h for h in groups if h is not g and h.atoms == g.atoms] if g.diastereotopic else []
        if twins:
            # the mutual coupling is in both twins' lists: the largest |J| shared by them.
            # Of the =CH2 pair of a terminal vinyl group the large couplings are the trans
            # (17 Hz) and cis (10 Hz) ones to =CH, one in each list, and the geminal is
            # ~1.5 Hz: nothing is removed (the largest coupling alone was, which left the
            # first-order =CH2 signals a narrow doublet and their integration windows
            # cut through the real dd)
            other = {round(abs(float(c[1])), 2) for h in twins for c in h.couplings if c[0] == 1}
            gem = [c for c in g.couplings if c[0] == 1 and abs(c[1]) >= GEMINAL_MIN_J_HZ
                   and round(abs(float(c[1])), 2) in other]
            if gem:
                big = max(gem, key=lambda c: abs(c[1]))
                rest = list(g.couplings)
                rest.remove(big)
                g = replace(g, couplings=tuple(rest))
        out.append(g)
    return tuple(out)


def _prepare_candidates(candidates: Sequence[str], names: Sequence[str] | None,
                        predictions: Sequence | None = None) -> list[_Candidate]:
    from ...prediction import predict
    from ...structures import parse_structure

    cands = [str(c).strip() for c in candidates]
    if len(cands) < 2:
        raise SpecmatchError(
            f"a product ratio needs at least two candidate structures, got {len(cands)}; "
            "list every isomer that may be in the sample (one SMILES per line)")
    if len(cands) > MAX_CANDIDATES:
        raise SpecmatchError(
            f"{len(cands)} candidates given; the ratio fit takes at most {MAX_CANDIDATES}. Keep the plausible "
            "ones (e.g. those the identification gives more than 1% probability)")
    seen: dict[str, int] = {}
    out = []
    for i, smi in enumerate(cands):
        st = parse_structure(smi)
        if st.canonical_smiles in seen:
            raise SpecmatchError(
                f"candidates {seen[st.canonical_smiles] + 1} and {i + 1} are the same compound "
                f"({st.canonical_smiles}); give each isomer once")
        seen[st.canonical_smiles] = i
        pred = predictions[i] if predictions is not None else predict(smi)
        groups = _fit_groups(with_couplings(st, pred.protons))
        if not any(not g.exchangeable for g in groups):
            raise SpecmatchError(f"candidate {i + 1} ({smi}) has no C-H protons; a 1H ratio cannot include it")
        name = names[i] if names and i < len(names) and names[i] else smi
        out.append(_Candidate(smi, name, groups, "placeholder" in (pred.tables_version or ""), pred))
    return out


def _masks(peaklist, solvent: str | None, warnings: list[str], cands: Sequence[_Candidate] = ()
           ) -> tuple[list[tuple[float, float]], list[str], list[tuple[str, float]]]:
    """Ranges to leave out: TMS, the peak list's flagged lines and the solvent table's lines.

    Lines flagged as a known impurity or as a trace multiplet are kept in the fit when
    a candidate has a predicted signal within 1 sigma (the "impurity" may be the product:
    tert-butyl alcohol is both a common impurity and a hydration product); grease
    is always masked.
    """
    def near_candidate(c: float, sigmas: float = 1.0) -> str | None:
        return _near_candidate(cands, c, sigmas)

    masks: list[tuple[float, float]] = [(-_SOLVENT_HALF_WIDTH_PPM, _SOLVENT_HALF_WIDTH_PPM)]
    names = ["TMS 0.00"]
    flagged = []
    if peaklist is not None:
        for m in peaklist.multiplets:
            if m.flag is not None:
                lo, hi = min(m.range), max(m.range)
                flagged.append((lo - 0.01, hi + 0.01, m.flag, m.shift))
        for p in peaklist.peaks:
            if p.flag is not None:
                half = max(_SOLVENT_HALF_WIDTH_PPM, 4.0 * (p.width_hz or 1.0) / (peaklist.frequency_mhz or 400.0))
                if p.flag == "water":
                    half = max(half, _WATER_HALF_WIDTH_PPM)
                flagged.append((p.shift - half, p.shift + half, p.flag, p.shift))
    for lo, hi, flag, c in flagged:
        # a weak ("trace") multiplet where a candidate has a signal may be that candidate
        # (the unreacted substrate's vinyl lines): masked, its amount would rest on nothing
        if flag.startswith("impurity") or flag == "trace":
            # a trace multiplet anywhere the fit can move a candidate's group (3 sigma) is kept
            who = near_candidate(c, 3.0 if flag == "trace" else 1.0)
            if who is not None:
                if flag != "trace":  # a weak candidate's multiplets are expected, not news
                    warnings.append(f"the line at {c:.2f} ppm flagged '{flag}' is where {who} has a signal; "
                                    "kept in the fit")
                continue
        masks.append((lo, hi))
        names.append(f"{flag} {c:.2f}")
    # the solvent's table lines (specmatch.spectra.solvents) are masked as well: a weak
    # water line is often not flagged
    from ...spectra.solvents import canonical_solvent, lines_for

    rows = [r for r in lines_for(canonical_solvent(solvent, strict=False), "1H")
            if r.kind in ("solvent", "water", "TMS")]
    if not rows and not flagged:
        warnings.append(
            f"solvent {'not given' if not solvent else repr(solvent)}: residual solvent and water lines "
            "were not masked (give --solvent, e.g. CDCl3)")
    for r in rows:
        half = _WATER_HALF_WIDTH_PPM if r.kind == "water" else _SOLVENT_HALF_WIDTH_PPM
        masks.append((r.shift_ppm - half, r.shift_ppm + half))
        names.append(f"{r.kind} {r.shift_ppm:.2f}")
    # every masked line also gets a free line in the fit (its tails reach past the mask)
    lines = {}
    for n in names:
        label, _, c = n.rpartition(" ")
        lines.setdefault(round(float(c), 2), n)
    return masks, list(dict.fromkeys(names)), [(n, c) for c, n in lines.items()]


def _near_candidate(cands: Sequence[_Candidate], shift: float, sigmas: float = 1.0) -> str | None:
    """Name of a candidate with a predicted C-H signal within ``sigmas`` sigma of ``shift``."""
    for cand in cands:
        for g in cand.groups:
            if not g.exchangeable and abs(g.shift - shift) <= sigmas * g.sigma:
                return cand.name
    return None


def _describe_groups(cands: list[_Candidate], k: int, group_indices: Sequence[int],
                     fitted: dict[int, float] | None = None) -> str:
    parts = []
    for i in group_indices:
        g = cands[k].groups[i]
        if fitted is not None and i in fitted:
            parts.append(f"{g.count}H {g.multiplicity} at {fitted[i]:.2f} (predicted {g.shift:.2f})")
        else:
            parts.append(f"{g.count}H {g.multiplicity} predicted at {g.shift:.2f}")
    return "; ".join(parts)


def _interval(f: np.ndarray, sd: np.ndarray) -> tuple[tuple[float, float], ...]:
    return tuple((float(max(0.0, a - Z95 * s)), float(min(1.0, a + Z95 * s))) for a, s in zip(f, sd))


def _alpha_to_heteroatom(cand: _Candidate, group_indices: Sequence[int]) -> bool:
    from ...structures import parse_structure

    mol = parse_structure(cand.smiles).mol
    for i in group_indices:
        atom = mol.GetAtomWithIdx(int(cand.groups[i].atoms[0]))
        if atom.GetSymbol() == "C" and any(n.GetSymbol() not in ("C", "H") for n in atom.GetNeighbors()):
            return True
    return False


def _integral_ratio(regions, cands, weights, fitted_shift_map) -> tuple[IntegralRatio | None, str]:
    """Best diagnostic region per candidate -> classical ratio; or None and why."""
    from .spectrum_fit import PURITY_MIN

    chosen = []
    for k in range(len(cands)):
        regs = [r for r in regions if r.component == k and r.purity >= PURITY_MIN and r.amount is not None]
        if not regs:
            return None, f"no well-separated signal of {cands[k].name} for an integral ratio"
        # the classical choice: an X-CH signal (on the carbon bearing the heteroatom) if
        # one is resolved, else the most precise resolved signal
        chosen.append(min(regs, key=lambda r: (not _alpha_to_heteroatom(cands[k], r.own_groups), r.amount_sd)))
    amounts = np.array([max(0.0, r.amount) for r in chosen])
    sds = np.array([r.amount_sd for r in chosen])
    tot = amounts.sum()
    if tot <= 0:
        return None, "the diagnostic signals integrate to nothing"
    f = amounts / tot
    # delta method, independent integrals
    d = (np.eye(len(f)) - f[:, None]) / tot
    sd = np.sqrt(np.clip(np.diag(d @ np.diag(sds**2) @ d.T), 0.0, None))
    sigs = tuple(
        CarryingSignal(r.component, (r.lo_ppm, r.hi_ppm), r.protons,
                       _describe_groups(cands, r.component, r.own_groups, fitted_shift_map.get(r.component)),
                       r.purity, r.amount)
        for r in chosen)
    return IntegralRatio(tuple(float(v) for v in f), tuple(float(v) for v in sd), ratio_text(f), sigs), ""


# ------------------------------------------------------- observed-multiplet ratio
#: couplings below this (Hz) are not resolved at routine line widths (common practice)
_RESOLVED_J_HZ = 2.5
#: a multiplet is integrated this far (ppm) beyond its outer lines when the neighbours allow
_INTEGRATION_EXTENSION_PPM = 0.012
#: relative integration error of a clean multiplet (phasing, baseline; common practice: 1-2%)
_INTEGRAL_REL_SD = 0.015
#: another present candidate may make at most this share of the fitted intensity of a diagnostic multiplet
_FOREIGN_MAX = 0.05
#: besides the best-matching group, a group counts in a multiplet only within this many
#: prediction sigmas of its predicted shift
MULTIPLET_Z_MAX = 2.0


def _observed_partners(multiplicity: str) -> int | None:
    """Equivalent-partner count of an observed first-order multiplicity ('dq' -> 4); None for m/br."""
    return partners_of(multiplicity)


def _predicted_partners(group) -> int:
    return int(sum(n for n, j in group.couplings if abs(float(j)) >= _RESOLVED_J_HZ))


def _observed_integral_ratio(cands: Sequence[_Candidate], fit, peaklist, f_mhz: float
                             ) -> tuple[IntegralRatio | None, str, dict[int, float]]:
    """Classical ratio from the observed, well-separated multiplets of the peak list.

    A multiplet is diagnostic of candidate k when a group of k whose first-order
    pattern matches the observed multiplicity (same number of resolved partners)
    was refined into it, no such group of another present candidate was, and the
    other candidates make less than ``_FOREIGN_MAX`` of the fitted intensity there.
    Groups of k whose pattern does not match (a quartet refined onto a triplet) do
    not count: the observed pattern shows they are not there. The integral is taken
    from the data (baseline removed), not from the model, so a poor fit of a crowded
    envelope elsewhere does not enter. Returns the ratio (or None and why) and, per
    candidate, the relative spread of its diagnostic multiplets' per-proton amounts.
    """
    if peaklist is None or not peaklist.multiplets:
        return None, "no peak list", {}
    x, y, used = fit.x, fit.y, fit.used
    h = float(x[1] - x[0])
    hw = fit.width_hz / f_mhz / 2.0
    w = fit.weights
    tot = w.sum()
    present = w > ABSENT_FRACTION * tot if tot > 0 else np.zeros(len(w), bool)
    mults = sorted((m for m in peaklist.multiplets if m.flag is None), key=lambda m: min(m.range))
    edges = [(min(m.range), max(m.range)) for m in mults]
    found: dict[int, list] = {}
    for i, m in enumerate(mults):
        lo, hi = edges[i]
        # integration window: a fixed extension beyond the outer lines, less where a
        # neighbour comes closer (then at most to half the gap)
        gap_lo = lo - edges[i - 1][1] if i > 0 else np.inf
        gap_hi = edges[i + 1][0] - hi if i + 1 < len(mults) else np.inf
        ext = min(_INTEGRATION_EXTENSION_PPM, 0.5 * gap_lo, 0.5 * gap_hi)
        if ext < 4.0 * hw:  # touching another multiplet: not well separated
            continue
        a, b = lo - ext, hi + ext
        sel = (x >= a) & (x <= b)
        if sel.sum() < 3 or x[0] > a or x[-1] < b or not used[sel].all():
            continue
        obs = _observed_partners(m.multiplicity)
        tol = max(3.0 * hw, 0.005)
        inside: dict[int, list[tuple[float, int]]] = {}
        for j, g in enumerate(fit.groups):
            if lo - tol <= fit.shifts_ppm[j] <= hi + tol:
                grp = cands[g.component].groups[g.index]
                if obs is None or _predicted_partners(grp) == obs:
                    z = abs(fit.shifts_ppm[j] - g.shift0) / g.sigma
                    inside.setdefault(g.component, []).append((z, g.index))
        owners = [k for k in inside if present[k]] or list(inside)
        if len(owners) != 1:
            continue
        k = owners[0]
        if obs is None:
            # no clean pattern: the fitted model must say the multiplet is k's alone
            model_in = fit.component_curves[:, sel].sum(axis=1)
            if model_in.sum() <= 0 or (model_in.sum() - model_in[k]) > _FOREIGN_MAX * model_in.sum():
                continue
        # the most plausible matching group (closest to its prediction in sigmas); more
        # only if also plausible (within MULTIPLET_Z_MAX sigma): the fit parks groups of the
        # crowded envelope on clean resolved lines when the envelope is poorly modelled
        ranked = sorted(inside[k])
        own = [ranked[0][1]] + [q for z, q in ranked[1:] if z <= MULTIPLET_Z_MAX]
        inside[k] = own
        protons = sum(cands[k].groups[q].count for q in own)
        data = float(np.sum(y[sel] - fit.baseline_curve[sel]) * h)
        # Lorentzian area beyond the window (both sides, a line at each edge): same for
        # every multiplet with the full extension, so it mostly cancels in the ratio
        data /= max(1.0 - 2.0 * hw / (np.pi * ext), 0.5)
        sd = float(np.hypot(fit.noise_sd * np.sqrt(sel.sum()) * h, _INTEGRAL_REL_SD * abs(data)))
        found.setdefault(k, []).append((obs is None, not _alpha_to_heteroatom(cands[k], inside[k]),
                                        sd / max(abs(data), 1e-300), (a, b), protons, tuple(inside[k]),
                                        data / protons, sd / protons))
    missing = [cands[k].name for k in range(len(cands)) if k not in found]
    if missing:
        return None, f"no well-separated multiplet of {', '.join(missing)} for an integral ratio", {}
    chosen, spread = [], {}
    for k in range(len(cands)):
        opts = sorted(found[k])
        chosen.append(opts[0])
        per_h = np.array([o[6] for o in opts if not o[0]] or [opts[0][6]])
        # several clean multiplets of one candidate should agree: their spread is a
        # measure of what the single integral does not see (overlap, misassignment)
        spread[k] = float(np.std(per_h) / max(abs(np.mean(per_h)), 1e-300)) if len(per_h) > 1 else 0.0
    amounts = np.array([max(0.0, c[6]) for c in chosen])
    sds = np.array([np.hypot(c[7], spread[k] * c[6]) for k, c in enumerate(chosen)])
    tot_a = amounts.sum()
    if tot_a <= 0:
        return None, "the diagnostic multiplets integrate to nothing", {}
    f = amounts / tot_a
    d = (np.eye(len(f)) - f[:, None]) / tot_a
    sdf = np.sqrt(np.clip(np.diag(d @ np.diag(sds**2) @ d.T), 0.0, None))
    fitted = {}
    for j, g in enumerate(fit.groups):
        fitted.setdefault(g.component, {})[g.index] = float(fit.shifts_ppm[j])
    sigs = tuple(
        CarryingSignal(k, c[3], c[4], _describe_groups(list(cands), k, c[5], fitted.get(k)) + " (observed multiplet)",
                       1.0, c[6])
        for k, c in enumerate(chosen))
    return IntegralRatio(tuple(float(v) for v in f), tuple(float(v) for v in sdf), ratio_text(f), sigs), "", spread


def _finish(cands, weights, wcov, regions, *, method, uncertainty_method, warnings, source,
            fitted, group_keys, details, undetected: dict[int, float] | None = None,
            observed: IntegralRatio | None = None, extra_sd: np.ndarray | None = None,
            plausible: np.ndarray | None = None) -> MixtureEstimate:
    from .spectrum_fit import PURITY_MIN, _fraction_sd

    w = np.asarray(weights, float)
    tot = w.sum()
    if not tot > 0:
        raise SpecmatchError(
            "none of the candidates' predicted signals were found in the spectrum; check that the "
            "spectrum is a 1H spectrum of this reaction and that the candidate list is right")
    f = w / tot
    sd = np.sqrt(_fraction_sd(w, wcov) ** 2 + MODEL_SD_FLOOR**2)
    if extra_sd is not None:
        sd = np.sqrt(sd**2 + np.asarray(extra_sd, float) ** 2)
    # a candidate the fit did not need: what it had before the detection test is how
    # much the spectrum cannot exclude; its 95% interval reaches that far
    for k, before in (undetected or {}).items():
        extra = max(before, Z95 * sd[k]) / Z95
        for j in range(len(sd)):
            sd[j] = max(sd[j], extra) if j == k else float(np.sqrt(sd[j] ** 2 + extra**2))
        warnings.append(f"{cands[k].name}: not detected; the spectrum cannot exclude up to about "
                        f"{100 * Z95 * extra:.1f}%")
    # per region, the candidate's own group indices (for descriptions)
    for r in regions:
        r.own_groups = tuple(group_keys[j][1] for j in r.groups)
    carrying = []
    for r in regions:
        if r.purity < PURITY_MIN:
            continue
        k = r.component
        desc = _describe_groups(cands, k, r.own_groups, fitted.get(k))
        if f[k] < ABSENT_FRACTION:
            desc += " (expected here if present; not seen)"
        carrying.append(CarryingSignal(k, (r.lo_ppm, r.hi_ppm), r.protons, desc, r.purity, r.amount))
    # the observed, well-separated multiplets (data integrals, pattern-checked
    # assignment) are preferred over the model's own regions for the classical ratio
    integral, why = (observed, "") if observed is not None else _integral_ratio(regions, cands, w, fitted)
    disagreement = False
    if integral is None:
        warnings.append(f"no classical integral ratio: {why}")
    else:
        fi = np.array(integral.fractions)
        diff = np.abs(fi - f)
        comb = np.sqrt(np.array(integral.uncertainties) ** 2 + sd**2)
        bad = (diff > DISAGREE_MIN) & (diff > DISAGREE_SIGMAS * comb)
        if bad.any():
            disagreement = True
            fit_text = ratio_text(f)
            if observed is not None:
                # the full fit is driven by the crowded, poorly modelled stretches; the
                # resolved multiplets are what a chemist would integrate: report them,
                # with half the difference to the fit added to the sd (the two span it)
                f = fi
                sd = np.sqrt(np.array(integral.uncertainties) ** 2 + (diff / 2.0) ** 2 + MODEL_SD_FLOOR**2)
                carrying = list(integral.signals)
                method = method + "; reported: the integral ratio of the resolved multiplets (the fit disagrees)"
                uncertainty_method = (uncertainty_method + "; as the fit and the integrals disagree: integral sd "
                                      "with half their difference added in quadrature")
            warnings.append(
                f"the full fit ({fit_text}) and the integrals of the diagnostic signals "
                f"({integral.ratio_text}) disagree; overlapped or misassigned signals, an impurity under a "
                "diagnostic signal, or a missing candidate are the usual causes"
                + ("; the integral ratio is reported, the uncertainty spans both" if observed is not None
                   else ": inspect the fit"))
    for k in range(len(cands)):
        resolved = any(c.candidate == k for c in carrying) or (integral is not None and observed is not None)
        if not resolved and f[k] >= ABSENT_FRACTION:
            msg = f"{cands[k].name}: no resolved signal of its own; its fraction rests on overlapped signals"
            misfit = float(details.get("unexplained_share", 0.0)) > UNEXPLAINED_MAX if \
                "unexplained_share" in details else float(details.get("chi2_red", 0.0)) > MISFIT_CHI2_RED
            if misfit:
                # its share comes from a line-shape model that does not reproduce the
                # spectrum: add NO_RESOLVED_REL_SD of its fraction in quadrature
                extra = NO_RESOLVED_REL_SD * f[k]
                sd = np.sqrt(sd**2 + extra**2)
                msg += f", and the fit leaves structured residual (sd widened by {100 * extra:.1f} percentage points)"
            warnings.append(msg)
    if np.nanmax(sd) > 0.15:
        warnings.append("the spectrum does not separate the candidates well: some fractions have an sd above 0.15")
    if any(c.placeholder for c in cands):
        warnings.append("the 1H prediction tables are placeholders; the estimate is not meaningful yet")
    major = int(np.argmax(f))
    iv = _interval(f, sd)
    if plausible is not None and len(plausible):
        # readings the data cannot exclude (peak-list assignments): the interval reaches them
        pl = np.asarray(plausible, float)
        iv = tuple((float(min(lo, pl[:, k].min())), float(max(hi, pl[:, k].max()))) for k, (lo, hi) in enumerate(iv))
    return MixtureEstimate(
        candidates=tuple(c.smiles for c in cands),
        names=tuple(c.name for c in cands),
        fractions=tuple(float(v) for v in f),
        uncertainties=tuple(float(v) for v in sd),
        interval_95=iv,
        ratio_text=ratio_text(f),
        selectivity=selectivity_words(float(f[major])),
        selectivity_note=_selectivity_note(*iv[major]),
        major=major,
        method=method,
        uncertainty_method=uncertainty_method,
        carrying_signals=tuple(carrying),
        integral_ratio=integral,
        disagreement=disagreement,
        warnings=tuple(dict.fromkeys(warnings)),
        source=source,
        details=details,
    )


# ---------------------------------------------------------------------------- API
def estimate_mixture(
    candidates: Sequence[str],
    *,
    spectrum=None,
    peaklist=None,
    solvent: str | None = None,
    frequency_mhz: float | None = None,
    names: Sequence[str] | None = None,
    predictions: Sequence | None = None,
) -> MixtureEstimate:
    """Mole fractions of the candidates from a 1H spectrum or a 1H peak list with integrals.

    Parameters
    ----------
    candidates : sequence of str
        SMILES of every isomer that may be in the sample (at least two).
    spectrum : Spectrum, optional
        The processed 1H spectrum (preferred: full-spectrum fit).
    peaklist : PeakList, optional
        Its peak list: used for the flagged solvent/water/impurity lines with a
        spectrum, or alone (multiplet integrals needed) without one.
    solvent : str, optional
        Masks the solvent's residual and water lines when no flagged lines are known.
    frequency_mhz : float, optional
        1H frequency if the spectrum does not say (default 400 with a warning).
    names : sequence of str, optional
        Display names of the candidates.
    predictions : sequence of Prediction, optional
        Already computed predictions, one per candidate (default: ``predict``).

    Raises
    ------
    SpecmatchError
        Fewer than two candidates, a 13C spectrum (not quantitative), a peak list
        without integrals, or nothing to fit.
    """
    warnings: list[str] = []
    for obj in (spectrum, peaklist):
        if obj is not None and obj.nucleus != "1H":
            raise SpecmatchError(
                f"a product ratio needs a 1H spectrum; this is {obj.nucleus}. 13C intensities are not "
                "quantitative under routine conditions (nuclear Overhauser enhancement, unequal "
                "relaxation), so specmatch does not report a ratio from them")
        if obj is not None and obj.experiment != "1D":
            raise SpecmatchError(f"a product ratio needs a plain 1D 1H spectrum, not {obj.experiment}")
    if spectrum is None and peaklist is None:
        raise SpecmatchError("give a 1H spectrum or a 1H peak list with integrals")
    if predictions is not None and len(predictions) != len(candidates):
        raise SpecmatchError(f"{len(candidates)} candidates but {len(predictions)} predictions")
    cands = _prepare_candidates(candidates, names, predictions)
    src = (spectrum.source if spectrum is not None else peaklist.source) or ""
    solvent = solvent or (spectrum.solvent if spectrum is not None else None) or \
        (peaklist.solvent if peaklist is not None else None)
    f_mhz = frequency_mhz or (spectrum.frequency_mhz if spectrum is not None else None) or \
        (peaklist.frequency_mhz if peaklist is not None else None)
    if not f_mhz:
        f_mhz = 400.0
        if spectrum is not None:  # a peak-list fit does not simulate line shapes
            warnings.append("the 1H frequency is not known; 400 MHz assumed (it sets the multiplet widths)")
    if spectrum is not None:
        if peaklist is None:
            peaklist = _try_process(spectrum, solvent, warnings)
        return _from_spectrum(cands, spectrum, peaklist, solvent, float(f_mhz), warnings, src)
    return _from_peaklist(cands, peaklist, warnings, src)


def _try_process(spectrum, solvent, warnings):
    from ...spectra import process_spectrum

    try:
        return process_spectrum(spectrum, solvent=solvent)
    except SpecmatchError as exc:
        warnings.append(f"peak picking failed ({exc}); solvent lines masked from the table instead")
        return None


def _from_spectrum(cands, spectrum, peaklist, solvent, f_mhz, warnings, src) -> MixtureEstimate:
    from .spectrum_fit import fit_spectrum

    ppm = np.asarray(spectrum.ppm, float)
    y = np.asarray(spectrum.intensity, float)
    if ppm.size < 100 or not np.all(np.isfinite(y)):
        raise SpecmatchError(f"{src or 'the spectrum'}: too few points or non-finite intensities; "
                             "export the processed (real, phased) 1H spectrum")
    masks, mask_names, lines = _masks(peaklist, solvent, warnings, cands)
    fit = fit_spectrum(ppm, y, [c.groups for c in cands], frequency_mhz=f_mhz, masks_ppm=masks,
                       extra_lines_ppm=lines, predictions=[c.pred for c in cands],
                       anchor_fractions=_integral_anchor(cands, peaklist))
    exact = any("exact second-order" in n for n in fit.notes)
    fitted: dict[int, dict[int, float]] = {}
    for j, g in enumerate(fit.groups):
        fitted.setdefault(g.component, {})[g.index] = float(fit.shifts_ppm[j])
    group_keys = [(g.component, g.index) for g in fit.groups]
    if fit.chi2_red > 4.0:
        warnings.append(
            f"the fit leaves structured residual (reduced chi-square {fit.chi2_red:.1f} over the signals): "
            "second-order multiplets, an impurity or a candidate missing from the list")
    resid = (fit.y - fit.fitted)[fit.used]
    sig = (fit.fitted - fit.baseline_curve)[fit.used]
    unexplained = 0.0
    if sig.sum() > 0:
        # positive residual well above the noise: lines no candidate accounts for
        big = resid > 5.0 * fit.noise_sd
        unexplained = float(resid[big].sum() / sig.sum())
        if unexplained > UNEXPLAINED_MAX:
            warnings.append(f"{100 * unexplained:.0f}% of the intensity is not explained by any candidate "
                            "(impurity, solvent or a missing candidate?)")
    if fit.oh is not None and fit.oh[0] > 0:
        warnings.append(f"exchangeable OH line fitted at {fit.oh[1]:.2f} ppm ({fit.oh[2]:.0f} Hz wide); "
                        "not used for the ratio")
    kind = ("exact (second-order) 1H spectra" if exact else "first-order 1H multiplets")
    method = (f"full-spectrum fit: non-negative combination of the candidates' simulated {kind} "
              f"({f_mhz:.0f} MHz), per-group shift refinement (within {3:.0f} prediction sigma)"
              f"{'' if exact else ' and J refinement'}, one line width ({fit.width_hz:.2f} Hz fitted), "
              f"degree-2 baseline; "
              f"masked: {', '.join(mask_names)}")
    unc = (f"fit covariance at the solution (Gauss-Newton), inflated x{fit.inflation:.2f} for excess residual "
           f"and residual correlation, plus {100 * MODEL_SD_FLOOR:.1f} percentage points in quadrature for the "
           f"line-shape model; 95% interval = fraction +- 1.96 sd (assumes fully relaxed spectra)")
    details = {"width_hz": fit.width_hz, "chi2_red": fit.chi2_red, "inflation": fit.inflation,
               "noise_sd": fit.noise_sd, "frequency_mhz": f_mhz, "unexplained_share": unexplained}
    observed, why_not, _ = _observed_integral_ratio(cands, fit, peaklist, f_mhz)
    est = _finish(cands, fit.weights, fit.weights_cov, fit.regions, method=method, uncertainty_method=unc,
                  warnings=warnings, source=src, fitted=fitted, group_keys=group_keys, details=details,
                  undetected=fit.undetected, observed=observed)
    return replace(est, fit=fit)


def _integral_anchor(cands, peaklist) -> np.ndarray | None:
    """Fractions from the picked multiplets' integrals (``integral_fit.fit_integrals``, trace
    multiplets included), or None: the spectrum fit holds its amounts in these proportions
    while it searches a crowded envelope (``fit_spectrum(anchor_fractions=...)``); the
    reported amounts are the fit's own."""
    from .integral_fit import fit_integrals

    if peaklist is None or len(cands) < 2:
        return None
    mults = [m for m in peaklist.multiplets if m.integral and m.integral > 0 and m.flag in (None, "trace")]
    if not mults:
        return None
    try:
        fr = np.asarray(fit_integrals(mults, [c.groups for c in cands]).fractions, float)
    except SpecmatchError:
        return None  # no reading of the integrals: the fit searches without an anchor
    return fr if fr.shape == (len(cands),) and np.all(np.isfinite(fr)) and fr.sum() > 0 else None


def _from_peaklist(cands, peaklist, warnings, src) -> MixtureEstimate:
    from .integral_fit import fit_integrals

    mults = []
    for m in peaklist.multiplets:
        if m.integral is None or m.integral <= 0:
            continue
        if m.flag is not None:
            who = _near_candidate(cands, m.shift) if m.flag.startswith("impurity") else None
            if who is None:
                continue
            warnings.append(f"the multiplet at {m.shift:.2f} ppm flagged '{m.flag}' is where {who} has a "
                            "signal; kept in the fit")
        mults.append(m)
    if not mults:
        raise SpecmatchError(
            f"{src or 'the peak list'} has no multiplets with integrals; a ratio needs integrals "
            "(CSV columns shift_ppm, range, integral) or the full 1H spectrum")
    fit = fit_integrals(mults, [c.groups for c in cands])
    group_keys = list(fit.group_index)
    warnings.extend(fit.notes)
    if fit.chi2_red > 4.0:
        warnings.append(f"the integrals are not well explained by the candidates (reduced chi-square "
                        f"{fit.chi2_red:.1f}): an impurity, a missing candidate or a wrong assignment")
    # an absent candidate has no multiplet of its own: its diagnostic signal is "not observed"
    from .spectrum_fit import SignalRegion

    regions = list(fit.regions)
    tot = fit.weights.sum()
    for k in range(len(cands)):
        if not any(r.component == k for r in regions) and tot > 0 and fit.weights[k] / tot < ABSENT_FRACTION:
            gi = [q for q, (kk, _) in enumerate(group_keys) if kk == k]
            if gi:
                q = max(gi, key=lambda q: cands[k].groups[group_keys[q][1]].shift)
                g = cands[k].groups[group_keys[q][1]]
                regions.append(SignalRegion(k, (q,), g.shift - 0.05, g.shift + 0.05, g.count, 1.0,
                                            integral=0.0, amount=0.0,
                                            amount_sd=fit.abs_sd / g.count))
    method = ("peak-list fit: multiplet integrals explained by the candidates' proton groups "
              "(assignment within 5 prediction sigma, a C-H group left unobserved only at a cost, shift errors with a "
              "shared offset per environment class, non-negative least squares for the amounts)")
    unc = ("covariance of the amounts for the best assignment, integrals taken to +-2% (+0.5% of the largest), "
           f"scaled by the reduced chi-square when above 1, plus {100 * MODEL_SD_FLOOR:.1f} percentage points in "
           "quadrature; 95% interval = fraction +- 1.96 sd")
    details = {"chi2_red": fit.chi2_red, "oh_multiplet": fit.assignment.free_exchange}
    weights = fit.weights
    extra_sd = None
    if fit.averaged_fractions is not None:
        # assignments the integrals cannot tell apart share the estimate; their spread
        # is added to the sd (integral_fit.ASSIGNMENT_AVERAGING)
        weights = fit.averaged_fractions * float(fit.weights.sum())
        extra_sd = fit.assignment_sd
        unc += ("; the best assignment's fractions, the spread of the other plausible assignments around them "
                "(weights exp(-chi2/(2T))) added in quadrature")
        if fit.plausible is not None:
            unc += "; the 95% interval reaches every assignment with at least 5% of that weight"
    if len(fit.confounded) > 1:
        # only the confounded candidates' summed amount is measured: split it evenly and
        # give each the sd of a uniform share of it (the data say nothing inside it)
        weights = np.array(weights, float)
        conf = list(fit.confounded)
        tot_all = float(weights.sum())
        share = float(weights[conf].sum())
        weights[conf] = share / len(conf)
        flat = np.zeros(len(cands))
        flat[conf] = (share / tot_all if tot_all > 0 else 1.0) / np.sqrt(12.0)
        extra_sd = flat if extra_sd is None else np.sqrt(np.asarray(extra_sd) ** 2 + flat**2)
        unc += "; candidates the integrals cannot tell apart share their summed amount evenly, with a uniform sd"
    return _finish(cands, weights, fit.weights_cov, regions, method=method, uncertainty_method=unc,
                   warnings=warnings, source=src, fitted={}, group_keys=group_keys, details=details,
                   extra_sd=extra_sd, plausible=fit.plausible if len(fit.confounded) <= 1 else None)


def mixture_from_files(h1_path: str | Path, candidates_path: str | Path, *, solvent: str | None = None
                       ) -> MixtureEstimate:
    """``specmatch mixture``: read the 1H file (spectrum or CSV peak list) and the candidates."""
    from ...spectra import read_spectrum
    from ..candidates import read_candidates

    lines = read_candidates(candidates_path)
    smiles, names = [c.smiles for c in lines], [c.name for c in lines]
    obj = read_spectrum(str(h1_path))
    if obj.nucleus != "1H":
        raise SpecmatchError(
            f"'{h1_path}' is a {obj.nucleus} file. 13C intensities are not quantitative under routine "
            "conditions (nuclear Overhauser enhancement, unequal relaxation), so specmatch does not "
            "report a ratio from them; give the 1H spectrum")
    from ...spectra.types import PeakList

    if isinstance(obj, PeakList):
        return estimate_mixture(smiles, peaklist=obj, solvent=solvent, names=names)
    return estimate_mixture(smiles, spectrum=obj, solvent=solvent, names=names)
