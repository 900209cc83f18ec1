"""Instrument folders (nmrglue), zip uploads, nmrML, CSV/TSV peak lists, x,y text, the CLI.

The instrument fixtures are written at test time with nmrglue's own writers
(Bruker processed data, Agilent/Varian fid + procpar, NMRPipe), so the tests check
our reading of what nmrglue writes; the spectra are invented (an ethyl group).
"""

from __future__ import annotations

import base64
import io
import json
import subprocess
import sys
import warnings
import zipfile
import zlib
from pathlib import Path

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.spectra import PeakList, Spectrum, peaks_from_file, read_peak_csv, read_spectrum

ng = pytest.importorskip("nmrglue")
DATA = Path(__file__).parent / "data" / "spectra"
FREQ = 400.13
N = 16384
SW = FREQ * 13.0
LEFT_PPM = 12.0


def _ppm():
    return LEFT_PPM - np.arange(N) * (SW / FREQ) / N


def _lines():
    """(ppm, relative height) of an ethyl quartet/triplet, CHCl3 and TMS."""
    j = 7.1 / FREQ
    out = [(3.65 + (k - 1.5) * j, a) for k, a in enumerate((1, 3, 3, 1))]
    out += [(1.21 + (k - 1) * j, a) for k, a in enumerate((1.5, 3, 1.5))]
    return out + [(7.26, 0.3), (0.0, 1.0)]


def _spectrum_y():
    ppm = _ppm()
    y = np.zeros(N)
    for c, a in _lines():
        y += a / (1 + (((ppm - c) * FREQ) / 0.5) ** 2)
    return y


def _assert_ethyl(pl: PeakList):
    comp = pl.compound_multiplets()
    assert [m.multiplicity for m in comp] == ["q", "t"]
    assert comp[0].shift == pytest.approx(3.65, abs=0.01)
    assert comp[0].j_hz[0] == pytest.approx(7.1, abs=0.4)


def _jcamp_params(path: Path, params: dict) -> None:
    lines = ["##TITLE= Parameter file", "##JCAMPDX= 5.0"]
    lines += [f"##${k}= {v}" for k, v in params.items()]
    path.write_text("\n".join(lines + ["##END="]) + "\n")


@pytest.fixture()
def bruker_folder(tmp_path) -> Path:
    exp = tmp_path / "ethyl" / "10"
    pdata = exp / "pdata" / "1"
    pdata.mkdir(parents=True)
    data = (_spectrum_y() * 1e6).astype("<i4")
    data.tofile(pdata / "1r")
    _jcamp_params(pdata / "procs", {"SF": FREQ, "OFFSET": LEFT_PPM, "SW_p": SW, "SI": N, "NC_proc": 0,
                                    "BYTORDP": 0, "DTYPP": 0, "FT_mod": 6})
    _jcamp_params(exp / "acqus", {"NUC1": "<1H>", "SOLVENT": "<CDCl3>", "SFO1": FREQ, "BF1": FREQ,
                                  "SW_h": SW, "TD": N, "PULPROG": "<zg30>", "BYTORDA": 0, "DTYPA": 0})
    return tmp_path / "ethyl"


def test_bruker_processed_folder(bruker_folder):
    sp = read_spectrum(bruker_folder)
    assert isinstance(sp, Spectrum) and sp.nucleus == "1H" and sp.solvent == "CDCl3"
    assert sp.frequency_mhz == pytest.approx(FREQ)
    assert sp.ppm[0] == pytest.approx(LEFT_PPM)
    pl = peaks_from_file(bruker_folder)
    _assert_ethyl(pl)
    assert pl.reference.startswith("TMS")


def _zip_dir(folder: Path) -> bytes:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for p in folder.rglob("*"):
            if p.is_file():
                zf.write(p, p.relative_to(folder.parent))
    return buf.getvalue()


def test_bruker_folder_uploaded_as_zip(bruker_folder):
    pl = peaks_from_file(_zip_dir(bruker_folder), name="ethyl.zip")
    _assert_ethyl(pl)


def test_nmrpipe_spectrum(tmp_path):
    udic = ng.fileiobase.create_blank_udic(1)
    udic[0].update(size=N, complex=False, encoding="direct", sw=SW, obs=FREQ,
                   car=(LEFT_PPM - 6.5) * FREQ, label="1H", time=False, freq=True)
    dic = ng.pipe.create_dic(udic)
    p = tmp_path / "ethyl.ft"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ng.pipe.write(str(p), dic, _spectrum_y().astype("float32"), overwrite=True)
    sp = read_spectrum(p)
    assert sp.nucleus == "1H" and sp.frequency_mhz == pytest.approx(FREQ)
    _assert_ethyl(peaks_from_file(p, solvent="CDCl3"))


