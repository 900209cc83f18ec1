"""``specmatch predict``: predicted 1H/13C spectra of one structure or a batch."""

from __future__ import annotations

import argparse
import json
from typing import Any

from ..errors import SpecmatchError
from ._common import _open_out, _print_json, _progress, _read_lines


#: molecules that pay for a worker's start-up (a prediction takes a few milliseconds)
PER_WORKER = 200


def _predict_row(line: str, geometry: bool = False) -> dict[str, Any]:
    """One line of a ``--batch`` file as its result row (run by the batch executor).

    ``geometry`` turns on the 3D stereo layer (``--stereo-3d``)."""
    from ..prediction import predict

    smi = line.strip()
    if not smi or smi.startswith("#"):
        return {"smiles": line, "ok": False, "error": "empty line"}
    smi = smi.split()[0]
    try:
        row = predict(smi, geometry=geometry).to_dict()
        row["smiles"] = smi
        return row
    except SpecmatchError as exc:
        return {"smiles": smi, "ok": False, "error": str(exc)}


def cmd_predict(args: argparse.Namespace) -> int:
    from ..prediction import predict
    from ..reports.tables_text import prediction_table

    if args.batch:
        from contextlib import closing
        from functools import partial

        from ..executor import plan_workers, run_tasks

        if not args.out:
            raise SpecmatchError("--batch needs --out OUT.jsonl")
        lines = _read_lines(args.batch)
        # the 3D stereo layer costs 0.1-1 s per molecule with a relative configuration: opt-in here
        task = partial(_predict_row, geometry=True) if args.stereo_3d else _predict_row
        plan = plan_workers(len(lines), per_worker=PER_WORKER)
        with _open_out(args.out) as out, _progress(len(lines), "predict") as bar, \
                closing(run_tasks(task, lines, plan, ordered=True, chunk=16)) as outcomes:
            for group in outcomes:
                for o in group:
                    row = o.value if o.ok else {"smiles": lines[o.index], "ok": False,
                                                "error": o.error}
                    out.write(json.dumps(row) + "\n")
                    bar.update()
        return 0
    if not args.smiles:
        raise SpecmatchError("give a SMILES, or --batch FILE --out OUT.jsonl")
    pred = predict(args.smiles)
    if args.json:
        _print_json(pred.to_dict())
    else:
        print(prediction_table(pred, frequency_mhz=args.frequency, solvent=args.solvent))
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("predict", help="predict 1H and 13C spectra of a structure")
    p.add_argument("smiles", nargs="?", help="SMILES of the structure")
    p.add_argument("--json", action="store_true", help="print JSON")
    p.add_argument("--batch", metavar="FILE", help="one SMILES per line")
    p.add_argument("--out", metavar="OUT.jsonl", help="with --batch: where to write results")
    p.add_argument("--stereo-3d", action="store_true",
                   help="with --batch: also run the 3D conformer layer for molecules with a relative "
                        "configuration (cis/trans, meso/dl); slower (single predictions always use it)")
    p.add_argument("--frequency", type=float, default=400.0, metavar="MHZ",
                   help="1H frequency for the peak text (default 400)")
    p.add_argument("--solvent", default="CDCl3", help="solvent named in the peak text")
    p.set_defaults(func=cmd_predict)
