"""``specmatch history`` and ``specmatch batch``: saved analyses and manifests of samples."""

from __future__ import annotations

import argparse


def cmd_history(args: argparse.Namespace) -> int:
    from ..store.commands import run_history

    return run_history(args)


def cmd_batch(args: argparse.Namespace) -> int:
    from ..store.batch import run_batch_command

    return run_batch_command(args)


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("history", help="saved analyses: list, search, show, export, compare")
    p.add_argument("--store", metavar="URL", help="database URL (default $SPECMATCH_STORE, "
                   "else a SQLite file in your data directory)")
    p.set_defaults(func=cmd_history, action=None)
    hs = p.add_subparsers(dest="action", metavar="ACTION")
    store_opt = argparse.ArgumentParser(add_help=False)  # --store also after the action
    store_opt.add_argument("--store", metavar="URL", default=argparse.SUPPRESS)
    store_opt.add_argument("--json", action="store_true", help="print JSON")
    q = hs.add_parser("list", parents=[store_opt], help="latest saved analyses, newest first")
    q.add_argument("--limit", type=int, default=30, metavar="N", help="how many (default 30)")
    q.add_argument("--all-versions", action="store_true", help="list every version, notes included")
    q = hs.add_parser("search", parents=[store_opt], help="find saved analyses")
    q.add_argument("--substrate", metavar="SMILES", help="same molecule, any SMILES spelling")
    q.add_argument("--reagent", metavar="TEXT")
    q.add_argument("--verdict", metavar="TEXT", help="verdict words or the top candidate's SMILES")
    q.add_argument("--since", metavar="DATE", help="run on or after (UTC, YYYY-MM-DD[THH:MM])")
    q.add_argument("--until", metavar="DATE", help="run on or before (UTC)")
    q.add_argument("--sample-id", metavar="ID")
    q.add_argument("--limit", type=int, default=200, metavar="N")
    q.add_argument("--all-versions", action="store_true")
    q = hs.add_parser("show", parents=[store_opt], help="one analysis with its versions and files")
    q.add_argument("id", help="analysis id (or its first characters)")
    q = hs.add_parser("export", parents=[store_opt], help="write an analysis as JSON or HTML")
    q.add_argument("id")
    q.add_argument("--format", choices=["json", "html"], default="json")
    q.add_argument("--out", metavar="FILE", help="file to write (default: standard output)")
    q.add_argument("--include-files", action="store_true", help="JSON: embed the input files (base64)")
    q = hs.add_parser("compare", parents=[store_opt], help="two analyses side by side")
    q.add_argument("id_a")
    q.add_argument("id_b")
    q = hs.add_parser("note", parents=[store_opt], help="add a note or a corrected verdict (new version)")
    q.add_argument("id")
    q.add_argument("text", help="the note; with --verdict, the reason for the correction")
    q.add_argument("--verdict", metavar="TEXT", help="record this corrected verdict")
    q.add_argument("--author", metavar="NAME", help="who writes it (default: the OS user)")
    p = sub.add_parser("batch", help="run a manifest of samples, resumable")
    p.add_argument("manifest", metavar="MANIFEST.csv", help="columns: sample_id, substrate, reagent, "
                   "c13, h1, dept135, solvent, alcohol, candidates (paths relative to the manifest)")
    p.add_argument("--out", metavar="DIR", help="where summary.csv goes (default MANIFEST_results/)")
    p.add_argument("--workers", type=int, metavar="N", help="local worker processes (default: CPUs; 0: in this process)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786")
    p.add_argument("--store", metavar="URL", help="database URL for the results (as for history)")
    p.add_argument("--user", metavar="NAME", help="who runs the batch (default: the OS user)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=cmd_batch)
