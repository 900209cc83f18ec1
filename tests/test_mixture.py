"""Product ratio (regioselectivity) from 1H spectra and peak lists.

Data: tests/data/mixture_isomer_pairs.json holds experimental 1H shifts of isomer
pairs copied from nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582).
Synthetic crude spectra are built from those EXPERIMENTAL shifts; the fit works
from predicted (or deliberately displaced) shifts and must find the true ratio.
"""

from __future__ import annotations

import json
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.identification.mixture import (
    MixtureEstimate,
    estimate_mixture,
    mixture_from_files,
    ratio_text,
    selectivity_words,
)
from mixture_synth import experimental_groups, synthetic_spectrum
from specmatch.prediction.types import Prediction
from specmatch.reports.mixture_text import mixture_text
from specmatch.spectra.types import Multiplet, Peak, PeakList, Spectrum

DATA = json.loads((Path(__file__).parent / "data" / "mixture_isomer_pairs.json").read_text(encoding="utf-8"))
RECS = {r["name"]: r for r in DATA["records"]}
NO_FLAGS = PeakList("1H", (), frequency_mhz=400.0, solvent="CDCl3")


def _mixture(name_a: str, name_b: str, major: float, seed: int = 3) -> tuple[Spectrum, dict, dict]:
    a, b = RECS[name_a], RECS[name_b]
    rng = np.random.default_rng(seed)
    ga, oha = experimental_groups(a, rng=rng)
    gb, ohb = experimental_groups(b, rng=rng)
    sp = synthetic_spectrum([ga, gb], [major, 1.0 - major], oh_shifts_ppm=[oha, ohb],
                            oh_per_molecule=[int("O" in a["smiles"]), int("O" in b["smiles"])], rng=rng)
    return sp, a, b


def _stand_in(rec: dict, offset_ppm: float) -> Prediction:
    """A stand-in for a prediction: experimental shifts displaced by +-offset (alternating),
    sigma 0.2 ppm, J 7.0 Hz - so the test does not depend on the tables' current accuracy."""
    groups, _ = experimental_groups(rec)
    out = []
    for i, g in enumerate(groups):
        out.append(replace(g, shift=g.shift + (offset_ppm if i % 2 == 0 else -offset_ppm), sigma=0.2,
                           multiplicity="m", couplings=tuple((n, 7.0) for n, _ in g.couplings)))
    return Prediction(rec["smiles"], rec["smiles"], (), tuple(out))


# ----------------------------------------------------------------------- wording
@pytest.mark.parametrize("major, words", [
    (1.0, "completely regioselective"), (0.99, "completely regioselective"),
    (0.985, "highly regioselective"), (0.90, "highly regioselective"),
    (0.89, "moderately regioselective"), (0.70, "moderately regioselective"),
    (0.69, "not regioselective"), (0.50, "not regioselective"),
])
def test_selectivity_wording_thresholds(major, words):
    # thresholds 99:1 / 90:10 / 70:30 on the major fraction (common practice)
    assert selectivity_words(major) == words


def test_ratio_text():
    assert ratio_text([0.78, 0.22]) == "78:22"
    assert ratio_text([0.22, 0.78]) == "22:78"
    assert ratio_text([0.998, 0.002]) == ">99:1"
    parts = ratio_text([1 / 3, 1 / 3, 1 / 3]).split(":")
    assert sum(int(p) for p in parts) == 100


# ------------------------------------------------------------------ bad input
def test_13c_is_refused_as_not_quantitative():
    ppm = np.linspace(220, -5, 4096)
    c13 = Spectrum("13C", ppm, np.zeros_like(ppm), 100.0, "CDCl3", "test")
    with pytest.raises(SpecmatchError, match="not quantitative"):
        estimate_mixture(["CC(C)Br", "CCCBr"], spectrum=c13)
    pl = PeakList("13C", (Peak(45.0, 1.0), Peak(35.0, 2.0)))
    with pytest.raises(SpecmatchError, match="Overhauser"):
        estimate_mixture(["CC(C)Br", "CCCBr"], peaklist=pl)


def test_candidate_list_problems_are_explained():
    pl = PeakList("1H", (), (Multiplet(4.1, (4.05, 4.15), 1.0),))
    with pytest.raises(SpecmatchError, match="at least two"):
        estimate_mixture(["CC(C)Br"], peaklist=pl)
    with pytest.raises(SpecmatchError, match="same compound"):
        estimate_mixture(["CC(C)Br", "BrC(C)C"], peaklist=pl)
    with pytest.raises(SpecmatchError, match="integrals"):
        estimate_mixture(["CC(C)Br", "CCCBr"], peaklist=PeakList("1H", (Peak(4.1, 1.0),)))


def test_candidate_file_errors(tmp_path):
    with pytest.raises(SpecmatchError, match="not found"):
        mixture_from_files(tmp_path / "x.csv", tmp_path / "missing.txt")
    empty = tmp_path / "c.txt"
    empty.write_text("# nothing here\n\n")
    with pytest.raises(SpecmatchError, match="no structures"):
        mixture_from_files(tmp_path / "x.csv", empty)


