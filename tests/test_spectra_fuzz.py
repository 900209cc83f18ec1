"""Property tests: damaged JCAMP-DX files give a SpecmatchError, never another
exception or a hang (hypothesis; each example has a deadline)."""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from specmatch.errors import SpecmatchError
from specmatch.spectra import Spectrum, read_spectrum
from specmatch.spectra.jcampdx import read_jcampdx

import scipy.signal  # noqa: E402,F401  (imported up front: a first lazy import is not a hang)

SETTINGS = settings(max_examples=60, deadline=3000, suppress_health_check=[HealthCheck.too_slow])
FORMS = ("AFFN", "PAC", "SQZ", "DIF", "DUP", "DIFDUP")


@lru_cache(maxsize=None)
def _valid(form: str) -> bytes:
    import tempfile
    from pathlib import Path

    from specmatch.spectra import write_jcampdx

    ppm = np.linspace(10, 0, 600)
    y = 1 / (1 + ((ppm - 3) / 0.05) ** 2) + np.random.default_rng(0).normal(0, 1e-3, 600)
    y[300:340] = 0.0
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "v.jdx"
        write_jcampdx(Spectrum("1H", ppm, y, 400.0, "CDCl3", "fuzz"), p, form=form)
        return p.read_bytes()


def _last_data_line_start(data: bytes, form: str) -> int:
    """Start of the last line that carries points (in DIF forms the very last line
    only repeats the final ordinate as the Y-check, so losing it loses nothing)."""
    end = data.rindex(b"##END=")
    start = data.rindex(b"\n", 0, end - 1) + 1
    if form in ("DIF", "DIFDUP"):
        start = data.rindex(b"\n", 0, start - 1) + 1
    return start


def _read_ok_or_clear_error(data: bytes) -> None:
    try:
        read_jcampdx(data, source="damaged.jdx")
    except SpecmatchError as exc:
        assert str(exc)  # a message a chemist can act on, not an empty one


@SETTINGS
@given(form=st.sampled_from(FORMS), frac=st.floats(0.0, 1.0))
def test_truncation_before_the_last_data_line_is_reported(form, frac):
    data = _valid(form)
    cut = int(frac * _last_data_line_start(data, form))
    try:
        read_jcampdx(data[:cut], source="cut.jdx")
    except SpecmatchError as exc:
        assert str(exc)
    else:  # pragma: no cover - a short file must never read as complete
        raise AssertionError(f"truncated at byte {cut} of {len(data)} but read without error")


@SETTINGS
@given(form=st.sampled_from(FORMS), pos=st.floats(0.0, 1.0),
       byte=st.integers(0, 255), n=st.integers(1, 4))
def test_random_byte_corruption_never_crashes(form, pos, byte, n):
    data = bytearray(_valid(form))
    for k in range(n):
        i = min(int(pos * len(data)) + 7 * k, len(data) - 1)
        data[i] = byte
    _read_ok_or_clear_error(bytes(data))


@SETTINGS
@given(form=st.sampled_from(FORMS), pos=st.floats(0.0, 1.0), junk=st.binary(min_size=1, max_size=40))
def test_inserted_junk_never_crashes(form, pos, junk):
    data = _valid(form)
    i = int(pos * len(data))
    _read_ok_or_clear_error(data[:i] + junk + data[i:])


@SETTINGS
@given(form=st.sampled_from(("DIF", "DIFDUP")), line=st.integers(0, 10_000))
def test_dropped_data_line_in_dif_forms_is_caught(form, line):
    text = _valid(form).decode()
    lines = text.split("\n")
    first = next(i for i, s in enumerate(lines) if s.startswith("##XYDATA")) + 1
    last = next(i for i, s in enumerate(lines) if s.startswith("##END"))
    k = first + line % (last - 1 - first)  # not the final line: it only repeats the last ordinate
    damaged = "\n".join(lines[:k] + lines[k + 1:])
    try:
        read_jcampdx(damaged)
    except SpecmatchError:
        pass
    else:  # pragma: no cover
        raise AssertionError(f"data line {k + 1} dropped but the file read without error")


@SETTINGS
@given(data=st.binary(max_size=300))
def test_arbitrary_bytes_through_the_front_door(data):
    try:
        read_spectrum(data, name="upload.bin")
    except SpecmatchError:
        pass


@SETTINGS
@given(values=st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=0, max_size=400),
       nucleus=st.sampled_from(["1H", "13C"]), dept=st.booleans(),
       solvent=st.sampled_from([None, "CDCl3", "DMSO-d6", "D2O"]))
def test_processing_arbitrary_intensities_never_crashes(values, nucleus, dept, solvent):
    from specmatch.spectra import process_spectrum

    n = len(values)
    hi = 12.0 if nucleus == "1H" else 220.0
    sp = Spectrum(nucleus, np.linspace(hi, -1.0, n), np.asarray(values, float), 400.0, solvent, "fuzz")
    try:
        pl = process_spectrum(sp, dept135=dept and nucleus == "13C")
    except SpecmatchError:
        return
    assert all(np.isfinite(p.shift) for p in pl.peaks)
