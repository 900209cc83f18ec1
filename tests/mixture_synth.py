"""Synthetic crude 1H spectra of isomer mixtures, for the tests and the benchmarks (not
production code: benchmarks import it from here).

A mixture spectrum is built from *experimental* 1H shifts (one per set of
equivalent protons, assigned to the structure's atoms), first-order multiplets
(vicinal couplings between H on neighbouring sp3 carbons, J drawn near 7 Hz),
Lorentzian lines, white noise, a gentle baseline, and the usual extra lines of a
CDCl3 sample: CHCl3 at 7.26, water at 1.56, TMS at 0.00 ppm (residual-solvent
values as tabulated by Fulmer et al., Organometallics 2010, 29, 2176; from
memory). OH protons of all components exchange and give one broad line at their
amount-weighted mean shift.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np

from specmatch.identification.mixture.estimate import VICINAL_J_HZ, first_order_couplings
from specmatch.prediction.types import ProtonGroup
from specmatch.spectra.types import Spectrum
from specmatch.structures import parse_structure

__all__ = ["experimental_groups", "synthetic_spectrum"]


def experimental_groups(entry: Mapping, *, rng: np.random.Generator | None = None,
                        j_spread_hz: float = 0.5) -> tuple[tuple[ProtonGroup, ...], float | None]:
    """Proton groups with experimental shifts from a curated record.

    Parameters
    ----------
    entry : mapping
        ``smiles``; ``h1`` as in the nmrshiftdb2 record, ``[[shift_ppm, source_atom], ...]``;
        ``atom_map`` from source atom number (as text) to the SMILES heavy-atom index.
    rng : numpy Generator, optional
        Draws each vicinal J from ``VICINAL_J_HZ +- j_spread_hz`` (uniform), so the
        synthetic multiplets differ a little from the predicted ones.

    Returns
    -------
    (groups, oh_shift_ppm)
        One group per set of equivalent C-H protons (mean of the experimental shifts
        of its atoms; sets without a value take none and are left out), and the
        OH shift (None if the record has none).
    """
    st = parse_structure(entry["smiles"])
    amap = {int(k): int(v) for k, v in entry["atom_map"].items()}
    per_atom: dict[int, list[float]] = {}
    for shift, src in entry["h1"]:
        per_atom.setdefault(amap[int(src)], []).append(float(shift))
    groups = []
    oh = None
    for atoms in st.equivalence_sets():
        a = st.mol.GetAtomWithIdx(atoms[0])
        n_h = a.GetTotalNumHs()
        if n_h == 0:
            continue
        vals = [v for i in atoms for v in per_atom.get(i, [])]
        if a.GetSymbol() == "O":
            if vals:
                oh = float(np.mean(vals))
            continue
        if not vals:
            continue
        j = VICINAL_J_HZ if rng is None else None
        coup = []
        for n, _ in first_order_couplings(st, atoms):
            jj = j if j is not None else float(rng.uniform(VICINAL_J_HZ - j_spread_hz, VICINAL_J_HZ + j_spread_hz))
            coup.append((n, jj))
        groups.append(ProtonGroup(atoms=tuple(atoms), shift=float(np.mean(vals)), sigma=0.0,
                                  count=n_h * len(atoms), multiplicity="m", couplings=tuple(coup),
                                  environment="experimental"))
    return tuple(groups), oh


def synthetic_spectrum(
    components: Sequence[Sequence[ProtonGroup]],
    fractions: Sequence[float],
    *,
    oh_shifts_ppm: Sequence[float | None] = (),
    oh_per_molecule: Sequence[int] = (),
    frequency_mhz: float = 400.0,
    width_hz: float = 1.0,
    snr: float = 500.0,
    rng: np.random.Generator | None = None,
    solvent_lines: bool = True,
    baseline: bool = True,
    n_points: int = 32768,
) -> Spectrum:
    """A crude-mixture 1H spectrum on a descending 11 to -0.5 ppm axis.

    Parameters
    ----------
    components : per component, its proton groups (shift, count, couplings used)
    fractions : mole fractions (need not sum to 1)
    oh_shifts_ppm, oh_per_molecule : per component the OH shift and OH count
    snr : float
        Height of the tallest compound line over the noise sd.
    """
    from specmatch.prediction.simulate import sticks_1h

    rng = rng or np.random.default_rng(0)
    x = np.linspace(11.0, -0.5, n_points)
    y = np.zeros_like(x)
    hw = width_hz / frequency_mhz / 2.0

    def lines(centres, areas, half_width):
        d = x[:, None] - np.asarray(centres)[None, :]
        return (np.asarray(areas)[None, :] * (half_width / np.pi) / (d * d + half_width**2)).sum(axis=1)

    for groups, frac in zip(components, fractions):
        for g in groups:
            pos, inten = sticks_1h(g, frequency_mhz)
            y += frac * lines(pos, inten, hw)
    # exchanging OH protons: one broad line at the amount-weighted mean shift
    oh_amount = sum(f * n for f, n, s in zip(fractions, oh_per_molecule, oh_shifts_ppm) if s is not None)
    if oh_amount > 0:
        mean = sum(f * n * s for f, n, s in zip(fractions, oh_per_molecule, oh_shifts_ppm) if s is not None) / oh_amount
        y += lines([mean], [oh_amount], 12.0 / frequency_mhz / 2.0)
    top = float(y.max())
    if solvent_lines:
        # CHCl3, water, TMS: heights comparable to a crude sample's
        y += lines([7.26], [0.6 * top * np.pi * hw], hw)
        y += lines([1.56], [0.3 * top * np.pi * hw * 2.5], 2.5 * hw)
        y += lines([0.0], [0.2 * top * np.pi * hw], hw)
    if baseline:
        t = (x - 5.0) / 6.0
        y += top * (0.002 + 0.001 * t - 0.0015 * t * t)
    y += rng.normal(0.0, top / snr, size=x.shape)
    return Spectrum(nucleus="1H", ppm=x, intensity=y, frequency_mhz=frequency_mhz, solvent="CDCl3",
                    source="synthetic mixture (tests/mixture_synth.py)")
