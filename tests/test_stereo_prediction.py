"""Diastereomer-sensitive prediction (prediction/stereo.py): 3D ensemble corrections and 3J.

Reference values are handbook-type numbers recalled without the book at hand, marked
"from memory"; the Karplus-type equation is Haasnoot, de Leeuw & Altona, Tetrahedron 1980,
36, 2783. Each check compares two diastereomers, so a layer that did nothing would fail.
"""

from __future__ import annotations

import pytest

from specmatch.prediction import predict, predict_structure
from specmatch.prediction.stereo import (
    apply_stereo_layer,
    conformer_ensemble,
    geometric_couplings,
    needs_stereo_layer,
    parameters,
    stereo_features,
)
from specmatch.structures import parse_structure

TRANS_TBU = "CC(C)(C)[C@H]1CC[C@H](O)CC1"    # trans-4-tert-butylcyclohexanol: OH equatorial, H1 axial
CIS_TBU = "CC(C)(C)[C@H]1CC[C@@H](O)CC1"     # cis: OH axial, H1 equatorial
TRANS_2ME = "C[C@@H]1CCCC[C@H]1O"            # trans-2-methylcyclohexanol
CIS_2ME = "C[C@@H]1CCCC[C@@H]1O"             # cis-2-methylcyclohexanol
MESO = "C[C@@H](Br)[C@H](C)Br"               # meso-2,3-dibromobutane
DL = "C[C@@H](Br)[C@@H](C)Br"                # (2R,3R)-2,3-dibromobutane (one enantiomer of dl)


def carbinol(smiles: str):
    """(C1 13C shift, H1 group) of the CH-O carbon."""
    st = parse_structure(smiles)
    c1 = next(a.GetIdx() for a in st.mol.GetAtoms()
              if a.GetSymbol() == "C" and any(n.GetSymbol() == "O" for n in a.GetNeighbors()))
    p = predict(smiles)
    carbon = next(c for c in p.carbons if c1 in c.atoms)
    proton = next(h for h in p.protons if c1 in h.atoms)
    return carbon.shift, proton


def test_gate_only_where_relative_configuration_is_defined():
    assert needs_stereo_layer(parse_structure(TRANS_TBU))
    assert needs_stereo_layer(parse_structure(MESO))           # adjacent stereocentres
    assert not needs_stereo_layer(parse_structure("CC(C)(C)C1CCC(O)CC1"))   # no configuration given
    assert not needs_stereo_layer(parse_structure("C[C@H](O)CC"))           # one centre: nothing relative
    assert not needs_stereo_layer(parse_structure("C[C@H](O)CC[C@H](C)O"))  # open chain, 1,4-apart


def test_tert_butylcyclohexanols_c1_differs_in_the_right_direction():
    # trans (equatorial OH) C1 about 71, cis (axial OH) about 65.5-66 (from memory: the handbook pair
    # 71.1 / 65.9 ppm); done-when: >= 2.5 ppm apart, trans downfield
    c_trans, _ = carbinol(TRANS_TBU)
    c_cis, _ = carbinol(CIS_TBU)
    assert c_trans - c_cis >= 2.5
    assert c_trans == pytest.approx(71.1, abs=2.5)
    assert c_cis == pytest.approx(65.9, abs=2.5)


def test_tert_butylcyclohexanols_h1_shift_and_couplings():
    # trans H1 axial about 3.5, tt J ~ 11 and ~ 4 Hz; cis H1 equatorial about 4.0, narrow (from memory)
    _, h_trans = carbinol(TRANS_TBU)
    _, h_cis = carbinol(CIS_TBU)
    assert h_cis.shift - h_trans.shift >= 0.25
    assert h_trans.multiplicity == "tt"
    big, small = h_trans.j_hz
    assert 9.5 <= big <= 12.5 and 3.0 <= small <= 5.5
    assert max(j for _, j in h_cis.couplings) < 6.0           # no axial-axial coupling: narrow
    width = lambda h: sum(n * j for n, j in h.couplings)       # first-order width, Hz
    assert width(h_trans) > 1.8 * width(h_cis)


