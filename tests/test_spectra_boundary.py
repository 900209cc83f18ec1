"""Physical validation and size limits where spectra and peak lists enter (each case was accepted,
or ended in an internal error, before these checks)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from specmatch.cli import main
from specmatch.errors import SpecmatchError
from specmatch.spectra import Spectrum, peaks_from_file, read_jcampdx, read_peak_csv, write_jcampdx
from specmatch.spectra.peaklist_io import MAX_PEAKS


def _jdx(tmp_path: Path, n: int = 1024, form: str = "AFFN") -> str:
    ppm = np.linspace(10.0, 0.0, n)
    y = np.exp(-(((ppm - 3.0) * 400) ** 2) / 2) + np.exp(-(((ppm - 1.2) * 400) ** 2) / 2)
    y += np.random.default_rng(1).normal(0, 1e-3, n)
    p = tmp_path / "x.jdx"
    write_jcampdx(Spectrum("1H", ppm, y, 400.13, "CDCl3", "test"), p, form=form)
    return p.read_text()


def _set(text: str, label: str, value: str) -> str:
    out, done = [], False
    for line in text.splitlines():
        if line.startswith(f"##{label}="):
            out.append(f"##{label}= {value}")
            done = True
        else:
            out.append(line)
    assert done, label
    return "\n".join(out) + "\n"


@pytest.mark.parametrize("value", ["inf", "nan", "-inf"])
def test_npoints_inf_or_nan_is_a_clear_error(tmp_path, value):
    with pytest.raises(SpecmatchError, match=r"NPOINTS= .*not a finite number"):
        read_jcampdx(_set(_jdx(tmp_path), "NPOINTS", value))


def test_npoints_not_a_whole_count_or_too_many(tmp_path):
    with pytest.raises(SpecmatchError, match="not a positive whole number"):
        read_jcampdx(_set(_jdx(tmp_path), "NPOINTS", "1023.5"))
    with pytest.raises(SpecmatchError, match="more than the"):
        read_jcampdx(_set(_jdx(tmp_path), "NPOINTS", "1e12"))


@pytest.mark.parametrize("label", ["XFACTOR", "YFACTOR"])
@pytest.mark.parametrize("value", ["0", "inf", "nan"])
def test_zero_or_non_finite_factors_are_refused(tmp_path, label, value):
    with pytest.raises(SpecmatchError, match=rf"{label}=|not a finite number"):
        read_jcampdx(_set(_jdx(tmp_path), label, value))


@pytest.mark.parametrize("value", ["1e-300", "0.001", "99999"])
def test_implausible_observe_frequency_is_refused(tmp_path, value):
    with pytest.raises(SpecmatchError, match="observe frequency of .* MHz is not plausible for 1H"):
        read_jcampdx(_set(_jdx(tmp_path), ".OBSERVE FREQUENCY", value))


def test_infinite_ordinate_is_a_clear_error_not_a_zero(tmp_path):
    text = _jdx(tmp_path)
    lines = text.splitlines()
    k = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 5
    parts = lines[k].split()
    parts[2] = "1e309"
    lines[k] = " ".join(parts)
    with pytest.raises(SpecmatchError, match=rf"line {k + 1}: an ordinate is infinite"):
        read_jcampdx("\n".join(lines))


def test_unknown_ordinate_is_named_as_unknown(tmp_path):
    text = _jdx(tmp_path)
    lines = text.splitlines()
    k = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 5
    parts = lines[k].split()
    parts[2] = "?"
    lines[k] = " ".join(parts)
    sp = read_jcampdx("\n".join(lines))
    assert any("unknown ordinates ('?')" in w for w in sp.meta["warnings"])


def test_drift_of_line_x_values_is_a_warning(tmp_path):
    # an exporter that writes each line's X from a slightly different step: drift of ~2 points
    text = _jdx(tmp_path, n=4096)
    lines = text.splitlines()
    first = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 1
    deltax = float(re.search(r"##DELTAX= (\S+)", text).group(1))
    out = []
    for j, s in enumerate(lines):
        if first <= j and not s.startswith("##"):
            x, rest = s.split(" ", 1)
            s = f"{float(x) + (j - first) * 0.01 * deltax:.6f} {rest}"
        out.append(s)
    sp = read_jcampdx("\n".join(out))
    assert len(sp.ppm) == 4096
    assert any("drift" in w for w in sp.meta["warnings"])


def test_repeated_line_is_refused_with_its_line_number(tmp_path):
    text = _jdx(tmp_path, n=4096)
    lines = text.splitlines()
    k = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 20
    lines.insert(k + 1, lines[k])
    with pytest.raises(SpecmatchError, match=rf"line {k + 2:,}: .*points are repeated"):
        read_jcampdx("\n".join(lines))


def test_peak_list_shift_overflow_and_out_of_range(tmp_path):
    for bad in ("1e308", "1e309", "-45"):
        with pytest.raises(SpecmatchError, match=r"line 3: shift .* outside the 1H range"):
            read_peak_csv(f"shift,integral\n1.20,3\n{bad},1\n", nucleus="1H")
    with pytest.raises(SpecmatchError, match="outside the 13C range"):
        read_peak_csv("shift\n77.0\n1e309\n", nucleus="13C")


@pytest.mark.parametrize("bad", ["0", "-2", "1e308"])
def test_peak_list_integrals_must_be_finite_positive(bad):
    with pytest.raises(SpecmatchError, match=r"line 3: integral .* positive number"):
        read_peak_csv(f"shift,integral\n1.20,3\n3.60,{bad}\n", nucleus="1H")


def test_peak_list_j_values_are_checked():
    with pytest.raises(SpecmatchError, match="J value 1e9 Hz is outside"):
        read_peak_csv("shift,integral,multiplicity,j\n1.20,3,t,1e9\n", nucleus="1H")


def _big_csv(tmp_path: Path, rows: int) -> Path:
    rng = np.random.default_rng(0)
    p = tmp_path / "many_1H.csv"
    body = "\n".join(f"{s:.4f},1,s," for s in rng.uniform(0.5, 9.5, rows))
    p.write_text("shift,integral,multiplicity,j\n" + body + "\n")
    return p


def test_ten_thousand_row_peak_list_is_refused_under_the_limit(tmp_path, capsys):
    p = _big_csv(tmp_path, 10_000)
    with pytest.raises(SpecmatchError, match=rf"lists 10,000 peaks; a peak list may hold at most {MAX_PEAKS:,}"):
        peaks_from_file(p, nucleus="1H")
    assert main(["peaks", str(p), "--nucleus", "1H"]) == 2
    assert "at most" in capsys.readouterr().err
    rc = main(["identify", "--substrate", "C=CC", "--reagent", "HBr", "--h1", str(p), "--mixture"])
    assert rc == 2 and "at most" in capsys.readouterr().err


def test_peak_list_at_the_limit_is_answered(tmp_path):
    pl = peaks_from_file(_big_csv(tmp_path, MAX_PEAKS), nucleus="1H")
    assert len(pl.peaks) == MAX_PEAKS


def test_large_junk_text_is_refused_by_size_before_reading(tmp_path):
    p = tmp_path / "junk.txt"
    with open(p, "wb") as fh:
        fh.truncate(200 * 1024 * 1024)  # sparse
    with pytest.raises(SpecmatchError, match="above the 64.0 MB limit for a spectrum file"):
        peaks_from_file(p)


def test_title_alone_does_not_make_a_dept(tmp_path):
    # a 1H file with a 1D pulse program whose title says DEPT is 1H (issue: was refused)
    text = _set(_jdx(tmp_path), "TITLE", "crude product, DEPT planned")
    text = text.replace("##XUNITS=", "##.PULSE SEQUENCE= zg30\n##XUNITS=")
    sp = read_jcampdx(text)
    assert sp.experiment == "1D"
    assert any("title mentions DEPT" in w for w in sp.meta["warnings"])
    pl = peaks_from_file(text.encode(), name="t.jdx")
    assert pl.nucleus == "1H" and pl.experiment == "1D"


def test_no_dept_run_title_is_not_dept(tmp_path):
    ppm = np.linspace(220.0, -5.0, 8192)
    y = sum(np.exp(-(((ppm - c) * 100) ** 2) / 2) for c in (170.0, 60.4, 21.0, 14.2))
    p = tmp_path / "c.jdx"
    write_jcampdx(Spectrum("13C", ppm, y, 100.6, "CDCl3", "t"), p, title="ethyl acetate 13C (no DEPT run)")
    assert read_jcampdx(p.read_bytes()).experiment == "1D"


def test_dept_title_without_pulse_program_needs_negative_lines(tmp_path):
    ppm = np.linspace(220.0, -5.0, 8192)
    up = sum(np.exp(-(((ppm - c) * 100) ** 2) / 2) for c in (60.4, 21.0))
    p = tmp_path / "d.jdx"
    write_jcampdx(Spectrum("13C", ppm, up - np.exp(-(((ppm - 30.0) * 100) ** 2) / 2), 100.6, None, "t"), p,
                  title="sample 7 DEPT-135")
    assert read_jcampdx(p.read_bytes()).experiment == "DEPT-135"
    write_jcampdx(Spectrum("13C", ppm, up, 100.6, None, "t"), p, title="sample 7 DEPT-135")
    sp = read_jcampdx(p.read_bytes())
    assert sp.experiment == "1D" and any("no line points down" in w for w in sp.meta["warnings"])


def test_line_x_in_other_units_is_a_warning_and_still_checks_points(tmp_path):
    # line X values written as point indices with XFACTOR 1 (not the Hz of FIRSTX/LASTX)
    lines = _jdx(tmp_path, n=2048).splitlines()
    first = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 1
    start, out = 0, lines[:first]
    for s in lines[first:]:
        if s.startswith("##"):
            out.append(s)
            continue
        parts = s.split()
        out.append(" ".join([str(start)] + parts[1:]))
        start += len(parts) - 1
    sp = read_jcampdx("\n".join(out))
    assert len(sp.ppm) == 2048 and any("other units" in w for w in sp.meta["warnings"])
    del out[first + 5]
    with pytest.raises(SpecmatchError, match=rf"line {first + 6}: .*points are missing"):
        read_jcampdx("\n".join(out))


def test_huge_folder_tree_is_refused_quickly(tmp_path, monkeypatch):
    from specmatch.spectra import instrument

    monkeypatch.setattr(instrument, "MAX_ENTRIES", 50)
    for i in range(60):
        (tmp_path / f"f{i}.txt").write_text("x")
    with pytest.raises(SpecmatchError, match="holds more than 50 entries; give the experiment folder"):
        peaks_from_file(tmp_path)


def test_fuzz_regressions_firstx_extremes(tmp_path):
    # found by tests/test_spectra_fuzz_boundary.py: an abscissa overflowing to inf, and an axis
    # whose multiplets integrate to zero (a division by zero when making integrals relative)
    with pytest.raises(SpecmatchError, match="leaves the range of numbers|not finite"):
        read_jcampdx(_set(_jdx(tmp_path), "FIRSTX", "1.7976931348623157e+308"))
    text = _set(_jdx(tmp_path), "FIRSTX", "3.3676259625593135e-38")
    try:
        pl = peaks_from_file(text.encode(), name="fuzz.jdx")
    except SpecmatchError:
        return
    assert all(m.integral is None or np.isfinite(m.integral) for m in pl.multiplets)
