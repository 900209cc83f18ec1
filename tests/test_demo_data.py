"""The invented demo scenario in sample_spectra/: labelled as invented, reproducible,
built from the documented values, and carrying the documented product ratios."""

from __future__ import annotations

import csv
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from specmatch.demo import LAB_NAME, demo_case, demo_cases, sample_dir
from specmatch.errors import SpecmatchError

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "sample_spectra"
DATA = Path(__file__).parent / "data"


def _table() -> list[dict]:
    with open(SAMPLES / "shift_values.csv", encoding="utf-8") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def _csv_rows(path: Path) -> list[dict]:
    with open(path, encoding="utf-8") as fh:
        return list(csv.DictReader(ln for ln in fh if not ln.startswith("#")))


def test_cases_point_at_existing_files():
    cases = demo_cases()
    assert [c.key for c in cases] == ["a", "b", "c"]
    assert sample_dir() == SAMPLES
    for c in cases:
        for path in (c.c13, c.h1, c.dept135, c.c13_csv, c.h1_csv):
            assert path.is_file(), path
        assert abs(sum(c.truth.values()) - 1.0) < 1e-9
        assert c.rearranged in c.truth and c.truth[c.rearranged] == max(c.truth.values())
    assert demo_case("a").ratio_text() == "70:30"
    assert demo_case("b").ratio_text() == "80:20"
    assert demo_case("c").ratio_text() == "65:35"
    assert demo_case("c").frequency_mhz == pytest.approx(60.0)
    with pytest.raises(SpecmatchError, match="no demo case"):
        demo_case("z")


def test_every_file_says_it_is_invented():
    for c in demo_cases():
        for path in (c.c13, c.h1, c.dept135):
            head = path.read_text(encoding="ascii").splitlines()[:8]
            assert head[0].startswith("##TITLE= INVENTED DEMO DATA")
            assert "(fictional)" in head[0]
            assert any(ln.startswith("$$") and "Invented demo scenario" in ln for ln in head)
        for path in (c.c13_csv, c.h1_csv):
            first = path.read_text(encoding="utf-8").splitlines()[0]
            assert first.startswith("# INVENTED DEMO DATA") and LAB_NAME in first
    readme = (SAMPLES / "README.md").read_text(encoding="utf-8")
    assert "invented" in readme.lower()
    assert "Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582" in readme


def test_every_value_has_a_source():
    rows = _table()
    assert rows
    for r in rows:
        src = r["source"]
        assert src.startswith("nmrshiftdb2 ") or src.startswith("estimated"), r
        if src.startswith("estimated"):
            assert "not a measurement" in src


def test_experimental_rows_match_the_nmrshiftdb2_record():
    # the record is copied in tests/data (nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582)
    blob = json.loads((DATA / "demo_nmrshiftdb2_records.json").read_text(encoding="utf-8"))
    rec = {r["nmrshiftdb2_id"]: r for r in blob["records"]}[20208384]
    c13 = {round(s, 2) for spectrum in rec["c13"] for s, _, _ in spectrum}
    h1 = {round(s, 3) for spectrum in rec["h1"] for s, _ in spectrum}
    used = [r for r in _table() if r["source"].startswith("nmrshiftdb2 20208384")]
    assert len(used) >= 10
    for r in used:
        shift = float(r["shift_ppm"])
        pool = c13 if r["nucleus"] == "13C" else h1
        assert any(abs(shift - s) < 1e-6 for s in pool), r


def test_regeneration_is_byte_identical(tmp_path):
    proc = subprocess.run([sys.executable, str(SAMPLES / "make_demo.py"), "--out", str(tmp_path)],
                          capture_output=True, text=True, timeout=900)  # slow on a busy machine
    assert proc.returncode == 0, proc.stderr
    made = sorted(p.name for p in tmp_path.iterdir())
    assert len(made) == 16  # 3 cases x (3 JCAMP-DX + 2 CSV) + manifest
    for name in made:
        assert (tmp_path / name).read_bytes() == (SAMPLES / name).read_bytes(), name


