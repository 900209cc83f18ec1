"""NMReDATA export: the SD file reads back with RDKit, with its tags and assignments.

Observed shifts: nmrshiftdb2 record 10007822 (2-bromobutane; Kuhn & Schlörer, Magn.
Reson. Chem. 2015, 53, 582), copied to tests/data/nmrshiftdb2_identification_subset.json.
The tag names and layout follow the NMReDATA description (Pupier et al., Magn. Reson.
Chem. 2018, 56, 703), as remembered (see specmatch/reports/nmredata.py).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from rdkit import Chem

from specmatch.errors import SpecmatchError
from specmatch.identification import identify
from specmatch.reports.nmredata import nmredata_sdf, write_nmredata

DATA = json.loads((Path(__file__).parent / "data" / "nmrshiftdb2_identification_subset.json").read_text("utf-8"))
REC = {r["smiles"]: r for r in DATA["records"]}
C13 = sorted({round(s, 1) for s, _ in REC["CCC(C)Br"]["c13"]}, reverse=True)  # 53.0, 34.3, 26.0, 12.1
# the record's 1H shifts grouped by value; counts are the protons per group
H1 = [{"shift": s, "integral": REC["CCC(C)Br"]["h1"].count(s)} for s in sorted(set(REC["CCC(C)Br"]["h1"]), reverse=True)]


@pytest.fixture(scope="module")
def result():
    return identify(candidates=["CCCCBr", "CCC(C)Br"], c13=C13, h1=H1, solvent="CDCl3")


def _read_back(tmp_path: Path, result, smiles=None):
    path = tmp_path / "out.nmredata.sdf"
    write_nmredata(result, str(path), smiles)
    mols = list(Chem.SDMolSupplier(str(path), removeHs=False))
    assert len(mols) == 1 and mols[0] is not None
    return mols[0]


def _rows(mol, tag):
    return [ln.rstrip("\\").strip() for ln in mol.GetProp(tag).splitlines() if ln.strip()]


def test_reads_back_with_rdkit_with_its_tags(result, tmp_path):
    assert result.best.smiles == "CCC(C)Br"
    mol = _read_back(tmp_path, result)
    for tag in ("NMREDATA_VERSION", "NMREDATA_LEVEL", "NMREDATA_SOLVENT", "NMREDATA_ASSIGNMENT",
                "NMREDATA_1D_13C", "NMREDATA_1D_1H"):
        assert mol.HasProp(tag), tag
    assert mol.GetProp("NMREDATA_VERSION").strip() == "1.1"
    assert mol.GetProp("NMREDATA_SOLVENT").strip() == "CDCl3"
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == Chem.CanonSmiles("CCC(C)Br")


def test_assignments_point_at_the_right_atoms(result, tmp_path):
    mol = _read_back(tmp_path, result)
    rows = [r.split(", ") for r in _rows(mol, "NMREDATA_ASSIGNMENT")]
    carbons = {float(r[1]): [int(a) for a in r[2:]] for r in rows if r[0].startswith("C")}
    assert sorted(carbons, reverse=True) == C13  # every measured 13C line, at its measured shift
    ch_br = mol.GetAtomWithIdx(carbons[53.0][0] - 1)  # molfile numbers are 1-based
    assert ch_br.GetSymbol() == "C" and any(n.GetSymbol() == "Br" for n in ch_br.GetNeighbors())
    protons = {float(r[1]): [int(a) for a in r[2:]] for r in rows if r[0].startswith("H")}
    assert all(mol.GetAtomWithIdx(h - 1).GetSymbol() == "H" for hs in protons.values() for h in hs)
    # 4.10 ppm is the CH-Br proton (one H, on the carbon that carries Br)
    (h,) = protons[4.1]
    assert mol.GetAtomWithIdx(h - 1).GetNeighbors()[0].GetIdx() == ch_br.GetIdx()
    assert sum(len(hs) for hs in protons.values()) == 9  # every H of C4H9Br assigned once
    spectrum = _rows(mol, "NMREDATA_1D_1H")
    assert any(r.startswith("4.100") and "N=1" in r for r in spectrum), spectrum


def test_another_candidate_and_errors(result, tmp_path):
    mol = _read_back(tmp_path, result, "CCCCBr")
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == "CCCCBr"
    with pytest.raises(SpecmatchError, match="not one of the ranked candidates"):
        nmredata_sdf(result, "CCO")


def test_identify_writes_nmredata_from_the_command_line(tmp_path):
    import subprocess
    import sys

    c13 = tmp_path / "c13.csv"
    c13.write_text("# nmrshiftdb2 10007822 (2-bromobutane)\nshift_ppm,intensity\n"
                   + "".join(f"{s},1.0\n" for s in C13), encoding="utf-8")
    cands = tmp_path / "cands.smi"
    cands.write_text("CCCCBr\nCCC(C)Br\n", encoding="utf-8")
    out = tmp_path / "top.sdf"
    p = subprocess.run([sys.executable, "-m", "specmatch", "identify", "--candidates", str(cands),
                        "--c13", str(c13), "--nmredata", str(out)], capture_output=True, text=True, timeout=300)
    assert p.returncode == 0, p.stderr
    mol = next(iter(Chem.SDMolSupplier(str(out), removeHs=False)))
    assert Chem.MolToSmiles(Chem.RemoveHs(mol)) == Chem.CanonSmiles("CCC(C)Br")
    assert mol.HasProp("NMREDATA_ASSIGNMENT") and mol.HasProp("NMREDATA_1D_13C")
