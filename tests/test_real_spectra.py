"""Real exported spectra: every file of the corpus in tests/data/spectra/real/ reads (or is refused
for the stated reason) as a careful reader of the JCAMP-DX specifications would.

Source of every file: the test data of jcampconverter (github.com/cheminfo/jcampconverter, commit
5722326, MIT licence; see tests/data/spectra/real/README.md). The expected header facts (nucleus,
frequency, solvent, pulse program, point counts) are what each file's own records say. Where a test
states a compound's shifts, couplings or proton counts, the source is named beside it.
"""

from __future__ import annotations

import json
from functools import lru_cache
from pathlib import Path

import numpy as np
import pytest

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.spectra import hydrogen_count, peaks_from_file, read_spectrum, scale_integrals

REAL = Path(__file__).parent / "data" / "spectra" / "real"

# file -> (nucleus, experiment, solvent, observe frequency MHz, points) as the file records them
EXPECTED = {
    "chloroethanol_1h_cdcl3_affn.dx": ("1H", "1D", "CDCl3", 400.1321, 16384),
    "chloroethanol_1h_cdcl3_difdup.dx": ("1H", "1D", "CDCl3", 400.1321, 16384),
    "chloroethanol_1h_cdcl3_pac.dx": ("1H", "1D", "CDCl3", 400.1321, 16384),
    "chloroethanol_1h_cdcl3_sqz.dx": ("1H", "1D", "CDCl3", 400.1321, 16384),
    "chloroethanol_1h_cdcl3_difdup_reexport.jdx": ("1H", "1D", "CDCl3", 400.1321, 16384),
    "vendor_j_1h_xindex_offset.dx": ("1H", "1D", "DMSO", 399.7845, 16384),
    "vendor_v_1h_cdcl3_npoints_plus_one.jdx": ("1H", "1D", "CDCL3", 299.9329, 16384),
    "dept135_13c_dmso_ntuples.dx": ("13C", "DEPT-135", "DMSO", 100.6238, 32768),
    "sample_lq_13c_meod.jdx": ("13C", "DEPTQ-135", "MeOD", 150.9287, 65536),
    "sample_lq_1h_meod.jdx": ("1H", "1D", "MeOD", 600.1742, 65536),
    "sample_m72_1h_dmso.jdx": ("1H", "1D", "DMSO", 600.1328, 65536),
    "sample_mf78_1h_solventcode.jdx": ("1H", "1D", "CDCl3", 400.2150, 65536),
    "short_1024pt_1h.jdx": ("1H", "1D", "CDCl3", 399.9529, 1024),
    "short_256pt_1h.jdx": ("1H", "1D", None, 399.9529, 256),
    "link_blocks_1h_dmso.dx": ("1H", "1D", "DMSO", 500.2330, 65536),
    "params_block_1h.jdx": ("1H", "1D", None, 600.5899, 131072),
}
REFUSED = {
    "not_nmr_2d_ntuples.jdx": "DATA TYPE= nD', not an NMR spectrum",
    "not_nmr_reim_ntuples.jdx": "DATA TYPE= RE IM', not an NMR spectrum",
}


@lru_cache(maxsize=None)
def spectrum(name: str):
    return read_spectrum(REAL / name)


@lru_cache(maxsize=None)
def peaks(name: str):
    return peaks_from_file(REAL / name)


def test_every_corpus_file_has_an_expected_outcome():
    files = {p.name for p in REAL.iterdir() if p.suffix in (".dx", ".jdx")}
    assert files == set(EXPECTED) | set(REFUSED)


@pytest.mark.parametrize("name", sorted(EXPECTED))
def test_corpus_file_reads_with_the_recorded_header(name):
    nucleus, experiment, solvent, freq, points = EXPECTED[name]
    sp = spectrum(name)
    assert sp.nucleus == nucleus
    assert sp.experiment == experiment
    assert sp.solvent == solvent
    assert sp.frequency_mhz == pytest.approx(freq, abs=1e-3)
    assert len(sp.ppm) == points
    assert np.all(np.diff(sp.ppm) < 0) and np.all(np.isfinite(sp.intensity))
    pl = peaks(name)
    assert pl.nucleus == nucleus and len(pl.compound_peaks()) > 0


@pytest.mark.parametrize("name", sorted(REFUSED))
def test_non_nmr_examples_are_refused_clearly(name):
    with pytest.raises(SpecmatchError, match=REFUSED[name]):
        read_spectrum(REAL / name)


