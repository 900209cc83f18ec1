"""The 1H assignment: whole proton groups on observed multiplets.

One object, :class:`GroupAssignment`, says which observed multiplet each predicted
proton group (a set of equivalent protons) sits on. The 1H likelihood of the
ranking and the hypotheses (:mod:`.scoring`), the per-signal tables, the
peak-list mixture fit (:mod:`.mixture.integral_fit`) and the product ratio all
read this one object, so what the tables show is what was scored and what the
ratio rests on.

Rules the assignment keeps (whoever builds it):

- a group goes to one multiplet **as a whole** (a CH3 is never split across two
  signals), or is "not observed"; a builder may allow, as a penalised exception, one
  group's protons on two neighbouring multiplets (``parts``) for peak lists that give
  one group as two lines (records that list the two protons of a CH2 apart);
- an exchangeable OH/NH group only goes to a multiplet its position and width
  allow: a singlet or broad line (no resolved couplings) within its window; it may
  also be absent or part of a free exchange-averaged line (``free_exchange``).

:func:`assign_whole_groups` is the exact solver for the linear form used by the
likelihood: cost per proton of group g on multiplet m, a capacity (protons) per
multiplet and a cost for leaving a group out. It is a generalized assignment
problem; it is solved first as the relaxation with single protons (Hungarian
algorithm, ``scipy.optimize.linear_sum_assignment``): if no group ends up split,
that optimum is also the whole-group optimum (the relaxation's feasible set
contains the whole-group one). Otherwise the small integer programme is solved
exactly by a depth-first branch and bound over the groups (largest first, bounded
by each remaining group's cheapest option).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["GroupAssignment", "assign_whole_groups", "exchangeable_allowed", "NOT_OBSERVED"]

#: multiplet index of a group that is not observed (or, for an exchangeable group,
#: inside the free exchange-averaged line)
NOT_OBSERVED = -1
_BIG = 1.0e6


@dataclass(frozen=True)
class GroupAssignment:
    """Which observed multiplet every predicted proton group sits on.

    Attributes
    ----------
    groups : tuple of (component, group index)
        The assigned groups; the component is the candidate's position in the
        mixture (0 for a single candidate), the index its position in that
        candidate's proton groups.
    counts : tuple of int
        Protons per group.
    exchangeable : tuple of bool
        OH/NH groups.
    multiplet : tuple of int
        Per group the observed multiplet index, ``NOT_OBSERVED`` (-1) if none.
    n_multiplets : int
        Number of observed multiplets.
    free_exchange : int
        Multiplet taken by a free exchange-averaged OH/NH line (its integral not
        tied to any component), -1 if none.
    cost : float
        The objective the builder minimised (its units are the builder's).
    """

    groups: tuple[tuple[int, int], ...]
    counts: tuple[int, ...]
    exchangeable: tuple[bool, ...]
    multiplet: tuple[int, ...]
    n_multiplets: int
    free_exchange: int = -1
    cost: float = 0.0
    #: per group its (multiplet, protons) parts, () when every group sits whole on
    #: ``multiplet``; a group split over two multiplets (a builder's penalised exception
    #: for a list that gives one group's protons as two lines) has two parts, and
    #: ``multiplet`` then names the part with more protons
    parts: tuple[tuple[tuple[int, int], ...], ...] = ()

    def __post_init__(self) -> None:
        n = len(self.groups)
        if not (len(self.counts) == len(self.exchangeable) == len(self.multiplet) == n):
            raise ValueError("GroupAssignment: groups, counts, exchangeable and multiplet differ in length")
        if any(m >= self.n_multiplets or m < NOT_OBSERVED for m in self.multiplet):
            raise ValueError("GroupAssignment: multiplet index out of range")
        if self.parts:
            if len(self.parts) != n:
                raise ValueError("GroupAssignment: parts and groups differ in length")
            for q, ps in enumerate(self.parts):
                if any(not 0 <= m < self.n_multiplets for m, _ in ps) or \
                        (ps and sum(c for _, c in ps) != self.counts[q]):
                    raise ValueError("GroupAssignment: a group's parts must lie on multiplets and add up to its protons")

    def parts_of(self, q: int) -> tuple[tuple[int, int], ...]:
        """(multiplet, protons) of group position q: one part when whole, none when not observed."""
        if self.parts and self.parts[q]:
            return self.parts[q]
        m = self.multiplet[q]
        return ((m, self.counts[q]),) if m >= 0 else ()

    @property
    def split(self) -> tuple[int, ...]:
        """Positions of the groups split over more than one multiplet."""
        return tuple(q for q in range(len(self.groups)) if len(self.parts_of(q)) > 1)

    def of(self, component: int, index: int) -> int:
        """Multiplet of a group (``NOT_OBSERVED`` if the group is not listed or not observed)."""
        for (k, i), m in zip(self.groups, self.multiplet):
            if k == component and i == index:
                return m
        return NOT_OBSERVED

    def on(self, m: int) -> tuple[int, ...]:
        """Positions (into ``groups``) of the groups on multiplet m (wholly or in part)."""
        if not self.parts:
            return tuple(q for q, mm in enumerate(self.multiplet) if mm == m)
        return tuple(q for q in range(len(self.groups)) if any(mm == m for mm, _ in self.parts_of(q)))

    def owners(self, m: int) -> frozenset[int]:
        """Components with a group on multiplet m."""
        return frozenset(self.groups[q][0] for q in self.on(m))

    def protons_on(self, m: int, component: int | None = None) -> int:
        return int(sum(c for q in self.on(m) if component is None or self.groups[q][0] == component
                       for mm, c in self.parts_of(q) if mm == m))

    def exclusive(self, component: int, *, with_exchangeable: bool = False) -> tuple[int, ...]:
        """Multiplets that this component alone explains: no other component's group on
        them and not the free exchange line (by default also no exchangeable group of its
        own, whose integral is the least reliable)."""
        out = []
        for m in range(self.n_multiplets):
            if m == self.free_exchange or self.owners(m) != {component}:
                continue
            if not with_exchangeable and any(self.exchangeable[q] for q in self.on(m)):
                continue
            out.append(m)
        return tuple(out)

    def unexplained(self) -> tuple[int, ...]:
        """Multiplets no group (and not the free exchange line) explains."""
        used = {m for q in range(len(self.groups)) for m, _ in self.parts_of(q)} | {self.free_exchange}
        return tuple(m for m in range(self.n_multiplets) if m not in used)

    def to_dict(self) -> dict[str, Any]:
        return {
            "groups": [[int(k), int(i)] for k, i in self.groups],
            "counts": [int(c) for c in self.counts],
            "exchangeable": [bool(x) for x in self.exchangeable],
            "multiplet": [int(m) for m in self.multiplet],
            "n_multiplets": int(self.n_multiplets),
            "free_exchange": int(self.free_exchange),
            "cost": float(self.cost),
            **({"parts": [[[int(m), int(c)] for m, c in ps] for ps in self.parts]} if self.parts else {}),
        }

    @classmethod
    def from_dict(cls, d: dict[str, Any]) -> "GroupAssignment":
        return cls(tuple((int(k), int(i)) for k, i in d["groups"]), tuple(int(c) for c in d["counts"]),
                   tuple(bool(x) for x in d["exchangeable"]), tuple(int(m) for m in d["multiplet"]),
                   int(d["n_multiplets"]), int(d.get("free_exchange", -1)), float(d.get("cost", 0.0)),
                   tuple(tuple((int(m), int(c)) for m, c in ps) for ps in d.get("parts", ())))


def exchangeable_allowed(shift: float, sigma: float, obs_shift: np.ndarray, resolved: Sequence[bool],
                         window_sigmas: float) -> np.ndarray:
    """Multiplets an exchangeable group may take: no resolved couplings (an exchanging
    OH/NH gives a singlet, sharp or broad) and within ``window_sigmas`` of its
    predicted shift (its sigma is the wide exchangeable one)."""
    near = np.abs(np.asarray(obs_shift, float) - shift) <= window_sigmas * sigma
    return near & ~np.asarray(resolved, bool)


def assign_whole_groups(cost: np.ndarray, counts: Sequence[int], capacity: Sequence[int],
                        missing: Sequence[float]) -> tuple[float, np.ndarray]:
    """Exact whole-group assignment with multiplet capacities.

    Minimises ``sum_g counts[g] * cost[g, m_g]`` (+ ``missing[g]`` for a group left
    out) subject to ``sum_{g on m} counts[g] <= capacity[m]``.

    Parameters
    ----------
    cost : (G, M) array
        Cost per proton of group g on multiplet m (``>= 1e5`` means forbidden).
    counts : G ints
        Protons per group (>= 1).
    capacity : M ints
        Protons each multiplet can take.
    missing : G floats
        Cost of leaving the whole group out.

    Returns
    -------
    (total cost, per group the multiplet index or NOT_OBSERVED)
    """
    cost = np.asarray(cost, float)
    G, M = cost.shape
    counts = np.asarray(counts, int)
    cap = np.asarray(capacity, int)
    miss = np.asarray(missing, float)
    if G == 0:
        return 0.0, np.zeros(0, int)
    # relaxation: one row per proton, one column per proton slot, plus per-proton "missing"
    pg = np.repeat(np.arange(G), counts)
    slot_m = np.repeat(np.arange(M), np.maximum(cap, 0))
    P, S = pg.size, slot_m.size
    big = np.full((P, S + P), _BIG)
    if S:
        big[:, :S] = cost[pg][:, slot_m]
    big[np.arange(P), S + np.arange(P)] = miss[pg] / counts[pg]
    # scoring loads scipy's Hungarian solver alone (without the rest of scipy.optimize)
    from .scoring import linear_sum_assignment

    r, c = linear_sum_assignment(big)
    where = np.where(c < S, slot_m[np.minimum(c, max(S - 1, 0))], NOT_OBSERVED) if S else np.full(P, NOT_OBSERVED)
    out = np.full(G, NOT_OBSERVED - 1)
    split = False
    for p, w in zip(pg[r], where):
        if out[p] == NOT_OBSERVED - 1:
            out[p] = w
        elif out[p] != w:
            split = True
            break
    if not split:
        total = float(sum(counts[g] * cost[g, out[g]] if out[g] >= 0 else miss[g] for g in range(G)))
        if total < _BIG / 10:
            return total, out
    return _branch_and_bound(cost, counts, cap, miss, _repair(cost, counts, cap, miss, pg[r], where))


def _repair(cost, counts, cap, miss, rows_group, rows_where) -> np.ndarray:
    """A whole-group assignment near the relaxation's (the search's first incumbent):
    each group, largest first, to the multiplet holding most of its protons if it still
    has room, else its cheapest option with room, else left out."""
    G, M = cost.shape
    left = cap.astype(int).copy()
    out = np.full(G, NOT_OBSERVED)
    for g in sorted(range(G), key=lambda g: -counts[g]):
        votes = rows_where[rows_group == g]
        votes = votes[votes >= 0]
        prefer = [int(np.bincount(votes, minlength=M).argmax())] if votes.size else []
        opts = prefer + [int(m) for m in np.argsort(cost[g])]
        for m in opts:
            if left[m] >= counts[g] and cost[g, m] < _BIG / 10 and counts[g] * cost[g, m] < miss[g]:
                out[g] = m
                left[m] -= counts[g]
                break
    return out


#: node budget of the exact search (far above what peak lists of a few candidates
#: need); past it the best assignment found is returned
SEARCH_NODES = 20_000


def _branch_and_bound(cost, counts, cap, miss, start: np.ndarray) -> tuple[float, np.ndarray]:
    """The whole-group problem by depth-first branch and bound (exact within the node
    budget, else the best found; the search starts from ``start``). Groups are placed largest first; the bound adds, for every group not yet
    placed, its cheapest option ignoring the other groups (an admissible bound)."""
    G, M = cost.shape
    per = counts[:, None] * cost  # cost of the whole group on m
    order = sorted(range(G), key=lambda g: (-counts[g], float(min(per[g].min(), miss[g]))))
    cheapest = np.array([min(float(per[g].min()), float(miss[g])) for g in order])
    rest = np.concatenate([np.cumsum(cheapest[::-1])[::-1], [0.0]])  # bound of groups order[d:]
    choices = []
    for g in order:
        opts = [(float(per[g, m]), m) for m in range(M) if per[g, m] < _BIG / 10 and counts[g] <= cap[m]]
        opts.append((float(miss[g]), NOT_OBSERVED))
        choices.append(sorted(opts))
    left = cap.astype(int).copy()
    pick = [NOT_OBSERVED] * G
    start_cost = float(sum(per[g, start[g]] if start[g] >= 0 else miss[g] for g in range(G)))
    best_cost = [start_cost]
    best_pick = [[int(x) for x in start]]
    nodes = [0]

    def dfs(d: int, acc: float) -> None:
        if nodes[0] > SEARCH_NODES:
            return
        nodes[0] += 1
        if d == G:
            if acc < best_cost[0]:
                best_cost[0], best_pick[0] = acc, list(pick)
            return
        g = order[d]
        for c, m in choices[d]:
            if acc + c + rest[d + 1] >= best_cost[0] - 1e-12:
                break  # options are sorted: the rest are no better
            if m >= 0:
                if left[m] < counts[g]:
                    continue
                left[m] -= counts[g]
            pick[g] = m
            dfs(d + 1, acc + c)
            if m >= 0:
                left[m] += counts[g]
        pick[g] = NOT_OBSERVED

    dfs(0, 0.0)
    return float(best_cost[0]), np.asarray(best_pick[0], int)