def _fid(n=32768, sw=SW, carrier_ppm=6.0):
    t = np.arange(n) / sw
    fid = np.zeros(n, complex)
    for c, a in _lines():
        # the sign convention nmrglue's FFT maps to a descending ppm axis
        fid += a * np.exp(-2j * np.pi * (c - carrier_ppm) * FREQ * t) * np.exp(-t / 0.6)
    return fid


def test_varian_fid_is_processed(tmp_path):
    folder = tmp_path / "ethyl.fid"
    folder.mkdir()
    fid = _fid()
    udic = ng.fileiobase.create_blank_udic(1)
    udic[0].update(size=len(fid), complex=True, encoding="direct", sw=SW, obs=FREQ, car=6.0 * FREQ,
                   label="H1", time=True, freq=False)
    dic = ng.varian.create_dic(udic)
    right_ppm = 6.0 - 6.5
    pp = dic["procpar"]
    for key, val in {"sfrq": FREQ, "sw": SW, "tn": "H1", "rfl": -right_ppm * FREQ, "rfp": 0.0,
                     "solvent": "CDCl3", "rp": 0.0, "lp": 0.0}.items():
        pp[key] = ng.varian.create_pdic_param(key, [str(val)])
    ng.varian.write(str(folder), dic, fid.astype("complex64"), overwrite=True)
    sp = read_spectrum(folder)
    assert sp.nucleus == "1H"
    # carrier 6.0 ppm, 13 ppm wide: 12.5 ... -0.5 ppm
    assert sp.ppm[0] == pytest.approx(12.5, abs=0.01) and sp.ppm[-1] == pytest.approx(-0.5, abs=0.01)
    pl = peaks_from_file(folder)
    _assert_ethyl(pl)


def _b64(arr: np.ndarray, compress: bool) -> tuple[str, int]:
    raw = arr.tobytes()
    if compress:
        raw = zlib.compress(raw)
    text = base64.b64encode(raw).decode()
    return text, len(text)


def test_nmrml_spectrum_and_fid(tmp_path):
    ppm = _ppm()
    y = _spectrum_y()
    text, n = _b64(y.astype("<f8"), True)
    doc = f"""<?xml version="1.0" encoding="UTF-8"?>
<nmrML xmlns="http://nmrml.org/schema" version="1.0.rc1">
 <acquisition><acquisition1D><acquisitionParameterSet numberOfScans="8" numberOfSteadyStateScans="0">
  <DirectDimensionParameterSet decoupled="false" numberOfDataPoints="{N}">
   <acquisitionNucleus name="1H" cvRef="CHEBI" accession="CHEBI:49637"/>
   <irradiationFrequency value="{FREQ}" unitName="megaHertz"/>
   <sweepWidth value="{SW}" unitName="hertz"/>
  </DirectDimensionParameterSet></acquisitionParameterSet>
 </acquisition1D></acquisition>
 <spectrumList><spectrum1D numberOfDataPoints="{N}">
  <spectrumDataArray compressed="true" encodedLength="{n}" byteFormat="float64">{text}</spectrumDataArray>
  <xAxis startValue="{ppm[0]}" endValue="{ppm[-1]}" unitName="ppm"/>
 </spectrum1D></spectrumList>
</nmrML>"""
    p = tmp_path / "ethyl.nmrML"
    p.write_text(doc)
    sp = read_spectrum(p)
    assert sp.nucleus == "1H" and sp.frequency_mhz == pytest.approx(FREQ)
    _assert_ethyl(peaks_from_file(p, solvent="CDCl3"))
    # damaged base64/zlib gives a clear message
    p.write_text(doc.replace(text[:40], "!!!!" * 10))
    with pytest.raises(SpecmatchError, match="nmrML"):
        read_spectrum(p)


def test_csv_peak_list():
    pl = read_peak_csv(DATA / "peaks_1h.csv")
    assert pl.nucleus == "1H"
    assert [m.multiplicity for m in pl.multiplets] == ["q", "s", "m", "t"]
    q = pl.multiplets[0]
    assert q.integral == 2 and q.j_hz == (7.1,)
    rng = [m for m in pl.multiplets if m.multiplicity == "m"][0]
    assert rng.range == (1.20, 1.35)


