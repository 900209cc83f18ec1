"""Machine-readable exports of an identification: JSON and a CSV of assignments."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

__all__ = ["ASSIGNMENT_COLUMNS", "assignment_rows", "assignments_csv", "result_json",
           "write_assignments_csv", "write_json"]

from ..identification.ranking import ASSIGNMENT_COLUMNS


def assignment_rows(result: Any) -> list[dict[str, Any]]:
    """One row per candidate and signal (see :meth:`Ranking.assignment_rows`)."""
    return result.ranking.assignment_rows()


def assignments_csv(result: Any) -> str:
    """The assignment table as CSV text (atoms 1-based, space separated)."""
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=list(ASSIGNMENT_COLUMNS), lineterminator="\n")
    w.writeheader()
    for row in assignment_rows(result):
        w.writerow({k: ("" if v is None else v) for k, v in row.items()})
    return buf.getvalue()


def result_json(result: Any, indent: int | None = 2) -> str:
    return json.dumps(result.to_dict(), indent=indent, ensure_ascii=False, default=str)


def write_json(result: Any, path: str) -> None:
    with open(path, "w", encoding="utf-8") as fh:
        fh.write(result_json(result))


def write_assignments_csv(result: Any, path: str) -> None:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(assignments_csv(result))
