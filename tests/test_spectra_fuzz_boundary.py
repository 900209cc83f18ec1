"""Property tests at the input boundary (hypothesis, small CI budget): peak-list CSV text, JCAMP-DX
header values, NTUPLES headers of a real export and raw bytes through the text decoder end in a
result or a SpecmatchError, never another exception."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from specmatch import safeio
from specmatch.errors import SpecmatchError
from specmatch.spectra import PeakList, Spectrum, peaks_from_file, read_peak_csv, read_spectrum
from specmatch.spectra.jcampdx import read_jcampdx

import scipy.signal  # noqa: E402,F401  (imported up front)

SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
REAL = Path(__file__).parent / "data" / "spectra" / "real"

_numberish = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10**12, 10**12).map(str),
    st.sampled_from(["", "inf", "nan", "1e309", "-1e309", "1e-300", "0", "-0", "1e308", "?", "x", "3.6-3.7",
                     "1.2.3", "--1", "1e", "CH2", "dd", "br s"]),
)


def _ok_or_clear(fn, *args, **kwargs):
    try:
        return fn(*args, **kwargs)
    except SpecmatchError as exc:
        assert str(exc)
        return None


@SETTINGS
@given(header=st.lists(st.sampled_from(["shift", "ppm", "integral", "intensity", "multiplicity", "j",
                                        "hydrogens", "flag", "from_ppm", "to_ppm", "junk"]),
                       min_size=1, max_size=5),
       rows=st.lists(st.lists(_numberish, min_size=0, max_size=6), min_size=0, max_size=25),
       sep=st.sampled_from([",", ";", "\t", " "]), nucleus=st.sampled_from([None, "1H", "13C"]))
def test_peak_csv_text_never_crashes(header, rows, sep, nucleus):
    text = sep.join(header) + "\n" + "\n".join(sep.join(r) for r in rows) + "\n"
    got = _ok_or_clear(read_peak_csv, text, nucleus=nucleus)
    if isinstance(got, PeakList):
        lo, hi = {"1H": (-5, 25), "13C": (-50, 400)}[got.nucleus]
        assert all(np.isfinite(p.shift) and lo <= p.shift <= hi for p in got.peaks)
        assert all(m.integral is None or (np.isfinite(m.integral) and m.integral > 0) for m in got.multiplets)
    elif isinstance(got, Spectrum):
        assert np.all(np.isfinite(got.ppm)) and np.all(np.isfinite(got.intensity))


@SETTINGS
@given(data=st.binary(max_size=400))
def test_decoder_never_crashes(data):
    got = _ok_or_clear(safeio.decode_text, data, name="x")
    assert got is None or isinstance(got, str)


@lru_cache(maxsize=None)
def _small_jdx() -> str:
    import tempfile

    from specmatch.spectra import write_jcampdx

    ppm = np.linspace(10, 0, 512)
    y = 1 / (1 + ((ppm - 3) / 0.02) ** 2) + np.random.default_rng(0).normal(0, 1e-3, 512)
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "v.jdx"
        write_jcampdx(Spectrum("1H", ppm, y, 400.0, "CDCl3", "fuzz"), p, form="DIFDUP")
        return p.read_text()


@SETTINGS
@given(label=st.sampled_from(["NPOINTS", "FIRSTX", "LASTX", "DELTAX", "XFACTOR", "YFACTOR", "FIRSTY",
                              ".OBSERVE FREQUENCY", ".OBSERVE NUCLEUS", ".SOLVENT NAME", "XUNITS",
                              ".SHIFT REFERENCE", ".PULSE SEQUENCE", "TITLE"]),
       value=_numberish)
def test_header_values_never_crash(label, value):
    lines = [f"##{label}= {value}" if ln.startswith(f"##{label}=") else ln
             for ln in _small_jdx().splitlines()]
    got = _ok_or_clear(read_jcampdx, "\n".join(lines), source="fuzz.jdx")
    if isinstance(got, Spectrum):
        assert np.all(np.isfinite(got.ppm)) and np.all(np.isfinite(got.intensity))
        _ok_or_clear(peaks_from_file, "\n".join(lines).encode(), name="fuzz.jdx")


@lru_cache(maxsize=None)
def _real_ntuples() -> str:
    return (REAL / "short_256pt_1h.jdx").read_text(encoding="latin-1")


@SETTINGS
@given(label=st.sampled_from(["VARDIM", "FIRST", "LAST", "FACTOR", "UNITS", "SYMBOL", ".OBSERVEFREQUENCY",
                              ".SOLVENTNAME", ".PULSESEQUENCE"]),
       values=st.lists(_numberish, min_size=1, max_size=4))
def test_real_ntuples_header_values_never_crash(label, values):
    # a real export from the corpus (tests/data/spectra/real, jcampconverter test data, MIT)
    value = ",\t".join(values)
    lines = [f"##{label}=\t{value}" if ln.startswith(f"##{label}=") else ln
             for ln in _real_ntuples().splitlines()]
    got = _ok_or_clear(read_spectrum, "\n".join(lines).encode("latin-1"), name="fuzz.jdx")
    if isinstance(got, Spectrum):
        assert np.all(np.isfinite(got.ppm)) and np.all(np.isfinite(got.intensity))


@SETTINGS
@given(prefix=st.sampled_from([b"PK\x03\x04", b"PK\x05\x06", b"<?xml version='1.0'?><nmrML>",
                               b"\xff\xfe#\x00#\x00", b"\xef\xbb\xbfshift,integral\n"]),
       body=st.binary(max_size=300))
def test_archive_nmrml_and_encoded_text_never_crash(prefix, body):
    got = _ok_or_clear(read_spectrum, prefix + body, name="fuzz")
    assert got is None or isinstance(got, (Spectrum, PeakList))
