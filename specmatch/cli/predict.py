"""``specmatch predict``: predicted 1H/13C spectra of one structure or a batch."""

from __future__ import annotations

import argparse
import json
import sys

from ..errors import SpecmatchError
from ._common import _fast_exit_after, _open_out, _print_json, _progress, _read_lines

#: molecules that pay for a worker's start-up: workers are forked from this process after
#: the tables are loaded (a few milliseconds each), a prediction takes 2-5 ms
PER_WORKER = 50


def cmd_predict(args: argparse.Namespace) -> int:
    if args.batch:
        return _batch(args)
    # the text table loads the spectra stage (numpy): only for a single structure
    from ..prediction import predict
    from ..reports.tables_text import prediction_table

    if not args.smiles:
        raise SpecmatchError("give a SMILES, or --batch FILE --out OUT.jsonl")
    pred = predict(args.smiles)
    if args.json:
        _print_json(pred.to_dict())
    else:
        print(prediction_table(pred, frequency_mhz=args.frequency, solvent=args.solvent))
    return 0


def _batch(args: argparse.Namespace) -> int:
    """Every line gets its row (in order, on the shared executor); a one-line summary on
    stderr; exit 1 if any molecule failed."""
    from contextlib import closing
    from functools import partial

    from ..executor import plan_workers, run_tasks
    from ..prediction.batch import predict_line, warm, worker_setup

    if not args.out:
        raise SpecmatchError("--batch needs --out OUT.jsonl")
    lines = _read_lines(args.batch)
    # the 3D stereo layer costs 0.1-1 s per molecule with a relative configuration: opt-in here
    task = partial(predict_line, geometry=True) if args.stereo_3d else predict_line
    plan = plan_workers(len(lines), args.workers, per_worker=PER_WORKER)
    # workers without the cyclic collector (prediction/batch.py): checked for the plain
    # predictions; the 3D layer (numpy, conformers) keeps it
    setup = worker_setup if plan.kind == "processes" and not args.stereo_3d else None
    warm()  # tables read once here; forked workers inherit them
    # about 16 chunks per worker: a round trip costs some 50 us (two pipes, one pickled list),
    # and small last chunks keep both cores busy to the end
    chunk = max(4, min(256, len(lines) // (16 * max(1, plan.workers))))
    n_ok = n_failed = n_skipped = 0
    first_error = ""
    with _open_out(args.out) as out, _progress(len(lines), "predict") as bar, \
            closing(run_tasks(task, lines, plan, ordered=True, chunk=chunk, fork=True,
                              initializer=setup)) as outcomes:
        for group in outcomes:
            for o in group:
                if o.ok:
                    status, text, error = o.value
                else:  # a lost worker: the row still says why
                    status, error = "failed", o.error
                    text = json.dumps({"smiles": lines[o.index], "ok": False, "error": error})
                out.write(text + "\n")
                if status == "ok":
                    n_ok += 1
                elif status == "skipped":
                    n_skipped += 1
                else:
                    n_failed += 1
                    first_error = first_error or f"line {o.index + 1}: {error}"
            bar.update(len(group))
    summary = f"predict: {n_ok} predicted, {n_failed} failed, {n_skipped} blank/comment lines -> {args.out}"
    if first_error:
        summary += f" (first failure, {first_error})"
    print(summary, file=sys.stderr)
    _fast_exit_after()  # every row written and the file closed
    return 1 if n_failed else 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("predict", help="predict 1H and 13C spectra of a structure")
    p.add_argument("smiles", nargs="?", help="SMILES of the structure")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--batch", metavar="FILE", help="one SMILES per line")
    p.add_argument("--out", metavar="OUT.jsonl", help="with --batch: where to write results")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="with --batch: 0 = this process, N = N worker processes "
                        "(default: $SPECMATCH_WORKERS, else automatic for large batches)")
    p.add_argument("--stereo-3d", action="store_true",
                   help="with --batch: also run the 3D conformer layer for molecules with a relative "
                        "configuration (cis/trans, meso/dl); slower (single predictions always use it)")
    p.add_argument("--frequency", type=float, default=400.0, metavar="MHZ",
                   help="1H frequency for the peak text (default 400)")
    p.add_argument("--solvent", default="CDCl3", help="solvent named in the peak text")
    p.set_defaults(func=cmd_predict)
