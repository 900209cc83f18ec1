"""``specmatch rank --batch``: many ranking tasks, one JSON line each.

The formats (also printed by ``specmatch rank --help``) are in :data:`FORMATS`.
"""

from __future__ import annotations

import json
from contextlib import closing, nullcontext
from typing import TYPE_CHECKING, Any, Callable

from ..errors import SpecmatchError

if TYPE_CHECKING:
    from .errormodel import ErrorModel

# numpy, scipy and the scorers are imported on first use: ``specmatch --help`` reads
# FORMATS from this module and must stay fast

__all__ = ["FORMATS", "rank_batch", "rank_task"]

FORMATS = """\
Task file: JSON lines, one task per line:

  {"id": "t1", "candidates": ["SMILES", ...],
   "c13": [ppm, ...]  or  [{"shift": ppm, "hydrogens": 0-3}, ...],
   "h1": [{"shift": ppm, "integral": n, "multiplicity": "t", "j_hz": [7.1]}, ...],
   "dept135": [{"shift": ppm, "sign": 1 or -1}, ...],
   "solvent": "CDCl3", "priors": [p, ...], "max_components": 2}

Only "candidates" is required; c13, h1 and dept135 may be empty or absent; priors
(one per candidate) switch the probability from spectra only to spectra and
mechanism prior; unknown keys are ignored. A DEPT-135 line within 0.25 ppm of a
13C line gives its phase (+1 CH/CH3, -1 CH2); a 13C line without one is taken
as quaternary.

Result file: JSON lines in task order:

  {"id": "t1", "ok": true, "basis": "spectra only",
   "ranking": [{"smiles": <as given>, "probability": p, "probability_spectra": p,
                "p_present": p, "log_likelihood_c13": x, "log_likelihood_h1": x}, ...],
   "hypotheses": [{"components": [SMILES, ...], "fractions": [f, ...],
                   "probability": p}, ...]}

"ranking" lists every candidate, best first; its probabilities (the candidate
is the product if the sample is pure) sum to 1. "hypotheses" lists every
candidate pure and mixtures of two (three with max_components 3) of the
leading candidates, best first; probabilities sum to 1; "p_present" is the
summed probability of the hypotheses holding the candidate. Fractions are mole
fractions (equal shares when the data carry no integrals or line heights). A
task that cannot be scored gives {"id": ..., "ok": false, "error": "..."} and the
batch goes on; the command then exits 1 after writing every line.
"""


def rank_task(task: Any, model: ErrorModel | None = None, max_components: int = 2) -> dict[str, Any]:
    """Score one task dict; raises SpecmatchError for a task that cannot be scored.

    ``max_components`` (1, 2 or 3; a task's own ``"max_components"`` key wins) is
    the largest mixture scored among the hypotheses.
    """
    import numpy as np

    from .errormodel import load_error_model
    from .hypotheses import score_hypotheses
    from .ranking import _normalise_priors, combined_score, hypothesis_posterior, log_likelihoods, softmax
    from .scoring import observed_c13, observed_h1, prepare, prepare_c13

    model = model or load_error_model()
    if not isinstance(task, dict):
        raise SpecmatchError("the task is not a JSON object")
    cands = task.get("candidates")
    if not isinstance(cands, list) or not cands:
        raise SpecmatchError("'candidates' must be a non-empty list of SMILES")
    if not all(isinstance(c, str) for c in cands):
        raise SpecmatchError("every candidate must be a SMILES string")
    c13, h1, dept = task.get("c13") or [], task.get("h1") or [], task.get("dept135") or []
    if not isinstance(c13, list) or not isinstance(h1, list) or not isinstance(dept, list):
        raise SpecmatchError("'c13', 'h1' and 'dept135' must be lists")
    if dept:
        from .pipeline import merge_dept

        if not all(isinstance(x, dict) and "shift" in x and x.get("sign") in (1, -1) for x in dept):
            raise SpecmatchError("'dept135' lines must be {\"shift\": ppm, \"sign\": 1 or -1} objects")
        observed_c13(c13)  # the 13C lines' own check first (clear messages)
        observed_c13(dept)
        c13 = merge_dept(c13, dept)
    oc, oh = observed_c13(c13), observed_h1(h1)
    prep = prepare if oh.n else prepare_c13
    prepared = [prep(c) for c in cands]
    lc, lh = log_likelihoods(prepared, oc, oh, model)
    score = combined_score(lc, lh, model)
    p_spec = softmax(score)
    pri = _normalise_priors(task.get("priors"), cands, [None] * len(cands)) if task.get("priors") else None
    p = softmax(score + np.log(pri)) if pri is not None else p_spec
    k = task.get("max_components", max_components)
    if k not in (1, 2, 3):
        raise SpecmatchError(f"'max_components' must be 1, 2 or 3, got {k!r}")
    nuclei = oc.n > 0 or oh.n > 0
    raw = score_hypotheses(prepared, score, pri, oc, oh, model, max_components=k if nuclei else 1)
    # components spelt as the task gave them (like the ranking), major first
    hyps, present = hypothesis_posterior(raw, cands)
    order = sorted(range(len(cands)), key=lambda i: (-p[i], i))
    ranking = []
    for i in order:
        row = {"smiles": cands[i], "probability": float(p[i]),
               "probability_spectra": float(p_spec[i]),
               "log_likelihood_c13": round(float(lc[i]), 4),
               "log_likelihood_h1": round(float(lh[i]), 4),
               "p_present": float(present[i])}
        if pri is not None:
            row["prior"] = float(pri[i])
        ranking.append(row)
    return {"id": task.get("id"), "ok": True, "ranking": ranking,
            "hypotheses": [{"components": list(h.components), "fractions": [round(f, 4) for f in h.fractions],
                            "probability": h.probability} for h in hyps],
            "basis": "spectra and mechanism prior" if pri is not None else "spectra only"}


