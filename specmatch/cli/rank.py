"""``specmatch rank``: scripted ranking of candidate sets (batch)."""

from __future__ import annotations

import argparse
import sys

from ..errors import SpecmatchError
from ._common import _fast_exit_after, _progress


def cmd_rank(args: argparse.Namespace) -> int:
    from ..identification.batch import rank_batch

    if not args.batch or not args.out:
        raise SpecmatchError("use: specmatch rank --batch TASKS.jsonl --out RESULTS.jsonl "
                             "(see 'specmatch rank --help' for the formats)")
    failed, total = rank_batch(args.batch, args.out, progress=_progress,
                               workers=args.workers, max_components=args.max_components, count=True)
    # the summary goes to stderr so the result file (or a pipe) holds only JSON lines
    print(f"specmatch rank: {total - failed} of {total} task(s) ranked, {failed} failed"
          + (f" (see the 'error' field in {args.out})" if failed else "") + f"; results in {args.out}",
          file=sys.stderr)
    _fast_exit_after()  # every line written and the file closed
    return 1 if failed else 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    from ..identification.batch import FORMATS

    p = sub.add_parser(
        "rank", help="rank candidate structures against observed shifts (batch)",
        description="Rank the candidates of every task of a JSON-lines file against its observed\n"
                    "13C/1H/DEPT-135 data and write one JSON line per task. Exit status: 0 when\n"
                    "every task was ranked, 1 when any task failed (every line is still written,\n"
                    "a one-line summary goes to stderr), 2 on bad arguments or unreadable files.",
        epilog=FORMATS, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--batch", metavar="TASKS.jsonl", help="the task file (format below)")
    p.add_argument("--out", metavar="RESULTS.jsonl", help="where to write the result lines")
    p.add_argument("--max-components", type=int, choices=(1, 2, 3), default=2,
                   help="largest mixture scored as a hypothesis (default 2; 1: pure samples only)")
    p.add_argument("--workers", type=int, default=None, metavar="N",
                   help="0 = this process, N = N worker processes (default: $SPECMATCH_WORKERS, "
                        "else automatic for large batches)")
    p.set_defaults(func=cmd_rank)