def test_manifest_columns_and_files():
    with open(SAMPLES / "manifest.csv", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        assert reader.fieldnames == ["sample_id", "substrate", "reagent", "c13", "h1", "dept135",
                                     "solvent", "alcohol", "candidates"]
        rows = list(reader)
    assert {r["sample_id"] for r in rows} >= {"LFP-0419-A", "LFP-0422-B", "LFP-0503-C"}
    for r in rows:
        for col in ("c13", "h1", "dept135"):
            if r[col]:
                assert (SAMPLES / r[col]).is_file()


def _peak_index(spectrum, ppm: float) -> int:
    return int(np.argmin(np.abs(spectrum.ppm - ppm)))


def test_jcamp_files_read_back_with_the_documented_lines():
    from specmatch.spectra import read_jcampdx

    rows = _table()
    for c in demo_cases():
        c13 = read_jcampdx(c.c13.read_bytes(), source=c.c13.name)
        dept = read_jcampdx(c.dept135.read_bytes(), source=c.dept135.name)
        h1 = read_jcampdx(c.h1.read_bytes(), source=c.h1.name)
        assert (c13.nucleus, h1.nucleus, dept.nucleus) == ("13C", "1H", "13C")
        assert dept.experiment == "DEPT-135"
        assert h1.frequency_mhz == pytest.approx(c.frequency_mhz)
        assert c13.solvent == "CDCl3"
        noise = float(np.std(c13.intensity[(c13.ppm > 180) & (c13.ppm < 210)]))
        major = c.rearranged
        for r in rows:
            if r["smiles"] != major or r["nucleus"] != "13C":
                continue
            shift = float(r["shift_ppm"])
            i = _peak_index(c13, shift)
            assert c13.intensity[i - 3:i + 4].max() > 8 * noise, (c.key, r["label"])
            # DEPT-135: CH2 down, CH/CH3 up, quaternary absent
            j = _peak_index(dept, shift)
            window = dept.intensity[j - 3:j + 4]
            h = int(r["hydrogens"])
            if h == 2:
                assert window.min() < -8 * noise
            elif h in (1, 3):
                assert window.max() > 8 * noise
            else:
                assert np.abs(window).max() < 5 * noise
        # residual solvent: CDCl3 triplet in 13C, CHCl3 and TMS in 1H
        for ppm in (77.16 + 32.0 / c13.frequency_mhz, 77.16, 77.16 - 32.0 / c13.frequency_mhz):
            assert c13.intensity[_peak_index(c13, ppm)] > 50 * noise
        assert abs(dept.intensity[_peak_index(dept, 77.16)]) < 5 * noise


def _area(spectrum, lo: float, hi: float) -> float:
    sel = (spectrum.ppm >= lo) & (spectrum.ppm <= hi)
    return float(np.abs(np.trapezoid(spectrum.intensity[sel], spectrum.ppm[sel])))


@pytest.mark.parametrize("key, minor_region, minor_h, major_region, major_h", [
    # (a) CH-OH of the secondary alcohol (1H) against the CH3 triplet of the tertiary (3H)
    ("a", (3.50, 3.60), 1, (0.86, 0.94), 3),
    # (b) CH-Br of the secondary bromide (1H) against the CH3 triplet of the tertiary (6H)
    ("b", (4.06, 4.18), 1, (0.995, 1.05), 6),
])
def test_1h_integrals_give_the_documented_ratio(key, minor_region, minor_h, major_region, major_h):
    from specmatch.spectra import read_jcampdx

    case = demo_case(key)
    h1 = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    minor = _area(h1, *minor_region) / minor_h
    major = _area(h1, *major_region) / major_h
    expected = case.truth[case.rearranged]
    assert major / (major + minor) == pytest.approx(expected, abs=0.02)
    # the CSV peak list says the same (integrals per proton)
    peaks = _csv_rows(case.h1_csv)
    def integral_near(ppm: float) -> float:
        return float(min(peaks, key=lambda p: abs(float(p["shift_ppm"]) - ppm))["integral"])
    minor_c = integral_near(sum(minor_region) / 2) / minor_h
    major_c = integral_near(sum(major_region) / 2) / major_h
    assert major_c / (major_c + minor_c) == pytest.approx(expected, abs=0.01)


def test_every_1h_row_is_one_predicted_group():
    # the generator simulates the predicted spin system: each non-exchangeable group
    # has exactly one row (make_demo.group_shifts raises otherwise)
    sys.path.insert(0, str(SAMPLES))
    try:
        import make_demo
    finally:
        sys.path.remove(str(SAMPLES))
    rows = make_demo.read_table()
    for smi in {r.smiles for r in rows if r.nucleus == "1H"}:
        pred, shifts, mapped = make_demo.group_shifts(smi, rows)
        assert len(mapped) == len(pred.protons)


def test_benchtop_case_is_second_order():
    # case (c) at 60 MHz: the ethyl CH3 triplet of 2-chloro-2-methylbutane (1.03 ppm, J 7.5 Hz,
    # 44 Hz from its CH2) leans towards the CH2 (roof effect, common practice), which a
    # first-order 1:2:1 triplet would not; the same shifts at 400 MHz are nearly binomial
    from specmatch.prediction import predict
    from specmatch.prediction.simulate import prediction_lines

    sys.path.insert(0, str(SAMPLES))
    try:
        import make_demo
    finally:
        sys.path.remove(str(SAMPLES))
    pred, shifts, _ = make_demo.group_shifts("CCC(C)(C)Cl", make_demo.read_table())
    ch3 = next(k for k, g in enumerate(pred.protons) if g.atoms == (0,))
    tilt = {}
    for f in (60.0, 400.0):
        lines = prediction_lines(pred, f, shifts=shifts)
        sel = (lines.owner() == ch3) & (lines.intensity > 0.05)
        hz, inten = lines.hz[sel], lines.intensity[sel]
        outer_hi = inten[hz > shifts[ch3] * f + 5].sum()
        outer_lo = inten[hz < shifts[ch3] * f - 5].sum()
        tilt[f] = outer_hi / outer_lo
    # the tilt grows with J/dnu (about 1 + 4 J/dnu for the outer lines, from the AB-type
    # mixing; common practice): ~0.7 at 60 MHz, ~0.1 at 400 MHz
    assert tilt[60.0] > 1.4
    assert 1.0 < tilt[400.0] < 1.2
    assert predict("CCC(C)(C)Cl").canonical_smiles in {predict(s).canonical_smiles for s in demo_case("c").truth}


def test_benchtop_integrals_give_the_documented_ratio():
    # (c): the CH-Cl signal of the secondary chloride (1H, 3.92 ppm) is the only resolved one;
    # both chlorides are C5H11Cl, so all product protons (11 per molecule) plus the water line
    # the generator adds (WATER_AREA per molecule of product) fall in 0.6-4.25 ppm
    from specmatch.spectra import read_jcampdx

    sys.path.insert(0, str(SAMPLES))
    try:
        import make_demo
    finally:
        sys.path.remove(str(SAMPLES))
    case = demo_case("c")
    h1 = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    minor = _area(h1, 3.6, 4.25)
    unit = (_area(h1, 0.6, 2.45) + minor) / (11 + make_demo.WATER_AREA)
    assert minor / unit == pytest.approx(case.truth["CC(Cl)C(C)C"], abs=0.03)
