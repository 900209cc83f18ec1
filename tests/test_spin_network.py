"""Coupling networks from structures, and exact spectra of predicted molecules.

Reference values: coupling magnitudes are the table's (prediction/tables/h1_coupling.csv,
each row with its source); the checks here are about which pairs get which
coupling (topology, magnetic versus chemical equivalence) and about the
second-order appearance at low field, with the expectations stated beside them.
"""

from __future__ import annotations

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.prediction import predict
from specmatch.prediction.couplings import coupling_network, coupling_table
from specmatch.prediction.types import Prediction, ProtonGroup
from specmatch.prediction.simulate import prediction_lines, simulate_1h, sticks_1h
from specmatch.prediction.spin import equivalence_groups


def _pairs(net, ga, gb):
    g = net.group_of_spin
    return sorted(round(v, 3) for i, j, v in net.couplings if {g[i], g[j]} == {ga, gb} and ga != gb)


def test_ethyl_group_is_a3x2_with_one_vicinal_value():
    pred = predict("CCOC(C)=O")  # ethyl acetate
    net = coupling_network(pred)
    idx = {g.atoms: k for k, g in enumerate(pred.protons)}
    ch3, ch2 = idx[(0,)], idx[(1,)]
    vic = _pairs(net, ch3, ch2)
    assert len(vic) == 6 and len(set(vic)) == 1
    tab = coupling_table()
    # electronegativity-corrected: one O substituent on the pair lowers 3J below the base value
    assert vic[0] < tab["3J_sp3_sp3_base"]
    assert 6.0 < vic[0] < 7.8  # common practice: ethyl 3J ~7 Hz
    # the acetyl CH3 is coupled to nothing outside itself
    g = net.group_of_spin
    assert not any((g[i] == idx[(4,)]) != (g[j] == idx[(4,)]) for i, j, _ in net.couplings)


def test_para_disubstituted_benzene_is_aa_bb():
    # 4-chlorotoluene: the ring H are two chemically equivalent pairs that are NOT
    # magnetically equivalent (ortho to one partner, para to the other): AA'BB'
    pred = predict("Cc1ccc(Cl)cc1")
    net = coupling_network(pred)
    arom = [k for k, g in enumerate(pred.protons) if g.count == 2]
    assert len(arom) == 2
    vals = set(_pairs(net, *arom))
    tab = coupling_table()
    assert vals == {round(tab["3J_aromatic_ortho"], 3), round(tab["5J_aromatic_para"], 3)}
    nu = net.shifts([g.shift for g in pred.protons]) * 400.0
    groups = equivalence_groups(nu, net.j_matrix())
    ring_spins = [s for s, g in enumerate(net.group_of_spin) if g in arom]
    assert all(len(gr) == 1 for gr in groups if gr[0] in ring_spins)


def test_x_ch2_ch2_y_has_two_vicinal_couplings():
    # 1-bromo-2-chloroethane: AA'BB' with J != J' (rotamer averaging, table row 3J_CH2CH2_anti_excess)
    pred = predict("BrCCCl")
    net = coupling_network(pred)
    vals = _pairs(net, 0, 1)
    assert len(vals) == 4 and len(set(vals)) == 2
    assert vals[-1] - vals[0] == pytest.approx(coupling_table()["3J_CH2CH2_anti_excess"])
    gem = [v for i, j, v in net.couplings if net.group_of_spin[i] == net.group_of_spin[j]]
    assert gem and all(v < 0 for v in gem)  # geminal sp3 couplings are negative (common practice)


def test_vinyl_couplings_follow_the_first_order_assignment():
    pred = predict("C=CC")  # propene: =CH2 cis/trans to the =CH
    net = coupling_network(pred)
    tab = coupling_table()
    ch = next(k for k, g in enumerate(pred.protons) if g.atoms == (1,))
    for k, g in enumerate(pred.protons):
        if g.atoms == (0,) and g.count == 1:
            expect = [j for n, j in g.couplings if j in (tab["3J_vinyl_cis"], tab["3J_vinyl_trans"])]
            assert _pairs(net, k, ch) == [round(expect[0], 3)]


def test_geometric_couplings_override_the_topological_value():
    pred = predict("CCCCl")
    idx = {g.atoms: k for k, g in enumerate(pred.protons)}
    net = coupling_network(pred, geometric={(idx[(1,)], idx[(2,)]): 3.3})
    assert set(_pairs(net, idx[(1,)], idx[(2,)])) == {3.3}
    assert set(_pairs(coupling_network(pred), idx[(1,)], idx[(2,)])) != {3.3}


def test_exact_lines_sum_to_the_proton_count_and_carry_group_derivatives():
    pred = predict("CC(Br)C(C)CC")
    lines = prediction_lines(pred, 60.0)
    n_h = sum(g.count for g in pred.protons if not g.exchangeable)
    assert lines.intensity.sum() == pytest.approx(n_h)
    assert lines.dhz_dshift.shape == (lines.hz.size, len(pred.protons))
    assert lines.dhz_dshift.sum(axis=1) == pytest.approx(np.ones(lines.hz.size), abs=1e-6)


