"""Batch prediction: one JSON-ready row per input line, in input order, on one or more processes.

Worker policy: ``workers=None`` ("auto") predicts in this process for batches of
fewer than :data:`AUTO_PARALLEL_MIN` lines (a pool's start-up would cost more
than it saves) and otherwise on ``min(os.cpu_count(), AUTO_MAX_WORKERS)``
processes; an explicit number is used as given (1 = this process). Workers are
forked after the tables are loaded, so they start in milliseconds, and they are
terminated with the pool whatever happens to the parent's loop.
"""

from __future__ import annotations

import os
from collections.abc import Iterator, Sequence
from typing import Any

from ..errors import SpecmatchError

#: below this many lines "auto" stays in one process
AUTO_PARALLEL_MIN = 1000
#: "auto" never uses more processes than this
AUTO_MAX_WORKERS = 4
#: lines handed to a worker at a time (amortises the inter-process traffic)
CHUNK = 64


def predict_row(line: str) -> dict[str, Any]:
    """The output row of one input line: the prediction, or ``ok: false`` with the reason.

    Blank lines and ``#`` comments give ``skipped: true`` rows (kept so output line
    n belongs to input line n); they are not failures.
    """
    from . import predict

    smi = line.strip()
    if not smi or smi.startswith("#"):
        return {"smiles": line, "ok": False, "skipped": True, "error": "empty line or comment"}
    smi = smi.split()[0]
    try:
        row = predict(smi).to_dict()
        row["smiles"] = smi
        return row
    except SpecmatchError as exc:
        return {"smiles": smi, "ok": False, "error": str(exc)}
    except Exception as exc:  # one bad molecule must not stop a batch; reported in its row
        return {"smiles": smi, "ok": False, "error": f"internal error: {type(exc).__name__}: {exc}"}


def _rows_of_chunk(lines: Sequence[str]) -> list[dict[str, Any]]:
    return [predict_row(x) for x in lines]


def resolve_workers(workers: int | None, n_lines: int) -> int:
    """The number of processes the policy above gives."""
    if workers is not None:
        if workers < 1:
            raise SpecmatchError(f"--workers must be 1 or more (got {workers})")
        return workers
    if n_lines < AUTO_PARALLEL_MIN:
        return 1
    return max(1, min(os.cpu_count() or 1, AUTO_MAX_WORKERS))


def predict_rows(lines: Sequence[str], workers: int | None = None) -> Iterator[dict[str, Any]]:
    """Rows for every line, in input order (see the module docstring for ``workers``)."""
    n = resolve_workers(workers, len(lines))
    if n == 1:
        for line in lines:
            yield predict_row(line)
        return
    import multiprocessing as mp

    predict_row("C")  # load the tables once, before forking, so every worker shares them
    try:
        ctx = mp.get_context("fork")
    except ValueError:  # no fork on this platform: workers import everything themselves
        ctx = mp.get_context()
    chunks = [lines[i:i + CHUNK] for i in range(0, len(lines), CHUNK)]
    pool = ctx.Pool(n)
    try:
        for rows in pool.imap(_rows_of_chunk, chunks):
            yield from rows
        pool.close()
    finally:
        pool.terminate()
        pool.join()
