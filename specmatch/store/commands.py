"""``specmatch history``: list, search, show, export, compare and annotate saved analyses.

Text for people by default, ``--json`` for scripts. The handlers only call the
store and lay out what it returns.
"""

from __future__ import annotations

import json
import sys
from typing import Any, Sequence

from ..errors import SpecmatchError

HELP = ("use: specmatch history list | search [--substrate S] [--reagent R] [--verdict V] "
        "[--since DATE] [--until DATE] [--sample-id ID] | show ID | export ID [--format html] | "
        "compare ID_A ID_B | note ID TEXT [--verdict V]")


def _dump(obj: Any) -> None:
    json.dump(obj, sys.stdout, indent=2, ensure_ascii=False, default=str)
    sys.stdout.write("\n")


def _fmt_p(p: float | None) -> str:
    return "" if p is None else f"{p:.3f}"


def _cut(text: Any, width: int) -> str:
    s = "" if text is None else str(text)
    return s if len(s) <= width else s[: width - 1] + "…"


def records_table(records: Sequence[Any]) -> str:
    """One line per analysis: id, when, sample, reaction, verdict, top candidate."""
    if not records:
        return "no saved analyses match"
    head = ("id", "when (UTC)", "v", "sample", "substrate", "reagent", "verdict", "top candidate", "p")
    rows = [(r.short_id, r.created_at.strftime("%Y-%m-%d %H:%M"), str(r.version),
             _cut(r.sample_id, 16), _cut(r.substrate, 22), _cut(r.reagent, 12),
             _cut(r.verdict, 18), _cut(r.top_smiles, 24), _fmt_p(r.top_probability))
            for r in records]
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
    line = lambda cells: "  ".join(c.ljust(w) for c, w in zip(cells, widths)).rstrip()  # noqa: E731
    return "\n".join([line(head), line(["-" * w for w in widths]), *map(line, rows)])


def record_text(rec: Any, versions: Sequence[Any]) -> str:
    """A saved analysis for reading: what was run, by whom, on which files, and its versions."""
    out = [
        f"analysis {rec.id}  (version {rec.version}, {rec.kind})",
        f"  sample        {rec.sample_id or '-'}",
        f"  reaction      {rec.substrate or '-'} + {rec.reagent or '-'}",
        f"  verdict       {rec.verdict or '-'}",
        f"  top candidate {rec.top_smiles or '-'}"
        + (f"  (p = {rec.top_probability:.3f})" if rec.top_probability is not None else ""),
        f"  run by        {rec.user} at {rec.created_at.isoformat(timespec='seconds')}",
        f"  specmatch     {rec.tool_version}; tables {rec.tables_version or '-'}",
        f"  data SHA-256  {rec.data_sha256}",
    ]
    cands = rec.data.get("candidates") or rec.data.get("ranking") or []
    if cands:
        out.append("  candidates:")
        from .records import _probability

        for i, c in enumerate(cands[:10], 1):
            if isinstance(c, dict):
                label = c.get("label") or ""
                out.append(f"    {i:>2}. {_fmt_p(_probability(c)):>6}  {c.get('smiles', '')}"
                           + (f"  ({label})" if label else ""))
        if len(cands) > 10:
            out.append(f"    ... {len(cands) - 10} more (see --json)")
    out.append("  files:" if rec.files else "  files: none saved")
    for name, digest in rec.files.items():
        out.append(f"    {name}  sha256:{digest}")
    if len(versions) > 1 or rec.note:
        out.append("  versions:")
        for v in versions:
            mark = "*" if v.id == rec.id else " "
            note = f": {v.note}" if v.note else ""
            out.append(f"   {mark}v{v.version} {v.short_id} {v.kind:<10} "
                       f"{v.created_at.strftime('%Y-%m-%d %H:%M')} {v.user}"
                       f"{' verdict ' + repr(v.verdict) if v.kind == 'correction' else ''}{note}")
    out.append("Identification is advisory: confirm it with orthogonal data.")
    return "\n".join(out)


