"""Exact spin simulation against closed-form results of the literature.

References for the analytic expressions written out below:

* [PSB] J. A. Pople, W. G. Schneider, H. J. Bernstein, "High-resolution Nuclear
  Magnetic Resonance", McGraw-Hill 1959, ch. 6 (AB, AB2, ABX, A2B2/AA'BB' energy
  levels in symmetrised product bases; X approximation).
* [G] H. Günther, "NMR Spectroscopy", 3rd ed., Wiley 2013, ch. 4 and 5 (the same
  expressions in the now usual notation; the AB2 rule nu_A = line 3, nu_B = mean of
  lines 5 and 7; the AA'BB' parameters K, L, M, N).

Tolerances are the ones the project promises: 0.01 Hz in position and 0.5% in
relative intensity. Intensities are normalised so that they sum to the number of
spins (the convention of specmatch.prediction.spin).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from specmatch.errors import SpecmatchError
from specmatch.prediction.spin import (
    MERGE_HZ,
    SpinSystem,
    composite_spins,
    equivalence_groups,
    simulate_spins,
)

POS_TOL_HZ = 0.01
INT_TOL = 0.005


def _match(lines, expected, n_spins, min_rel=1e-4):
    """Every expected (hz, intensity) line is present; nothing else above min_rel is."""
    hz, inten = lines.hz, lines.intensity
    assert inten.sum() == pytest.approx(n_spins, rel=1e-9)
    exp = sorted((float(h), float(i)) for h, i in expected if i > min_rel * n_spins)
    got = [(h, i) for h, i in zip(hz, inten) if i > min_rel * n_spins]
    # merge expected lines closer than the simulator's merge distance
    merged: list[list[float]] = []
    for h, i in exp:
        if merged and h - merged[-1][0] < MERGE_HZ:
            tot = merged[-1][1] + i
            merged[-1][0] = (merged[-1][0] * merged[-1][1] + h * i) / tot
            merged[-1][1] = tot
        else:
            merged.append([h, i])
    assert len(got) == len(merged), (got, merged)
    big = max(i for _, i in merged)
    for (gh, gi), (eh, ei) in zip(got, merged):
        assert gh == pytest.approx(eh, abs=POS_TOL_HZ)
        assert gi == pytest.approx(ei, abs=INT_TOL * big)


def _two_by_two(a, d, b):
    """Eigenvalues and eigenvectors of [[a, b], [b, d]] in closed form (ascending)."""
    mean, half = (a + d) / 2.0, (a - d) / 2.0
    r = np.hypot(half, b)
    theta = 0.5 * np.arctan2(b, half)  # tan 2theta = 2b / (a - d)
    up = np.array([np.cos(theta), np.sin(theta)])
    lo = np.array([-np.sin(theta), np.cos(theta)])
    return (mean - r, lo), (mean + r, up)


# ---------------------------------------------------------------------------- AB
@pytest.mark.parametrize("dnu,j", [(20.0, 10.0), (5.0, 12.0), (60.0, 7.0), (1.0, 15.0)])
def test_ab_quartet(dnu, j):
    # [PSB] 6-2, [G] 4.3: lines nu0 +- D/2 +- J/2 with D = sqrt(dnu^2 + J^2);
    # inner lines (1 + J/D), outer lines (1 - J/D) (here / 2 so that they sum to 2)
    f = 100.0
    na, nb = 2.0 * f, 2.0 * f + dnu
    lines = simulate_spins([na / f, nb / f], [(0, 1, j)], f)
    nu0, D = (na + nb) / 2.0, np.hypot(dnu, j)
    s = j / D
    expected = [(nu0 - D / 2 - j / 2, (1 - s) / 2), (nu0 - D / 2 + j / 2, (1 + s) / 2),
                (nu0 + D / 2 - j / 2, (1 + s) / 2), (nu0 + D / 2 + j / 2, (1 - s) / 2)]
    _match(lines, expected, 2)


def test_ab_limits_first_order_and_a2():
    # AX limit (dnu >> J): a doublet on each spin, J apart (first order, common practice);
    # A2 limit: one line, coupling invisible ([PSB] 6-2)
    lines = simulate_spins([1.0, 6.0], [(0, 1, 7.0)], 400.0)
    assert np.diff(lines.hz[:2])[0] == pytest.approx(7.0, abs=0.01)
    one = simulate_spins([1.0, 1.0], [(0, 1, 7.0)], 400.0)
    assert one.hz == pytest.approx([400.0])
    assert one.intensity == pytest.approx([2.0])


# --------------------------------------------------------------------------- AB2
def _ab2_expected(na, nb, j):
    """All AB2 lines from the closed-form 2x2 blocks of [PSB] 6-4 (symmetric B2 functions).

    States |m_A, I_B, M_B>. I_B = 1: M = 3/2 and -3/2 single states, M = +-1/2
    2x2 blocks; I_B = 0: one line at nu_A.
    """
    r2 = np.sqrt(2.0)
    e32 = na / 2 + nb + j / 2
    em32 = -na / 2 - nb + j / 2
    # M = 1/2: |a,0>, |b,1>
    p = _two_by_two(na / 2, -na / 2 + nb - j / 2, j / r2)
    # M = -1/2: |a,-1>, |b,0>
    m = _two_by_two(na / 2 - nb - j / 2, -na / 2, j / r2)
    lines = []
    # F+ = I+_A + F+_B; <a,1|F+|a,0> = sqrt2, <a,1|F+|b,1> = 1
    for e, v in p:
        lines.append((e32 - e, (r2 * v[0] + v[1]) ** 2))
    # M=-1/2 -> M=1/2: <a,0|F+|a,-1> = sqrt2, <a,0|F+|b,0> = 1, <b,1|F+|b,0> = sqrt2
    for (e1, v1), (e0, v0) in itertools.product(p, m):
        amp = v1[0] * (r2 * v0[0] + v0[1]) + v1[1] * (r2 * v0[1])
        lines.append((e1 - e0, amp**2))
    # M=-3/2 |b,-1> -> M=-1/2: <a,-1|F+|b,-1> = 1, <b,0|F+|b,-1> = sqrt2
    for e, v in m:
        lines.append((e - em32, (v[0] + r2 * v[1]) ** 2))
    lines.append((na, 1.0))  # I_B = 0: |b,0,0> -> |a,0,0>
    return [(h, i / 4.0) for h, i in lines]  # 2**(3-1) = 4


@pytest.mark.parametrize("dnu,j", [(30.0, 10.0), (8.0, 10.0), (-15.0, 7.0)])
def test_ab2_all_lines(dnu, j):
    f = 60.0
    na, nb = 120.0 + dnu, 120.0
    lines = simulate_spins([na / f, nb / f, nb / f], [(0, 1, j), (0, 2, j)], f)
    _match(lines, _ab2_expected(na, nb, j), 3)


def test_ab2_analysis_rule():
    # [G] 4.4.2: in an AB2 spectrum nu_A is line 3 and nu_B the mean of lines 5 and 7
    # (lines numbered from the A side, combination line 9 excluded)
    f, j = 100.0, 6.0
    na, nb = 130.0, 110.0
    lines = simulate_spins([na / f, nb / f, nb / f], [(0, 1, j), (0, 2, j)], f)
    main = [h for h, i in sorted(zip(lines.hz, lines.intensity), key=lambda t: -t[0]) if i > 0.02]
    assert len(main) == 8
    assert main[2] == pytest.approx(na, abs=POS_TOL_HZ)
    assert (main[4] + main[6]) / 2 == pytest.approx(nb, abs=POS_TOL_HZ)


# --------------------------------------------------------------------------- ABX
def _abx_expected(na, nb, nx, jab, jax, jbx):
    """ABX lines in the X approximation ([PSB] 6-5, [G] 5.2).

    AB part: two AB sub-quartets for m_X = +-1/2 with effective offsets
    nu_A +- J_AX/2, nu_B +- J_BX/2:  2D+- = sqrt((dnu +- (J_AX - J_BX)/2)^2 + J_AB^2),
    lines nu_AB +- (J_AX + J_BX)/4 +- J_AB/2 +- D+-, intensities 1 -+ sin 2phi+-,
    sin 2phi+- = J_AB / (2 D+-). X part: nu_X +- (J_AX + J_BX)/2 (intensity 1 each),
    nu_X +- (D+ - D-) with cos^2(phi+ - phi-), combination lines nu_X +- (D+ + D-)
    with sin^2(phi+ - phi-). Units: AB part sums to 8, X part to 4 (then / 4).
    """
    nab, dnu = (na + nb) / 2.0, na - nb
    out = []
    phis = {}
    ds = {}
    for sgn in (1, -1):
        d2 = np.hypot(dnu + sgn * (jax - jbx) / 2.0, jab)  # 2 D
        D = d2 / 2.0
        s2 = jab / d2
        phis[sgn] = 0.5 * np.arctan2(jab, dnu + sgn * (jax - jbx) / 2.0)
        ds[sgn] = D
        c = nab + sgn * (jax + jbx) / 4.0
        out += [(c - jab / 2 - D, 1 - s2), (c + jab / 2 - D, 1 + s2),
                (c - jab / 2 + D, 1 + s2), (c + jab / 2 + D, 1 - s2)]
    dphi = phis[1] - phis[-1]
    dp, dm = ds[1], ds[-1]
    out += [(nx + (jax + jbx) / 2, 1.0), (nx - (jax + jbx) / 2, 1.0),
            (nx + (dp - dm), np.cos(dphi) ** 2), (nx - (dp - dm), np.cos(dphi) ** 2),
            (nx + (dp + dm), np.sin(dphi) ** 2), (nx - (dp + dm), np.sin(dphi) ** 2)]
    return [(h, i / 4.0) for h, i in out]


@pytest.mark.parametrize("jab,jax,jbx,dnu", [(-14.0, 7.0, 4.0, 12.0), (-12.0, 10.0, 1.0, 6.0), (17.0, 3.0, 9.0, 25.0)])
@pytest.mark.parametrize("reduce", [True, False])
def test_abx(jab, jax, jbx, dnu, reduce):
    # X 10 ppm away at 400 MHz: the neglected terms are below 1e-3 Hz
    f = 400.0
    na, nb, nx = 1000.0 + dnu, 1000.0, 5000.0
    lines = simulate_spins([na / f, nb / f, nx / f], [(0, 1, jab), (0, 2, jax), (1, 2, jbx)], f, reduce=reduce)
    _match(lines, _abx_expected(na, nb, nx, jab, jax, jbx), 3)


# ------------------------------------------------------ AA'BB' and A2B2 (closed-form subsets)
def _aabb_closed_form_lines(na, nb, jaa, jbb, jab, jabp):
    """The AA'BB' lines that come from 2x2 blocks ([PSB] 6-6, [G] 5.4), with
    K = J_AA' + J_BB', L = J_AB - J_AB', M = J_AA' - J_BB', N = J_AB + J_AB'.

    * N lines: |aaaa> (E = nu_A + nu_B + (K + 2N)/4) to the symmetric M = 1 pair
      [[nu_B - M/4 + J_AA'/2, N/2], [N/2, nu_A + M/4 + J_BB'/2]], F- elements sqrt2, sqrt2.
    * L lines: antisymmetric M = 1 pair [[nu_B - M/4 - J_AA'/2, L/2], [L/2, nu_A + M/4 - J_BB'/2]]
      to the antisymmetric M = 0 pair [[(-K + 2L)/4, -M/2], [-M/2, (-K - 2L)/4]];
      F+ maps u -> a_A + a_B and w -> a_A - a_B.
    The M <= 0 halves follow by inverting all spins (nu -> -nu, lines -> -lines).
    Intensities / 2**(4-1).
    """
    K, L, M, N = jaa + jbb, jab - jabp, jaa - jbb, jab + jabp

    def upper(na, nb):
        out = []
        top = na + nb + (K + 2 * N) / 4
        for e, v in _two_by_two(nb - M / 4 + jaa / 2, na + M / 4 + jbb / 2, N / 2):
            out.append((top - e, 2 * (v[0] + v[1]) ** 2))
        one = _two_by_two(nb - M / 4 - jaa / 2, na + M / 4 - jbb / 2, L / 2)
        zero = _two_by_two((-K + 2 * L) / 4, (-K - 2 * L) / 4, -M / 2)
        for (e1, v1), (e0, v0) in itertools.product(one, zero):
            # F+ |psi0> = v0[0] (a_A + a_B) + v0[1] (a_A - a_B)
            amp = v1[0] * (v0[0] + v0[1]) + v1[1] * (v0[0] - v0[1])
            out.append((e1 - e0, amp**2))
        return out

    lines = upper(na, nb) + [(-h, i) for h, i in upper(-na, -nb)]
    return [(h, i / 8.0) for h, i in lines]


def _aabb_system(f, na, nb, jaa, jbb, jab, jabp):
    # spins 0 = A, 1 = A', 2 = B, 3 = B'
    return simulate_spins([na / f, na / f, nb / f, nb / f],
                          [(0, 1, jaa), (2, 3, jbb), (0, 2, jab), (1, 3, jab), (0, 3, jabp), (1, 2, jabp)], f)


def _assert_contains(lines, expected):
    """Each expected line (coincident ones summed) is a line of the simulation."""
    summed: dict[float, float] = {}
    for h, i in expected:
        key = next((k for k in summed if abs(k - h) < MERGE_HZ), h)
        summed[key] = summed.get(key, 0.0) + i
    for h, i in summed.items():
        if i < 1e-4:
            continue
        k = int(np.argmin(np.abs(lines.hz - h)))
        assert lines.hz[k] == pytest.approx(h, abs=POS_TOL_HZ)
        assert lines.intensity[k] == pytest.approx(i, abs=INT_TOL * lines.intensity.max())


@pytest.mark.parametrize("params", [
    # X-CH2-CH2-Y like: geminal -12, vicinal J 8 / J' 5 (rotamer averaged; typical values, from memory)
    (60.0, 210.0, 180.0, -12.0, -12.5, 8.0, 5.0),
    # para-disubstituted benzene like: J_AB (ortho) 8.5, J_AB' (para) 0.4, J_AA' (meta) 2.5, J_BB' 2.2
    (400.0, 2950.0, 2830.0, 2.5, 2.2, 8.5, 0.4),
])
def test_aa_bb_closed_form_lines(params):
    f, na, nb, jaa, jbb, jab, jabp = params
    lines = _aabb_system(f, na, nb, jaa, jbb, jab, jabp)
    assert lines.intensity.sum() == pytest.approx(4.0)
    _assert_contains(lines, _aabb_closed_form_lines(na, nb, jaa, jbb, jab, jabp))
    # [G] 5.4: the two halves of an AA'BB' spectrum are mirror images about nu0
    nu0 = (na + nb) / 2
    strong = lines.intensity > 1e-3
    mirrored = 2 * nu0 - lines.hz[strong]
    for h in mirrored:
        assert np.min(np.abs(lines.hz[strong] - h)) < POS_TOL_HZ


def test_a2b2_is_aa_bb_with_equal_vicinal_couplings():
    # A2B2 = AA'BB' with J_AB = J_AB' (L = 0): magnetically equivalent pairs, composite particles
    f, na, nb, jv = 60.0, 210.0, 190.0, 7.0
    lines = _aabb_system(f, na, nb, -12.0, -12.0, jv, jv)
    _assert_contains(lines, _aabb_closed_form_lines(na, nb, -12.0, -12.0, jv, jv))
    # the geminal couplings cannot show in A2B2: changing them changes nothing ([PSB] 6-1)
    other = _aabb_system(f, na, nb, -15.0, 3.0, jv, jv)
    assert other.hz == pytest.approx(lines.hz, abs=1e-6)
    assert other.intensity == pytest.approx(lines.intensity, abs=1e-9)


# --------------------------------------------------------------------------- AnBm
def _an_bm_top_lines(na, nb, n_a, n_b, j):
    """The two lines from the all-up state of A_nB_m ([PSB] 6-4, composite spins
    I_A = n/2, I_B = m/2): E_top = I_A nu_A + I_B nu_B + J I_A I_B; the M - 1 pair
    |I_A - 1, I_B>, |I_A, I_B - 1> has diagonal (I_A - 1) nu_A + I_B nu_B + J (I_A - 1) I_B,
    I_A nu_A + (I_B - 1) nu_B + J I_A (I_B - 1) and off-diagonal J sqrt(2 I_A) sqrt(2 I_B) / 2;
    F- elements sqrt(2 I_A), sqrt(2 I_B). Intensities / 2**(n + m - 1)."""
    ia, ib = n_a / 2, n_b / 2
    top = ia * na + ib * nb + j * ia * ib
    out = []
    for e, v in _two_by_two((ia - 1) * na + ib * nb + j * (ia - 1) * ib, ia * na + (ib - 1) * nb + j * ia * (ib - 1),
                            j * np.sqrt(2 * ia) * np.sqrt(2 * ib) / 2):
        out.append((top - e, (np.sqrt(2 * ia) * v[0] + np.sqrt(2 * ib) * v[1]) ** 2 / 2 ** (n_a + n_b - 1)))
    return out


@pytest.mark.parametrize("f", [40.0, 60.0, 400.0])
def test_a3x2_ethyl(f):
    # an ethyl group CH3 1.2 / CH2 3.6 ppm, J 7.0 Hz (typical, from memory)
    na, nb, j = 1.2 * f, 3.6 * f, 7.0
    lines = simulate_spins([1.2] * 3 + [3.6] * 2, [(a, b, j) for a in range(3) for b in (3, 4)], f)
    assert lines.intensity.sum() == pytest.approx(5.0)
    _assert_contains(lines, _an_bm_top_lines(na, nb, 3, 2, j))
    _assert_contains(lines, [(-h, i) for h, i in _an_bm_top_lines(-na, -nb, 3, 2, j)])
    if f >= 400:
        # first-order limit (dnu/J = 137): 1:2:1 triplet and 1:3:3:1 quartet (common practice);
        # second-order fine structure (J^2/dnu ~ 0.05 Hz) stays inside 0.2 Hz of each line
        big = lines.intensity > 1e-3
        hz, inten = lines.hz[big], lines.intensity[big]
        first = [(na + k * j, 3 * w / 4) for k, w in ((-1, 1), (0, 2), (1, 1))] + \
                [(nb + k * j, 2 * w / 8) for k, w in ((-1.5, 1), (-0.5, 3), (0.5, 3), (1.5, 1))]
        for h, i in first:
            near = np.abs(hz - h) < 0.2
            # the roof effect tilts intensities by about 2 J/dnu per line step (~1.5% here)
            assert inten[near].sum() == pytest.approx(i, rel=0.03)
            assert np.average(hz[near], weights=inten[near]) == pytest.approx(h, abs=0.05)


def test_a2b2_and_ab2_top_lines():
    f = 60.0
    _assert_contains(_aabb_system(f, 200.0, 185.0, 0.0, 0.0, 7.0, 7.0), _an_bm_top_lines(200.0, 185.0, 2, 2, 7.0))
    ab2 = simulate_spins([130 / f, 110 / f, 110 / f], [(0, 1, 6.0), (0, 2, 6.0)], f)
    _assert_contains(ab2, _an_bm_top_lines(130.0, 110.0, 1, 2, 6.0))


# ------------------------------------------------- composite particles = full product space
@pytest.mark.parametrize("system", [
    # isopropyl CH(CH3)2: CH 2.9, CH3 1.2, J 6.9 at 60 MHz
    ([2.9] + [1.2] * 6, [(0, k, 6.9) for k in range(1, 7)]),
    # tert-butyl next to a CH2 with a 0.5 Hz long-range coupling (strongly coupled at 40 MHz)
    ([1.0] * 9 + [1.1] * 2, [(a, b, 0.5) for a in range(9) for b in (9, 10)]),
    # propyl: CH3-CH2-CH2-X at 60 MHz
    ([0.95] * 3 + [1.6] * 2 + [3.4] * 2, [(a, b, 7.3) for a in range(3) for b in (3, 4)]
     + [(a, b, 6.8) for a in (3, 4) for b in (5, 6)]),
])
def test_composite_particles_equal_full_space(system):
    shifts, coup = system
    f = 60.0 if len(shifts) < 11 else 40.0
    fast = simulate_spins(shifts, coup, f)
    full = simulate_spins(shifts, coup, f, reduce=False, composite=False)
    assert fast.intensity.sum() == pytest.approx(len(shifts))
    keep_f, keep_r = fast.intensity > 1e-5, full.intensity > 1e-5
    # same lines; 1e-4 Hz allows for where the 0.005 Hz merging cuts
    assert fast.hz[keep_f] == pytest.approx(full.hz[keep_r], abs=1e-4)
    assert fast.intensity[keep_f] == pytest.approx(full.intensity[keep_r], abs=1e-7)


def test_composite_multiplicities():
    # n spins 1/2 -> total spins with multiplicities (angular-momentum addition; [PSB] 6-1):
    # CH3: 3/2 x1 + 1/2 x2; four spins: 2 x1, 1 x3, 0 x2; dimension sums to 2**n
    assert composite_spins(3) == ((1.5, 1), (0.5, 2))
    assert composite_spins(4) == ((2.0, 1), (1.0, 3), (0.0, 2))
    for n in range(1, 10):
        assert sum(m * (2 * s + 1) for s, m in composite_spins(n)) == 2**n


def test_magnetic_versus_chemical_equivalence():
    # AA'BB' (J_AB != J_AB'): A and A' are chemically but not magnetically equivalent
    nu = np.array([100.0, 100.0, 80.0, 80.0])
    J = np.zeros((4, 4))
    for a, b, v in [(0, 2, 8.0), (1, 3, 8.0), (0, 3, 5.0), (1, 2, 5.0)]:
        J[a, b] = J[b, a] = v
    assert equivalence_groups(nu, J) == [[0], [1], [2], [3]]
    J[0, 3] = J[3, 0] = J[1, 2] = J[2, 1] = 8.0
    assert equivalence_groups(nu, J) == [[0, 1], [2, 3]]


def test_close_lines_are_merged_and_weak_clusters_split():
    # two uncoupled spins 0.002 Hz apart give one line of intensity 2
    lines = simulate_spins([1.0, 1.0 + 0.002 / 400], [], 400.0)
    assert lines.hz.size == 1 and lines.intensity[0] == pytest.approx(2.0)
    # a long chain of weakly coupled spins is cheap and first order
    shifts = [1.0 + 1.5 * k for k in range(6)]
    chain = simulate_spins(shifts, [(k, k + 1, 0.3) for k in range(5)], 400.0)
    assert chain.intensity.sum() == pytest.approx(6.0)
    assert chain.dhz_dshift.sum(axis=1) == pytest.approx(np.ones(chain.hz.size))


def test_hellmann_feynman_derivatives():
    # d(line)/d(nu_i) from <Iz_i> differences agrees with a finite difference (AB, J 10, dnu 15)
    f = 100.0
    base = simulate_spins([1.0, 1.15], [(0, 1, 10.0)], f)
    step = simulate_spins([1.0 + 1e-4 / f, 1.15], [(0, 1, 10.0)], f)
    fd = (step.hz - base.hz) / 1e-4
    assert fd == pytest.approx(base.dhz_dshift[:, 0], abs=1e-3)


@pytest.mark.parametrize("bad,msg", [
    ({"couplings_hz": []}, "shifts_ppm"),
    ({"shifts_ppm": []}, "non-empty"),
    ({"shifts_ppm": [1.0, "x"]}, "numbers"),
    ({"shifts_ppm": [1.0, 2.0], "couplings_hz": [[0, 2, 7.0]]}, "outside"),
    ({"shifts_ppm": [1.0, 2.0], "couplings_hz": [[0, 0, 7.0]]}, "itself"),
    ({"shifts_ppm": [1.0, 2.0], "couplings_hz": [[0, 1]]}, "triple"),
    ({"shifts_ppm": [1.0, 2.0], "couplings_hz": [[0, 1, "seven"]]}, "number"),
    ([1, 2], "JSON object"),
])
def test_bad_spin_systems_are_refused(bad, msg):
    with pytest.raises(SpecmatchError, match=msg):
        SpinSystem.from_json(bad)


def test_bad_field_is_refused():
    with pytest.raises(SpecmatchError, match="MHz"):
        simulate_spins([1.0], [], 0.0)