# ---------------------------------------------------- classical integral ratio
# Common-practice worked example (numbers invented for the test, shifts of
# 2-bromobutane from nmrshiftdb2 record 10007822, of 1-bromobutane from memory):
# HBr + but-1-ene, crude 1H. CH-Br methine (1H) of 2-bromobutane at 4.10 integrates
# 0.78; CH2-Br methylene (2H) of 1-bromobutane at 3.41 integrates 0.44. Per proton
# 0.78 : 0.22, i.e. 78:22, "moderately regioselective" (Markovnikov product major).
BROMOBUTANES_CSV = """shift,range,integral,multiplicity
4.10,,0.78,sext
3.41,,0.44,t
1.85,,2.00,m
1.72,,2.34,d
1.47,,0.44,m
1.03,,2.34,t
0.93,,0.66,t
"""


def _bromobutane_peaklist() -> PeakList:
    rows = [(4.10, 0.78, "sext"), (3.41, 0.44, "t"), (1.85, 2.00, "m"), (1.72, 2.34, "d"),
            (1.47, 0.44, "m"), (1.03, 2.34, "t"), (0.93, 0.66, "t")]
    mults = tuple(Multiplet(s, (s - 0.03, s + 0.03), i, m) for s, i, m in rows)
    return PeakList("1H", tuple(Peak(s) for s, _, _ in rows), mults, frequency_mhz=400.0,
                    solvent="CDCl3", source="worked example")


def test_integral_ratio_worked_example_bromobutanes():
    est = estimate_mixture(["CCC(C)Br", "CCCCBr"], peaklist=_bromobutane_peaklist(),
                           names=["2-bromobutane", "1-bromobutane"])
    assert est.integral_ratio is not None
    assert est.integral_ratio.ratio_text == "78:22"
    assert est.fractions[0] == pytest.approx(0.78, abs=0.015)
    assert est.ratio_text == "78:22"
    assert est.selectivity == "moderately regioselective"
    assert not est.disagreement
    # the diagnostic signals are the CH-Br and CH2-Br multiplets
    diag = {s.candidate: s for s in est.integral_ratio.signals}
    assert 4.0 < diag[0].range_ppm[1] < 4.2 and diag[0].protons == 1
    assert 3.3 < diag[1].range_ppm[1] < 3.5 and diag[1].protons == 2