def compare_text(cmp: dict[str, Any]) -> str:
    """Two analyses side by side; differing fields marked with '≠'."""
    def cell(v: Any) -> str:
        return "-" if v is None else _cut(v if isinstance(v, str) else json.dumps(v), 34)

    rows = [(f["field"], cell(f["a"]), cell(f["b"]), "" if f["same"] else "≠")
            for f in cmp["fields"]]
    w0 = max(len(r[0]) for r in rows)
    w1 = max(12, *(len(r[1]) for r in rows))
    out = [f"{'':<{w0}}  {'A ' + cmp['a'][:12]:<{w1}}  B {cmp['b'][:12]}"]
    out += [f"{a:<{w0}}  {b:<{w1}}  {c:<34} {d}".rstrip() for a, b, c, d in rows]
    out.append("same input files" if cmp["same_files"] else
               f"input files differ ({len(cmp['shared_files'])} shared)")
    if cmp["candidates"]:
        out.append("\ncandidate probabilities:")
        ws = max(len(c["smiles"]) for c in cmp["candidates"])
        out.append(f"  {'SMILES':<{ws}}  {'A':>6}  {'B':>6}")
        for c in cmp["candidates"]:
            out.append(f"  {c['smiles']:<{ws}}  {_fmt_p(c['a']) or '-':>6}  {_fmt_p(c['b']) or '-':>6}")
    return "\n".join(out)


def run_history(args: Any) -> int:
    """Entry point of ``specmatch history`` (arguments as built in ``specmatch.cli``)."""
    from .store import open_store

    action = getattr(args, "action", None)
    if not action:
        raise SpecmatchError(HELP)
    as_json = getattr(args, "json", False)
    with open_store(getattr(args, "store", None)) as store:
        if action in ("list", "search"):
            filters = {}
            if action == "search":
                filters = {k: getattr(args, k, None) for k in
                           ("substrate", "reagent", "verdict", "since", "until", "sample_id")}
                if not any(filters.values()):
                    raise SpecmatchError("search needs at least one of --substrate, --reagent, "
                                         "--verdict, --since, --until, --sample-id (or use 'list')")
            recs = store.search(**filters, all_versions=args.all_versions, limit=args.limit)
            if as_json:
                _dump([{k: v for k, v in r.to_dict().items() if k != "data"} for r in recs])
            else:
                print(records_table(recs))
        elif action == "show":
            rec = store.get(args.id)
            versions = store.history(rec.id)
            if as_json:
                _dump(store.export_dict(rec.id))
            else:
                print(record_text(rec, versions))
        elif action == "export":
            text = (store.export_html(args.id) if args.format == "html"
                    else store.export_json(args.id, include_files=args.include_files))
            if args.out:
                try:
                    with open(args.out, "w", encoding="utf-8") as fh:
                        fh.write(text)
                except OSError as exc:
                    raise SpecmatchError(f"cannot write '{args.out}': {exc.strerror}") from None
                print(f"written to {args.out}", file=sys.stderr)
            else:
                sys.stdout.write(text if text.endswith("\n") else text + "\n")
        elif action == "compare":
            cmp = store.compare(args.id_a, args.id_b)
            _dump(cmp) if as_json else print(compare_text(cmp))
        elif action == "note":
            if args.verdict:
                new = store.correct(args.id, verdict=args.verdict, reason=args.text,
                                    author=args.author)
            else:
                new = store.add_note(args.id, args.text, author=args.author)
            rec = store.get(new)
            if as_json:
                _dump({"id": new, "parent_id": rec.parent_id, "version": rec.version})
            else:
                print(f"saved as version {rec.version} ({rec.kind}) {new}; "
                      f"earlier versions are kept unchanged")
        else:  # argparse restricts the choices; kept for callers building args by hand
            raise SpecmatchError(HELP)
    return 0