def test_the_four_ordinate_forms_decode_to_the_same_points():
    ref = spectrum("chloroethanol_1h_cdcl3_affn.dx")
    for name in ("chloroethanol_1h_cdcl3_difdup.dx", "chloroethanol_1h_cdcl3_pac.dx",
                 "chloroethanol_1h_cdcl3_sqz.dx"):
        sp = spectrum(name)
        assert np.array_equal(sp.intensity, ref.intensity)
        assert np.allclose(sp.ppm, ref.ppm, atol=1e-9)


def test_reexport_by_another_program_gives_the_same_axis():
    a, b = spectrum("chloroethanol_1h_cdcl3_affn.dx"), spectrum("chloroethanol_1h_cdcl3_difdup_reexport.jdx")
    # the re-export keeps the points; its program moved the axis by under a thousandth of a ppm
    assert np.allclose(a.ppm, b.ppm, atol=1e-3)
    assert np.corrcoef(a.intensity, b.intensity)[0, 1] > 0.9999


def test_index_x_with_an_offset_origin_is_a_warning_not_a_refusal():
    w = " ".join(spectrum("vendor_j_1h_xindex_offset.dx").meta["warnings"])
    assert "offset from ##FIRSTX=" in w
    assert "DELTAX" in w  # its DELTAX has the wrong sign: noted, FIRSTX/LASTX win
    sp = spectrum("vendor_j_1h_xindex_offset.dx")
    assert sp.ppm[0] == pytest.approx(6037.9072694778 / 399.784493896, abs=1e-6)


def test_npoints_one_more_than_the_data_is_a_warning():
    sp = spectrum("vendor_v_1h_cdcl3_npoints_plus_one.jdx")
    w = " ".join(sp.meta["warnings"])
    assert "NPOINTS= says 16,385 but the data hold 16,384" in w
    # the axis runs from FIRSTX to LASTX over the points the data hold (DELTAX agrees)
    assert sp.ppm[0] == pytest.approx(16.089531599) and sp.ppm[-1] == pytest.approx(-0.746542441)
    assert sp.ppm[0] - sp.ppm[1] == pytest.approx(0.001027655, rel=1e-4)


def test_solvent_code_explained_by_the_embedded_parameters():
    sp = spectrum("sample_mf78_1h_solventcode.jdx")
    assert sp.solvent == "CDCl3"
    assert any("code '5'" in w and "CDCl3" in w for w in sp.meta["warnings"])
    # the short export says '5' too and embeds its original header as BASE64 naming CDCl3
    assert spectrum("short_1024pt_1h.jdx").solvent == "CDCl3"


def test_unexplained_solvent_code_is_a_warning_with_the_raw_text():
    sp = spectrum("short_256pt_1h.jdx")
    assert sp.solvent is None
    assert any("code '5'" in w and "does not explain" in w for w in sp.meta["warnings"])
    assert any("code '5'" in w for w in peaks("short_256pt_1h.jdx").warnings)


def test_solvent_from_a_comment_and_a_vendor_label():
    # '$$solvent=CDCL3' (comment) and '##$SLVNT= DMSO' (parameter) are read and flag solvent lines
    assert peaks("vendor_v_1h_cdcl3_npoints_plus_one.jdx").solvent == "CDCl3"
    assert peaks("vendor_j_1h_xindex_offset.dx").solvent == "DMSO-d6"


def test_real_dept135_from_its_pulse_program_with_negative_ch2():
    pl = peaks("dept135_13c_dmso_ntuples.dx")
    assert pl.experiment == "DEPT-135"
    down = [p for p in pl.compound_peaks() if p.sign == -1]
    assert len(down) == 1 and down[0].hydrogens == 2
    assert down[0].shift == pytest.approx(24.9, abs=0.2)
    assert all(p.sign == 1 for p in pl.compound_peaks() if p is not down[0])


def test_deptq_is_not_read_as_dept135():
    pl = peaks("sample_lq_13c_meod.jdx")
    assert pl.experiment == "DEPTQ-135"
    assert all(p.hydrogens is None and p.sign is None for p in pl.peaks)
    # CD3OD septet at 49.00 ppm (Fulmer et al., Organometallics 2010, 29, 2176) is flagged
    assert sum(1 for p in pl.peaks if p.flag == "solvent") >= 5


def test_link_file_reads_the_spectrum_block_not_the_fid():
    sp = spectrum("link_blocks_1h_dmso.dx")
    assert sp.meta["pulse_program"] == "zg30"
    assert sp.ppm[0] == pytest.approx(14.00914, abs=1e-4)


