"""identify(): the whole job, the Result object, the HTML report and the exports.

Observed shifts: nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582)
records copied to tests/data/nmrshiftdb2_identification_subset.json:
10008912 (2-methylbutan-2-ol) and 10007822 (2-bromobutane).
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

import specmatch
from specmatch.errors import SpecmatchError
from specmatch.identification import identify
from specmatch.identification.pipeline import merge_dept
from specmatch.reports.exports import ASSIGNMENT_COLUMNS, assignments_csv
from specmatch.reports.html import write_report
from specmatch.reports.result_text import result_text

DATA = json.loads((Path(__file__).parent / "data" / "nmrshiftdb2_identification_subset.json").read_text("utf-8"))
REC = {r["smiles"]: r for r in DATA["records"]}


def lines(smiles):
    out = []
    for s, _ in sorted(REC[smiles]["c13"]):
        if not out or abs(s - out[-1]) > 0.05:
            out.append(s)
    return out


def write_c13_csv(path: Path, shifts) -> Path:
    path.write_text("# test peak list (nmrshiftdb2 values)\nshift_ppm,intensity\n"
                    + "".join(f"{s},{1.0}\n" for s in shifts), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def hydration(tmp_path_factory):
    # 3-methylbut-1-ene + aqueous acid; the sample's 13C is 2-methylbutan-2-ol (10008912),
    # the product after a 1,2-hydride shift
    d = tmp_path_factory.mktemp("hyd")
    f = write_c13_csv(d / "c13.csv", lines("CCC(C)(C)O"))
    return identify(substrate="C=CC(C)C", reagent="H2O/H2SO4", c13=str(f), solvent="CDCl3",
                    candidates=["CC(C)(C)CO"]), f


def test_identify_names_the_rearranged_alcohol(hydration):
    res, _ = hydration
    assert res.best.canonical_smiles == "CCC(C)(C)O"
    assert res.verdict.word in ("decisive", "likely")
    assert res.verdict.basis == "spectra and mechanism prior"
    smiles = [c.canonical_smiles for c in res.candidates]
    assert "CC(C)C(C)O" in smiles  # the Markovnikov product without shift was scored too
    assert "CC(C)(C)CO" in smiles  # the user's own candidate was added
    user = next(c for c in res.candidates if c.smiles == "CC(C)(C)CO")
    assert user.label == "your candidate"
    assert all(c.probability_with_prior is not None for c in res.candidates)


def test_result_holds_inputs_versions_safety_and_caution(hydration):
    res, f = hydration
    assert res.inputs["files"]["c13"]["sha256"] == hashlib.sha256(f.read_bytes()).hexdigest()
    assert res.versions["error_model"] and res.versions["prediction_tables"]
    assert res.safety_notes  # aqueous sulfuric acid is corrosive: the catalogue says so
    assert "advisory" in res.caution.lower()
    assert res.mixture is None  # the hook stays empty unless mixture=True
    d = res.to_dict()
    json.dumps(d)
    assert d["verdict"]["basis"] == res.verdict.basis
    assert {"probability_spectra", "probability_with_prior"} <= set(d["candidates"][0])


def test_frame_and_text(hydration):
    res, _ = hydration
    df = res.to_frame()
    assert df.iloc[0]["smiles"] == res.best.smiles
    assert df["probability"].sum() == pytest.approx(1.0)
    text = result_text(res)
    assert res.verdict.text in text and "SHA-256" in text and "advisory" in text.lower()


def test_html_report_is_self_contained(hydration, tmp_path):
    res, f = hydration
    out = tmp_path / "report.html"
    write_report(res, str(out))
    html = out.read_text("utf-8")
    assert html.startswith("<!DOCTYPE html>")
    assert html.count("<svg") >= len(res.candidates) + 1  # structures plus at least one overlay
    assert hashlib.sha256(f.read_bytes()).hexdigest() in html
    assert not re.search(r"<script[^>]+src=|<link[^>]+href=\s*[\"']?https?:", html)
    assert "cdn" not in html.lower()
    for note in res.safety_notes:
        assert note.split()[0] in html
    assert res.versions["error_model"] in html
    frag = res._repr_html_()
    assert "<html" not in frag and "Verdict" in frag


def test_assignment_csv(hydration):
    res, _ = hydration
    text = assignments_csv(res)
    rows = list(csv.DictReader(io.StringIO(text)))
    assert tuple(rows[0].keys()) == ASSIGNMENT_COLUMNS
    assert len(rows) == sum(len(c.c13_table) + len(c.h1_table) for c in res.candidates)
    assert {r["smiles"] for r in rows} == {c.smiles for c in res.candidates}


def test_identify_from_candidates_only_and_top_level_api():
    res = specmatch.identify(candidates=["CCCCBr", "CCC(C)Br"], c13=lines("CCC(C)Br"))
    assert res.best.smiles == "CCC(C)Br"
    assert res.verdict.basis == "spectra only"
    assert res.enumeration is None


def test_identify_bad_inputs_are_specmatch_errors(tmp_path):
    with pytest.raises(SpecmatchError, match="no such file"):
        identify(candidates=["CCCCBr"], c13=str(tmp_path / "missing.jdx"))
    with pytest.raises(SpecmatchError, match="both"):
        identify(substrate="C=CC", candidates=["CCCBr"], c13=[30.0])
    with pytest.raises(SpecmatchError, match="no candidates"):
        identify(c13=[30.0])


def test_merge_dept_reads_phases_and_quaternary_carbons():
    c13 = [{"shift": 71.0}, {"shift": 36.5}, {"shift": 28.7}, {"shift": 8.8}]
    dept = [{"shift": 36.52, "sign": -1}, {"shift": 28.7, "sign": 1}, {"shift": 8.79, "sign": 1}]
    m = merge_dept(c13, dept)
    assert m[0]["hydrogens"] == 0  # no DEPT line: quaternary
    assert m[1]["hydrogens"] == 2  # negative: CH2
    assert m[2]["sign"] == 1 and m[2]["hydrogens"] is None  # CH or CH3


def test_identify_mixture_hook_calls_the_mixture_module():
    pytest.importorskip("specmatch.identification.mixture", reason="the mixture module is not installed")
    # 2-bromobutane 1H, nmrshiftdb2 10007822, grouped by shift
    h1 = [{"shift": 4.10, "integral": 1}, {"shift": 1.85, "integral": 2}, {"shift": 1.72, "integral": 3},
          {"shift": 1.04, "integral": 3}]
    res = identify(candidates=["CCCCBr", "CCC(C)Br"], h1=h1, mixture=True)
    assert res.mixture is not None
    assert hasattr(res.mixture, "fractions")
    assert "mixture" in json.dumps(res.to_dict())


def test_cli_identify_end_to_end(tmp_path):
    f = write_c13_csv(tmp_path / "c13.csv", lines("CCC(C)(C)O"))
    rep = tmp_path / "r.html"
    p = subprocess.run([sys.executable, "-m", "specmatch", "identify", "--substrate", "C=CC(C)C",
                        "--reagent", "H2O/H2SO4", "--c13", str(f), "--report", str(rep), "--json"],
                       capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    d = json.loads(p.stdout)
    assert d["candidates"][0]["canonical_smiles"] == "CCC(C)(C)O"
    assert rep.exists() and "<svg" in rep.read_text("utf-8")


def test_a_model_fitted_on_other_tables_is_flagged():
    from dataclasses import replace

    from specmatch.identification.errormodel import load_error_model, tables_digest

    stale = replace(load_error_model(), tables_sha256="0" * 64)
    res = identify(candidates=["CCCCBr", "CCC(C)Br"], c13=lines("CCC(C)Br"), model=stale)
    assert any("other prediction tables" in c for c in res.cautions)
    fresh = replace(load_error_model(), tables_sha256=tables_digest())
    res = identify(candidates=["CCCCBr", "CCC(C)Br"], c13=lines("CCC(C)Br"), model=fresh)
    assert not any("other prediction tables" in c for c in res.cautions)
