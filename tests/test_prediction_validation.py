"""Structure validation at the prediction boundary: radicals, ions, isotopes.

Before these checks, ``[CH3]`` and ``C[CH2+]`` were predicted as the parent alkane
without a word and ``[2H]`` was perceived as a substituent atom (a CD3 carbon
predicted at 63.5 ppm, like a CH2 bearing a heteroatom).
"""

from __future__ import annotations

import subprocess
import sys

import pytest

from specmatch.errors import SpecmatchError
from specmatch.prediction import predict


@pytest.mark.parametrize("smiles, word", [
    ("[CH3]", "radical"),
    ("[CH2]C", "radical"),
    ("CC[CH]C", "radical"),
    ("C[CH2+]", "carbocation"),
    ("CC(C)[C+](C)C", "carbocation"),
    ("C[CH2-]", "carbanion"),
    ("CC[O-]", "ion"),
    ("C[NH3+]", "ion"),
])
def test_radicals_and_ions_are_refused_with_the_reason(smiles, word):
    with pytest.raises(SpecmatchError, match=word):
        predict(smiles)


def test_charge_separated_neutral_group_is_accepted():
    # nitromethane written with N+ / O-: a neutral molecule, still predicted
    pred = predict("C[N+](=O)[O-]")
    assert len(pred.carbons) == 1 and pred.protons[0].count == 3


@pytest.mark.parametrize("smiles", ["[13CH4]", "[3H]CC", "C[18OH]"])
def test_other_isotope_labels_are_refused_clearly(smiles):
    with pytest.raises(SpecmatchError, match="isotope|tritium"):
        predict(smiles)


def test_cd3_gives_no_1h_signal_and_a_c_h_like_carbon():
    # iodomethane-d3 vs iodomethane: same 13C environment; the C-D carbon sits a few
    # tenths of a ppm upfield (one-bond D isotope effect, about 0.2-0.4 ppm per D,
    # from memory) and is no longer a "CH3" for DEPT
    d3, h3 = predict("[2H]C([2H])([2H])I"), predict("CI")
    assert d3.protons == ()
    (c_d,), (c_h,) = d3.carbons, h3.carbons
    assert -1.5 < c_d.shift - c_h.shift < 0.0
    assert c_d.hydrogens == 0 and c_h.hydrogens == 3
    assert any("C-D multiplet" in w for w in d3.warnings)


def test_d_is_never_a_substituent():
    # ethanol-1,1-d2: the CD2 carbon must stay in the alcohol-carbon range of ethanol
    # (58.3 ppm, from memory), not be shifted by a phantom heteroatom
    pred = predict("OC([2H])([2H])C")
    ch2 = next(c for c in pred.carbons if c.atoms == (1,))
    assert ch2.shift == pytest.approx(predict("OCC").carbons[0].shift, abs=1.5)
    # the methyl no longer couples to resolved partners: a singlet, 3H
    me = next(g for g in pred.protons if g.atoms == (2,))
    assert (me.count, me.multiplicity) == (3, "s")
    assert sum(g.count for g in pred.protons) == 4  # CH3 + OH


def test_partial_d_that_breaks_symmetry_is_refused():
    with pytest.raises(SpecmatchError, match="D label"):
        predict("C([2H])C")


def test_cli_refuses_a_radical_with_exit_2_and_one_line():
    p = subprocess.run([sys.executable, "-m", "specmatch", "predict", "[CH3]"], capture_output=True, text=True)
    assert p.returncode == 2
    assert "radical" in p.stderr and "Traceback" not in p.stderr
    assert len(p.stderr.strip().splitlines()) == 1
