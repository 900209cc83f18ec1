"""The exact (second-order) whole-spectrum fit: noise estimate and search.

The spectra here are drawn with the exact simulation itself (or are the invented demo
spectra, which are too), so the checks are about the fit machinery recovering what the
data were made with, not about the physics (tests/test_spin.py checks that against
closed-form results). The noise estimate is checked on Gaussian noise of known sd.
"""

from __future__ import annotations

import numpy as np
import pytest

from specmatch.identification.mixture.spectrum_fit import noise_sd
from specmatch.prediction.simulate import lorentzian_sum


def test_noise_sd_of_pure_noise():
    rng = np.random.default_rng(7)
    y = rng.normal(0.0, 2.0e-3, 20000)
    assert noise_sd(y) == pytest.approx(2.0e-3, rel=0.03)


def test_noise_sd_ignores_a_band_of_lines():
    # a tenth of the points carry sharp, tall lines (a crowded multiplet envelope): the
    # signal-free stretches still give the noise. One MAD over the whole spectrum would
    # read the line flanks as noise (it is kept here to show the test sees the difference).
    rng = np.random.default_rng(11)
    x = np.linspace(12.0, -0.5, 32768)
    centres = np.linspace(1.0, 2.2, 300)
    y = lorentzian_sum(x, centres, np.full(centres.size, 0.2), 0.9 / 400.0)
    y += rng.normal(0.0, 5e-4, x.size)
    dy = np.diff(y)
    single_mad = 1.4826 * np.median(np.abs(dy - np.median(dy))) / np.sqrt(2.0)
    assert single_mad > 1.05 * 5e-4
    assert noise_sd(y) == pytest.approx(5e-4, rel=0.03)


def test_noise_sd_of_a_short_spectrum():
    rng = np.random.default_rng(3)
    assert noise_sd(rng.normal(0.0, 1.0, 300)) == pytest.approx(1.0, rel=0.15)
    assert noise_sd(np.zeros(5)) == 0.0


@pytest.mark.parametrize("minor_smiles", ["CC(Br)C(C)CC", "CCC(C)C(C)Br"])
def test_minor_candidate_under_the_major_envelope_at_400_mhz(minor_smiles):
    # the invented demo (b): 80:20 3-bromo-3-methylpentane : 2-bromo-3-methylpentane at
    # 400 MHz, exact simulation of the table's shifts (sample_spectra/make_demo.py). The
    # minor's 3H doublet and CH lie among the major's CH2 multiplets; searched together
    # with the major the minor's groups took the major's lines (reduced chi-square ~1200,
    # first-order fallback). Placed after the major, with swaps, the fit reaches the noise
    # and the ratio. The second SMILES is the same molecule written in another atom order
    # (groups in another order: its triplet and doublet CH3 once ended on each other's lines).
    from specmatch.demo import demo_case
    from specmatch.identification.mixture.estimate import estimate_mixture
    from specmatch.spectra import read_jcampdx

    case = demo_case("b")
    spec = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    est = estimate_mixture(["CCC(C)(Br)CC", minor_smiles], spectrum=spec, solvent="CDCl3")
    fit = est.fit
    assert any("exact second-order" in n for n in fit.notes)
    assert fit.chi2_red < 1.5
    assert est.fractions == pytest.approx([0.8, 0.2], abs=0.01)
    assert est.integral_ratio is not None and not est.disagreement
    diff = np.abs(np.array(est.fractions) - np.array(est.integral_ratio.fractions))
    assert np.all(diff <= 2.0 * np.hypot(est.uncertainties, est.integral_ratio.uncertainties))


def test_trace_multiplets_of_a_candidate_stay_in_the_fit():
    # the peak picker flags weak multiplets "trace"; where a candidate (the unreacted
    # substrate, a few per cent) has its signals they are that candidate's lines: masked,
    # its amount would rest on the overlapped envelope alone. A trace multiplet where no
    # candidate can have a signal is still masked. Vinyl =CH near 5.8 ppm and =CH2 near
    # 4.9-5.0 ppm (common practice); the alkyl alcohols have nothing above 4.5 ppm.
    from specmatch.identification.mixture.estimate import _masks, _prepare_candidates
    from specmatch.spectra.types import Multiplet, Peak, PeakList

    cands = _prepare_candidates(["CCC1(O)CCCCC1", "C=CC1CCCCC1"], None)
    trace = [Multiplet(5.77, (5.73, 5.82), 0.2, "ddd", flag="trace"),
             Multiplet(4.87, (4.86, 4.89), 0.2, "dd", flag="trace"),
             Multiplet(8.10, (8.09, 8.11), 0.2, "s", flag="trace")]
    pl = PeakList("1H", tuple(Peak(m.shift, 0.01, flag="trace") for m in trace), tuple(trace),
                  frequency_mhz=400.0)

    def masked(masks, c):
        return any(min(a, b) <= c <= max(a, b) for a, b in masks)

    warnings: list[str] = []
    masks, names, _ = _masks(pl, "CDCl3", warnings, cands)
    assert not masked(masks, 5.77) and not masked(masks, 4.87)
    assert masked(masks, 8.10)
    assert not any("5.77" in w for w in warnings)  # expected, not news
    # without the substrate among the candidates nothing predicts the vinyl lines there
    masks, _, _ = _masks(pl, "CDCl3", [], cands[:1])
    assert masked(masks, 5.77) and masked(masks, 4.87)