def _row(item: tuple[int, str, int]) -> dict[str, Any]:
    from .errormodel import load_error_model

    n, line, max_components = item
    tid = None
    try:
        task = json.loads(line)
        tid = task.get("id") if isinstance(task, dict) else None
        return rank_task(task, load_error_model(), max_components)
    except json.JSONDecodeError as exc:
        return {"id": None, "ok": False, "error": f"line {n} is not valid JSON ({exc.msg})"}
    except SpecmatchError as exc:
        return {"id": tid, "ok": False, "error": str(exc)}
    except Exception as exc:  # one bad task must not stop the batch
        return {"id": tid, "ok": False, "error": f"internal error: {type(exc).__name__}: {exc}"}


#: tasks that pay for a worker's start-up (a task takes a few milliseconds; workers are
#: forked after the parent has loaded the scorers and the error model)
PER_WORKER = 40


def _warm() -> None:
    """Load the scorers, the predictor's tables and the error model once per process."""
    from ..prediction.batch import warm
    # imported for the side effect (loaded once, before workers are forked; ranking too, or
    # each worker would import it on its first task)
    from . import hypotheses, ranking, scoring  # noqa: F401
    from .errormodel import load_error_model

    load_error_model()
    warm()


def rank_batch(in_path: str, out_path: str, progress: Callable[[int, str], Any] | None = None,
               workers: int | None = None, max_components: int = 2, count: bool = False
               ) -> int | tuple[int, int]:
    """Rank every task of a JSON-lines file; returns the number of failed tasks
    (with ``count``: failed and total).

    The tasks run through :func:`specmatch.executor.run_tasks` under its worker policy
    (``workers`` or ``$SPECMATCH_WORKERS``, else automatic); the result lines keep the
    task order.
    """
    from ..executor import plan_workers, run_tasks

    from .. import safeio

    # guarded: regular files only, the documented ``batch`` limit (no /dev/zero, no FIFO)
    text = safeio.read_text(in_path, kind="batch", legacy_8bit=False)
    lines = [ln for ln in text.splitlines() if ln.strip()]
    try:
        out = open(out_path, "w", encoding="utf-8")
    except OSError as exc:
        raise SpecmatchError(f"cannot write '{out_path}': {exc.strerror}") from None
    plan = plan_workers(len(lines), workers, per_worker=PER_WORKER)
    items = [(n, line, max_components) for n, line in enumerate(lines, 1)]
    failed = 0
    bar_cm = progress(len(lines), "rank") if progress else nullcontext()
    _warm()  # before the workers are forked: they inherit the loaded modules and model
    # about 8 chunks per worker: few round trips, and the last chunks are small enough that
    # both workers finish together (a task takes 2-20 ms)
    chunk = max(1, min(16, len(items) // (8 * max(1, plan.workers))))
    with out, bar_cm as bar, closing(run_tasks(_row, items, plan, ordered=True, chunk=chunk,
                                                initializer=_warm, fork=True)) as outcomes:
        for group in outcomes:
            for o in group:
                # _row turns every error into a row; a lost worker still gives one
                row = o.value if o.ok else {"id": None, "ok": False, "error": o.error}
                failed += not row["ok"]
                out.write(json.dumps(row) + "\n")
                if bar is not None:
                    bar.update()
    return (failed, len(lines)) if count else failed
