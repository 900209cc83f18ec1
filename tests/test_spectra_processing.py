"""Processing: noise, peak picking, referencing, multiplets, integrals, flags, DEPT-135.

Outside references named beside the checks: the residual solvent / water / impurity
table of Fulmer et al., Organometallics 2010, 29, 2176; first-order multiplet rules
(n equivalent neighbours give n+1 lines in binomial ratio; common practice).
"""

from __future__ import annotations

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.spectra import Spectrum, peaklist_to_dict, peaks_from_file, process_spectrum, write_jcampdx
from specmatch.spectra.processing import baseline_correct, first_order, noise_level, pick_peaks
from specmatch.spectra.solvents import canonical_solvent, lines_for, solvent_table


def _lor(ppm, centre, width_hz, freq, area):
    hw = width_hz / 2
    x = (ppm - centre) * freq
    return area / (np.pi * hw) / (1 + (x / hw) ** 2)


def _multiplet(ppm, centre, freq, n_h, pattern, j_hz, width_hz=1.0):
    y = np.zeros_like(ppm)
    k = len(pattern)
    for i, a in enumerate(pattern):
        y += _lor(ppm, centre + (i - (k - 1) / 2) * j_hz / freq, width_hz, freq, n_h * a / sum(pattern))
    return y


def ethyl_spectrum(n=65536, freq=400.13, noise=2e-4, shift_ppm=0.0, seed=0) -> Spectrum:
    """Synthetic 1H spectrum of an ethyl group (CH2 q, CH3 t, J 7.1 Hz) in CDCl3 with TMS."""
    ppm = np.linspace(12, -1, n)
    y = _multiplet(ppm, 3.65, freq, 2, [1, 3, 3, 1], 7.1)
    y += _multiplet(ppm, 1.21, freq, 3, [1, 2, 1], 7.1)
    y += _lor(ppm, 7.26, 1.0, freq, 0.05) + _lor(ppm, 0.0, 1.0, freq, 0.2)
    y = y / y.max() + np.random.default_rng(seed).normal(0, noise, n)
    return Spectrum("1H", ppm + shift_ppm, y, freq, "CDCl3", "synthetic ethyl")


def carbon_spectrum(n=65536, freq=100.61, shift_ppm=0.0, dept=False) -> Spectrum:
    ppm = np.linspace(230, -10, n)
    y = np.zeros(n)
    if not dept:
        for k in (-1, 0, 1):  # CDCl3: 1:1:1 triplet, J(C,D) ~ 32 Hz (from memory)
            y += _lor(ppm, 77.16 + k * 32.0 / freq, 1.5, freq, 1.0)
        y += _lor(ppm, 170.0, 1.5, freq, 0.3)  # C=O (quaternary: absent in DEPT)
    signs = {60.5: 1.0, 31.3: -1.0, 14.2: 1.0} if dept else {60.5: 1.0, 31.3: 1.0, 14.2: 1.0}
    for c, s in signs.items():
        y += s * _lor(ppm, c, 1.5, freq, 0.8)
    y = y / np.abs(y).max() + np.random.default_rng(1).normal(0, 1e-3, n)
    return Spectrum("13C", ppm + shift_ppm, y, freq, "CDCl3", "synthetic 13C",
                    experiment="DEPT-135" if dept else "1D")


# ------------------------------------------------------------------------ array steps
def test_noise_estimate_is_robust_to_peaks():
    rng = np.random.default_rng(5)
    y = rng.normal(0, 1.0, 50_000)
    y[1000:1050] += 500.0  # a big signal must not inflate the estimate
    assert noise_level(y) == pytest.approx(1.0, rel=0.05)


def test_baseline_correction_removes_a_tilt_but_keeps_peaks():
    x = np.linspace(0, 1, 20_000)
    peak = 100 / (1 + ((x - 0.3) / 0.001) ** 2)
    y = peak + 5 + 8 * x + np.random.default_rng(2).normal(0, 0.1, len(x))
    yc = baseline_correct(y)
    assert abs(np.median(yc)) < 0.05
    assert yc.max() == pytest.approx(100, rel=0.02)


