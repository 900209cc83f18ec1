"""``specmatch history`` and ``specmatch batch``: saved analyses and manifests of samples.

Thin handlers: they open the store (read-only for everything that only looks), call
the library and lay out what it returns (text from ``specmatch.reports.history_text``,
or JSON with ``--json``).
"""

from __future__ import annotations

import argparse
import sys

from ..errors import SpecmatchError
from ._common import _print_json

HELP = ("use: specmatch history list | search [--substrate S] [--reagent R] [--verdict V] "
        "[--since DATE] [--until DATE] [--sample-id ID] | show ID | export ID [--format html] | "
        "compare ID_A ID_B | note ID TEXT [--verdict V] | verify")
READ_ONLY_ACTIONS = ("list", "search", "show", "export", "compare", "verify")


def cmd_history(args: argparse.Namespace) -> int:
    from ..reports import history_text as text
    from ..store import open_store

    action = args.action
    if not action:
        raise SpecmatchError(HELP)
    with open_store(args.store, read_only=action in READ_ONLY_ACTIONS) as store:
        if action in ("list", "search"):
            filters = {}
            if action == "search":
                filters = {k: getattr(args, k) for k in
                           ("substrate", "reagent", "verdict", "since", "until", "sample_id")}
                if not any(filters.values()):
                    raise SpecmatchError("search needs at least one of --substrate, --reagent, "
                                         "--verdict, --since, --until, --sample-id (or use 'list')")
            recs = store.search(**filters, all_versions=args.all_versions, limit=args.limit)
            if args.json:
                _print_json([{k: v for k, v in r.to_dict().items() if k != "data"} for r in recs])
            else:
                print(text.records_table(recs))
            _warn_triggers(store)
        elif action == "show":
            rec = store.get(args.id)
            versions = store.history(rec.id)
            if args.json:
                _print_json(store.export_dict(rec.id))
            else:
                print(text.record_text(rec, versions))
            broken = [p for v in versions for p in v.problems]
            if broken:
                print(f"specmatch: warning: analysis {rec.short_id} fails its audit check: "
                      f"{broken[0]}", file=sys.stderr)
            _warn_triggers(store)
        elif action == "export":
            out = (store.export_html(args.id) if args.format == "html"
                   else store.export_json(args.id, include_files=args.include_files))
            if args.out:
                try:
                    with open(args.out, "w", encoding="utf-8") as fh:
                        fh.write(out)
                except OSError as exc:
                    raise SpecmatchError(f"cannot write '{args.out}': {exc.strerror}") from None
                print(f"written to {args.out}", file=sys.stderr)
            else:
                sys.stdout.write(out if out.endswith("\n") else out + "\n")
        elif action == "compare":
            cmp = store.compare(args.id_a, args.id_b)
            _print_json(cmp) if args.json else print(text.compare_text(cmp))
        elif action == "note":
            if args.verdict:
                new = store.correct(args.id, verdict=args.verdict, reason=args.text,
                                    author=args.author)
            else:
                new = store.add_note(args.id, args.text, author=args.author)
            rec = store.get(new)
            if args.json:
                _print_json({"id": new, "parent_id": rec.parent_id, "version": rec.version})
            else:
                print(f"saved as version {rec.version} ({rec.kind}) {new}; "
                      f"earlier versions are kept unchanged")
        elif action == "verify":
            report = store.verify()
            if args.json:
                _print_json({"ok": report.ok, "versions": report.versions, "links": report.links,
                             "head_hash": report.head_hash, "migrated": report.migrated,
                             "problems": [{"analysis_id": p.analysis_id, "version": p.version,
                                           "problem": p.text} for p in report.problems]})
            else:
                print(text.verify_text(report))
            return 0 if report.ok else 1
    return 0


def _warn_triggers(store) -> None:
    missing = store.missing_triggers()
    if missing:
        print(f"specmatch: warning: the store's guard trigger '{missing[0]}' is missing: saved "
              "analyses are no longer protected; run 'specmatch history verify'", file=sys.stderr)


def cmd_batch(args: argparse.Namespace) -> int:
    """``specmatch batch``: run the manifest, print the outcome; exit 1 if any row failed."""
    from ..executor import Stopped
    from ..store.batch import run_batch

    try:
        summary = run_batch(args.manifest, args.out, workers=args.workers,
                            scheduler=args.scheduler, store=args.store, user=args.user,
                            groups=args.group or ())
    except Stopped as exc:
        print(f"specmatch: stopped by {exc.name}; every finished sample is saved and the "
              "summary says which; run the same command again to finish", file=sys.stderr)
        return 128 + exc.signum
    rows = summary.rows
    if args.json:
        _print_json({"summary": str(summary.summary_path), "store": summary.store_url,
                     "ran": summary.plan, "samples": rows})
    else:
        n_done, n_earlier = summary.count("done"), summary.count("done-earlier")
        n_failed = summary.count("failed")
        print(f"{len(rows)} samples: {n_done} done now, {n_earlier} done in an earlier run "
              f"(skipped), {n_failed} failed")
        bad = [r for r in rows if r["status"] == "failed"]
        if bad:
            width = max(len(r["sample_id"]) for r in bad)
            print("\nfailed:")
            for r in bad:
                print(f"  {r['sample_id']:<{width}}  {r['error']}")
        print(f"\nsummary: {summary.summary_path}")
        print("results saved in the analysis store; see them with 'specmatch history list'")
    return 1 if summary.count("failed") else 0


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("history", help="saved analyses: list, search, show, export, compare, verify")
    p.add_argument("--store", metavar="URL", help="database URL (default $SPECMATCH_STORE, "
                   "else a SQLite file in your data directory)")
    p.set_defaults(func=cmd_history, action=None, json=False)
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
    hs.add_parser("verify", parents=[store_opt],
                  help="check the audit trail (hash chain, files, guard triggers); exit 1 if broken")
    p = sub.add_parser("batch", help="run a manifest of samples, resumable")
    p.add_argument("manifest", metavar="MANIFEST.csv", help="columns: sample_id, substrate, reagent, "
                   "c13, h1, dept135, solvent, alcohol, candidates (paths relative to the manifest)")
    p.add_argument("--out", metavar="DIR", help="where summary.csv goes (default MANIFEST_results/)")
    p.add_argument("--workers", type=int, metavar="N",
                   help="local worker processes (0: in this process; default: automatic, at most "
                        "4 and the CPUs available)")
    p.add_argument("--scheduler", metavar="ADDRESS", help="run on a Dask cluster, e.g. tcp://host:8786")
    p.add_argument("--store", metavar="URL", help="database URL for the results (as for history)")
    p.add_argument("--user", metavar="NAME", help="who runs the batch (default: the OS user)")
    p.add_argument("--group", action="append", metavar="NAME",
                   help="share the analyses with this group (repeatable)")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")
    p.set_defaults(func=cmd_batch)
