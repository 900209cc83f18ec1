"""The 13C increment tables (CSV data files in ``prediction/tables/``), read once at import.

``tables/c13_increments.csv`` has one row per increment (term name, fitted value,
handbook value, the number of carbons it was refined on, meaning and source);
``tables/c13_sigma.csv`` the expected error per environment class and coverage.
``benchmarks/fit_c13_tables.py`` rewrites both.
"""

from __future__ import annotations

import csv
from pathlib import Path

TABLE_DIR = Path(__file__).resolve().parent.parent / "tables"
TABLES_VERSION = "c13-increments-2026-12-03+neighbour-layer-2026-12-03+morgan-codes-2026-12-03"


def _read_tables() -> tuple[dict[str, float], dict[str, int], dict[str, float]]:
    value: dict[str, float] = {}
    support: dict[str, int] = {}
    with open(TABLE_DIR / "c13_increments.csv", newline="", encoding="utf-8") as fh:
        rows = csv.reader(fh)
        head = next(rows)
        k_term, k_val, k_n = head.index("term"), head.index("shift_ppm"), head.index("n_carbons")
        for row in rows:
            value[row[k_term]] = float(row[k_val])
            support[row[k_term]] = int(row[k_n])
    sigma: dict[str, float] = {}
    with open(TABLE_DIR / "c13_sigma.csv", newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            sigma[row["class"]] = float(row["sigma_ppm"])
    return value, support, sigma


#: term -> increment (ppm); term -> number of fitting carbons; sigma class -> sigma (ppm)
VALUE, SUPPORT, SIGMA = _read_tables()