def test_methylcyclohexanols_differ_as_observed():
    # trans-2-methylcyclohexanol H1 about 3.1 (td, J ~ 10 Hz, axial H); cis about 3.8 (narrow);
    # C1 trans about 76, cis about 71 (from memory)
    c_trans, h_trans = carbinol(TRANS_2ME)
    c_cis, h_cis = carbinol(CIS_2ME)
    assert c_trans - c_cis >= 2.5
    assert h_cis.shift - h_trans.shift >= 0.25
    assert h_trans.multiplicity == "td" and h_trans.j_hz[0] >= 9.0
    assert max(j for _, j in h_cis.couplings) < 6.0


def test_meso_and_dl_dibromobutane_predictions_differ():
    # diastereomers must not get identical spectra (any handbook lists meso/dl separately)
    meso, dl = predict(MESO), predict(DL)
    assert [round(c.shift, 2) for c in meso.carbons] != [round(c.shift, 2) for c in dl.carbons]
    # the H2-H3 coupling (hidden in first order: the two methines are equivalent) follows the
    # conformers: meso prefers Br anti with H anti (large J), dl puts the methines gauche
    j_meso = stereo_features(parse_structure(MESO))[0].j3[(1, 3)][0]
    j_dl = stereo_features(parse_structure(DL))[0].j3[(1, 3)][0]
    assert abs(j_meso - j_dl) > 1.0


def test_enantiomers_get_identical_predictions():
    # mirror images have identical NMR spectra in an achiral solvent (a sign error would break this)
    one, two = predict(DL), predict("C[C@H](Br)[C@H](C)Br")
    assert [c.shift for c in one.carbons] == pytest.approx([c.shift for c in two.carbons], abs=1e-6)
    assert [h.j_hz for h in one.protons] == [h.j_hz for h in two.protons]


def test_corrections_centre_on_the_increment_value():
    # the tables were fitted on mixed configurations: the cis/trans corrections are equal and opposite
    plain = predict("CC(C)(C)C1CCC(O)CC1")
    c_trans, _ = carbinol(TRANS_TBU)
    c_cis, _ = carbinol(CIS_TBU)
    base = next(c.shift for c in plain.carbons if 7 in c.atoms)
    assert (c_trans + c_cis) / 2 == pytest.approx(base, abs=0.05)


def test_ensemble_is_boltzmann_weighted_and_cached():
    ens = conformer_ensemble(CIS_2ME)
    assert ens is not None
    assert ens.weights.sum() == pytest.approx(1.0)
    assert ens.energies.min() == 0.0
    assert (ens.energies <= parameters()["ensemble:window"]).all()
    assert conformer_ensemble(CIS_2ME) is ens


def test_geometric_couplings_for_the_spin_simulation():
    st = parse_structure(TRANS_TBU)
    pred = predict_structure(st)
    geo = geometric_couplings(st, pred.protons)
    assert geo, "a 3D structure must give couplings"
    h1 = next(i for i, g in enumerate(pred.protons) if g.atoms == (7,))
    js = [j for (a, b), j in geo.items() if h1 in (a, b)]
    assert max(js) > 6.0  # average of ax-ax (~11) and ax-eq (~4) to each ring CH2
    assert all(a < b for a, b in geo)
    assert geometric_couplings(parse_structure("CCO"), predict("CCO").protons) is None


def test_layer_leaves_other_molecules_unchanged():
    st = parse_structure("CC(C)(C)C1CCC(O)CC1")
    pred = predict_structure(st)
    assert apply_stereo_layer(st, pred) is pred
    assert "stereo_layer" not in pred.extra


def test_every_stereo_parameter_has_a_source():
    import csv
    from pathlib import Path

    import specmatch.prediction as pr

    with open(Path(pr.__file__).parent / "tables" / "stereo.csv", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    assert rows and all(r["source"].strip() for r in rows)
