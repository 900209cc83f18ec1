"""Development records the 1H fits leave out (they stay in every measured figure).

Each entry is an nmrshiftdb2 record of the development part whose 1H list cannot
belong to the structure it is filed under, with the reason. The fits
(``fit_h1_tables.py``, the 1H part of ``fit_hose.py``) do not learn from them;
the benchmarks and ``../shared/tools/specbench.py`` still count them, and
``fit_hose.py`` prints its cross-validated 1H figures with and without them
(``fit_h1_tables.py`` reports on the records it fits).
"""

from __future__ import annotations

#: nmrshiftdb2_id -> why its 1H shifts are not those of the filed structure
H1_EXCLUDED: dict[int, str] = {
    60016160: "CC(F)(C(F)(F)F)C(F)(F)F: its CH3 listed at 8.25 ppm; a methyl on a saturated carbon with no "
              "aromatic ring or carbonyl in the molecule sits below 2.5 ppm (common practice; CH3CF2CF3 near 1.8)",
    60016162: "CC(F)(C(F)F)C(F)(F)F: CH3 listed at 8.42 ppm and CHF2 at 4.16 ppm; a methyl cannot be near 8.4 ppm "
              "here, and CHF2 protons on perfluoroalkyl carbons sit near 5.5-6.2 ppm (from memory)",
    60016167: "FC(F)C(F)(C(F)F)C(F)F: three CHF2 groups listed at 3.9 ppm; CHF2 protons on perfluoroalkyl carbons "
              "sit near 5.5-6.2 ppm (from memory)",
}
