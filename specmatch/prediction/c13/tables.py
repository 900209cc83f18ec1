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
TABLES_VERSION = "c13-increments-2026-12-03+neighbour-layer-2026-12-04b+morgan-codes-2026-12-04b"


def _read_increments(path: Path) -> tuple[dict[str, float], dict[str, int]]:
    """Term -> value and term -> carbon count of the increment CSV.

    The file is a megabyte, mostly the quoted meaning and source texts, and is read at
    every start of the command: as bytes (decoding the text costs 2-3 ms, the csv module
    another 8 ms) with the four leading columns split off each line. Those columns hold
    no quotes and no line ends in the file as written by ``benchmarks/fit_c13_tables.py``;
    a file that does not have this shape (another column order, a quoted term, a quoted
    field running over a line end) is read with the csv module instead, with the same
    result.
    """
    data = path.read_bytes()
    lines = data.split(b"\n")
    if lines[0].rstrip(b"\r").split(b",")[:4] == [b"term", b"shift_ppm", b"handbook_ppm", b"n_carbons"]:
        value: dict[str, float] = {}
        support: dict[str, int] = {}
        try:
            for line in lines[1:]:
                if not line.strip():
                    continue
                parts = line.split(b",", 4)
                # a quoted term, or a quoted field spanning lines (odd quotes): the csv module
                # (a quoted value or count fails its conversion below, with the same effect)
                if len(parts) < 5 or b'"' in parts[0] or line.count(b'"') % 2:
                    raise ValueError(line)
                term = parts[0].decode("utf-8")
                value[term] = float(parts[1])
                support[term] = int(parts[3])
            return value, support
        except ValueError:
            pass
    value, support = {}, {}
    with open(path, newline="", encoding="utf-8") as fh:
        rows = csv.reader(fh)
        head = next(rows)
        k_term, k_val, k_n = head.index("term"), head.index("shift_ppm"), head.index("n_carbons")
        for row in rows:
            value[row[k_term]] = float(row[k_val])
            support[row[k_term]] = int(row[k_n])
    return value, support


def _read_tables() -> tuple[dict[str, float], dict[str, int], dict[str, float]]:
    value, support = _read_increments(TABLE_DIR / "c13_increments.csv")
    sigma: dict[str, float] = {}
    with open(TABLE_DIR / "c13_sigma.csv", newline="", encoding="utf-8") as fh:
        for row in csv.DictReader(fh):
            sigma[row["class"]] = float(row["sigma_ppm"])
    return value, support, sigma


#: term -> increment (ppm); term -> number of fitting carbons; sigma class -> sigma (ppm)
VALUE, SUPPORT, SIGMA = _read_tables()
