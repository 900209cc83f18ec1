"""Saved analyses as text: the list, one analysis with its versions, two side by side,
and the audit check.

Used by ``specmatch history``; the store returns records, these lay them out.
"""

from __future__ import annotations

import json
from typing import Any, Sequence


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
    rows = [(r.short_id + ("!" if r.problems else ""), r.created_at.strftime("%Y-%m-%d %H:%M"), str(r.version),
             _cut(r.sample_id, 16), _cut(r.substrate, 22), _cut(r.reagent, 12),
             _cut(r.verdict, 18), _cut(r.top_smiles, 24), _fmt_p(r.top_probability))
            for r in records]
    widths = [max(len(h), *(len(row[i]) for row in rows)) for i, h in enumerate(head)]
    line = lambda cells: "  ".join(c.ljust(w) for c, w in zip(cells, widths)).rstrip()  # noqa: E731
    lines = [line(head), line(["-" * w for w in widths]), *map(line, rows)]
    if any(r.problems for r in records):
        lines.append("! fails its audit check: see 'specmatch history show ID' and "
                     "'specmatch history verify'")
    return "\n".join(lines)


def record_text(rec: Any, versions: Sequence[Any]) -> str:
    """A saved analysis for reading: what was run, by whom, on which files, and its versions."""
    broken = [f"v{v.version}: {p}" for v in versions for p in v.problems]
    out = [f"WARNING: the audit check of this analysis failed ({'; '.join(broken)}); "
           "run 'specmatch history verify'" ] if broken else []
    out += [
        f"analysis {rec.id}  (version {rec.version}, {rec.kind})",
        f"  sample        {rec.sample_id or '-'}",
        f"  reaction      {rec.substrate or '-'} + {rec.reagent or '-'}",
        f"  verdict       {rec.verdict or '-'}",
        f"  top candidate {rec.top_smiles or '-'}"
        + (f"  (p = {rec.top_probability:.3f})" if rec.top_probability is not None else ""),
        f"  run by        {rec.user} at {rec.created_at.isoformat(timespec='seconds')}",
        f"  specmatch     {rec.tool_version}; tables {rec.tables_version or '-'}",
        f"  data SHA-256  {rec.data_sha256}",
        f"  audit chain   {rec.chain_hash or '-'}"
        + ("  (linked at upgrade: saved before the chain existed)"
           if rec.chain_origin == "migration" else ""),
    ]
    if rec.groups:
        out.append(f"  shared with   {', '.join(rec.groups)}")
    cands = rec.data.get("candidates") or []
    if cands:
        out.append("  candidates:")
        for i, c in enumerate(cands[:10], 1):
            if isinstance(c, dict):
                label = c.get("label") or ""
                out.append(f"    {i:>2}. {_fmt_p(c.get('probability')):>6}  {c.get('smiles', '')}"
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


def verify_text(report: Any) -> str:
    """The outcome of the store's audit check, one line per break."""
    if report.ok:
        out = [f"audit trail intact: {report.versions} versions, {report.links} links, "
               "guard triggers in place"]
    else:
        out = [f"AUDIT TRAIL BROKEN: {len(report.problems)} problem"
               f"{'s' if len(report.problems) != 1 else ''} in {report.versions} versions"]
        out += [f"  {p}" for p in report.problems]
    if report.migrated:
        out.append(f"{report.migrated} versions were saved before the chain existed and were "
                   "linked when the store was upgraded")
    out.append(f"head of the chain: {report.head_hash} (note it elsewhere to detect a rewrite "
               "of the whole tail)")
    return "\n".join(out)
