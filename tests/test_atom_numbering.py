"""One atom-numbering convention in every user-facing output.

Users read atom numbers from 1, counting the heavy atoms of the SMILES as written
(NMReDATA is 1-based by its specification; the enumeration's C1, C2, ... count the
substrate as typed). The objects keep RDKit's 0-based indices. Checked here: the
predict text and JSON, the Result dict (schema 3, with the migration of schema-2
dicts), the assignment rows and CSV, and that all of them name the same atoms.

Observed shifts: 2-bromobutane, nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem.
2015, 53, 582), record copied to tests/data/nmrshiftdb2_identification_subset.json.
"""

from __future__ import annotations

import csv
import io
import json
from pathlib import Path

import pytest

from specmatch.cli import main
from specmatch.identification import identify
from specmatch.identification.result import RESULT_SCHEMA_VERSION, Result
from specmatch.prediction import predict
from specmatch.reports.exports import assignments_csv

DATA = json.loads((Path(__file__).parent / "data" / "nmrshiftdb2_identification_subset.json").read_text("utf-8"))
BROMOBUTANE_C13 = sorted(s for s, _ in {r["smiles"]: r for r in DATA["records"]}["CCC(C)Br"]["c13"])

# Br written first: heavy atom 1 is the bromine, so no carbon may be numbered 1, and
# the carbon bearing Br (RDKit index 1) is atom 2
SMILES = "BrC(C)CC"


def test_predict_json_numbers_atoms_from_one(capsys):
    assert main(["predict", SMILES, "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    carbons = sorted(a for c in d["carbons"] for a in c["atoms"])
    assert carbons == [2, 3, 4, 5]  # the four carbons; 1 is the bromine
    ch_br = [c for c in d["carbons"] if c["atoms"] == [2]]
    assert ch_br and ch_br[0]["hydrogens"] == 1 and ch_br[0]["shift"] > 45  # CHBr, alpha-Br
    assert 1 not in {a for p in d["protons"] for a in p["atoms"]}
    # the object keeps RDKit's index of the same carbon
    assert any(c.atoms == (1,) and c.hydrogens == 1 for c in predict(SMILES).carbons)


def test_predict_text_numbers_atoms_from_one(capsys):
    assert main(["predict", SMILES]) == 0
    out = capsys.readouterr().out
    rows = out.split("13C (predicted)", 1)[1].split("1H (predicted)", 1)[0].splitlines()[2:]
    numbers = {int(x) for row in rows if row.strip() for x in row.split()[0].split(",")}
    assert numbers == {2, 3, 4, 5}


@pytest.fixture(scope="module")
def result() -> Result:
    return identify(candidates=[SMILES, "BrCCCC"], c13=BROMOBUTANE_C13)


def test_result_dict_and_csv_number_atoms_from_one(result):
    d = result.to_dict()
    assert d["schema_version"] == RESULT_SCHEMA_VERSION >= 3
    top = d["candidates"][0]
    assert top["smiles"] == SMILES
    dict_atoms = sorted(a for row in top["c13_table"] for a in row["atoms"])
    obj_atoms = sorted(a for row in result.best.c13_table for a in row.atoms)
    assert dict_atoms == [a + 1 for a in obj_atoms] == [2, 3, 4, 5]
    rows = list(csv.DictReader(io.StringIO(assignments_csv(result))))
    csv_atoms = sorted(int(a) for r in rows if r["smiles"] == SMILES and r["nucleus"] == "13C"
                       for a in r["atoms"].split())
    assert csv_atoms == dict_atoms
    assert Result.from_dict(d) == result


def test_schema_2_dicts_with_zero_based_atoms_still_load(result):
    d = result.to_dict()
    old = {**d, "schema_version": 2,
           "candidates": [{**c, **{k: [{**row, "atoms": [a - 1 for a in row["atoms"]]} for row in c[k]]
                                  for k in ("c13_table", "h1_table")}} for c in d["candidates"]]}
    assert Result.from_dict(old) == result
