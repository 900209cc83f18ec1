"""Simulated spectra: first-order stick patterns and Lorentzian line shapes.

Expected patterns are the first-order (n+1, binomial) rule (common practice:
Pascal's triangle intensities, e.g. a quartet 1:3:3:1) and the Lorentzian line
definition (height h at the centre, h/2 at +-FWHM/2, area pi*h*FWHM/2).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from specmatch.errors import SpecmatchError
from specmatch.prediction.types import CarbonShift, Prediction, ProtonGroup
from specmatch.prediction.simulate import (
    default_axis,
    lorentzian_sum,
    simulate_13c,
    simulate_1h,
    sticks_1h,
)


def _group(shift, count, couplings=(), exchangeable=False):
    return ProtonGroup(atoms=(0,), shift=shift, sigma=0.1, count=count, multiplicity="m",
                       couplings=tuple(couplings), exchangeable=exchangeable)


def _ethyl_prediction():
    # ethyl group of ethyl acetate: CH2 q 4.12, CH3 t 1.26, J 7.1 Hz (from memory, handbook spectra)
    ch2 = _group(4.12, 2, [(3, 7.1)])
    ch3 = _group(1.26, 3, [(2, 7.1)])
    return Prediction("CCOC(C)=O", "CCOC(C)=O", carbons=(), protons=(ch2, ch3))


def test_quartet_sticks_are_binomial_and_sum_to_count():
    pos, inten = sticks_1h(_group(4.12, 2, [(3, 7.1)]), 400.0)
    order = np.argsort(pos)
    pos, inten = pos[order], inten[order]
    assert len(pos) == 4
    assert inten.sum() == pytest.approx(2.0)
    assert inten / inten[0] == pytest.approx([1, 3, 3, 1])  # Pascal's triangle (common practice)
    assert np.diff(pos) * 400.0 == pytest.approx([7.1] * 3)
    assert pos.mean() == pytest.approx(4.12)


def test_doublet_of_doublets_four_equal_lines():
    # vinyl CH of a terminal alkene: dd with J_trans 17, J_cis 10 (common practice)
    pos, inten = sticks_1h(_group(5.8, 1, [(1, 17.0), (1, 10.0)]), 400.0)
    assert len(pos) == 4
    assert inten == pytest.approx([0.25] * 4)
    hz = np.sort(pos - 5.8) * 400.0
    assert hz == pytest.approx([-13.5, -3.5, 3.5, 13.5])


def test_equal_couplings_merge_into_binomial_pattern():
    # CH2 of propyl between CH3 and CH2, both ~7 Hz: a sextet 1:5:10:10:5:1
    pos, inten = sticks_1h(_group(1.6, 2, [(3, 7.0), (2, 7.0)]), 400.0)
    assert len(pos) == 6
    assert inten / inten.min() == pytest.approx([1, 5, 10, 10, 5, 1])


def test_exchangeable_group_is_one_line():
    pos, inten = sticks_1h(_group(2.0, 1, [(2, 6.0)], exchangeable=True), 400.0)
    assert pos == pytest.approx([2.0]) and inten == pytest.approx([1.0])


def test_lorentzian_height_and_half_width():
    x = np.array([1.0, 1.005, 0.995, 1.5])
    y = lorentzian_sum(x, np.array([1.0]), np.array([2.0]), 0.01)
    assert y[0] == pytest.approx(2.0)
    assert y[1] == pytest.approx(1.0) and y[2] == pytest.approx(1.0)
    assert y[3] < 1e-3


def test_lorentzian_area():
    x = np.linspace(-50, 50, 400001)
    y = lorentzian_sum(x, np.array([0.0]), np.array([1.0]), 0.2)
    area = np.trapezoid(y, x)
    assert area == pytest.approx(np.pi * 0.2 / 2, rel=2e-3)


def test_simulate_1h_integrals_follow_proton_counts():
    pred = _ethyl_prediction()
    x = default_axis("1H", 65536)
    y = simulate_1h(pred, x, frequency_mhz=400.0, line_width_hz=1.0)
    xa = x[::-1]
    ya = y[::-1]
    a_ch2 = np.trapezoid(ya[(xa > 3.6) & (xa < 4.6)], xa[(xa > 3.6) & (xa < 4.6)])
    a_ch3 = np.trapezoid(ya[(xa > 0.8) & (xa < 1.7)], xa[(xa > 0.8) & (xa < 1.7)])
    assert a_ch3 / a_ch2 == pytest.approx(1.5, rel=0.02)
    # the quartet's tallest lines sit at 4.12 +- 3.55 Hz
    peak = xa[(xa > 4.0) & (xa < 4.2)][np.argmax(ya[(xa > 4.0) & (xa < 4.2)])]
    assert abs(abs(peak - 4.12) * 400 - 3.55) < 0.2


def test_simulate_1h_shift_override_moves_group():
    pred = _ethyl_prediction()
    x = np.linspace(6, 0, 24001)
    y = simulate_1h(pred, x, shifts=[3.0, 1.26])
    assert y[np.abs(x - 3.0) < 0.05].max() > 0.5
    assert y[np.abs(x - 4.12) < 0.05].max() < 0.01
    with pytest.raises(SpecmatchError, match="one shift per group"):
        simulate_1h(pred, x, shifts=[3.0])


def test_broad_line_keeps_its_area():
    oh = _group(2.0, 1, exchangeable=True)
    ch = _group(5.0, 1)
    pred = Prediction("x", "x", carbons=(), protons=(oh, ch))
    x = np.linspace(12, -2, 140001)[::-1]
    y = simulate_1h(pred, x)
    a_oh = np.trapezoid(y[x < 3.5], x[x < 3.5])
    a_ch = np.trapezoid(y[x > 3.5], x[x > 3.5])
    assert a_oh / a_ch == pytest.approx(1.0, rel=0.03)
    assert y.max() == pytest.approx(1.0, rel=0.01)  # narrow line keeps its height


def test_simulate_13c_heights_follow_carbon_counts():
    # tert-butyl alcohol: 69.1 (1 C), 31.3 (3 C) (from memory, handbook tables)
    pred = Prediction("CC(C)(C)O", "CC(C)(C)O",
                      carbons=(CarbonShift((1,), 69.1, 1.0, 0), CarbonShift((0, 2, 3), 31.3, 1.0, 3)),
                      protons=())
    assert default_axis("13C")[0] > default_axis("13C")[-1]
    x = np.linspace(220.0, -5.0, 225001)
    y = simulate_13c(pred, x)
    assert y[np.abs(x - 31.3) < 0.05].max() == pytest.approx(3.0, rel=0.05)
    assert y[np.abs(x - 69.1) < 0.05].max() == pytest.approx(1.0, rel=0.05)
    y2 = simulate_13c(pred, x, shifts=[70.0, 30.0])
    assert y2[np.abs(x - 30.0) < 0.05].max() == pytest.approx(3.0, rel=0.05)


def test_default_axis_rejects_unknown_nucleus():
    with pytest.raises(SpecmatchError, match="1H"):
        default_axis("19F")
    assert len(default_axis("1H", 1000)) == 1000


couplings_st = st.lists(st.tuples(st.integers(1, 6), st.floats(0.5, 20.0)), max_size=5)


@settings(max_examples=60, deadline=None)
@given(couplings_st, st.integers(1, 9), st.floats(0.5, 10.0))
def test_property_sticks_finite_and_sum_to_count(couplings, count, shift):
    pos, inten = sticks_1h(_group(shift, count, couplings), 400.0)
    assert np.all(np.isfinite(pos)) and np.all(inten > 0)
    assert inten.sum() == pytest.approx(count)
    # first-order multiplets are symmetric about the shift
    assert np.average(pos, weights=inten) == pytest.approx(shift, abs=1e-6)


@settings(max_examples=25, deadline=None)
@given(st.lists(st.tuples(st.integers(1, 6), couplings_st.filter(lambda c: len(c) <= 3)), min_size=1, max_size=3))
def test_property_simulated_integrals_proportional(groups):
    # groups placed 2 ppm apart so their areas can be integrated separately
    protons = tuple(_group(1.0 + 2.0 * i, n, c) for i, (n, c) in enumerate(groups))
    pred = Prediction("x", "x", carbons=(), protons=protons)
    x = np.linspace(-10, 20, 30001)
    y = simulate_1h(pred, x, line_width_hz=2.0)
    assert np.all(np.isfinite(y))
    areas = [np.trapezoid(y[np.abs(x - g.shift) < 1.0], x[np.abs(x - g.shift) < 1.0]) for g in protons]
    ratio = np.array(areas) / np.array([g.count for g in protons])
    assert ratio == pytest.approx(np.full(len(ratio), ratio[0]), rel=0.03)


_PIECES = ["C", "C(C)", "C(O)", "C(Cl)", "C(Br)", "C(F)", "C=C", "O", "C#C", "c1ccc(cc1)", "C1CC1"]


@settings(max_examples=30, deadline=None)
@given(st.lists(st.sampled_from(_PIECES), min_size=1, max_size=5), st.sampled_from(["", "C", "O", "Cl", "Br"]))
def test_property_predicted_spectra_finite_and_area_follows_h_count(body, end):
    # whole chain: perception -> 1H prediction -> simulation; total area / H count must be
    # one constant (pi * width / 2 per proton), whatever the molecule
    from specmatch.prediction.h1.predictor import predict_protons
    from specmatch.structures import parse_structure

    st_ = parse_structure("C" + "".join(body) + end)
    groups, _ = predict_protons(st_)
    pred = Prediction("x", "x", carbons=(), protons=tuple(groups))
    x = np.linspace(-30.0, 40.0, 70001)
    y = simulate_1h(pred, x, frequency_mhz=400.0, line_width_hz=2.0)
    assert np.all(np.isfinite(y)) and y.min() >= 0
    n_h = sum(a.GetTotalNumHs() for a in st_.mol.GetAtoms())
    width_ppm = 2.0 / 400.0
    area = np.trapezoid(y, x)
    assert area / n_h == pytest.approx(np.pi * width_ppm / 2, rel=0.02)