def _demo_from_table(key: str):
    """A demo case's 1H spectrum, its truth, candidates, the group shifts it was drawn with
    (sample_spectra/shift_values.csv, through make_demo.py), the prepared candidates and the
    estimate's masks and extra lines: the set-up of a polish from known shifts."""
    import sys
    from pathlib import Path

    from specmatch.demo import demo_case
    from specmatch.identification.mixture.estimate import _masks, _prepare_candidates, _try_process
    from specmatch.spectra import read_jcampdx

    samples = str(Path(__file__).resolve().parents[1] / "sample_spectra")
    sys.path.insert(0, samples)
    try:
        import make_demo
    finally:
        sys.path.remove(samples)

    case = demo_case(key)
    spec = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    truth = {**case.truth, **case.impurities}
    cands = list(truth)
    rows = make_demo.read_table()
    start = [list(make_demo.group_shifts(smi, rows)[1]) for smi in cands]
    cs = _prepare_candidates(cands, None)
    masks, _, lines = _masks(_try_process(spec, "CDCl3", []), "CDCl3", [], cs)
    return spec, truth, cands, start, cs, masks, lines


def test_demo_a_from_the_shifts_it_was_made_with_reaches_the_noise():
    # the invented demo (a) at 400 MHz: 70:30 of the two alcohols and 4% unreacted
    # vinylcyclohexane, drawn by sample_spectra/make_demo.py with the exact simulation at the
    # shifts of shift_values.csv. Polished from those shifts, the exact model must fit to the
    # noise and return the tube's fractions: what is left on the search from the predicted
    # shifts (a crowded cyclohexyl envelope) is then the search's, not the model's.
    from specmatch.identification.mixture.spectrum_fit import fit_spectrum

    spec, truth, cands, start, cs, masks, lines = _demo_from_table("a")
    fit = fit_spectrum(spec.ppm, spec.intensity, [c.groups for c in cs], frequency_mhz=spec.frequency_mhz,
                       masks_ppm=masks, extra_lines_ppm=lines, predictions=[c.pred for c in cs],
                       start_shifts=start)
    assert fit.chi2_red < 1.3
    tot = sum(truth.values())
    assert fit.fractions == pytest.approx([truth[c] / tot for c in cands], abs=0.003)


@pytest.mark.parametrize("group, offset", [(3, 0.25), (0, -0.25)])
def test_demo_b_from_a_group_placed_off_its_place_returns_to_the_noise(group, offset):
    # the invented demo (b) (see above) polished from the shifts it was made with
    # (sample_spectra/shift_values.csv) but one group of the minor candidate placed 0.25 ppm
    # off (its 3H doublets: onto the major's envelope, or off it). The polish alone stalls
    # there (reduced chi-square in the hundreds or thousands: the lines it would have to move
    # onto are taken by the other candidate, or too far for a local step); the
    # residual-guided relocation moves the group back to the unexplained intensity.
    from specmatch.identification.mixture.spectrum_fit import fit_spectrum

    spec, truth, cands, start, cs, masks, lines = _demo_from_table("b")
    start[1][group] += offset
    kw = dict(frequency_mhz=spec.frequency_mhz, masks_ppm=masks, extra_lines_ppm=lines,
              predictions=[c.pred for c in cs], start_shifts=start)
    stuck = fit_spectrum(spec.ppm, spec.intensity, [c.groups for c in cs], **kw)
    assert stuck.chi2_red > 50.0  # the start is off the optimum's basin
    fit = fit_spectrum(spec.ppm, spec.intensity, [c.groups for c in cs], relocate=True, **kw)
    assert any("relocation" in n for n in fit.notes)
    assert fit.chi2_red < 1.3
    tot = sum(truth.values())
    assert fit.fractions == pytest.approx([truth[c] / tot for c in cands], abs=0.003)


def test_integral_anchor_of_the_picked_multiplets():
    # the proportions the exact fit's search holds the amounts in (fit_spectrum(anchor_fractions=...)):
    # read from the multiplet integrals, or none when there is nothing to read. Two invented
    # multiplets (a CH3 near 0.9 ppm, a CH-O near 3.5 ppm: common practice); with so few the
    # reading itself is not unique, so only its form is checked here (the demo figures are
    # benchmarks/bench_spin.py --demo-fit a)
    from specmatch.identification.mixture.estimate import _integral_anchor, _prepare_candidates
    from specmatch.spectra.types import Multiplet, Peak, PeakList

    cands = _prepare_candidates(["CCC1(O)CCCCC1", "CC(O)C1CCCCC1"], None)
    mults = [Multiplet(0.90, (0.87, 0.93), 3.0, "t"), Multiplet(3.55, (3.52, 3.58), 0.5, "m")]
    pl = PeakList("1H", tuple(Peak(m.shift, 1.0) for m in mults), tuple(mults), frequency_mhz=400.0)
    assert _integral_anchor(cands, None) is None
    assert _integral_anchor(cands[:1], pl) is None
    bare = PeakList("1H", pl.peaks, tuple(Multiplet(m.shift, m.range, None, m.multiplicity) for m in mults),
                    frequency_mhz=400.0)
    assert _integral_anchor(cands, bare) is None
    fr = _integral_anchor(cands, pl)
    assert fr is not None and fr.shape == (2,) and np.all(fr >= 0) and fr.sum() == pytest.approx(1.0, abs=1e-6)
