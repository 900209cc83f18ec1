"""JCAMP-DX: the ASDF ordinate forms, header records, blocks, checks and messages.

Outside references: the JCAMP-DX specifications, McDonald & Wilks, Appl. Spectrosc.
1988, 42, 151 (XYDATA and the ASDF forms AFFN, PAC, SQZ, DIF, DUP, the DIF Y-check) and
Davies & Lampen, Appl. Spectrosc. 1993, 47, 1093 (NMR labels .OBSERVE FREQUENCY,
.OBSERVE NUCLEUS, .SOLVENT NAME, .SHIFT REFERENCE, NTUPLES with real/imaginary pages).
nmrglue's reader (``nmrglue.jcampdx``) serves as an independent decoder.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.spectra import PeakList, Spectrum, read_jcampdx, read_spectrum, write_jcampdx
from specmatch.spectra.asdf import FORMS, decode_xy_lines, encode_xy_lines
from specmatch.spectra.jcampdx import normalise_nucleus

DATA = Path(__file__).parent / "data" / "spectra"


def _decode(lines: list[str]) -> list[float]:
    return decode_xy_lines(lines, list(range(1, len(lines) + 1))).y.tolist()


# ----------------------------------------------------------------- the worked examples
def _example_lines() -> dict[str, str]:
    out = {}
    for line in (DATA / "asdf_forms_example.txt").read_text().splitlines():
        if line and not line.startswith("#"):
            form, text = line.split("\t")
            out[form] = text
    return out


def test_worked_asdf_example_decodes_to_the_same_ordinates_in_every_form():
    # McDonald & Wilks 1988, ASDF examples (lines recalled, from memory):
    # X = 1, Y = 2 3 3 2 1 0 -1 -2 -3 written as AFFN, PAC, SQZ, DIF and DIF with DUP.
    expected = [2, 3, 3, 2, 1, 0, -1, -2, -3]
    lines = _example_lines()
    assert set(lines) == {"AFFN", "PAC", "SQZ", "DIF", "DIFDUP"}
    for form, text in lines.items():
        assert _decode([text]) == expected, form


def test_pseudo_digit_tables_of_the_specification():
    # SQZ: @=0, A..I = 1..9, a..i = -1..-9; DIF: %=0, J..R = 1..9, j..r = -1..-9;
    # DUP: S..Z = 1..8, s = 9 (McDonald & Wilks 1988, table of pseudo-digits).
    assert _decode(["0 @ A B C D E F G H I"]) == list(range(10))
    assert _decode(["0 a b c d e f g h i"]) == [-k for k in range(1, 10)]
    assert _decode(["0 A J K L M N O P Q R"]) == [1, 2, 4, 7, 11, 16, 22, 29, 37, 46]
    assert _decode(["0 A j k l m n o p q r"]) == [1, 0, -2, -5, -9, -14, -20, -27, -35, -44]
    assert _decode(["0 AZ"]) == [1] * 8
    assert _decode(["0 As"]) == [1] * 9
    assert _decode(["0 AS2"]) == [1] * 12  # DUP count 12 = S followed by the digit 2
    assert _decode(["0 A JU"]) == [1, 2, 3, 4]  # a DUP of a DIF repeats the difference
    assert _decode(["0 A1234B5"]) == [11234, 25]  # SQZ with more digits
    assert _decode(["0 A.5 B.25 J.5"]) == [1.5, 2.25, 3.75]  # decimals in compressed values


def test_blanks_between_pseudo_digits_are_allowed():
    # The specification allows blanks as separators; nmrglue's reader rejects them (see below).
    assert _decode(["1 B C C B A @ a b c"]) == [2, 3, 3, 2, 1, 0, -1, -2, -3]


def test_dif_y_check_is_verified_and_dropped():
    lines = ["10 A J J", "7 C j j"]  # line 2 repeats the last ordinate (3) as its check
    assert _decode(lines) == [1, 2, 3, 2, 1]
    with pytest.raises(SpecmatchError, match=r"line 2: DIF Y-check failed"):
        _decode(["10 A J J", "7 D j j"])
    with pytest.raises(SpecmatchError, match=r"line 2: expected the DIF Y-check value"):
        _decode(["10 A J J", "7 j j"])


def test_bad_characters_and_orphan_dif_or_dup_name_the_line():
    with pytest.raises(SpecmatchError, match=r"line 2: character '#' at column 5"):
        _decode(["10 A B", "8 C #"])
    with pytest.raises(SpecmatchError, match="DIF ordinate"):
        _decode(["10 J J"])
    with pytest.raises(SpecmatchError, match="DUP count"):
        _decode(["10 T"])


# -------------------------------------------------------------- re-encoding round trips
def _integer_spectrum(n: int = 3000, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    x = np.arange(n)
    y = 1e6 / (1 + ((x - 900) / 3.0) ** 2) + 4e5 / (1 + ((x - 2100) / 2.0) ** 2)
    y = np.rint(y + rng.normal(0, 300, n)).astype(np.int64)
    y[100:160] = 0  # a run of equal values (DUP) and of equal differences (DIFDUP)
    y[200:260] = np.arange(60) * 7
    return y


@pytest.mark.parametrize("form", FORMS)
def test_every_form_reencodes_to_identical_ordinates(form):
    y = _integer_spectrum()
    x = np.arange(len(y), dtype=float)
    lines = encode_xy_lines(x, y, form)
    assert max(len(s) for s in lines) <= 80  # the specification's line length
    dec = decode_xy_lines(lines, list(range(1, len(lines) + 1)))
    assert np.array_equal(dec.y.astype(np.int64), y)
    # each line's X names the point it starts with
    assert np.allclose(dec.line_x, x[dec.line_start])


def test_compressed_forms_are_smaller_than_affn():
    y = _integer_spectrum()
    x = np.arange(len(y), dtype=float)
    size = {f: sum(len(s) + 1 for s in encode_xy_lines(x, y, f)) for f in FORMS}
    assert size["SQZ"] < size["PAC"] < size["AFFN"]
    assert size["DIFDUP"] < size["AFFN"]


def _spectrum(n: int = 4096, nucleus: str = "1H", freq: float | None = 400.13) -> Spectrum:
    ppm = np.linspace(10.0, -0.5, n)
    y = 1.0 / (1 + ((ppm - 3.6) / 0.002) ** 2) + 0.5 / (1 + ((ppm - 1.2) / 0.002) ** 2)
    y += np.random.default_rng(1).normal(0, 1e-4, n)
    return Spectrum(nucleus=nucleus, ppm=ppm, intensity=y, frequency_mhz=freq, solvent="CDCl3",
                    source="test")


@pytest.mark.parametrize("form", FORMS)
def test_writer_and_reader_round_trip(tmp_path, form):
    sp = _spectrum()
    path = tmp_path / f"s_{form}.jdx"
    write_jcampdx(sp, path, form=form, comments=["invented test spectrum"])
    back = read_jcampdx(path.read_bytes(), source=path.name)
    assert back.nucleus == "1H" and back.solvent == "CDCl3"
    assert back.frequency_mhz == pytest.approx(400.13)
    assert np.allclose(back.ppm, sp.ppm, atol=1e-6)
    # ordinates are stored as integers with YFACTOR = max/1e8
    assert np.max(np.abs(back.intensity - sp.intensity)) <= 1.01e-8 * np.max(np.abs(sp.intensity))
    text = path.read_text()
    assert "##.OBSERVE NUCLEUS= ^1H" in text and "$$ invented test spectrum" in text


@pytest.mark.parametrize("form", FORMS)
def test_nmrglue_reader_agrees_with_ours_on_our_files(tmp_path, form):
    ng = pytest.importorskip("nmrglue")
    sp = _spectrum(2000)
    path = tmp_path / f"s_{form}.jdx"
    write_jcampdx(sp, path, form=form)
    ours = read_jcampdx(path.read_bytes())
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, data = ng.jcampdx.read(str(path))
    assert np.allclose(np.asarray(data), ours.intensity, rtol=0, atol=1e-12)


def test_where_nmrglue_reader_falls_short(tmp_path):
    """The gaps that made us decode ourselves, shown on tiny files."""
    ng = pytest.importorskip("nmrglue")

    def mk(name: str, data_lines: list[str], npoints: int) -> Path:
        p = tmp_path / name
        p.write_text("\n".join(["##TITLE= t", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
                                "##.OBSERVE NUCLEUS= ^1H", "##XUNITS= PPM", "##YUNITS= ARBITRARY UNITS",
                                "##FIRSTX= 10", "##LASTX= 1", f"##NPOINTS= {npoints}",
                                "##XFACTOR= 1", "##YFACTOR= 1", "##XYDATA= (X++(Y..Y))",
                                *data_lines, "##END="]) + "\n")
        return p

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # 1. blanks between pseudo-digits: nmrglue gives no data; we read it.
        p = mk("blanks.jdx", ["10A B C C B", "5A @ a b c"], 10)
        assert ng.jcampdx.read(str(p))[1] is None
        assert read_spectrum(p).intensity.tolist() == [1, 2, 3, 3, 2, 1, 0, -1, -2, -3]
        # 2. a DIF line without its Y-check: nmrglue silently drops a real point.
        p = mk("nocheck.jdx", ["10AJJ%j", "5jjjjj"], 10)
        assert len(ng.jcampdx.read(str(p))[1]) == 9
        with pytest.raises(SpecmatchError, match="line 14: expected the DIF Y-check value"):
            read_spectrum(p)
        # 3. truncated data: nmrglue returns the short array; we say what is missing.
        p = mk("short.jdx", ["10 1 2 3 3 2"], 10)
        assert len(ng.jcampdx.read(str(p))[1]) == 5
        with pytest.raises(SpecmatchError, match=r"data ends after 5 of 10 points; the export may be truncated"):
            read_spectrum(p)


# --------------------------------------------------------------------- headers, blocks
@pytest.mark.parametrize("text, expected", [
    ("^13C", "13C"), ("<13C>", "13C"), ("13C", "13C"), ("C13", "13C"), ("^1H", "1H"),
    ("<1H>", "1H"), ("1H", "1H"), ("H1", "1H"), ("proton", "1H"), ("^19F", "19F"),
])
def test_observe_nucleus_spellings(text, expected):
    assert normalise_nucleus(text) == expected


def test_ntuples_real_page_with_hz_axis_and_shift_reference():
    sp = read_spectrum(DATA / "nmr_ntuples_real_imag.jdx")
    assert isinstance(sp, Spectrum) and sp.nucleus == "13C"
    # .SHIFT REFERENCE= (INTERNAL, CDCl3, 5, 77.16): point 5 is 77.16 ppm; 10 Hz steps at 100 MHz
    assert sp.ppm[4] == pytest.approx(77.16)
    assert np.allclose(np.diff(sp.ppm), -0.1)
    # the real page (FACTOR 0.5), not the imaginary one
    assert sp.intensity.tolist() == [1, 1, 1, 20, 50, 20, 1, 1]


def test_link_file_reads_the_spectrum_block():
    sp = read_spectrum(DATA / "link_two_blocks.jdx")
    assert isinstance(sp, Spectrum) and sp.nucleus == "13C" and sp.solvent == "CDCl3"
    assert sp.ppm[0] == pytest.approx(200) and sp.ppm[-1] == pytest.approx(0)
    assert sp.intensity[3] == 5 and sp.intensity[7] == 9


def test_peak_table_becomes_a_peak_list():
    pl = read_spectrum(DATA / "peak_table_xyw.jdx")
    assert isinstance(pl, PeakList) and pl.nucleus == "1H"
    assert [p.shift for p in pl.peaks] == [7.26, 3.65, 1.21]
    assert pl.peaks[1].width_hz == pytest.approx(0.0025 * 400.13)


def test_xypoints_with_cr_line_ends_and_hz_axis():
    sp = read_spectrum(DATA / "xypoints_cr.jdx")
    assert sp.ppm.tolist() == [5, 4, 3, 2, 1, 0]
    assert sp.intensity.tolist() == [1, 2, 50, 3, 2, 1]


@pytest.mark.parametrize("eol", ["\n", "\r\n", "\r"])
def test_line_endings(tmp_path, eol):
    sp = _spectrum(500)
    p = tmp_path / "s.jdx"
    write_jcampdx(sp, p)
    text = p.read_text().replace("\n", eol)
    back = read_jcampdx(text.encode())
    assert np.allclose(back.intensity, sp.intensity, atol=1e-7)


def test_offset_record_places_the_axis(tmp_path):
    # A file with x in Hz, $OFFSET (ppm of the first point) and no .SHIFT REFERENCE.
    lines = ["##TITLE= offset", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
             "##.OBSERVE FREQUENCY= 400.0", "##.OBSERVE NUCLEUS= ^1H", "##$OFFSET= 12.5",
             "##XUNITS= HZ", "##YUNITS= ARBITRARY UNITS", "##FIRSTX= 4000", "##LASTX= 0",
             "##NPOINTS= 5", "##XYDATA= (X++(Y..Y))", "4000 1 2 3 4 5", "##END="]
    sp = read_jcampdx("\n".join(lines))
    assert sp.ppm.tolist() == pytest.approx([12.5, 10.0, 7.5, 5.0, 2.5])


# -------------------------------------------------------------------------- messages
def _good_file(tmp_path, form="DIFDUP", n=2048) -> Path:
    p = tmp_path / "good.jdx"
    write_jcampdx(_spectrum(n), p, form=form)
    return p


def test_truncated_file_says_how_many_points_arrived(tmp_path):
    p = _good_file(tmp_path, form="AFFN", n=16384)
    lines = p.read_text().splitlines()
    data_start = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 1
    cut = "\n".join(lines[: data_start + 100]) + "\n"
    with pytest.raises(SpecmatchError, match=r"data ends after [\d,]+ of 16,384 points; the export may be truncated"):
        read_jcampdx(cut, source="crude_1H.jdx")


def test_missing_lines_in_the_middle_are_located(tmp_path):
    p = _good_file(tmp_path, form="AFFN", n=4096)
    lines = p.read_text().splitlines()
    data_start = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 1
    del lines[data_start + 10]
    with pytest.raises(SpecmatchError, match=rf"line {data_start + 11:,}: its X .* points beyond .* "
                                             "points are missing"):
        read_jcampdx("\n".join(lines))


def test_wrong_firsty_is_caught(tmp_path):
    p = _good_file(tmp_path)
    text = "\n".join(("##FIRSTY= 12345" if s.startswith("##FIRSTY") else s) for s in p.read_text().splitlines())
    with pytest.raises(SpecmatchError, match="FIRSTY"):
        read_jcampdx(text)


def test_not_jcampdx_and_fid_messages():
    with pytest.raises(SpecmatchError, match="a JCAMP-DX block starts with '##TITLE='"):
        read_jcampdx("##JCAMP-DX= 5.01\n")
    fid = "\n".join(["##TITLE= fid", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR FID", "##XUNITS= SECONDS",
                     "##FIRSTX= 0", "##LASTX= 1", "##NPOINTS= 2", "##XYDATA= (X++(Y..Y))", "0 1 2", "##END="])
    with pytest.raises(SpecmatchError, match="time-domain FID"):
        read_jcampdx(fid)


def test_comments_in_data_lines_and_reference_without_parentheses():
    lines = ["##TITLE= comments", "##JCAMP-DX= 5.01", "##DATA TYPE= NMR SPECTRUM",
             "##.OBSERVE FREQUENCY= 100.0", "##.OBSERVE NUCLEUS= ^13C",
             "##.SHIFT REFERENCE= INTERNAL, TMS, 2, 0.0", "##XUNITS= HZ", "##YUNITS= ARBITRARY UNITS",
             "##FIRSTX= 100", "##LASTX= -100", "##NPOINTS= 3", "##XYDATA= (X++(Y..Y))",
             "100 A $$ first point", "0 B C $$ checksum 1234", "##END="]
    sp = read_jcampdx("\n".join(lines))
    assert sp.intensity.tolist() == [1, 2, 3]
    assert sp.ppm.tolist() == pytest.approx([1.0, 0.0, -1.0])


def test_2d_ntuples_is_refused_clearly():
    text = (DATA / "nmr_ntuples_real_imag.jdx").read_text().replace(
        "##NTUPLES= NMR SPECTRUM", "##NTUPLES= nD NMR SPECTRUM").replace("##PAGE= N=1", "##PAGE= F1= 4000.0")
    with pytest.raises(SpecmatchError, match="2D NMR data set"):
        read_jcampdx(text)