def test_parabolic_interpolation_finds_the_true_centre():
    ppm = np.linspace(5, 0, 1001)  # 0.005 ppm per point
    y = 1 / (1 + ((ppm - 2.5012) / 0.01) ** 2)
    p = pick_peaks(ppm, y, threshold=0.5, sigma=1e-3)
    assert len(p.ppm) == 1
    assert p.ppm[0] == pytest.approx(2.5012, abs=5e-4)  # a tenth of the point spacing


# -------------------------------------------------------------------- first order
@pytest.mark.parametrize("pattern, js, name", [
    ([1], (), "s"),
    ([1, 1], (7.0,), "d"),
    ([1, 2, 1], (7.0, 7.0), "t"),
    ([1, 3, 3, 1], (7.0,) * 3, "q"),
    ([1, 4, 6, 4, 1], (6.5,) * 4, "quint"),
    ([1, 6, 15, 20, 15, 6, 1], (6.8,) * 6, "sept"),
])
def test_binomial_patterns(pattern, js, name):
    # n equivalent neighbours: n+1 lines in binomial ratio (common practice)
    j = js[0] if js else 0.0
    pos = np.arange(len(pattern)) * j
    mult, jout, _ = first_order(pos, np.array(pattern, float))
    assert mult == name
    assert jout == ((round(j, 1),) if js else ())


def _tree(js):
    lines = np.array([0.0])
    for j in js:
        lines = np.concatenate((lines - j / 2, lines + j / 2))
    pos, counts = np.unique(np.round(lines, 6), return_counts=True)
    return pos, counts.astype(float)


@pytest.mark.parametrize("js, name, expected", [
    ((10.0, 4.0), "dd", (10.0, 4.0)),
    ((17.2, 10.4, 6.6), "ddd", (17.2, 10.4, 6.6)),
    ((7.5, 7.5, 1.5), "td", (7.5, 1.5)),
    ((7.0, 2.0, 2.0), "dt", (7.0, 2.0)),
    ((6.7, 6.7, 6.7, 5.0), "qd", (6.7, 5.0)),
])
def test_coupling_trees(js, name, expected):
    pos, h = _tree(js)
    mult, jout, centre = first_order(pos, h)
    assert mult == name
    assert jout == pytest.approx(expected, abs=0.05)
    assert centre == pytest.approx(0.0, abs=1e-6)


def test_unsymmetric_pattern_is_m():
    assert first_order(np.array([0.0, 3.0, 11.0]), np.array([1.0, 1.0, 1.0]))[0] == "m"
    assert first_order(np.array([0.0, 7.0, 14.0]), np.array([1.0, 5.0, 1.0]))[0] == "m"


# --------------------------------------------------------------------- the pipeline
def test_ethyl_group_gives_quartet_and_triplet_with_2_to_3_integrals():
    pl = process_spectrum(ethyl_spectrum(), solvent="CDCl3", total_h=5)
    comp = pl.compound_multiplets()
    assert [m.multiplicity for m in comp] == ["q", "t"]
    q, t = comp
    assert q.shift == pytest.approx(3.65, abs=0.002) and t.shift == pytest.approx(1.21, abs=0.002)
    assert q.j_hz[0] == pytest.approx(7.1, abs=0.3) and t.j_hz[0] == pytest.approx(7.1, abs=0.3)
    assert q.integral == pytest.approx(2.0, abs=0.1) and t.integral == pytest.approx(3.0, abs=0.1)
    flags = {m.flag for m in pl.multiplets} - {None}
    assert flags == {"solvent", "TMS"}


def test_tms_reference_corrects_a_shifted_axis():
    pl = process_spectrum(ethyl_spectrum(shift_ppm=0.037), solvent="CDCl3")
    assert pl.reference.startswith("TMS")
    assert "-0.037" in pl.reference
    q = pl.compound_multiplets()[0]
    assert q.shift == pytest.approx(3.65, abs=0.002)