def test_chloroethanol_triplets_and_integrals():
    # 2-chloroethanol, ClCH2CH2OH, in CDCl3 (from memory): OCH2 ~3.85 and CH2Cl ~3.65, each an
    # apparent triplet with 3J(HH) about 5 Hz, OH a singlet between 2 and 3 ppm; 2H:2H:1H.
    for name in ("chloroethanol_1h_cdcl3_difdup.dx", "chloroethanol_1h_cdcl3_difdup_reexport.jdx"):
        pl = scale_integrals(peaks(name), formula="OCCCl")
        big = [m for m in pl.compound_multiplets() if m.integral > 0.5]
        assert [m.multiplicity for m in big] == ["t", "t", "s"]
        assert [round(m.integral) for m in big] == [2, 2, 1]
        for m, want in zip(big, (3.85, 3.65)):
            assert m.shift == pytest.approx(want, abs=0.05)
            assert m.j_hz[0] == pytest.approx(5.2, abs=0.5)
            assert m.integral == pytest.approx(2.0, abs=0.25)
        assert 2.0 < big[2].shift < 3.0


def test_chloroethanol_13c_satellites_are_flagged_not_listed():
    pl = peaks("chloroethanol_1h_cdcl3_difdup.dx")
    sats = [m for m in pl.multiplets if m.flag == "13C satellite"]
    assert sats, "the 13C satellites of the CH2 triplets are flagged"
    comp = [m.shift for m in pl.compound_multiplets() if m.multiplicity == "t"]
    for s in sats:
        # each lies half a 1J(CH) from a CH2 triplet: 1J(CH) 130-160 Hz for sp3 CH2-X
        # (Pretsch et al., Structure Determination of Organic Compounds; from memory)
        half_j = min(abs(s.shift - c) for c in comp) * pl.frequency_mhz
        assert 65 <= half_j <= 80
    assert not any(m.flag is None and 3.9 < m.shift < 4.1 and m.integral > 0.5 for m in pl.multiplets)


def test_lidocaine_hydrochloride_pattern():
    # sample_m72 is lidocaine (its title path names it) measured as the hydrochloride in DMSO-d6.
    # Expected pattern of lidocaine hydrochloride in DMSO-d6 (from memory): ~10.3 (NH+), ~9.8 (NH),
    # 7.1 (3H, ArH), 4.2 (s, 2H, COCH2N), 3.2 (4H, NCH2), 2.18 (s, 6H, ArCH3), 1.27 (t, 7 Hz, 6H).
    total = hydrogen_count("C14H23ClN2O")  # lidocaine hydrochloride
    assert total == 23
    pl = scale_integrals(peaks("sample_m72_1h_dmso.jdx"), total_h=total)
    big = [m for m in pl.compound_multiplets() if m.integral > 0.6]
    got = [(round(m.shift, 1), round(m.integral)) for m in big]
    assert got == [(10.3, 1), (9.8, 1), (7.1, 3), (4.2, 2), (3.2, 4), (2.2, 6), (1.3, 6)]
    methyl = big[-1]
    assert methyl.multiplicity == "t" and methyl.j_hz[0] == pytest.approx(7.2, abs=0.3)
    assert big[3].multiplicity == "s" and big[5].multiplicity == "s"
    # the TMS line and its satellites are not compound signals
    assert all(abs(m.shift) > 0.2 for m in pl.compound_multiplets())


def test_default_integrals_are_relative_not_smallest_equals_one():
    pl = peaks("sample_m72_1h_dmso.jdx")
    assert pl.integral_unit == "percent"
    assert sum(m.integral for m in pl.compound_multiplets()) == pytest.approx(100.0, abs=0.05)


def test_peaks_json_lists_the_reading_warnings(capsys):
    rc = main(["peaks", str(REAL / "vendor_v_1h_cdcl3_npoints_plus_one.jdx"), "--json"])
    assert rc == 0
    out = json.loads(capsys.readouterr().out)
    assert any("NPOINTS" in w for w in out["warnings"])
    assert out["integral_unit"] == "percent"


def test_journal_text_counts_protons_only_when_scaled():
    from specmatch.reports.journal_text import measured_peak_text

    pl = peaks("chloroethanol_1h_cdcl3_difdup.dx")
    plain = measured_peak_text(pl, "1H", pl.frequency_mhz, pl.solvent)
    assert "H)" not in plain  # relative integrals are not proton counts
    scaled = measured_peak_text(pl, "1H", pl.frequency_mhz, pl.solvent, formula="C2H5ClO")
    # 2-chloroethanol: two 2H triplets (J about 5 Hz, from memory) and the 1H OH singlet
    assert "(t, J = 5.2 Hz, 2H)" in scaled and "(s, 1H)" in scaled
