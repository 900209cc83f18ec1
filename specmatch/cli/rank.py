"""``specmatch rank``: scripted ranking of candidate sets (batch)."""

from __future__ import annotations

import argparse

from ..errors import SpecmatchError
from ._common import _progress


def cmd_rank(args: argparse.Namespace) -> int:
    from ..identification.batch import rank_batch

    if not args.batch or not args.out:
        raise SpecmatchError("use: specmatch rank --batch TASKS.jsonl --out RESULTS.jsonl")
    rank_batch(args.batch, args.out, progress=_progress)
    return 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("rank", help="rank candidate structures against observed shifts (batch)")
    p.add_argument("--batch", metavar="TASKS.jsonl")
    p.add_argument("--out", metavar="RESULTS.jsonl")
    p.set_defaults(func=cmd_rank)