def test_ethyl_at_60_mhz_is_second_order_and_first_order_at_600():
    # ethyl bromide-like CH2/CH3 at 60 MHz (dnu/J ~ 15): the quartet and triplet lean
    # towards each other (roof effect, common practice); at 600 MHz they are binomial
    pred = predict("CCBr")
    idx = {g.atoms: k for k, g in enumerate(pred.protons)}
    for f, tilted in ((60.0, True), (600.0, False)):
        lines = prediction_lines(pred, f)
        own = lines.owner()
        tri = np.sort(lines.hz[(own == idx[(0,)]) & (lines.intensity > 0.05)])
        inten = lines.intensity[(own == idx[(0,)]) & (lines.intensity > 0.05)][np.argsort(lines.hz[(own == idx[(0,)]) & (lines.intensity > 0.05)])]
        # the CH3 triplet lies upfield of the CH2: its downfield line is the taller outer line
        ratio = inten[-1] / inten[0]
        if tilted:
            assert ratio > 1.05
        else:
            assert ratio == pytest.approx(1.0, abs=0.03)
        assert tri.size >= 3


def test_simulated_area_is_field_independent():
    pred = predict("CCOC(C)=O")
    # heights are per proton; area = pi * height * width_ppm / 2, so area * field is constant
    x = np.linspace(-0.5, 6.0, 65000)
    a60 = np.trapezoid(simulate_1h(pred, x, 60.0, 1.0), x) * 60.0
    a400 = np.trapezoid(simulate_1h(pred, x, 400.0, 1.0), x) * 400.0
    assert a60 == pytest.approx(a400, rel=0.01)
    first = np.trapezoid(simulate_1h(pred, x, 400.0, 1.0, exact=False), x) * 400.0
    assert a400 == pytest.approx(first, rel=0.01)


def test_hand_made_groups_fall_back_to_first_order():
    # groups that do not fit the structure cannot be simulated exactly; overlays still work
    g = ProtonGroup(atoms=(0,), shift=1.2, sigma=0.1, count=2, multiplicity="q", couplings=((3, 7.0),))
    pred = Prediction("CCO", "CCO", carbons=(), protons=(g, g))
    x = np.linspace(0.5, 2.0, 2000)
    y = simulate_1h(pred, x, 400.0)
    assert np.all(np.isfinite(y)) and y.max() > 0
    with pytest.raises(SpecmatchError, match="do not match"):
        coupling_network(pred)
    assert sticks_1h(g, 400.0)[1].sum() == pytest.approx(2.0)


def test_exact_polish_recovers_a_benchtop_ratio():
    # a synthetic 60 MHz mixture (65:35) drawn with the exact simulation itself, 1.6 Hz lines,
    # noise 2e-3: the first-order fit cannot reach the noise level, the exact polish must
    # (reduced chi-square near 1) and give the ratio back. This checks the fit machinery,
    # not the physics (tests/test_spin.py does that against closed-form results).
    from specmatch.identification.mixture.spectrum_fit import fit_spectrum

    f = 60.0
    preds = [predict("CCC(C)(C)Cl"), predict("CC(Cl)C(C)C")]
    x = np.linspace(6.0, -0.5, 16384)
    rng = np.random.default_rng(1)
    y = 0.65 * simulate_1h(preds[0], x, f, 1.6) + 0.35 * simulate_1h(preds[1], x, f, 1.6) \
        + rng.normal(0.0, 2e-3, x.size)
    first = fit_spectrum(x, y, [p.protons for p in preds], frequency_mhz=f)
    fit = fit_spectrum(x, y, [p.protons for p in preds], frequency_mhz=f, predictions=preds)
    assert any("exact second-order" in n for n in fit.notes)
    assert fit.chi2_red < 2.0 < first.chi2_red
    assert fit.fractions == pytest.approx([0.65, 0.35], abs=0.01)


@pytest.mark.parametrize("smiles, j_published", [
    # trans-4-tert-butylcyclohexan-1-ol: H1 axial, tt with J(ax,ax) 11.1 and J(ax,eq) 4.3 Hz, so
    # 7.7 Hz averaged over the two C2 protons; cis: H1 equatorial, J about 3 Hz to both
    # (values from memory, as tabulated e.g. in H. Gunther, NMR Spectroscopy, 3rd ed., Wiley 2013)
    ("O[C@H]1CC[C@H](C(C)(C)C)CC1", 7.7),
    ("O[C@H]1CC[C@@H](C(C)(C)C)CC1", 3.0),
])
def test_geometric_3j_from_the_3d_layer(smiles, j_published):
    from specmatch.prediction.couplings import geometric_from_3d

    pred = predict(smiles)
    geo = geometric_from_3d(pred)
    assert geo is not None
    h1 = next(i for i, g in enumerate(pred.protons) if g.atoms == (1,))
    ring = [i for i, g in enumerate(pred.protons) if g.atoms == (2, 10)]
    topo = coupling_network(pred)
    net = coupling_network(pred, geometric=True)
    pairs = [(i, j, v) for i, j, v in net.couplings
             if {net.group_of_spin[i], net.group_of_spin[j]} & {h1} and
             ({net.group_of_spin[i], net.group_of_spin[j]} - {h1}) <= set(ring)]
    assert pairs
    mean = float(np.mean([v for _, _, v in pairs]))
    assert mean == pytest.approx(j_published, abs=1.0)
    # the topological value does not know the conformation: it is not what 3D gives
    topo_mean = float(np.mean([v for i, j, v in topo.couplings if (i, j) in {(a, b) for a, b, _ in pairs}]))
    assert abs(topo_mean - mean) > 0.5
