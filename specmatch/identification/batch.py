"""``specmatch rank --batch``: many ranking tasks, one JSON line each.

Task line::

    {"id": "...", "candidates": ["SMILES", ...],
     "c13": [ppm, ...] or [{"shift": ppm, "hydrogens": n}, ...],
     "h1": [{"shift": ppm, "integral": x, "multiplicity": "t", "j_hz": [...]}, ...],
     "solvent": "CDCl3", "priors": [...]}          # solvent, priors optional

Unknown keys are ignored; c13 or h1 may be empty. Result line, in task order::

    {"id": ..., "ok": true, "ranking": [{"smiles": <as given>, "probability": p, ...}, ...]}

with every candidate present, sorted by probability, summing to 1; a task that
cannot be scored gives ``{"id": ..., "ok": false, "error": "..."}`` and the batch
goes on. The probability is the spectra-only one unless the task gives priors.
"""

from __future__ import annotations

import json
from contextlib import closing, nullcontext
from typing import Any, Callable

import numpy as np

from ..errors import SpecmatchError
from .errormodel import ErrorModel, load_error_model
from .ranking import _normalise_priors, combined_score, log_likelihoods, softmax
from .scoring import observed_c13, observed_h1, prepare, prepare_c13

__all__ = ["rank_batch", "rank_task"]


def rank_task(task: Any, model: ErrorModel | None = None) -> dict[str, Any]:
    """Score one task dict; raises SpecmatchError for a task that cannot be scored."""
    model = model or load_error_model()
    if not isinstance(task, dict):
        raise SpecmatchError("the task is not a JSON object")
    cands = task.get("candidates")
    if not isinstance(cands, list) or not cands:
        raise SpecmatchError("'candidates' must be a non-empty list of SMILES")
    if not all(isinstance(c, str) for c in cands):
        raise SpecmatchError("every candidate must be a SMILES string")
    c13, h1 = task.get("c13") or [], task.get("h1") or []
    if not isinstance(c13, list) or not isinstance(h1, list):
        raise SpecmatchError("'c13' and 'h1' must be lists")
    oc, oh = observed_c13(c13), observed_h1(h1)
    prep = prepare if oh.n else prepare_c13
    prepared = [prep(c) for c in cands]
    lc, lh = log_likelihoods(prepared, oc, oh, model)
    score = combined_score(lc, lh, model)
    p_spec = softmax(score)
    pri = _normalise_priors(task.get("priors"), cands, [None] * len(cands)) if task.get("priors") else None
    p = softmax(score + np.log(pri)) if pri is not None else p_spec
    order = sorted(range(len(cands)), key=lambda i: (-p[i], i))
    ranking = []
    for i in order:
        row = {"smiles": cands[i], "probability": float(p[i]),
               "probability_spectra": float(p_spec[i]),
               "log_likelihood_c13": round(float(lc[i]), 4),
               "log_likelihood_h1": round(float(lh[i]), 4)}
        if pri is not None:
            row["prior"] = float(pri[i])
        ranking.append(row)
    return {"id": task.get("id"), "ok": True, "ranking": ranking,
            "basis": "spectra and mechanism prior" if pri is not None else "spectra only"}


def _row(item: tuple[int, str]) -> dict[str, Any]:
    n, line = item
    tid = None
    try:
        task = json.loads(line)
        tid = task.get("id") if isinstance(task, dict) else None
        return rank_task(task, load_error_model())
    except json.JSONDecodeError as exc:
        return {"id": None, "ok": False, "error": f"line {n} is not valid JSON ({exc.msg})"}
    except SpecmatchError as exc:
        return {"id": tid, "ok": False, "error": str(exc)}
    except Exception as exc:  # one bad task must not stop the batch
        return {"id": tid, "ok": False, "error": f"internal error: {type(exc).__name__}: {exc}"}


#: tasks that pay for a worker's start-up (a task takes a few milliseconds)
PER_WORKER = 150


def _warm() -> None:
    """Worker initializer: read the error model once per worker."""
    load_error_model()


def rank_batch(in_path: str, out_path: str, progress: Callable[[int, str], Any] | None = None,
               workers: int | None = None) -> int:
    """Rank every task of a JSON-lines file; returns the number of failed tasks.

    The tasks run through :func:`specmatch.executor.run_tasks` under its worker policy
    (``workers`` or ``$SPECMATCH_WORKERS``, else automatic); the result lines keep the
    task order.
    """
    from ..executor import plan_workers, run_tasks

    try:
        with open(in_path, encoding="utf-8") as fh:
            lines = [ln for ln in fh.read().splitlines() if ln.strip()]
    except OSError as exc:
        raise SpecmatchError(f"cannot read '{in_path}': {exc.strerror}") from None
    except UnicodeDecodeError:
        raise SpecmatchError(f"cannot read '{in_path}': it is not UTF-8 text") from None
    try:
        out = open(out_path, "w", encoding="utf-8")
    except OSError as exc:
        raise SpecmatchError(f"cannot write '{out_path}': {exc.strerror}") from None
    plan = plan_workers(len(lines), workers, per_worker=PER_WORKER)
    items = list(enumerate(lines, 1))
    failed = 0
    bar_cm = progress(len(lines), "rank") if progress else nullcontext()
    with out, bar_cm as bar, closing(run_tasks(_row, items, plan, ordered=True, chunk=16,
                                                initializer=_warm)) as outcomes:
        for group in outcomes:
            for o in group:
                # _row turns every error into a row; a lost worker still gives one
                row = o.value if o.ok else {"id": None, "ok": False, "error": o.error}
                failed += not row["ok"]
                out.write(json.dumps(row) + "\n")
                if bar is not None:
                    bar.update()
    return failed
