"""The Result contract: hypotheses (pure and mixtures), p_present, verdict kind, the
symmetric dict form with its schema version, and the one candidate-file reader.

Observed shifts: nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582),
records copied to tests/data/nmrshiftdb2_identification_subset.json (butan-1-ol,
butan-2-ol, 2-bromobutane, tert-butyl bromide). The demo files in sample_spectra/
are invented (see sample_spectra/README.md).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from specmatch.errors import SpecmatchError
from specmatch.identification import identify, rank
from specmatch.identification.batch import rank_task
from specmatch.identification.candidates import parse_candidates, read_candidates
from specmatch.identification.ranking import VERDICT_KINDS, Hypothesis, percent
from specmatch.identification.result import RESULT_SCHEMA_VERSION, Result

ROOT = Path(__file__).resolve().parents[1]
DEMO = ROOT / "sample_spectra"
DATA = json.loads((Path(__file__).parent / "data" / "nmrshiftdb2_identification_subset.json").read_text("utf-8"))
REC = {r["smiles"]: r for r in DATA["records"]}


def c13_lines(*smiles: str) -> list[float]:
    """Distinct 13C lines of one or more compounds (a resolved spectrum of their mixture)."""
    out: list[float] = []
    for s in smiles:
        for shift, _ in sorted(REC[s]["c13"]):
            if not any(abs(shift - o) <= 0.05 for o in out):
                out.append(shift)
    return sorted(out)


# ------------------------------------------------------------ hypotheses
def _check_hypotheses(r):
    hs = r.hypotheses
    assert hs and all(isinstance(h, Hypothesis) for h in hs)
    assert sum(h.probability for h in hs) == pytest.approx(1.0)
    assert [h.probability for h in hs] == sorted((h.probability for h in hs), reverse=True)
    pure = {h.components[0] for h in hs if len(h.components) == 1}
    assert pure == {c.canonical_smiles for c in r.candidates}  # every candidate pure
    for h in hs:
        assert sum(h.fractions) == pytest.approx(1.0) and len(h.fractions) == len(h.components)
    for c in r.candidates:
        inside = sum(h.probability for h in hs if c.canonical_smiles in h.components)
        assert c.p_present == pytest.approx(min(inside, 1.0))
    assert r.verdict.kind in VERDICT_KINDS


def test_pure_sample_is_called_pure():
    # 2-bromobutane alone (nmrshiftdb2 10007822)
    r = rank(["CCCCBr", "CCC(C)Br", "CC(C)(C)Br"], c13=c13_lines("CCC(C)Br"))
    _check_hypotheses(r)
    assert r.verdict.kind == "pure"
    assert r.verdict.components == ("CCC(C)Br",)
    assert r.hypotheses[0].components == ("CCC(C)Br",)
    assert "pure" in r.verdict.text
    absent = next(c for c in r.candidates if c.smiles == "CC(C)(C)Br")
    assert absent.p_present < 0.05


def test_lines_of_two_isomers_are_called_a_mixture():
    # butan-1-ol + butan-2-ol lines together (nmrshiftdb2 records in the subset); the
    # pure hypotheses each leave four lines unexplained
    r = rank(["CCCCO", "CCC(C)O", "CC(C)CO"], c13=c13_lines("CCCCO", "CCC(C)O"))
    _check_hypotheses(r)
    assert r.verdict.kind == "mixture", r.verdict.text
    assert set(r.verdict.components) == {"CCCCO", "CCC(C)O"}
    assert r.verdict.text.split(":")[1].strip().startswith("mixture of")
    # 13C lines without heights say nothing about the ratio
    assert r.hypotheses[0].quantified is False
    assert "no ratio" in r.verdict.text
    for smi in ("CCCCO", "CCC(C)O"):
        assert next(c for c in r.candidates if c.smiles == smi).p_present > 0.9


def test_pure_only_when_asked():
    r = rank(["CCCCO", "CCC(C)O"], c13=c13_lines("CCCCO", "CCC(C)O"), max_components=1)
    assert all(len(h.components) == 1 for h in r.hypotheses)
    assert r.verdict.kind != "mixture"


def test_three_components_on_request():
    r = rank(["CCCCO", "CCC(C)O", "CC(C)CO"], c13=c13_lines("CCCCO"), max_components=3)
    assert any(len(h.components) == 3 for h in r.hypotheses)
    _check_hypotheses(r)


def test_percentages_for_people():
    assert percent(0.0) == "<0.1%" and percent(1.0) == ">99.9%" and percent(0.7) == "70%"


# --------------------------------------------------------- dict round trip
@pytest.fixture(scope="module")
def demo_results():
    # demo (a) from its peak lists with the ratio; demo (b) from its JCAMP-DX files
    a = identify(substrate="C=CC1CCCCC1", reagent="H2O/H2SO4",
                 c13=str(DEMO / "a_vinylcyclohexane_hydration_13C_peaks.csv"),
                 h1=str(DEMO / "a_vinylcyclohexane_hydration_1H_peaks.csv"), solvent="CDCl3", mixture=True)
    b = identify(substrate="C=CC(C)CC", reagent="HBr", c13=str(DEMO / "b_methylpentene_hbr_13C.jdx"),
                 dept135=str(DEMO / "b_methylpentene_hbr_DEPT135.jdx"), solvent="CDCl3")
    return a, b


def test_result_round_trips_through_json(demo_results):
    for r in demo_results:
        d = r.to_dict()
        assert d["schema_version"] == RESULT_SCHEMA_VERSION
        text = json.dumps(d, allow_nan=False)  # the store refuses NaN
        back = Result.from_dict(json.loads(text))
        assert back == r
        assert back.to_dict() == d


def test_result_is_frozen_and_typed(demo_results):
    a, _ = demo_results
    with pytest.raises(AttributeError):
        a.mixture = None  # type: ignore[misc]
    assert a.mixture is not None and a.mixture.fit is None  # a peak-list estimate has no spectrum fit
    d = a.to_dict()
    assert d["verdict"]["kind"] == a.verdict.kind
    assert d["hypotheses"][0]["components"] == list(a.hypotheses[0].components)
    assert {"p_present"} <= set(d["candidates"][0])


def test_demo_a_verdict_names_the_mixture_with_the_1h_ratio(demo_results):
    a, _ = demo_results
    v = a.verdict
    assert v.kind == "mixture", v.text
    assert v.components[0] == "CCC1(O)CCCCC1"  # tertiary alcohol (after the hydride shift) major
    assert v.components[1] == "CC(O)C1CCCCC1"
    # the verdict's fractions are the ratio's: the two never contradict
    mix = {s: f for s, f in zip(a.mixture.candidates, a.mixture.fractions)}
    canon = {c.smiles: c.canonical_smiles for c in a.candidates}
    for comp, f in zip(v.components, v.fractions):
        share = sum(mix[s] for s in mix if canon[s] == comp)
        assert f == pytest.approx(share / sum(mix[s] for s in mix if canon[s] in v.components))
    for s, f in mix.items():
        if f >= 0.02:
            assert canon[s] in v.components  # a component at >0 in the ratio is not called absent


def test_old_dicts_still_load(demo_results):
    _, b = demo_results
    d = b.to_dict()
    old = {k: v for k, v in d.items() if k not in ("schema_version", "hypotheses", "observed",
                                                     "ranking_cautions", "analysis_cautions")}
    for c in old["candidates"]:
        c.pop("p_present")
    for k in ("kind", "components", "fractions", "p_hypothesis"):
        old["verdict"].pop(k)
    r = Result.from_dict(old)
    assert r.best.smiles == b.best.smiles and r.verdict.kind == "undecided" and r.hypotheses == ()


def test_newer_or_foreign_dicts_are_refused_clearly(demo_results):
    _, b = demo_results
    with pytest.raises(SpecmatchError, match="newer specmatch"):
        Result.from_dict({**b.to_dict(), "schema_version": RESULT_SCHEMA_VERSION + 1})
    with pytest.raises(SpecmatchError, match="not a saved identification"):
        Result.from_dict({"hello": 1})


# ------------------------------------------------------------ rank --batch
def test_rank_task_row_lists_hypotheses():
    row = rank_task({"id": "m", "candidates": ["CCCCO", "OC(C)CC"], "c13": c13_lines("CCCCO", "CCC(C)O")})
    hs = row["hypotheses"]
    assert sum(h["probability"] for h in hs) == pytest.approx(1.0)
    assert set(hs[0]["components"]) == {"CCCCO", "OC(C)CC"}  # spelt as the task gave them
    assert all(set(h) == {"components", "fractions", "probability"} for h in hs)
    assert all(0.0 <= c["p_present"] <= 1.0 for c in row["ranking"])


def test_rank_task_with_dept135_lines():
    lines = c13_lines("CCC(C)O")
    dept = [{"shift": s, "sign": -1 if 30 < s < 33 else 1} for s in lines]  # butan-2-ol: its one CH2 is at 32.0
    row = rank_task({"id": "d", "candidates": ["CCCCO", "CCC(C)O"], "c13": lines, "dept135": dept})
    assert row["ranking"][0]["smiles"] == "CCC(C)O"
    with pytest.raises(SpecmatchError, match="dept135"):
        rank_task({"id": "d", "candidates": ["CCCCO"], "c13": lines, "dept135": [{"shift": 1.0, "sign": "x"}]})


# --------------------------------------------------------- candidate files
def test_alkyne_smiles_in_a_candidate_file_survives(tmp_path):
    f = tmp_path / "c.smi"
    f.write_text("# my list\nC#Cc1ccc2ccccc2c1 2-ethynylnaphthalene # a comment\n"
                 "CC#N\tacetonitrile\n\n   # indented comment\nCC(C)(C)O\n", encoding="utf-8")
    got = read_candidates(f)
    assert [c.smiles for c in got] == ["C#Cc1ccc2ccccc2c1", "CC#N", "CC(C)(C)O"]
    assert [c.name for c in got] == ["2-ethynylnaphthalene", "acetonitrile", "CC(C)(C)O"]
    assert [c.line for c in got] == [2, 3, 6]


def test_candidate_file_saved_as_utf16_reads(tmp_path):
    # editors on Windows save "Unicode" text as UTF-16 with a byte-order mark
    f = tmp_path / "c16.smi"
    f.write_bytes("CCO ethanol\nC#Cc1ccc2ccccc2c1 # alkyne\n".encode("utf-16"))
    assert [c.smiles for c in read_candidates(f)] == ["CCO", "C#Cc1ccc2ccccc2c1"]


def test_candidate_file_problems_are_specmatch_errors(tmp_path):
    with pytest.raises(SpecmatchError, match="not found"):
        read_candidates(tmp_path / "missing.smi")
    with pytest.raises(SpecmatchError, match="folder"):
        read_candidates(tmp_path)
    (tmp_path / "b.smi").write_bytes(b"CCO \xe9thanol\n")  # Latin-1: refused, never guessed
    with pytest.raises(SpecmatchError, match="UTF-8"):
        read_candidates(tmp_path / "b.smi")
    with pytest.raises(SpecmatchError, match="no structures"):
        parse_candidates("# only a comment\n\n")


def test_identify_with_a_candidate_list_and_no_reaction(tmp_path):
    # analytical staff scoring their own list; 13C of 2-bromobutane (nmrshiftdb2 10007822)
    cands = tmp_path / "mine.smi"
    cands.write_text("CCCCBr 1-bromobutane\nCCC(C)Br 2-bromobutane\n", encoding="utf-8")
    c13 = tmp_path / "c13.csv"
    c13.write_text("shift_ppm,intensity\n" + "".join(f"{s},1\n" for s in c13_lines("CCC(C)Br")), encoding="utf-8")
    p = subprocess.run([sys.executable, "-m", "specmatch", "identify", "--candidates", str(cands),
                        "--c13", str(c13), "--json"], capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    d = json.loads(p.stdout)
    assert d["verdict"]["kind"] == "pure" and d["verdict"]["components"] == ["CCC(C)Br"]
    assert d["hypotheses"][0]["components"] == ["CCC(C)Br"]
    p = subprocess.run([sys.executable, "-m", "specmatch", "identify", "--c13", str(c13)],
                       capture_output=True, text=True, timeout=300)
    assert p.returncode == 2 and "--candidates" in p.stderr and "Traceback" not in p.stderr


# ------------------------------------------------------- model comparison
def test_occam_factor_of_the_fraction_is_the_prior_width_ratio():
    # MacKay, Information Theory, Inference, and Learning Algorithms (CUP 2003), ch. 28:
    # evidence = best-fit likelihood x Occam factor, the Occam factor being the share of
    # the prior range of the parameter that the data allow. With a uniform prior on G
    # grid fractions and a likelihood that only one grid point supports, the mixture's
    # log evidence must be that point's log-likelihood minus log G.
    import math

    import numpy as np

    from specmatch.identification.hypotheses import PAIR_RATIOS, _logmeanexp

    g = len(PAIR_RATIOS)
    ll = np.full(g, -1e6)
    ll[3] = -12.5
    assert _logmeanexp(ll) == pytest.approx(-12.5 - math.log(g))
    # a likelihood the fraction does not change costs nothing
    assert _logmeanexp(np.full(g, -7.0)) == pytest.approx(-7.0)


def test_integrals_that_fix_the_fraction_pay_an_occam_factor():
    # 1-chloropropane + 2-chloropropane at 3:1 by integrals (1H shifts from memory,
    # handbook values: CH2Cl 3.52 t, CH2 1.81, CH3 1.04 t; CHCl 4.16 sept, CH3 1.52 d).
    # The mixture hypothesis must win, and its fractions must be the 3:1 grid point.
    a = [{"shift": 3.52, "integral": 2 * 0.75}, {"shift": 1.81, "integral": 2 * 0.75},
         {"shift": 1.04, "integral": 3 * 0.75}, {"shift": 4.16, "integral": 1 * 0.25},
         {"shift": 1.52, "integral": 6 * 0.25}]
    r = rank(["CCCCl", "CC(C)Cl"], h1=a)
    top = r.hypotheses[0]
    assert set(top.components) == {"CCCCl", "CC(C)Cl"} and top.quantified
    assert top.components[0] == "CCCCl" and top.fractions[0] == pytest.approx(0.75)
    assert r.verdict.kind == "mixture" and "about 75%" in r.verdict.text


def test_ratio_and_verdict_never_contradict():
    # the 1H ratio is the measurement: a second component it finds is named, one it
    # does not find is not claimed
    from dataclasses import replace as dc_replace

    from specmatch.identification.mixture import MixtureEstimate
    from specmatch.identification.pipeline import reconcile

    r = rank(["CCCCBr", "CCC(C)Br"], c13=c13_lines("CCC(C)Br"))
    assert r.verdict.kind == "pure"

    def est(f_sec, lo):
        return MixtureEstimate(candidates=("CCC(C)Br", "CCCCBr"), names=("2-bromobutane", "1-bromobutane"),
                               fractions=(f_sec, 1 - f_sec), uncertainties=(0.02, 0.02),
                               interval_95=((f_sec - 0.04, f_sec + 0.04), (lo, 1 - f_sec + 0.04)),
                               ratio_text=f"{round(100 * f_sec)}:{100 - round(100 * f_sec)}",
                               selectivity="moderately regioselective", major=0, method="test",
                               uncertainty_method="test")

    mixed = reconcile(r, est(0.7, 0.26)).verdict
    assert mixed.kind == "mixture" and mixed.components == ("CCC(C)Br", "CCCCBr")
    assert mixed.fractions == pytest.approx((0.7, 0.3))
    assert "mixture of" in mixed.text and "about 70%" in mixed.text
    # the minor's interval reaches 0: not claimed, not denied
    unsure = reconcile(r, est(0.97, 0.0)).verdict
    assert unsure.kind == "undecided" and "CCCCBr" in unsure.components
    # a ratio with only one component present leaves a pure verdict alone
    alone = reconcile(r, est(0.995, 0.0)).verdict
    assert alone == r.verdict
    # ... and turns a mixture verdict into "undecided"
    as_mix = dc_replace(r, verdict=dc_replace(r.verdict, kind="mixture", components=("CCC(C)Br", "CCCCBr"),
                                              fractions=(0.5, 0.5)))
    assert reconcile(as_mix, est(0.995, 0.0)).verdict.kind == "undecided"


def test_candidate_file_naming_a_device_is_refused_quickly():
    # a character device reports size 0; it must be refused, not read without end
    with pytest.raises(SpecmatchError, match="device"):
        read_candidates("/dev/zero")
