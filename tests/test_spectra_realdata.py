"""Multiplet analysis on realistic line shapes: first-order patterns named with J to +-0.3 Hz despite
roofing, line width and noise; 13C satellites and spinning sidebands flagged, not listed.

The traces are synthetic (built here): Lorentzian lines of 0.8-1.1 Hz width with a roofing tilt,
at 400 MHz. Coupling constants of the named groups are typical values (from memory: vinyl
3J(trans) ~14-17 Hz, 3J(cis) ~7-11 Hz, allylic ~1-4 Hz; alkyl 3J ~7 Hz).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from specmatch.spectra import Spectrum, process_spectrum

FREQ = 400.0


def _lines(centre_ppm: float, js: list[float], roof: float) -> list[tuple[float, float]]:
    """First-order lines (ppm, intensity) of a proton coupled by `js`, tilted by `roof`."""
    offs = [0.0]
    for j in js:
        offs = [o + s * j / 2 for o in offs for s in (-1, 1)]
    span = max(abs(o) for o in offs) or 1.0
    return [(centre_ppm + o / FREQ, 1.0 + roof * o / span) for o in offs]


def _trace(signals, *, n=32768, width_hz=0.9, noise=3e-4, seed=0, extra=()):
    ppm = np.linspace(10.0, 0.0, n)
    y = np.zeros(n)
    hw = width_hz / 2
    for centre, js, n_h, roof in signals:
        lines = _lines(centre, js, roof)
        for pos, inten in lines:
            y += n_h * inten / len(lines) / (1 + (((ppm - pos) * FREQ) / hw) ** 2)
    for pos, height in extra:
        y += height / (1 + (((ppm - pos) * FREQ) / hw) ** 2)
    y = y / y.max() + np.random.default_rng(seed).normal(0, noise, n)
    return Spectrum("1H", ppm, y, FREQ, None, "synthetic")


CASES = [
    ("d", [7.5]), ("t", [7.1, 7.1]), ("q", [7.2] * 3), ("quint", [6.8] * 4), ("sept", [6.9] * 6),
    ("dd", [14.3, 6.8]), ("dt", [15.6, 6.7, 6.7]), ("ddd", [16.0, 10.0, 3.5]),
]


@pytest.mark.parametrize("name,js", CASES)
@pytest.mark.parametrize("roof", [0.0, 0.3])
def test_first_order_patterns_on_line_shapes(name, js, roof):
    sp = _trace([(5.0, js, 1.0, roof), (1.0, [], 3.0, 0.0)])
    pl = process_spectrum(sp)
    m = min(pl.compound_multiplets(), key=lambda m: abs(m.shift - 5.0))
    assert m.multiplicity == name
    want = sorted({round(j, 1) for j in js}, reverse=True)
    assert len(m.j_hz) == len(want)
    for got, j in zip(sorted(m.j_hz, reverse=True), want):
        assert got == pytest.approx(j, abs=0.3)
    assert m.shift == pytest.approx(5.0, abs=0.002)


def test_second_order_triplet_with_short_centre_is_an_apparent_triplet():
    # 0.9 : 1.3 : 1.1 (an AA'XX' half seen as a "t", roofed)
    ppm = np.linspace(10.0, 0.0, 32768)
    y = np.zeros_like(ppm)
    for off, h in ((-5.2, 0.9), (0.0, 1.3), (5.2, 1.1)):
        y += h / (1 + (((ppm - 3.0 - off / FREQ) * FREQ) / 0.45) ** 2)
    y += 3.0 / (1 + (((ppm - 1.0) * FREQ) / 0.45) ** 2)
    y = y / y.max() + np.random.default_rng(2).normal(0, 3e-4, len(ppm))
    pl = process_spectrum(Spectrum("1H", ppm, y, FREQ, None, "aa'xx'"))
    m = min(pl.compound_multiplets(), key=lambda m: abs(m.shift - 3.0))
    assert m.multiplicity == "t" and m.j_hz[0] == pytest.approx(5.2, abs=0.3)


def test_unrelated_lines_stay_m():
    # four lines with no coupling tree and no binomial heights
    ppm = np.linspace(10.0, 0.0, 32768)
    y = np.zeros_like(ppm)
    for off, h in ((-9.0, 1.0), (-4.1, 0.3), (1.7, 0.8), (8.8, 0.45)):
        y += h / (1 + (((ppm - 4.0 - off / FREQ) * FREQ) / 0.45) ** 2)
    y += 2 / (1 + (((ppm - 1.0) * FREQ) / 0.45) ** 2)
    y = y / y.max() + np.random.default_rng(3).normal(0, 3e-4, len(ppm))
    pl = process_spectrum(Spectrum("1H", ppm, y, FREQ, None, "m"))
    m = min(pl.compound_multiplets(), key=lambda m: abs(m.shift - 4.0))
    assert m.multiplicity == "m"


def test_13c_satellites_are_flagged_and_not_listed():
    # a methyl singlet and its 13C satellites at +-1J(CH)/2 = +-63 Hz (1J(CH) ~126 Hz for a
    # C-CH3, from memory), each 0.55% of the parent (half of 1.1% natural 13C abundance)
    parent = 3.0
    sats = [(2.0 + s * 63.0 / FREQ, parent * 0.0055) for s in (-1, 1)]
    sp = _trace([(2.0, [], parent, 0.0), (4.0, [7.0, 7.0], 2.0, 0.0)], extra=sats, noise=2e-5)
    pl = process_spectrum(sp)
    flagged = [m for m in pl.multiplets if m.flag == "13C satellite"]
    assert len(flagged) == 2
    assert all(abs(abs(m.shift - 2.0) * FREQ - 63.0) < 1.0 for m in flagged)
    assert not any(abs(abs(m.shift - 2.0) * FREQ - 63.0) < 2.0 for m in pl.compound_multiplets())


def test_a_real_small_signal_is_not_taken_for_a_satellite():
    # 5% of the parent and on one side only: a signal of its own
    sp = _trace([(2.0, [], 3.0, 0.0)], extra=[(2.0 + 63.0 / FREQ, 0.15)], noise=2e-5)
    pl = process_spectrum(sp)
    assert any(abs(m.shift - (2.0 + 63.0 / FREQ)) < 0.003 for m in pl.compound_multiplets())


@pytest.mark.parametrize("fraction,flagged", [(0.02, 4), (0.008, 0)])
def test_spinning_sidebands_are_not_listed(fraction, flagged):
    # sidebands at +-20 Hz (the spinning rate) around each strong singlet: at 2% they are
    # flagged; at 0.8% they are dropped as the foot of the line. Either way not compound signals.
    extra = [(c + s * 20.0 / FREQ, h * fraction) for c, h in ((3.5, 3.0), (1.2, 6.0)) for s in (-1, 1)]
    sp = _trace([(3.5, [], 3.0, 0.0), (1.2, [], 6.0, 0.0)], extra=extra, noise=2e-5)
    pl = process_spectrum(sp)
    side = [m for m in pl.multiplets if m.flag == "spinning sideband"]
    assert len(side) == flagged
    assert {round(m.shift, 2) for m in pl.compound_multiplets()} == {3.5, 1.2}


def test_integrals_are_relative_and_scale_to_whole_protons():
    from specmatch.spectra import scale_integrals

    sp = _trace([(3.6, [7.0] * 3, 2.0, 0.1), (1.2, [7.0] * 2, 3.0, 0.1), (2.1, [], 3.0, 0.0)])
    pl = process_spectrum(sp)
    assert pl.integral_unit == "percent"
    assert sum(m.integral for m in pl.compound_multiplets()) == pytest.approx(100.0, abs=0.05)
    h = scale_integrals(pl, formula="CC(=O)OCC")  # ethyl acetate, C4H8O2: 8 H
    assert h.integral_unit == "H"
    got = sorted((round(m.shift, 1), round(m.integral)) for m in h.compound_multiplets())
    assert got == [(1.2, 3), (2.1, 3), (3.6, 2)]
    assert all(abs(m.integral - round(m.integral)) < 0.15 for m in h.compound_multiplets())


@pytest.mark.parametrize("n_lines,spacing", list(itertools.product([2, 3], [0.4, 0.8])))
def test_unresolved_close_lines_do_not_split_a_singlet(n_lines, spacing):
    # lines closer than the line width are one line for the analysis
    sp = _trace([(2.0, [spacing] * (n_lines - 1), 3.0, 0.0), (4.0, [], 1.0, 0.0)])
    pl = process_spectrum(sp)
    m = min(pl.compound_multiplets(), key=lambda m: abs(m.shift - 2.0))
    assert m.integral == pytest.approx(75.0, abs=2.0)