def test_solvent_reference_when_there_is_no_tms():
    sp = carbon_spectrum(shift_ppm=0.21)
    pl = process_spectrum(sp, solvent="chloroform-d")
    # Fulmer et al. 2010: CDCl3 13C 77.16 ppm
    assert pl.reference.startswith("residual CDCl3 at 77.16 ppm")
    shifts = sorted(p.shift for p in pl.compound_peaks())
    assert shifts == pytest.approx([14.2, 31.3, 60.5, 170.0], abs=0.02)


def test_cdcl3_triplet_is_flagged_in_13c():
    pl = process_spectrum(carbon_spectrum(), solvent="CDCl3")
    solvent = [p.shift for p in pl.peaks if p.flag == "solvent"]
    # CDCl3: 77.16 ppm (Fulmer et al. 2010), 1:1:1 triplet from J(C,D) ~ 32 Hz (from memory)
    assert solvent == pytest.approx([77.16 + 32 / 100.61, 77.16, 77.16 - 32 / 100.61], abs=0.02)
    assert len(pl.compound_peaks()) == 4


def test_solvent_recognised_from_the_13c_pattern_when_not_given():
    sp = carbon_spectrum()
    sp = Spectrum(sp.nucleus, sp.ppm, sp.intensity, sp.frequency_mhz, None, sp.source)
    pl = process_spectrum(sp)
    assert pl.solvent == "CDCl3"
    assert sum(p.flag == "solvent" for p in pl.peaks) == 3


def test_dept135_signs_and_hydrogen_hints():
    pl = process_spectrum(carbon_spectrum(dept=True), solvent="CDCl3", dept135=True)
    by = {round(p.shift, 1): p for p in pl.peaks}
    assert by[31.3].sign == -1 and by[31.3].hydrogens == 2  # CH2 down
    assert by[60.5].sign == 1 and by[60.5].hydrogens is None  # CH or CH3 up: odd H count
    assert 170.0 not in by  # quaternary carbon absent
    assert pl.experiment == "DEPT-135"


def test_impurity_lines_are_flagged_when_weak():
    sp = ethyl_spectrum()
    # ethyl acetate in CDCl3 (Fulmer et al. 2010, values from memory): 2.05 s, 4.12 q, 1.26 t
    f = sp.frequency_mhz
    extra = (_multiplet(sp.ppm, 2.05, f, 0.09, [1], 0.0) + _multiplet(sp.ppm, 4.12, f, 0.06, [1, 3, 3, 1], 7.1)
             + _multiplet(sp.ppm, 1.26, f, 0.09, [1, 2, 1], 7.1))
    y = sp.intensity + extra / np.max(_multiplet(sp.ppm, 1.21, f, 3, [1, 2, 1], 7.1)) * 1.0
    pl = process_spectrum(Spectrum("1H", sp.ppm, y, f, "CDCl3", "ethyl + EtOAc"), solvent="CDCl3")
    flagged = {round(m.shift, 2) for m in pl.multiplets if m.flag == "impurity:ethyl acetate"}
    assert {2.05, 4.12} <= flagged
    assert [m.multiplicity for m in pl.compound_multiplets()][:1] == ["q"]


def test_water_is_flagged_in_cdcl3():
    sp = ethyl_spectrum()
    y = sp.intensity + 0.02 * _lor(sp.ppm, 1.56, 3.0, sp.frequency_mhz, 1.0)
    pl = process_spectrum(Spectrum("1H", sp.ppm, y, sp.frequency_mhz, "CDCl3", "wet"))
    water = [m for m in pl.multiplets if m.flag == "water"]
    # water in CDCl3: 1.56 ppm (Fulmer et al. 2010)
    assert len(water) == 1 and water[0].shift == pytest.approx(1.56, abs=0.01)


# --------------------------------------------------------------- nucleus/range checks
def test_13c_file_given_as_1h_is_refused(tmp_path):
    sp = carbon_spectrum(4096)
    p = tmp_path / "c.jdx"
    write_jcampdx(sp, p)
    with pytest.raises(SpecmatchError, match="says it is a 13C spectrum but 1H was given"):
        peaks_from_file(p, nucleus="1H")
    # without a nucleus record the range gives it away
    text = "\n".join(s for s in p.read_text().splitlines() if not s.startswith("##.OBSERVE NUCLEUS"))
    p.write_text(text)
    with pytest.raises(SpecmatchError, match="is it a 13C spectrum"):
        peaks_from_file(p, nucleus="1H")


