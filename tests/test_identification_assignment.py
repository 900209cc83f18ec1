"""The shared 1H assignment: whole proton groups on multiplets (identification/assignment.py)."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from specmatch.identification import load_error_model
from specmatch.identification.assignment import NOT_OBSERVED, GroupAssignment, assign_whole_groups
from specmatch.identification.mixture.integral_fit import fit_integrals
from specmatch.identification.scoring import h1_assignment, h1_table, observed_h1, prepare
from specmatch.prediction import predict
from specmatch.spectra.types import Multiplet


def _brute_force(cost, counts, cap, miss) -> float:
    """Every assignment enumerated (the independent reference for the exact solver)."""
    G, M = cost.shape
    best = np.inf
    for combo in itertools.product(range(-1, M), repeat=G):
        load = np.zeros(M, int)
        c = 0.0
        for g, m in enumerate(combo):
            if m < 0:
                c += miss[g]
            else:
                load[m] += counts[g]
                c += counts[g] * cost[g, m]
        if (load <= cap).all():
            best = min(best, c)
    return best


def test_whole_group_solver_is_exact_against_enumeration():
    rng = np.random.default_rng(7)
    for _ in range(150):
        G, M = int(rng.integers(1, 6)), int(rng.integers(1, 5))
        cost = rng.normal(size=(G, M))
        counts = rng.integers(1, 4, size=G)
        cap = rng.integers(0, 5, size=M)
        miss = rng.normal(2.0, 1.0, size=G)
        total, where = assign_whole_groups(cost, counts, cap, miss)
        assert total == pytest.approx(_brute_force(cost, counts, cap, miss), abs=1e-9)
        load = np.zeros(M, int)
        for g, m in enumerate(where):
            if m != NOT_OBSERVED:
                load[m] += counts[g]
        assert (load <= cap).all()


def test_relaxation_that_would_split_a_group_is_repaired():
    # a 3-proton group is cheapest on multiplet 0, which has room for 2 protons only: the
    # single-proton relaxation splits it 2 + 1; the whole group must go to multiplet 1
    cost = np.array([[-2.0, -1.0]])
    total, where = assign_whole_groups(cost, [3], [2, 3], [10.0])
    assert list(where) == [1] and total == pytest.approx(-3.0)


def test_a_methyl_group_is_not_split_across_two_signals():
    # 2-methylbutan-2-ol (nmrshiftdb2 10008912: 1.49 CH2, 1.197 2 CH3, 0.924 CH3) with a
    # little butan-2-ol (CH-O sextet at 3.62, nmrshiftdb2 10008032; its 1.16 doublet and
    # 0.91 triplet from memory) scored as the pure tertiary alcohol: every group of the
    # candidate is on one multiplet as a whole, and appears once in the table
    mults = [{"shift": 3.62, "integral": 0.3, "multiplicity": "sext", "j_hz": [6.2]},
             {"shift": 1.49, "integral": 2.6, "multiplicity": "m"},
             {"shift": 1.197, "integral": 6, "multiplicity": "s"},
             {"shift": 1.16, "integral": 0.9, "multiplicity": "d", "j_hz": [6.2]},
             {"shift": 0.92, "integral": 3.9, "multiplicity": "m"}]
    cand = prepare("CCC(C)(C)O")
    obs = observed_h1(mults)
    model = load_error_model().h1
    ll, ga = h1_assignment(cand, obs, model)
    assert isinstance(ga, GroupAssignment) and np.isfinite(ll)
    rows = [r for r in h1_table(cand, obs, model) if r.predicted_ppm is not None]
    groups = [p for p in cand.prediction.protons if p.count > 0]
    assert len(rows) == len(groups)
    for r in rows:
        g = next(p for p in groups if p.atoms == r.atoms)
        assert r.protons == g.count


def test_assignment_round_trips_and_checks_itself():
    ga = GroupAssignment(((0, 0), (0, 1), (1, 0)), (3, 2, 1), (False, False, True), (0, 1, -1), 3,
                         free_exchange=2, cost=1.5)
    assert GroupAssignment.from_dict(ga.to_dict()) == ga
    assert ga.exclusive(0) == (0, 1) and ga.exclusive(1) == ()
    assert ga.of(1, 0) == NOT_OBSERVED and ga.owners(1) == {0}
    with pytest.raises(ValueError):
        GroupAssignment(((0, 0),), (3,), (False,), (4,), 3)


def test_peak_list_fit_with_resolved_oh_lines_uses_whole_groups():
    # two alcohols whose OH lines are resolved (a dry sample): 2-methylbutan-2-ol and
    # butan-2-ol at 70:30, multiplets from the shifts above (OH lines at 1.60 and 1.85 ppm
    # invented for the test); the integral fit uses the shared assignment, every group whole
    def m(shift, integral):
        return Multiplet(shift, (shift - 0.02, shift + 0.02), integral, "m")

    a, b = 0.7, 0.3
    mults = [m(3.62, b * 1), m(1.85, b * 1), m(1.60, a * 1), m(1.49, a * 2 + b * 2), m(1.197, a * 6),
             m(1.16, b * 3), m(0.92, a * 3 + b * 3)]
    comps = [predict(s).protons for s in ("CCC(C)(C)O", "CCC(C)O")]
    fit = fit_integrals(mults, comps)
    assert isinstance(fit.assignment, GroupAssignment)
    assert fit.fractions[0] == pytest.approx(0.7, abs=0.03)
    # the shared object: one multiplet (or none) per group, whole groups only
    assert len(fit.assignment.multiplet) == len(fit.assignment.groups)


def test_candidates_the_integrals_cannot_separate_get_an_honest_interval():
    # common practice: two isomers whose only C-H group gives one merged multiplet cannot
    # be quantified from integrals; the estimate must not claim one of them at 100 % with
    # a narrow interval (the multiplet position and integral are invented for the test)
    from specmatch.identification.mixture import estimate_mixture
    from specmatch.spectra.types import PeakList

    pl = PeakList("1H", (), (Multiplet(3.46, (3.43, 3.49), 2.0, "m"),), frequency_mhz=400.0, solvent="CDCl3")
    est = estimate_mixture(["FC(F)(Cl)CC(F)(F)Cl", "FC(F)(F)CC(F)(Cl)Cl"], peaklist=pl, solvent="CDCl3")
    for lo, hi in est.interval_95:
        assert lo <= 0.05 and hi >= 0.95


def test_split_parts_count_on_both_multiplets_and_round_trip():
    # a 2 H group given as 1 H + 1 H on multiplets 0 and 2 (a builder's penalised exception)
    ga = GroupAssignment(((0, 0), (1, 0)), (2, 3), (False, False), (0, 1), 3,
                         parts=(((0, 1), (2, 1)), ((1, 3),)))
    assert ga.on(2) == (0,) and ga.protons_on(0) == 1 and ga.protons_on(2) == 1 and ga.protons_on(1) == 3
    assert ga.split == (0,) and ga.unexplained() == ()
    assert GroupAssignment.from_dict(ga.to_dict()) == ga
    with pytest.raises(ValueError):
        GroupAssignment(((0, 0),), (2,), (False,), (0,), 3, parts=(((0, 1), (2, 2)),))
