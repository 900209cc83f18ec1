"""Identification: the right isomer must win on published experimental spectra.

Experimental shifts come from tests/data/nmrshiftdb2_identification_subset.json
(nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582), copied from the
shared development part with attribution; a few values are from memory and are
marked so beside their use.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.identification import rank
from specmatch.identification.errormodel import load_error_model
from specmatch.identification.scoring import observed_c13, prepare, score_c13

DATA = json.loads((Path(__file__).parent / "data" / "nmrshiftdb2_identification_subset.json").read_text("utf-8"))
REC = {r["smiles"]: r for r in DATA["records"]}
H_OF = {"S": 0, "D": 1, "T": 2, "Q": 3}


def c13_lines(smiles: str, dept: bool = False) -> list:
    """Distinct 13C lines as a resolved spectrum shows them (0.05 ppm apart)."""
    out: list = []
    for shift, letter in sorted(REC[smiles]["c13"]):
        if out and abs(shift - (out[-1]["shift"] if dept else out[-1])) <= 0.05:
            continue
        out.append({"shift": shift, "hydrogens": H_OF[letter]} if dept else shift)
    return out


def h1_multiplets(smiles: str) -> list[dict]:
    groups: list[list[float]] = []
    for s in sorted(REC[smiles]["h1"]):
        if groups and abs(s - groups[-1][0]) <= 0.005:
            groups[-1][1] += 1
        else:
            groups.append([s, 1])
    return [{"shift": s, "integral": n} for s, n in groups]


# ----------------------------------------------------------- worked examples 13C
def test_2_bromobutane_beats_1_bromobutane_on_13c():
    # nmrshiftdb2 10007822, 2-bromobutane: 53.0 (CHBr), 34.3, 26.0, 12.1 ppm
    r = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    assert r.best.smiles == "CCC(C)Br"
    assert r.best.probability > 0.9
    assert sum(c.probability for c in r.candidates) == pytest.approx(1.0)


def test_2_chlorobutane_among_all_butyl_chlorides():
    # nmrshiftdb2 10927, 2-chlorobutane
    cands = ["CCCCCl", "CCC(C)Cl", "CC(C)CCl", "CC(C)(C)Cl"]
    r = rank(cands, c13=c13_lines("CCC(C)Cl"))
    assert r.best.smiles == "CCC(C)Cl"
    assert r.verdict.word in ("decisive", "likely")


def test_tert_amyl_chloride_beats_the_secondary_chloride():
    # 2-chloro-2-methylbutane 13C (CDCl3): 71.0 (C-Cl), 38.9 (CH2), 32.1 (2 CH3), 9.5 (CH3)
    # (values from memory, handbook tables); the rival is the unrearranged HCl adduct of
    # 3-methylbut-1-ene, 2-chloro-3-methylbutane
    r = rank(["CC(C)C(C)Cl", "CCC(C)(C)Cl"], c13=[71.0, 38.9, 32.1, 9.5])
    assert r.best.smiles == "CCC(C)(C)Cl"
    assert r.best.probability > 0.9


@pytest.mark.parametrize("truth", ["CCC(C)(C)O", "CC(C)C(C)O"])
def test_hydration_of_3_methylbut_1_ene_products(truth):
    # nmrshiftdb2 10008912 (2-methylbutan-2-ol, after hydride shift) and 10016637
    # (3-methylbutan-2-ol, Markovnikov without shift); anti-Markovnikov alcohol as a third
    cands = ["CC(C)C(C)O", "CCC(C)(C)O", "CC(C)CCO"]
    r = rank(cands, c13=c13_lines(truth))
    assert r.best.smiles == truth
    assert r.best.probability > 0.8


def test_ring_size_bromocyclohexane_vs_cyclopentyl_bromides_with_dept():
    # nmrshiftdb2 76143, bromocyclohexane: 52.1 (CHBr), 38.8, 28.4, 25.6 ppm, with the
    # record's attached-H counts (what DEPT-135 gives); rivals from ring contraction
    cands = ["BrC1CCCCC1", "BrCC1CCCC1", "CC1(Br)CCCC1"]
    r = rank(cands, c13=c13_lines("BrC1CCCCC1", dept=True))
    assert r.best.smiles == "BrC1CCCCC1"
    # the tertiary bromide has a quaternary C-Br, which DEPT rules out
    assert next(c for c in r.candidates if c.smiles == "CC1(Br)CCCC1").probability < 0.01


# ------------------------------------------------------------- worked examples 1H
def test_2_bromobutane_beats_1_bromobutane_on_1h_with_integrals():
    # nmrshiftdb2 10007822: 4.10 (1H), 1.85 (2H), 1.72 (3H), 1.04 (3H)
    r = rank(["CCCCBr", "CCC(C)Br"], h1=h1_multiplets("CCC(C)Br"))
    assert r.best.smiles == "CCC(C)Br"
    assert r.best.probability > 0.8
    # every observed proton is placed: no multiplet left unexplained for the winner
    assert r.best.unexplained == 0


def test_isopropyl_iodide_on_1h_integrals():
    # nmrshiftdb2 10005623, 2-iodopropane: 4.30 (1H, CHI), 1.78 (6H)
    r = rank(["CCCI", "CC(C)I"], h1=h1_multiplets("CC(C)I"))
    assert r.best.smiles == "CC(C)I"


def test_missing_oh_in_1h_list_is_tolerated():
    # butan-2-ol, nmrshiftdb2 10008032, with its OH line (3.99 ppm) left out:
    # the integral scale without the OH must be found per candidate
    mult = [m for m in h1_multiplets("CCC(C)O") if m["shift"] != 3.99]
    r = rank(["CCCCO", "CCC(C)O"], h1=mult)
    assert r.best.smiles == "CCC(C)O"


# -------------------------------------------------------------------- DEPT
def test_dept_hydrogen_count_is_a_hard_constraint():
    m = load_error_model().c13
    truth = prepare("CCC(C)Br")
    good = observed_c13(c13_lines("CCC(C)Br", dept=True))
    lines = c13_lines("CCC(C)Br", dept=True)
    lines[-1] = {**lines[-1], "hydrogens": 2}  # the CHBr line (53 ppm) labelled CH2: contradiction
    bad = observed_c13(lines)
    drop = score_c13(truth, good, m) - score_c13(truth, bad, m)
    assert drop > 5.0  # at least a large penalty, whatever the assignment does instead


def test_dept_helps_the_right_candidate():
    plain = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    dept = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br", dept=True))
    assert dept.has_dept
    p = lambda r: next(c.probability for c in r.candidates if c.smiles == "CCC(C)Br")
    assert p(dept) >= p(plain) - 1e-9


# ------------------------------------------------------------ cannot tell apart
def test_enantiomers_cannot_be_told_apart():
    # mirror images give the same NMR spectra in an achiral solvent
    r = rank(["C[C@H](Br)CC", "C[C@@H](Br)CC"], c13=c13_lines("CCC(C)Br"))
    assert r.verdict.word == "cannot tell apart"
    assert r.best.probability == pytest.approx(0.5, abs=1e-6)
    assert "same predicted spectra" in r.verdict.advice


def test_isomers_indistinguishable_by_13c_give_cannot_tell_apart_and_ask_for_dept():
    # two constitutional isomers whose predicted 13C lines nearly coincide but whose
    # carbons carry different numbers of H; the observed lines sit half-way between the
    # two predictions, so 13C alone cannot separate them
    a, b = "CC(C)CC(O)C(C)C", "CCCC(C)(C)C(C)O"
    pa, pb = prepare(a), prepare(b)
    assert pa.c_shift.size == pb.c_shift.size
    mid = list((np.sort(pa.c_shift) + np.sort(pb.c_shift)) / 2)
    r = rank([a, b], c13=mid)
    assert r.verdict.word == "cannot tell apart", r.verdict.text
    assert "cannot tell these apart with 13C alone: record a 1H or DEPT-135 spectrum" in r.verdict.advice
    # DEPT-like H counts of isomer b settle it in favour of b
    order = np.argsort(pb.c_shift)
    lines = [{"shift": s, "hydrogens": int(pb.c_h[i])} for s, i in zip(mid, order)]
    r2 = rank([a, b], c13=lines)
    assert r2.best.smiles == b and r2.best.probability > 0.9


# ------------------------------------------------------------ counting and priors
def test_fewer_distinct_carbons_than_lines_pays():
    # 2-bromobutane's four lines: tert-butyl bromide has two signals and must leave lines
    m = load_error_model().c13
    obs = observed_c13(c13_lines("CCC(C)Br"))
    assert score_c13(prepare("CC(C)(C)Br"), obs, m) < score_c13(prepare("CCC(C)Br"), obs, m) - 5
    r = rank(["CC(C)(C)Br", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    tbu = next(c for c in r.candidates if c.smiles == "CC(C)(C)Br")
    assert tbu.unexplained >= 2


def test_an_impurity_line_does_not_flip_the_winner_and_is_reported():
    lines = c13_lines("CCC(C)Br") + [77.2]  # a stray line (e.g. residual CDCl3 not flagged)
    r = rank(["CCCCBr", "CCC(C)Br"], c13=lines)
    assert r.best.smiles == "CCC(C)Br"
    assert any(row.status == "unexplained" and row.observed_ppm == 77.2 for row in r.best.c13_table)
    assert any("unexplained" in c for c in r.cautions)


def test_prior_changes_the_with_prior_probability_only():
    lines = c13_lines("CCC(C)Br")
    spec = rank(["CCCCBr", "CCC(C)Br"], c13=lines)
    pri = rank(["CCCCBr", "CCC(C)Br"], c13=lines, priors=[0.999, 0.001])
    p_spec = {c.smiles: c.probability_spectra for c in spec.candidates}
    for c in pri.candidates:
        assert c.probability_spectra == pytest.approx(p_spec[c.smiles])
    cb = next(c for c in pri.candidates if c.smiles == "CCC(C)Br")
    assert cb.probability_with_prior < cb.probability_spectra
    assert pri.verdict.basis == "spectra and mechanism prior"
    nopri = rank(["CCCCBr", "CCC(C)Br"], c13=lines, priors=[0.999, 0.001], use_prior=False)
    assert nopri.verdict.basis == "spectra only"


def test_discriminating_signals_name_the_chbr_line():
    r = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    assert r.discriminating
    top = r.discriminating[0]
    assert top.weight > 0
    # the CH-Br line near 53 ppm or the CH2Br region is what tells them apart
    assert any(d.observed_ppm is not None and d.observed_ppm > 40 for d in r.discriminating)


def test_per_signal_table_has_sigma_units():
    r = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    for row in r.best.c13_table:
        if row.status == "assigned":
            assert row.deviation_sigma == pytest.approx((row.observed_ppm - row.predicted_ppm) / row.sigma_ppm)


# ------------------------------------------------------------------ bad input
@pytest.mark.parametrize("c13, msg", [
    (["abc"], "not a number"),
    ([500.0], "outside the 13C range"),
    ([{"hydrogens": 1}], "no 'shift'"),
    ([{"shift": 20.0, "hydrogens": 5}], "hydrogens must be"),
])
def test_bad_13c_input_is_a_specmatch_error(c13, msg):
    with pytest.raises(SpecmatchError, match=msg):
        rank(["CCCCBr"], c13=c13)


def test_bad_candidates_are_specmatch_errors():
    with pytest.raises(SpecmatchError, match="no candidate"):
        rank([], c13=[10.0])
    with pytest.raises(SpecmatchError, match="not a valid SMILES"):
        rank(["C1CC"], c13=[10.0])


def test_frame_and_dict():
    r = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    df = r.to_frame()
    assert list(df["smiles"]) == [c.smiles for c in r.candidates]
    assert math.isclose(df["probability"].sum(), 1.0)
    json.dumps(r.to_dict())


def test_multiplicity_and_j_weigh_against_the_wrong_candidate():
    # 1-chloropropane 1H (CDCl3): 3.52 (t, J 6.6 Hz, 2H), 1.81 (sext, 2H), 1.04 (t, J 7.4 Hz, 3H)
    # (values from memory, handbook tables)
    from specmatch.identification.scoring import observed_h1, score_h1

    m = load_error_model().h1
    with_m = observed_h1([{"shift": 3.52, "integral": 2, "multiplicity": "t", "j_hz": [6.6]},
                          {"shift": 1.81, "integral": 2, "multiplicity": "sext", "j_hz": [7.0]},
                          {"shift": 1.04, "integral": 3, "multiplicity": "t", "j_hz": [7.4]}])
    without = observed_h1([{"shift": 3.52, "integral": 2}, {"shift": 1.81, "integral": 2},
                           {"shift": 1.04, "integral": 3}])
    d_true = score_h1(prepare("CCCCl"), with_m, m) - score_h1(prepare("CCCCl"), without, m)
    d_false = score_h1(prepare("CC(C)Cl"), with_m, m) - score_h1(prepare("CC(C)Cl"), without, m)
    assert d_false < d_true - 0.5


@pytest.mark.parametrize("major", ["CCC(C)Br", "CC(C)(C)Br"])
def test_line_heights_decide_which_component_of_a_mixture_is_the_product(major):
    # a sample holding 2-bromobutane (nmrshiftdb2 10007822) and tert-butyl bromide
    # (nmrshiftdb2 10926); line heights: 100 per carbon for the major component, 20 for
    # the minor one (quaternary C-Br half as tall: no NOE). Strong lines left unexplained
    # are unlikely impurities, so the major component must win either way round.
    sec = [(s, 100.0 if major == "CCC(C)Br" else 20.0) for s in c13_lines("CCC(C)Br")]
    w = 100.0 if major == "CC(C)(C)Br" else 20.0
    tert = [(36.3, 3 * w), (62.6, 0.5 * w)]
    lines = [{"shift": s, "intensity": i} for s, i in sec + tert]
    r = rank(["CCC(C)Br", "CC(C)(C)Br"], c13=lines)
    assert r.best.smiles == major
    # without heights the candidate explaining more lines (2-bromobutane) would win
    plain = rank(["CCC(C)Br", "CC(C)(C)Br"], c13=[d["shift"] for d in lines])
    assert plain.best.smiles == "CCC(C)Br"


def test_exchangeable_oh_does_not_take_a_resolved_multiplet():
    # 2-methylbutan-2-ol (nmrshiftdb2 10008912: 1.49 CH2, 1.197 2 CH3, 0.924 CH3; patterns
    # from memory) in a sample that also holds a little secondary alcohol, whose CH-O
    # sextet at 3.62 ppm (butan-2-ol, nmrshiftdb2 10008032) shows; the tertiary alcohol's
    # OH must not claim that sextet (an exchanging OH gives a singlet)
    from specmatch.identification.scoring import h1_table, observed_h1

    mults = [{"shift": 3.62, "integral": 0.3, "multiplicity": "sext", "j_hz": [6.2]},
             {"shift": 1.49, "integral": 2, "multiplicity": "q", "j_hz": [7.5]},
             {"shift": 1.197, "integral": 6, "multiplicity": "s"},
             {"shift": 0.924, "integral": 3, "multiplicity": "t", "j_hz": [7.5]}]
    cand = prepare("CCC(C)(C)O")
    oh_atoms = {a for g in cand.prediction.protons if g.exchangeable for a in g.atoms}
    rows = h1_table(cand, observed_h1(mults), load_error_model().h1)
    on_sextet = [r for r in rows if r.observed_ppm == 3.62]
    assert on_sextet and all(not (set(r.atoms) & oh_atoms) for r in on_sextet)
