"""Names, numbers and the summary the app and the report show (specmatch.reports).

Structural classes use the trade's words (primary/secondary/tertiary carbon bearing
the group; number of carbon substituents on C=C: common practice). Reporting
precision: 13C 0.1 ppm, 1H 0.01 ppm, J 0.1 Hz (common practice in experimental
sections).
"""

from __future__ import annotations

import pytest

from specmatch.reports import numbers as fmt
from specmatch.reports.naming import candidate_names, structure_class


@pytest.mark.parametrize("smiles, words", [
    ("CCC(C)(C)O", "tertiary alcohol"),
    ("CC(O)C1CCCCC1", "secondary alcohol"),
    ("OCCC1CCCCC1", "primary alcohol"),
    ("CCC(C)Br", "secondary bromide"),
    ("CC(C)(C)Cl", "tertiary chloride"),
    ("CCC1=CCCCC1", "trisubstituted alkene, in the ring"),
    ("C=C1CCCCC1", "disubstituted alkene, exocyclic"),
    ("CC(C)=C(C)C", "tetrasubstituted alkene"),
    ("COC(C)(C)C", "ether"),
    ("CCCC", "alkane"),
])
def test_structure_class(smiles, words):
    assert structure_class(smiles) == words


def test_one_label_never_names_two_structures():
    # two different alkenes from the same pathway label, as the enumeration can give
    names = candidate_names([("CCC1(O)CCCCC1", "after 1,2-hydride shift"),
                             ("CCC1=CCCCC1", "E1 alkene (after 1,2-hydride shift)"),
                             ("CC=C1CCCCC1", "E1 alkene (after 1,2-hydride shift)")])
    for field in ("code", "short", "full"):
        values = [getattr(n, field) for n in names.values()]
        assert len(set(values)) == len(values), values
    assert names["CCC1=CCCCC1"].full == "P2 trisubstituted alkene, in the ring (E1 alkene (after 1,2-hydride shift))"
    assert names["CC=C1CCCCC1"].short == "P3 trisubstituted alkene, exocyclic"


@pytest.mark.parametrize("p, text", [(0.0, "<0.1%"), (0.0004, "<0.1%"), (0.004, "0.4%"), (0.25, "25%"),
                                     (0.873, "87%"), (0.995, "99.5%"), (0.99999, ">99.9%"), (None, "")])
def test_percent(p, text):
    assert fmt.percent(p) == text


def test_shift_precision_per_nucleus_and_empty_cells():
    assert fmt.ppm(37.301, "13C") == "37.3" and fmt.ppm(45.099, "13C") == "45.1"
    assert fmt.ppm(5.773, "1H") == "5.77" and fmt.ppm(0.9, "1H") == "0.90"
    assert fmt.hz(7.04) == "7.0"
    assert fmt.ppm(None, "13C") == "" and fmt.hz(None) == "" and fmt.integral(None) == ""