def test_tsv_13c_peak_list_with_hydrogens(tmp_path):
    p = tmp_path / "c.tsv"
    p.write_text("shift\tintensity\thydrogens\n171.1\t20\tC\n60.4\t80\tCH2\n21.0\t70\t3\n14.2\t90\tCH3\n")
    pl = peaks_from_file(p, nucleus="13C")
    assert [pk.hydrogens for pk in pl.peaks] == [0, 2, 3, 3]


def test_csv_errors_name_the_line(tmp_path):
    p = tmp_path / "bad.csv"
    p.write_text("shift,multiplicity\n3.5,q\nabc,s\n")
    with pytest.raises(SpecmatchError, match="line 3: shift 'abc' is not a number"):
        read_peak_csv(p)
    p.write_text("shift,multiplicity\n3.5,quartet-ish\n")
    with pytest.raises(SpecmatchError, match="multiplicity 'quartet-ish'"):
        read_peak_csv(p)


def test_two_column_xy_text_is_a_spectrum(tmp_path):
    ppm = _ppm()[::4]
    y = _spectrum_y()[::4]
    p = tmp_path / "xy.txt"
    p.write_text("\n".join(f"{a:.6f} {b:.6g}" for a, b in zip(ppm[::-1], y[::-1])))
    sp = read_spectrum(p)
    assert isinstance(sp, Spectrum) and sp.nucleus == "1H"
    assert sp.ppm[0] > sp.ppm[-1]  # sorted descending whatever the file order


def test_unknown_binary_is_refused(tmp_path):
    p = tmp_path / "x.bin"
    p.write_bytes(b"\x00\x01\x02" * 100)
    with pytest.raises(SpecmatchError, match="binary file specmatch does not recognise"):
        read_spectrum(p)


def test_missing_file():
    with pytest.raises(SpecmatchError, match="no such file"):
        read_spectrum("/nonexistent/spectrum.jdx")


def test_cli_peaks_json_and_error(tmp_path, bruker_folder):
    from specmatch.spectra import write_jcampdx

    sp = read_spectrum(bruker_folder)
    p = tmp_path / "e.jdx"
    write_jcampdx(sp, p)
    exe = [sys.executable, "-m", "specmatch"]
    out = subprocess.run(exe + ["peaks", str(p), "--json"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    d = json.loads(out.stdout)
    assert d["nucleus"] == "1H" and [m["multiplicity"] for m in d["multiplets"] if not m["flag"]] == ["q", "t"]
    out = subprocess.run(exe + ["peaks", str(p), "--nucleus", "13C"], capture_output=True, text=True, timeout=120)
    assert out.returncode == 2
    assert out.stderr.startswith("specmatch: ") and "1H" in out.stderr and "Traceback" not in out.stderr
    out = subprocess.run(exe + ["peaks", str(p)], capture_output=True, text=True, timeout=120)
    assert "reference: TMS" in out.stdout and " q " in out.stdout


def test_import_stays_light():
    code = ("import sys, specmatch.spectra; "
            "print(any(m.startswith(('nmrglue', 'scipy')) for m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60)
    assert out.stdout.strip() == "False"


def test_zip_with_several_experiments_gives_the_claimed_nucleus(tmp_path):
    from specmatch.spectra import write_jcampdx

    h = read_spectrum(DATA / "xypoints_cr.jdx")
    c = read_spectrum(DATA / "link_two_blocks.jdx")
    ppm_c = np.linspace(200, 0, 2001)
    write_jcampdx(Spectrum("13C", ppm_c, np.interp(-ppm_c, -c.ppm, c.intensity), 100.61, "CDCl3", "c"),
                  tmp_path / "a_13C.jdx")
    ppm_h = np.linspace(5, 0, 501)
    write_jcampdx(Spectrum("1H", ppm_h, np.interp(-ppm_h, -h.ppm, h.intensity), 400.0, "CDCl3", "h"),
                  tmp_path / "b_1H.jdx")
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.write(tmp_path / "a_13C.jdx", "data/a_13C.jdx")
        zf.write(tmp_path / "b_1H.jdx", "data/b_1H.jdx")
    assert read_spectrum(buf.getvalue(), name="set.zip", nucleus="1H").nucleus == "1H"
    assert read_spectrum(buf.getvalue(), name="set.zip", nucleus="13C").nucleus == "13C"


def test_typed_peak_list_gets_solvent_flags():
    pl = peaks_from_file(DATA / "peak_table_xyw.jdx", solvent="CDCl3")
    assert [p.flag for p in pl.peaks] == ["solvent", None, None]  # CHCl3 7.26 (Fulmer et al. 2010)