def test_1h_window_given_as_13c_is_refused():
    sp = ethyl_spectrum(4096)
    with pytest.raises(SpecmatchError, match="is it a 1H spectrum"):
        process_spectrum(Spectrum("13C", sp.ppm, sp.intensity, 100.0, None, "x"))


def test_unknown_solvent_lists_the_known_ones():
    with pytest.raises(SpecmatchError, match="known solvents: CDCl3, DMSO-d6"):
        process_spectrum(ethyl_spectrum(4096), solvent="CCl4x")


# ------------------------------------------------------------------------ JSON shape
def test_json_shape_of_the_issue(tmp_path):
    p = tmp_path / "e.jdx"
    write_jcampdx(ethyl_spectrum(16384), p)
    d = peaklist_to_dict(peaks_from_file(p))
    assert set(d) >= {"nucleus", "frequency_mhz", "solvent", "reference", "peaks", "multiplets"}
    assert set(d["peaks"][0]) >= {"shift", "intensity", "flag"}
    m = d["multiplets"][1]
    assert set(m) >= {"shift", "range", "integral", "multiplicity", "j_hz", "flag"}
    assert len(m["range"]) == 2 and m["range"][0] <= m["shift"] <= m["range"][1]
    import json

    json.dumps(d)


# ---------------------------------------------------------------- the solvent table
@pytest.mark.parametrize("solvent, nucleus, shift", [
    # residual solvent signals, Fulmer et al., Organometallics 2010, 29, 2176
    ("CDCl3", "1H", 7.26), ("CDCl3", "13C", 77.16),
    ("DMSO-d6", "1H", 2.50), ("DMSO-d6", "13C", 39.52),
    ("CD3OD", "1H", 3.31), ("CD3OD", "13C", 49.00),
    ("C6D6", "1H", 7.16), ("C6D6", "13C", 128.06),
    ("acetone-d6", "1H", 2.05), ("acetone-d6", "13C", 29.84), ("acetone-d6", "13C", 206.26),
    ("CD3CN", "1H", 1.94), ("CD3CN", "13C", 1.32), ("CD3CN", "13C", 118.26),
    ("CD2Cl2", "1H", 5.32), ("CD2Cl2", "13C", 53.84),
    ("D2O", "1H", 4.79),
])
def test_residual_solvent_values(solvent, nucleus, shift):
    rows = [r for r in lines_for(solvent, nucleus) if r.kind == "solvent"]
    assert any(abs(r.shift_ppm - shift) < 1e-9 for r in rows)


@pytest.mark.parametrize("solvent, shift", [
    # water, Fulmer et al. 2010
    ("CDCl3", 1.56), ("acetone-d6", 2.84), ("DMSO-d6", 3.33), ("C6D6", 0.40), ("CD3CN", 2.13),
    ("CD2Cl2", 1.52),
])
def test_water_values(solvent, shift):
    assert [r.shift_ppm for r in lines_for(solvent, "1H") if r.kind == "water"] == [shift]


def test_every_row_names_its_source_and_multiplicity():
    rows = solvent_table()
    assert len(rows) > 300
    assert all(r.source for r in rows)
    assert all(r.multiplicity for r in rows)
    kinds = {r.kind for r in rows}
    assert kinds == {"solvent", "water", "TMS", "grease", "impurity"}
    names = {r.compound for r in rows if r.kind == "impurity"}
    assert {"acetone", "ethyl acetate", "n-hexane", "dichloromethane", "diethyl ether", "methanol",
            "ethanol", "toluene", "tetrahydrofuran"} <= names


def test_solvent_aliases():
    assert canonical_solvent("chloroform-d") == "CDCl3"
    assert canonical_solvent("DMSO") == "DMSO-d6"
    assert canonical_solvent("methanol-d4") == "CD3OD"
    assert canonical_solvent("nonsense", strict=False) is None
