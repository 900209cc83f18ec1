"""Product ratio from 1H peak lists of a real isomer pair (integrals only, no spectrum).

Data: tests/data/mixture_peaklist_pairs.json, the experimental 1H shifts of 3- and
2-chlorophenol copied from nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015,
53, 582). The peak list is built as benchmarks/bench_mixture.py builds it: one
multiplet per listed shift (+-0.015 ppm), integral = fraction x listed protons,
multiplets of the two compounds closer than 0.03 ppm merged (what a 400 MHz
spectrum integrates together). The fit works from the PREDICTED shifts.

The two isomers' aromatic protons are predicted close together and off in the
same direction, so a reading with the two assignments swapped as a whole explains
the integrals just as well; the shift evidence must decide it (before the shared
class offsets and the integral-filling starts the 80:20 list read 35:65).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from specmatch.identification.mixture import estimate_mixture
from specmatch.identification.mixture.integral_fit import _filling_start
from specmatch.spectra.types import Multiplet, PeakList

DATA = json.loads((Path(__file__).parent / "data" / "mixture_peaklist_pairs.json").read_text(encoding="utf-8"))
RECS = {r["smiles"]: r for r in DATA["records"]}
A, B = "Oc1cccc(Cl)c1", "Oc1ccccc1Cl"  # 3-chlorophenol, 2-chlorophenol


def _merged_peaklist(rows: list[tuple[float, float]]) -> PeakList:
    # (shift, protons) rows of both compounds; lines within 0.03 ppm integrate as one
    # multiplet, as a 400 MHz spectrum would (the bench's rule)
    merged: list[list[float]] = []
    for sh, i in sorted(rows):
        if merged and sh - merged[-1][1] <= 0.03:
            merged[-1][1] = sh
            merged[-1][2] += i
        else:
            merged.append([sh, sh, i])
    mults = tuple(Multiplet((lo + hi) / 2, (lo - 0.015, hi + 0.015), i, "m") for lo, hi, i in merged)
    return PeakList("1H", (), mults, frequency_mhz=400.0, solvent="CDCl3", source="test peak list")


def _peaklist(fa: float) -> PeakList:
    return _merged_peaklist([(s, fa) for s, _ in RECS[A]["h1"]] + [(s, 1.0 - fa) for s, _ in RECS[B]["h1"]])


@pytest.mark.parametrize("fa", [0.8, 0.9])
def test_ratio_of_chlorophenols_from_experimental_peak_list(fa):
    est = estimate_mixture([A, B], peaklist=_peaklist(fa), solvent="CDCl3")
    assert abs(est.fractions[0] - fa) <= 0.03
    lo, hi = est.interval_95[0]
    assert lo <= fa <= hi


def test_ratio_does_not_depend_on_how_the_candidates_are_written():
    pl = _peaklist(0.8)
    one = estimate_mixture([A, B], peaklist=pl, solvent="CDCl3")
    other = estimate_mixture(["Clc1cccc(O)c1", "Clc1ccccc1O"], peaklist=pl, solvent="CDCl3")
    assert other.fractions[0] == pytest.approx(one.fractions[0], abs=1e-9)
    assert other.uncertainties[0] == pytest.approx(one.uncertainties[0], abs=1e-9)


def test_filling_start_follows_the_assumed_ratio():
    # two candidates, one 1H group each, predicted at the same place; multiplets of
    # 0.9 and 0.1: at f = 0.9 the first candidate takes the large one, at 0.1 the small one
    import numpy as np

    options = [[(0, 0.0), (1, 0.0)], [(0, 0.0), (1, 0.0)]]
    counts, comp = np.array([1.0, 1.0]), np.array([0, 1])
    I = np.array([0.9, 0.1])
    s = 0.02 * I + 0.005
    assert _filling_start(0.9, options, counts, comp, I, s) == [0, 1]
    assert _filling_start(0.1, options, counts, comp, I, s) == [1, 0]


# the worked example of tests/test_mixture.py (2-bromobutane shifts from nmrshiftdb2 record
# 10007822, 1-bromobutane from memory, integrals invented for a 78:22 mixture)
BROMOBUTANES = [(4.10, 0.78, "sext"), (3.41, 0.44, "t"), (1.85, 2.00, "m"), (1.72, 2.34, "d"),
                (1.47, 0.44, "m"), (1.03, 2.34, "t"), (0.93, 0.66, "t")]


@pytest.mark.parametrize("drop", range(len(BROMOBUTANES)))
def test_a_multiplet_missing_from_the_list_leaves_the_ratio(drop):
    # a line under the water or solvent signal, or left out of the list: its groups are
    # "not observed" instead of being forced onto another multiplet (whose integral they
    # would then corrupt); the other six multiplets still say 78:22
    rows = [r for i, r in enumerate(BROMOBUTANES) if i != drop]
    mults = tuple(Multiplet(s, (s - 0.03, s + 0.03), i, m) for s, i, m in rows)
    pl = PeakList("1H", (), mults, frequency_mhz=400.0, solvent="CDCl3", source="worked example")
    est = estimate_mixture(["CCC(C)Br", "CCCCBr"], peaklist=pl)
    assert est.fractions[0] == pytest.approx(0.78, abs=0.015)
    lo, hi = est.interval_95[0]
    assert lo <= 0.78 <= hi


def test_mirrored_reading_exchanges_the_candidates_places():
    # two candidates with a 1H and a 2H group each, predicted close together (shifts and
    # integrals invented for the test): candidate 0 on the large multiplets, 1 on the small
    # ones; the mirrored reading puts each candidate's groups where the other's were
    from specmatch.identification.mixture.integral_fit import _Problem
    from specmatch.prediction.types import ProtonGroup

    def g(atom, shift, count):
        return ProtonGroup(atoms=(atom,), shift=shift, sigma=0.1, count=count, multiplicity="s",
                           environment="CH test")

    comps = [[g(0, 2.0, 1), g(1, 3.0, 2)], [g(0, 2.05, 1), g(1, 3.05, 2)]]
    mults = [Multiplet(s, (s - 0.01, s + 0.01), i, "m") for s, i in ((2.0, 0.8), (2.1, 0.2), (3.0, 1.6), (3.1, 0.4))]
    P = _Problem(mults, comps)
    where = {(k, i): m for m, (k, i) in ((0, (0, 0)), (2, (0, 1)), (1, (1, 0)), (3, (1, 1)))}
    assign = [P.opt_index[q][where[(k, i)]] for q, (k, i, _) in enumerate(P.groups)]
    mirrored = P.mirror(assign)
    got = {(k, i): P.options[q][mirrored[q]][0] for q, (k, i, _) in enumerate(P.groups)}
    assert got == {(0, 0): 1, (0, 1): 3, (1, 0): 0, (1, 1): 2}


def _grouped_peaklist(a: str, b: str, fa: float) -> PeakList:
    # as benchmarks/bench_mixture.py builds it: a record's lines within 0.005 ppm are one
    # multiplet of that many protons; the two compounds' multiplets merged within 0.03 ppm
    rows = []
    for smi, frac in ((a, fa), (b, 1.0 - fa)):
        shifts = sorted(s for s, _ in RECS[smi]["h1"])
        groups: list[list[float]] = []
        for s in shifts:
            if groups and s - groups[-1][0] <= 0.005:
                groups[-1][1] += 1
            else:
                groups.append([s, 1])
        rows += [(round(s, 3), n * frac) for s, n in groups]
    return _merged_peaklist(rows)


FT6, FT5 = "Fc1ccc2c(c1)CCCC2", "Fc1cccc2c1CCCC2"  # 6- and 5-fluorotetralin (nmrshiftdb2 10023506, 10023518)


@pytest.mark.parametrize("fa", [0.8, 0.5])
def test_a_ch2_listed_as_two_lines_is_split_at_a_cost(fa):
    # the 5-fluoro record gives the two protons of each ring CH2 as two lines up to 0.35 ppm
    # apart (1.505/1.547, 1.737/1.816, 2.421/2.772); whole-group assignment alone read the
    # 80:20 list as 89:11 and 50:50 as 72:28. A split group costs integral_fit.SPLIT_GROUP_COST.
    # The two isomers' predictions are so alike (aromatic H within 0.03-0.15 ppm, CH2 within
    # 0.04) that the shifts cannot say which isomer is the major one: a 0.01-0.03 ppm change of
    # the aromatic rows turns the 80:20 reading into its mirror. What the split cost must fix is
    # the size of the ratio, either way round; the interval must then span both readings.
    est = estimate_mixture([FT6, FT5], peaklist=_grouped_peaklist(FT6, FT5, fa), solvent="CDCl3")
    assert min(abs(est.fractions[0] - fa), abs(est.fractions[0] - (1.0 - fa))) <= 0.03
    lo, hi = est.interval_95[0]
    assert lo <= fa <= hi
    assert any("split over two multiplets" in w for w in est.warnings)


def test_no_split_when_every_group_has_a_line_of_its_own():
    # the chlorophenols' lists give every proton once: no group is split
    est = estimate_mixture([A, B], peaklist=_peaklist(0.8), solvent="CDCl3")
    assert not any("split over two multiplets" in w for w in est.warnings)


def test_one_group_candidates_keep_the_mirrored_reading_in_the_interval():
    # two candidates with one alkene CH each, predicted 0.07 ppm apart with sigmas of
    # 0.25 ppm, the lines 0.15 ppm apart (invented numbers shaped like the CF3-alkene
    # isomer pair of bench_mixture.py, whose predictor orders the two lines wrongly): the
    # integrals fit either reading exactly, the shifts hardly tell them apart, so the 95%
    # interval must reach both (the swap move once folded the mirrored reading back)
    from specmatch.identification.mixture.integral_fit import fit_integrals
    from specmatch.prediction.types import ProtonGroup

    def g(shift):
        return ProtonGroup(atoms=(0,), shift=shift, sigma=0.25, count=1, multiplicity="s", environment="=CH test")

    mults = [Multiplet(5.87, (5.855, 5.885), 0.8, "m"), Multiplet(6.02, (6.005, 6.035), 0.2, "m")]
    fit = fit_integrals(mults, [[g(6.03)], [g(5.96)]])
    assert fit.plausible is not None
    assert fit.plausible[:, 0].min() <= 0.2 + 1e-6 and fit.plausible[:, 0].max() >= 0.8 - 1e-6


@pytest.mark.parametrize("pair,fa", [((A, B), 0.8), ((FT6, FT5), 0.7), ((FT6, FT5), 0.9)])
def test_ratio_does_not_depend_on_the_order_of_the_candidates(pair, fa):
    # the descent visits the groups interleaved by shift, not candidate by candidate:
    # listing the minor first gives the same reading (it once favoured the first-listed
    # candidate as the major at near-ties)
    a, b = pair
    pl = _peaklist(fa) if pair == (A, B) else _grouped_peaklist(a, b, fa)
    one = estimate_mixture([a, b], peaklist=pl, solvent="CDCl3")
    other = estimate_mixture([b, a], peaklist=pl, solvent="CDCl3")
    assert other.fractions[1] == pytest.approx(one.fractions[0], abs=1e-9)
    assert other.interval_95[1] == pytest.approx(one.interval_95[0], abs=1e-9)
