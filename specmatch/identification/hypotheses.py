"""Pure or mixture: the posterior over "the sample is A" and "the sample is A + B (+ C)".

Every candidate is a *pure* hypothesis; every pair (every triple, when asked) of
the leading candidates is a *mixture* hypothesis. A mixture is scored as one
"union" candidate that carries the predicted signals of all its components: the
same assignment (:mod:`.scoring`) explains the same observed lines, so pure and
mixture log-likelihoods are directly comparable. A component's mole fraction
weighs its 1H protons (integrals) and its 13C line heights (when known); the
fraction is a nuisance parameter with a uniform prior on a grid
(:data:`FRACTION_GRID`), and the evidence of a mixture is the *average* of its
likelihood over that grid (an exact marginal over the discrete prior, which is
the Occam factor of the fraction: a fraction the data do not pin down costs the
log of the share of the grid the data allow). Without quantitative data (13C
without heights, 1H without integrals) the likelihood does not depend on the
fraction and the fraction is reported as unknown.

The Occam factor for the extra component is its prior: a mixture of k
components has prior ``prior_mixture`` (``prior_three`` for k = 3) spread over
the component sets in proportion to the product of their mechanism priors; a
pure sample has the rest, spread by the mechanism prior. Both numbers are fitted
on development tasks (``benchmarks/fit_error_model.py``, ``[hypotheses]`` in
``data/error_model.toml``).

The posterior of hypothesis h is ``softmax(score_h + log prior_h)`` with
``score = L_C/T_C + L_H/T_H`` (the tempered log-likelihood of the ranking), and
a candidate's probability of being present is the summed posterior of the
hypotheses that contain it.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, replace
from typing import Sequence

import numpy as np

from .errormodel import ErrorModel
from .scoring import ObservedC13, ObservedH1, PreparedCandidate, score_c13, score_h1

__all__ = ["FRACTION_GRID", "HypothesisScore", "score_hypotheses", "union_candidate"]

#: molar ratios of a two-component mixture tried as the fraction grid (major share
#: 1/2 .. 19/20, both ways round); integers because a union candidate replicates
#: each component's protons by its ratio number
PAIR_RATIOS: tuple[tuple[int, int], ...] = (
    (1, 1), (3, 2), (2, 3), (2, 1), (1, 2), (3, 1), (1, 3), (5, 1), (1, 5), (9, 1), (1, 9), (19, 1), (1, 19))
#: three components: a coarser grid
TRIPLE_RATIOS: tuple[tuple[int, int, int], ...] = tuple(
    sorted({p for p in itertools.product((1, 2, 4), repeat=3) if math.gcd(*p) == 1}))
FRACTION_GRID = {2: PAIR_RATIOS, 3: TRIPLE_RATIOS}

#: a mixture accounts for the whole sample: its integrals are scaled to its own protons
#: only (a pure candidate may also account for part of them, scoring.H1_SHARES)
UNION_SHARES = (1.0,)

#: only the best pure candidates (by tempered score) enter mixtures: a component
#: that explains no observed line on its own is not worth a mixture hypothesis
MAX_MIXTURE_MEMBERS = 8


@dataclass(frozen=True)
class HypothesisScore:
    """Scored hypothesis before normalisation (indices into the candidate list)."""

    members: tuple[int, ...]
    fractions: tuple[float, ...]
    quantified: bool
    log_likelihood: float  # tempered, marginal over the fraction grid
    log_prior: float

    @property
    def log_evidence(self) -> float:
        return self.log_likelihood + self.log_prior


def union_candidate(parts: Sequence[PreparedCandidate], ratio: Sequence[int]) -> PreparedCandidate:
    """One candidate carrying every component's signals; component k's protons are
    replicated ``ratio[k]`` times and its carbons count ``ratio[k]`` times in line
    heights, so integrals and heights see the molar ratio."""
    first = parts[0]
    cat = lambda name: np.concatenate([getattr(p, name) for p in parts])
    h_count = np.concatenate([p.h_count * int(r) for p, r in zip(parts, ratio)])
    offs = np.cumsum([0] + [p.h_shift.size for p in parts[:-1]])
    p_group = np.concatenate([np.repeat(np.arange(p.h_shift.size) + o, p.h_count * int(r))
                              for p, r, o in zip(parts, ratio, offs)]) if h_count.size else np.zeros(0, int)
    return replace(
        first,
        smiles=".".join(p.smiles for p in parts),
        c_shift=cat("c_shift"), c_sigma=cat("c_sigma"), c_h=cat("c_h"), c_optional=cat("c_optional"),
        c_index=cat("c_index"),
        c_atoms=np.concatenate([p.c_atoms * float(r) for p, r in zip(parts, ratio)]),
        h_shift=cat("h_shift"), h_sigma=cat("h_sigma"), h_count=h_count, h_exch=cat("h_exch"),
        h_mult=sum((p.h_mult for p in parts), ()), h_j=sum((p.h_j for p in parts), ()),
        p_group=p_group,
    )


def _logmeanexp(x: np.ndarray) -> float:
    m = float(np.max(x))
    return m + math.log(float(np.mean(np.exp(x - m))))


def _mixture_score(parts: Sequence[PreparedCandidate], oc: ObservedC13, oh: ObservedH1,
                   model: ErrorModel) -> tuple[float, tuple[float, ...], bool]:
    """(tempered marginal log-likelihood, fractions at the best grid point, quantified)."""
    quant_c = oc.n > 0 and oc.intensity is not None
    quant_h = oh.n > 0 and oh.has_integrals
    grid = FRACTION_GRID[len(parts)]
    if not (quant_c or quant_h):
        u = union_candidate(parts, (1,) * len(parts))
        lc = score_c13(u, oc, model.c13) if oc.n else 0.0
        lh = score_h1(u, oh, model.h1, UNION_SHARES) if oh.n else 0.0
        return lc / model.c13.temperature + lh / model.h1.temperature, \
            tuple(1.0 / len(parts) for _ in parts), False
    vals = []
    lc_flat = None
    if oc.n and not quant_c:
        lc_flat = score_c13(union_candidate(parts, (1,) * len(parts)), oc, model.c13)
    for ratio in grid:
        u = union_candidate(parts, ratio)
        lc = lc_flat if lc_flat is not None else (score_c13(u, oc, model.c13) if oc.n else 0.0)
        lh = score_h1(u, oh, model.h1, UNION_SHARES) if oh.n else 0.0
        vals.append(lc / model.c13.temperature + lh / model.h1.temperature)
    v = np.asarray(vals)
    best = grid[int(np.argmax(v))]
    tot = float(sum(best))
    return _logmeanexp(v), tuple(r / tot for r in best), True


def score_hypotheses(prepared: Sequence[PreparedCandidate], scores: np.ndarray, prior: np.ndarray | None,
                     oc: ObservedC13, oh: ObservedH1, model: ErrorModel, *,
                     max_components: int = 2) -> list[HypothesisScore]:
    """Every candidate pure plus mixtures of the leading candidates, unnormalised.

    Parameters
    ----------
    prepared : sequence of PreparedCandidate
    scores : ndarray
        The tempered pure scores (``L_C/T_C + L_H/T_H``) in the same order.
    prior : ndarray or None
        Normalised mechanism prior per candidate (None: uniform).
    max_components : int
        1 (pure only), 2 (default) or 3.
    """
    n = len(prepared)
    hp = model.hypotheses
    pri = np.full(n, 1.0 / n) if prior is None else np.asarray(prior, float)
    k_max = max(1, min(int(max_components), 3, n))
    # the prior mass of mixtures; a single candidate cannot mix with anything
    p_mix = {2: hp.prior_mixture if k_max >= 2 else 0.0, 3: hp.prior_three if k_max >= 3 else 0.0}
    p_pure = 1.0 - p_mix[2] - p_mix[3]
    out = [HypothesisScore((i,), (1.0,), True, float(scores[i]), math.log(p_pure * pri[i]))
           for i in range(n)]
    if k_max < 2:
        return out
    lead = sorted(range(n), key=lambda i: -scores[i])[:MAX_MIXTURE_MEMBERS]
    for k in range(2, k_max + 1):
        sets = list(itertools.combinations(sorted(lead), k))
        weights = np.array([math.prod(pri[i] for i in s) for s in sets])
        weights = weights / weights.sum()
        for s, w in zip(sets, weights):
            ll, fr, q = _mixture_score([prepared[i] for i in s], oc, oh, model)
            out.append(HypothesisScore(tuple(s), fr, q, ll, math.log(p_mix[k] * w)))
    return out