def test_cli_mixture_with_csv_peak_list(tmp_path, capsys):
    from specmatch.cli import main

    csv = tmp_path / "crude_1H.csv"
    csv.write_text("shift,integral,multiplicity\n4.10,0.78,sext\n3.41,0.44,t\n1.85,2.00,m\n1.72,2.34,d\n"
                   "1.47,0.44,m\n1.03,2.34,t\n0.93,0.66,t\n")
    cands = tmp_path / "candidates.txt"
    cands.write_text("# HBr + but-1-ene\nCCC(C)Br 2-bromobutane\nCCCCBr 1-bromobutane\n")
    assert main(["mixture", "--h1", str(csv), "--candidates", str(cands), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["ratio_text"] == "78:22"
    assert out["candidates"][0]["name"] == "2-bromobutane"
    assert out["selectivity"] == "moderately regioselective"
    assert main(["mixture", "--h1", str(csv), "--candidates", str(cands)]) == 0
    text = capsys.readouterr().out
    assert "78:22" in text and "moderately regioselective" in text


# ------------------------------------------------------------ full-spectrum fit
@pytest.fixture(scope="module")
def fit_80_20() -> MixtureEstimate:
    # 2-methylpropene + HBr: 2-bromo-2-methylpropane : 1-bromo-2-methylpropane 80:20
    sp, a, b = _mixture("2-bromo-2-methylpropane", "1-bromo-2-methylpropane", 0.80)
    return estimate_mixture([a["smiles"], b["smiles"]], spectrum=sp, peaklist=NO_FLAGS,
                            predictions=[_stand_in(a, 0.12), _stand_in(b, 0.12)],
                            names=[a["name"], b["name"]])


def test_full_fit_recovers_ratio_from_displaced_shifts(fit_80_20):
    est = fit_80_20
    # within 3 percentage points, and the 95% interval covers the truth
    assert abs(est.fractions[0] - 0.80) <= 0.03
    lo, hi = est.interval_95[0]
    assert lo <= 0.80 <= hi
    assert est.ratio_text in ("79:21", "80:20", "81:19")
    assert est.selectivity == "moderately regioselective"
    # the tert-butyl singlet and the CH2Br doublet are resolved and carry the estimate
    carried = {(c.candidate, round(c.range_ppm[1], 1)) for c in est.carrying_signals}
    assert any(k == 0 and abs(x - 1.8) < 0.1 for k, x in carried)
    assert any(k == 1 and abs(x - 3.3) < 0.1 for k, x in carried)
    assert est.integral_ratio is not None and not est.disagreement


def test_estimate_serialises_and_reads(fit_80_20):
    d = fit_80_20.to_dict()
    json.dumps(d)
    assert {"candidates", "ratio_text", "selectivity", "method", "uncertainty_method",
            "carrying_signals", "integral_ratio", "disagreement", "warnings"} <= set(d)
    assert d["thresholds"][0] == {"major_fraction_min": 0.99, "word": "completely"}
    text = mixture_text(fit_80_20)
    assert fit_80_20.ratio_text in text and "regioselective" in text and "Uncertainty" in text


def test_pure_sample_and_absent_candidate():
    # propene + HCl, only 2-chloropropane in the tube
    sp, a, b = _mixture("2-chloropropane", "1-chloropropane", 1.0)
    est = estimate_mixture([a["smiles"], b["smiles"]], spectrum=sp, peaklist=NO_FLAGS,
                           predictions=[_stand_in(a, 0.1), _stand_in(b, 0.1)])
    assert est.fractions[0] > 0.97
    # absent: fraction within its uncertainty of zero
    assert est.fractions[1] <= 2.0 * est.uncertainties[1] + 1e-9
    assert est.interval_95[1][0] == 0.0
    assert est.selectivity == "completely regioselective"


def test_full_fit_with_the_predictor():
    # 2-methylpropene + HCl 60:40 with the real 1H prediction tables
    sp, a, b = _mixture("2-chloro-2-methylpropane", "1-chloro-2-methylpropane", 0.60, seed=11)
    est = estimate_mixture([a["smiles"], b["smiles"]], spectrum=sp, peaklist=NO_FLAGS)
    if any("placeholder" in w for w in est.warnings):
        pytest.skip("1H prediction tables are placeholders")
    assert abs(est.fractions[0] - 0.60) <= 0.03
    assert est.selectivity == "not regioselective"


def test_cli_mixture_reads_a_jcamp_spectrum(tmp_path, capsys):
    # the whole path: JCAMP-DX file -> reader -> peak picking (solvent flags) -> fit
    from specmatch.cli import main
    from specmatch.spectra import write_jcampdx

    sp, a, b = _mixture("2-bromo-2-methylpropane", "1-bromo-2-methylpropane", 0.78, seed=5)
    jdx = tmp_path / "crude_1H.jdx"
    write_jcampdx(sp, jdx, comments=["synthetic test spectrum made by specmatch tests"])
    cands = tmp_path / "candidates.txt"
    cands.write_text(f"{a['smiles']} {a['name']}\n{b['smiles']} {b['name']}\n")
    assert main(["mixture", "--h1", str(jdx), "--candidates", str(cands), "--solvent", "CDCl3", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert abs(out["candidates"][0]["fraction"] - 0.78) <= 0.03
    assert out["selectivity"] == "moderately regioselective"


def test_peak_list_of_a_pure_sample():
    # 2-bromobutane alone (experimental shifts, nmrshiftdb2 record 10007822), integrals
    # equal to the proton counts; 1-bromobutane is a candidate that is not there
    groups, _ = experimental_groups(RECS["2-bromobutane"])
    mults = tuple(Multiplet(g.shift, (g.shift - 0.03, g.shift + 0.03), float(g.count)) for g in groups)
    pl = PeakList("1H", tuple(Peak(m.shift) for m in mults), mults, frequency_mhz=400.0, solvent="CDCl3")
    est = estimate_mixture(["CCC(C)Br", "CCCCBr"], peaklist=pl)
    assert est.fractions[0] > 0.97
    assert est.interval_95[1][0] == 0.0
    assert est.selectivity == "completely regioselective"


def test_observed_multiplicity_partner_counts():
    # first-order n+1 rule (common practice): a dq with equal J collapses to a quintet,
    # so both mean four equivalent-ish partners; 'm' and broad lines are not patterns
    from specmatch.identification.mixture.estimate import _observed_partners

    assert _observed_partners("t") == 2
    assert _observed_partners("quint") == 4
    assert _observed_partners("dq") == 4
    assert _observed_partners("ddd") == 3
    assert _observed_partners("sept") == 6
    assert _observed_partners("s") == 0
    assert _observed_partners("m") is None
    assert _observed_partners("br s") is None


def test_fitted_groups_keep_the_vinyl_couplings_and_drop_only_the_geminal_of_twins():
    """Diastereotopic twins lose their mutual geminal coupling in the fitted first-order
    multiplets, and only that one. Reference values: terminal vinyl =CH2 of vinylcyclohexane,
    3J trans ~17 Hz, 3J cis ~10 Hz, 2J(gem) 0-3 Hz (common practice; the rows 3J_vinyl_trans,
    3J_vinyl_cis, 2J_vinyl_gem of prediction/tables/h1_coupling.csv); ring CH2 2J(gem) ~13 Hz."""
    from specmatch.identification.mixture.estimate import _prepare_candidates

    cand = _prepare_candidates(["C=CC1CCCCC1", "CCO"], None)[0]
    vinyl = [g for g in cand.groups if g.atoms == (0,)]
    assert sorted(sorted(abs(j) for _, j in g.couplings) for g in vinyl) == [[1.5, 10.0], [1.5, 17.0]]
    ring = [g for g in cand.groups if g.atoms == (4, 6)]
    assert len(ring) == 2 and all(13.0 not in [abs(j) for _, j in g.couplings] for g in ring)
    assert all(7.0 in [abs(j) for _, j in g.couplings] for g in ring)
