"""Journal-style peak text (format as in experimental sections: common practice)."""

from __future__ import annotations

import re

import pytest

from specmatch.errors import SpecmatchError
from specmatch.prediction import predict_structure
from specmatch.prediction.types import CarbonShift, Prediction, ProtonGroup
from specmatch.prediction.h1.predictor import predict_protons
from specmatch.reports.journal_text import measured_peak_text, predicted_peak_text
from specmatch.spectra.types import Multiplet, Peak, PeakList
from specmatch.structures import parse_structure


def _ethyl_prediction():
    return Prediction(
        "CCO", "CCO",
        carbons=(CarbonShift((0,), 31.5, 1.0, 3), CarbonShift((1,), 77.2, 1.0, 2)),
        protons=(ProtonGroup((0,), 1.25, 0.1, 3, "t", (7.1,), couplings=((2, 7.1),)),
                 ProtonGroup((1,), 4.12, 0.1, 2, "q", (7.1,), couplings=((3, 7.1),))),
    )


def test_predicted_1h_text_exact():
    assert predicted_peak_text(_ethyl_prediction()) == \
        "1H NMR (400 MHz, CDCl3) δ 4.12 (q, J = 7.1 Hz, 2H), 1.25 (t, J = 7.1 Hz, 3H)."


def test_predicted_13c_text_exact():
    assert predicted_peak_text(_ethyl_prediction(), nucleus="13C", frequency_mhz=100.6) == \
        "13C NMR (101 MHz, CDCl3) δ 77.2, 31.5."


def test_predicted_text_multiple_j_broad_and_multiplet_range():
    pred = Prediction("x", "x", carbons=(), protons=(
        ProtonGroup((0,), 6.70, 0.1, 1, "dd", (17.6, 10.9), couplings=((1, 17.6), (1, 10.9))),
        ProtonGroup((1,), 2.10, 1.0, 1, "br s", exchangeable=True),
        ProtonGroup((2,), 1.30, 0.1, 4, "m", couplings=((3, 7.0), (2, 7.0), (1, 13.0))),
    ))
    text = predicted_peak_text(pred, frequency_mhz=500, solvent="C6D6")
    assert text.startswith("1H NMR (500 MHz, C6D6) δ 6.70 (dd, J = 17.6, 10.9 Hz, 1H), 2.10 (br s, 1H), ")
    # the multiplet spans sum(n*J)/2 = 24 Hz either side at 500 MHz: 1.30 +- 0.048 ppm
    assert text.endswith("1.25-1.35 (m, 4H).")


def test_predicted_text_of_real_prediction():
    st = parse_structure("CCOC(C)=O")
    protons, _ = predict_protons(st)
    pred = Prediction("CCOC(C)=O", st.canonical_smiles, carbons=(), protons=tuple(protons))
    text = predicted_peak_text(pred)
    assert re.fullmatch(r"1H NMR \(400 MHz, CDCl3\) δ 4\.\d\d \(q, J = 7\.\d Hz, 2H\), "
                        r"2\.\d\d \(s, 3H\), 1\.\d\d \(t, J = 7\.\d Hz, 3H\)\.", text), text


def test_measured_text_multiplets_and_ranges():
    mults = [
        Multiplet(1.27, (1.20, 1.35), integral=3.9, multiplicity="m"),
        Multiplet(4.12, (4.08, 4.16), integral=2.02, multiplicity="q", j_hz=(7.1,)),
        Multiplet(7.26, (7.25, 7.27), integral=0.1, multiplicity="s", flag="solvent"),
        Multiplet(2.05, (2.04, 2.06), integral=None, multiplicity="s"),
    ]
    assert measured_peak_text(mults, "1H", 400.0, "CDCl3") == \
        "1H NMR (400 MHz, CDCl3) δ 4.12 (q, J = 7.1 Hz, 2H), 2.05 (s), 1.20-1.35 (m, 4H)."


def test_measured_text_13c_peaks_and_peaklist():
    peaks = (Peak(171.1), Peak(77.16, flag="solvent"), Peak(60.4), Peak(14.2), Peak(21.0))
    assert measured_peak_text(peaks, "13C", 101.0, "CDCl3") == "13C NMR (101 MHz, CDCl3) δ 171.1, 60.4, 21.0, 14.2."
    pl = PeakList("13C", peaks)
    assert measured_peak_text(pl, "13C", None, None) == "13C NMR δ 171.1, 60.4, 21.0, 14.2."


def test_bad_input_raises_specmatch_error():
    with pytest.raises(SpecmatchError, match="1H"):
        predicted_peak_text(_ethyl_prediction(), nucleus="19F")
    with pytest.raises(SpecmatchError, match="Multiplet or Peak"):
        measured_peak_text([1.2, 3.4], "1H", 400.0, "CDCl3")


def test_prediction_table_includes_peak_text():
    from specmatch.reports.tables_text import prediction_table

    pred = predict_structure(parse_structure("CC(C)Br"))
    table = prediction_table(pred)
    assert "1H NMR (400 MHz, CDCl3) δ" in table and "(sept, J = " in table
