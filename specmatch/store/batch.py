"""Resumable batches: a manifest of samples run through the one batch runner.

A manifest is a CSV file, one row per sample::

    sample_id,substrate,reagent,c13,h1,dept135,solvent,alcohol,candidates
    S-001,C=CC(C)C,HBr,spectra/S-001_13C.jdx,spectra/S-001_1H.jdx,,CDCl3,,
    S-002,C=CCC,MeOH/H+,spectra/S-002_13C.jdx,,,CDCl3,CO,CC(C)OC;CCCCOC

``sample_id``, ``substrate`` and ``reagent`` are required; file paths are relative to
the manifest; ``candidates`` are extra SMILES separated by ``;``. The manifest and the
files it names are read through the guarded reader (:mod:`specmatch.safeio`): regular
files only (devices, pipes and folders are refused by name), the manifest within the
``manifest`` limit, each named file within the ``spectrum`` limit (a zip: ``archive``);
text in UTF-8, or UTF-16/UTF-32 with a byte-order mark. At most
:data:`MAX_MANIFEST_ROWS` rows.

How a batch stays safe to interrupt
-----------------------------------
The parent process reads each row's files, hashes them, and computes the sample's
*input key* (SHA-256 over the sample id, its fields and its file hashes). Samples
whose (sample id, input key) is already in the store are skipped. The others go to
the workers (:mod:`specmatch.executor`, its worker policy) with their file bytes (so
the worker analyses exactly the bytes that are saved, and needs no shared file
system); each result comes back to the parent, which saves it as soon as it arrives
(results that finish together share one transaction). Killing the batch at any
moment therefore loses at most the samples in flight, and a rerun does only those.
A row that fails (unreadable file, bad SMILES, anything) is recorded in
``summary.csv`` with its reason and the others go on; failed rows are retried on the
next run.

``summary.csv`` is written when the batch starts, every few seconds while it runs,
and on every exit the process lives through (the end, an error, Ctrl-C, SIGTERM,
SIGHUP); its "done" rows are read back from the store, so it says exactly what the
store holds. After a SIGKILL it is the last periodic one; the next run brings it up
to date.
"""

from __future__ import annotations

import csv
import json
import os
import sys
import tempfile
import time
from contextlib import closing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Iterator, Mapping, Sequence

from .. import safeio
from ..errors import SpecmatchError
from ..executor import Plan, plan_workers, run_tasks, scratch_dir
from .records import canonical_json, input_key, sha256_hex

REQUIRED_COLUMNS = ("sample_id", "substrate", "reagent")
FILE_COLUMNS = ("c13", "h1", "dept135")
TEXT_COLUMNS = ("solvent", "alcohol")
MANIFEST_COLUMNS = (*REQUIRED_COLUMNS, *FILE_COLUMNS, *TEXT_COLUMNS, "candidates")
SUMMARY_COLUMNS = ("sample_id", "status", "verdict", "top_candidate", "probability", "error",
                   "analysis_id")
MAX_MANIFEST_ROWS = 100_000
"""Most samples one manifest may list (split bigger plates into several manifests)."""
MAX_FIELD_CHARS = 10_000
"""Longest manifest cell (a SMILES list included)."""
SUMMARY_EVERY_S = 2.0
"""How often ``summary.csv`` is rewritten while a batch runs."""
PER_WORKER = 2
"""Samples that pay for a worker's start-up (a sample takes about a second)."""

Runner = Callable[[dict, str], Mapping[str, Any]]


# ------------------------------------------------------------------ the work of one sample
def run_sample(row: dict, base_dir: str) -> dict:
    """Analyse one manifest row with the identification pipeline; return ``Result.to_dict()``.

    ``row`` holds the manifest fields (``candidates`` as a list); if it carries
    ``_files`` (role -> ``{"name", "bytes"}``, as the batch runner sends them) the
    spectra are taken from there, otherwise from paths relative to ``base_dir``.
    Runs in a worker process, so it is a plain top-level function. The copies of the
    files live in the run's scratch folder (removed whatever ends the run).
    """
    from ..identification import identify

    sent = row.get("_files") or {}
    with tempfile.TemporaryDirectory(prefix="sample-", dir=scratch_dir()) as tmp:
        paths: dict[str, str | None] = {}
        for role in FILE_COLUMNS:
            if role in sent:
                # keep the file name: readers tell formats apart by extension
                sub = Path(tmp) / role
                sub.mkdir()
                path = sub / Path(sent[role]["name"]).name
                path.write_bytes(sent[role]["bytes"])
                paths[role] = str(path)
            elif row.get(role):
                paths[role] = str(Path(base_dir) / row[role])
            else:
                paths[role] = None
        result = identify(
            substrate=row["substrate"], reagent=row["reagent"],
            alcohol=row.get("alcohol") or None, solvent=row.get("solvent") or None,
            c13=paths["c13"], h1=paths["h1"], dept135=paths["dept135"],
            candidates=list(row.get("candidates") or []),
        )
    return result.to_dict()


def _run_task(item: tuple[Runner, dict, str]) -> str:
    """Worker entry: the runner's result as canonical JSON (checked JSON in the worker)."""
    runner, row, base_dir = item
    return canonical_json(dict(runner(row, base_dir)))


# ------------------------------------------------------------------------ manifest
@dataclass
class Sample:
    """One manifest row, prepared in the parent."""

    line: int
    sample_id: str
    fields: dict[str, Any]
    base: Path = Path(".")
    files: dict[str, tuple[str, str]] = field(default_factory=dict)  # role -> (rel path, SHA-256)
    key: str | None = None
    error: str | None = None

    def load(self) -> dict[str, tuple[str, bytes]]:
        """The sample's files (role -> (rel path, bytes)), checked against the hashes taken
        when the manifest was read, so the bytes analysed and saved are the ones keyed."""
        out = {}
        for role, (rel, digest) in self.files.items():
            data = read_named_file(self.base, rel)
            if sha256_hex(data) != digest:
                raise SpecmatchError(f"'{rel}' changed while the batch ran; run the batch again "
                                     "once the file is final")
            out[role] = (rel, data)
        return out

    def task(self, loaded: Mapping[str, tuple[str, bytes]] | None = None) -> dict:
        """The row as a worker gets it: the fields plus ``_files`` with the bytes."""
        loaded = self.load() if loaded is None else loaded
        row = dict(self.fields)
        row["_files"] = {role: {"name": Path(rel).name, "bytes": data}
                         for role, (rel, data) in loaded.items()}
        return row


def parse_manifest(text: str, base: Path, *, name: str = "manifest",
                   encoding: str | None = None) -> list[Sample]:
    """Check a manifest's text; rows with a problem carry ``error`` and are not run.

    Only the text is parsed here (no file is read): :func:`read_manifest` then reads
    and hashes the files the rows name. ``encoding`` (when the file was not UTF-8) is
    named in the messages about the header, since a wrong export is the usual cause.
    """
    if "\x00" in text:
        raise SpecmatchError(f"the manifest '{name}' contains NUL bytes: it is not a CSV text "
                             "file; save it as CSV UTF-8")
    try:
        reader = csv.DictReader(text.splitlines())
        header = [(h or "").strip().lower() for h in (reader.fieldnames or [])]
    except csv.Error as exc:
        raise SpecmatchError(f"the manifest '{name}' is not valid CSV ({exc})") from None
    what = f"the manifest '{name}'" + (f" (read as {encoding} text)" if encoding else "")
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        first = text.lstrip("\ufeff").split("\n", 1)[0]
        tabs = (" it looks tab-separated: save it as CSV (comma-separated) UTF-8;"
                if "\t" in first and "," not in first else "")
        again = " save it as CSV UTF-8;" if encoding and not tabs else ""
        raise SpecmatchError(
            f"{what} has no column {', '.join(repr(m) for m in missing)};{tabs}{again} "
            f"its first line must name the columns: {','.join(MANIFEST_COLUMNS)}")
    if not any(c in header for c in FILE_COLUMNS):
        raise SpecmatchError(f"{what} names no spectrum column; "
                             f"give at least one of {', '.join(FILE_COLUMNS)}")
    samples: list[Sample] = []
    seen: dict[str, int] = {}
    try:
        for raw in reader:
            n = reader.line_num
            row = {(k or "").strip().lower(): (v or "").strip() for k, v in raw.items()
                   if isinstance(v, str) or v is None}
            if not any(row.values()):
                continue  # blank line
            if len(samples) >= MAX_MANIFEST_ROWS:
                raise SpecmatchError(
                    f"the manifest '{name}' lists more than {MAX_MANIFEST_ROWS:,} samples; "
                    "split it into several manifests")
            sid = row.get("sample_id", "")
            fields: dict[str, Any] = {c: row.get(c, "") for c in (*REQUIRED_COLUMNS, *TEXT_COLUMNS)}
            fields["candidates"] = [x.strip() for x in row.get("candidates", "").split(";")
                                    if x.strip()]
            for c in FILE_COLUMNS:
                fields[c] = row.get(c, "")
            s = Sample(line=n, sample_id=sid or f"(line {n})", fields=fields, base=base)
            samples.append(s)
            long = [k for k, v in row.items() if len(v) > MAX_FIELD_CHARS]
            if long:
                s.sample_id = s.sample_id[:80]
                s.error = (f"line {n}: the cell '{long[0]}' is longer than {MAX_FIELD_CHARS:,} "
                           "characters")
                continue
            if not sid:
                s.error = f"line {n}: no sample_id; give every sample its own id"
                continue
            if sid in seen:
                s.error = (f"sample_id '{sid}' appears again (first on line {seen[sid]}); "
                           "ids must be unique")
                continue
            seen[sid] = n
            empty = [c for c in ("substrate", "reagent") if not fields[c]]
            if empty:
                s.error = f"line {n}: no {' or '.join(empty)}"
                continue
            if not any(fields[c] for c in FILE_COLUMNS):
                s.error = f"line {n}: no spectrum file (columns {', '.join(FILE_COLUMNS)})"
                continue
    except csv.Error as exc:
        raise SpecmatchError(f"the manifest '{name}' is not valid CSV "
                             f"(line {reader.line_num}: {exc})") from None
    return samples


def read_manifest(path: str | os.PathLike) -> list[Sample]:
    """Read and check a manifest, then read and hash the files its rows name.

    Raises
    ------
    SpecmatchError
        If the manifest cannot be read, is too large, or lacks a required column.
    """
    path = Path(path)
    raw = safeio.read_bytes(path, kind="manifest")
    # UTF-8 (a spreadsheet's BOM included), or UTF-16/32 with a byte-order mark; no
    # Latin-1 guess: sample ids and paths must not be silently mis-read
    text = safeio.decode_text(raw, name=str(path), legacy_8bit=False).lstrip("\ufeff")
    encoding = safeio.text_encoding(raw[:4096])
    samples = parse_manifest(text, path.parent, name=str(path),
                             encoding=encoding if encoding != "UTF-8" else None)
    for s in samples:
        if s.error:
            continue
        try:
            for role in FILE_COLUMNS:
                if s.fields[role]:
                    s.files[role] = (s.fields[role],
                                     sha256_hex(read_named_file(path.parent, s.fields[role])))
        except SpecmatchError as exc:
            s.error = str(exc)
            continue
        s.key = input_key(s.sample_id, {k: v for k, v in s.fields.items() if k not in FILE_COLUMNS},
                          {role: digest for role, (_, digest) in s.files.items()})
    return samples


def read_named_file(base: Path, rel: str) -> bytes:
    """The bytes of a file a manifest row names (relative to the manifest's folder),
    through the guarded reader (:func:`specmatch.spectra.reader.read_input_bytes`)."""
    from ..spectra.reader import read_input_bytes

    p = base / rel
    if not p.exists() and not p.is_symlink():
        raise SpecmatchError(f"'{rel}' not found (paths are relative to the manifest, "
                             f"here {base})")
    return read_input_bytes(p)


# ----------------------------------------------------------------------- the batch
@dataclass
class BatchSummary:
    rows: list[dict[str, Any]]
    summary_path: Path | None
    store_url: str
    plan: str = ""

    def count(self, status: str) -> int:
        return sum(1 for r in self.rows if r["status"] == status)


@dataclass
class _State:
    """What this run knows beyond the store: failures, and the ids it saved."""

    failed: dict[int, str] = field(default_factory=dict)
    saved: set[str] = field(default_factory=set)
    earlier: set[str] = field(default_factory=set)  # in the store before this run began
    finished: bool = False


def run_batch(manifest: str | os.PathLike, out_dir: str | os.PathLike | None = None, *,
              workers: int | None = None, scheduler: Any = None, store: Any = None,
              runner: Runner | None = None, progress: bool | None = None,
              user: str | None = None, groups: Sequence[str] = ()) -> BatchSummary:
    """Run every sample of a manifest; save each result as it finishes; write summary.csv.

    Parameters
    ----------
    manifest
        The CSV manifest (see the module docstring).
    out_dir
        Where ``summary.csv`` goes (default: ``<manifest name>_results`` beside it).
    workers, scheduler
        Where the samples run (the worker policy of :mod:`specmatch.executor`):
        ``workers`` local processes (0: this process; default automatic), or the Dask
        scheduler at ``scheduler`` (an address or a ``distributed.Client``).
    store
        A :class:`~specmatch.store.store.Store`, a URL, or None for the configured store.
    runner
        The per-sample function, ``runner(row, base_dir) -> dict``; a top-level
        (importable) function. Default :func:`run_sample`, the whole identify pipeline.
    progress
        Show a progress bar on stderr (default: when stderr is a terminal).
    user, groups
        Who runs the batch and the groups its analyses are shared with.

    Raises
    ------
    specmatch.executor.Stopped, KeyboardInterrupt
        When stopped by a signal; the summary is written first.
    """
    from tqdm import tqdm

    from .store import Store, open_store

    runner = runner or run_sample
    manifest = Path(manifest)
    out = Path(out_dir) if out_dir else manifest.parent / f"{manifest.stem}_results"
    samples = read_manifest(manifest)
    own_store = not isinstance(store, Store)
    st = open_store(store) if own_store else store
    state = _State()
    try:
        done = st.done_keys([s.key for s in samples if s.key])
        # "done" vs "done-earlier" is decided against this, not against the ids this run
        # saw saved: a signal between the store's commit and that bookkeeping must not
        # turn an analysis of this run into an earlier one
        state.earlier = set(done.values())
        todo = [i for i, s in enumerate(samples) if not s.error and (s.sample_id, s.key) not in done]
        for i, s in enumerate(samples):
            if s.error:
                state.failed[i] = s.error
        plan = plan_workers(len(todo), workers, scheduler, per_worker=PER_WORKER)
        write_summary(_rows_from_store(st, samples, state), out)
        bar = tqdm(total=len(samples), initial=len(samples) - len(todo), desc="batch",
                   unit="sample", file=sys.stderr, dynamic_ncols=True,
                   disable=(None if progress is None else not progress))
        try:
            _drive(st, plan, todo, samples, str(manifest.parent.resolve()), runner, user,
                   tuple(groups), state, bar, out)
            state.finished = True
        finally:
            bar.close()
            # on every exit this process lives through: what the store holds, now
            try:
                rows = _rows_from_store(st, samples, state)
            except Exception:  # the store went away: say what this run knows
                rows = [_row(s, "failed" if i in state.failed else "not-run",
                             error=state.failed.get(i)) for i, s in enumerate(samples)]
            path = write_summary(rows, out)
    finally:
        if own_store:
            st.close()
    return BatchSummary(rows=rows, summary_path=path, store_url=st.display_url,
                        plan=plan.describe())


def _drive(store: Any, plan: Plan, todo: list[int], samples: list[Sample], base_dir: str,
           runner: Runner, user: str | None, groups: tuple[str, ...], state: _State,
           bar: Any, out: Path) -> None:
    """Send the samples to the workers; save each result the moment it arrives."""
    sent: list[int] = []  # position in the task stream -> sample index
    inflight: dict[int, dict[str, bytes]] = {}  # file bytes of samples in flight only

    def tasks() -> Iterator[tuple[Runner, dict, str]]:
        for i in todo:
            try:
                loaded = samples[i].load()
            except SpecmatchError as exc:  # the file went away or changed meanwhile
                state.failed[i] = str(exc)
                bar.update()
                continue
            inflight[i] = {rel: data for rel, data in loaded.values()}
            sent.append(i)
            yield runner, samples[i].task(loaded), base_dir

    last_summary = time.monotonic()
    with closing(run_tasks(_run_task, tasks(), plan)) as outcomes:
        for group in outcomes:
            to_save = []
            for o in group:
                i = sent[o.index]
                files = inflight.pop(i, {})
                if o.ok:
                    to_save.append((i, o.value, files))
                else:
                    state.failed[i] = o.error
            if to_save:
                ids = store.save_many([
                    {"record": json.loads(payload), "data_json": payload, "files": files,
                     "sample_id": samples[i].sample_id, "user": user, "groups": groups,
                     "input_key": samples[i].key, "skip_if_done": True}
                    for i, payload, files in to_save])
                state.saved.update(ids)
            bar.update(len(group))
            if state.failed:
                bar.set_postfix(failed=len(state.failed), refresh=False)
            if time.monotonic() - last_summary > SUMMARY_EVERY_S:
                write_summary(_rows_from_store(store, samples, state), out)
                last_summary = time.monotonic()


def _rows_from_store(store: Any, samples: list[Sample], state: _State) -> list[dict[str, Any]]:
    """One summary row per manifest row; "done" rows are the analyses the store holds."""
    found = store.done_keys([s.key for s in samples if s.key])
    ids = sorted({found[(s.sample_id, s.key)] for s in samples if (s.sample_id, s.key) in found})
    brief = store.brief(ids)
    rows = []
    for i, s in enumerate(samples):
        aid = found.get((s.sample_id, s.key)) if s.key else None
        if aid:
            status = "done-earlier" if aid in state.earlier else "done"
            rows.append(_row(s, status, brief=brief.get(aid), analysis_id=aid))
        elif i in state.failed:
            rows.append(_row(s, "failed", error=state.failed[i]))
        else:
            rows.append(_row(s, "not-run" if state.finished or state.saved or state.failed
                             or len(found) > len(state.earlier) else "pending"))
    return rows


def _row(s: Sample, status: str, *, brief: Mapping[str, Any] | None = None,
         analysis_id: str | None = None, error: str | None = None) -> dict[str, Any]:
    brief = brief or {}
    prob = brief.get("top_probability")
    return {"sample_id": s.sample_id, "status": status, "verdict": brief.get("verdict") or "",
            "top_candidate": brief.get("top_smiles") or "",
            "probability": "" if prob is None else f"{prob:.4f}",
            "error": error or "", "analysis_id": analysis_id or ""}


def write_summary(rows: Iterable[Mapping[str, Any]], out_dir: str | os.PathLike) -> Path:
    """Write ``summary.csv`` (atomically: a reader never sees half a table)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
        path = out / "summary.csv"
        tmp = out / f".summary.csv.{os.getpid()}.tmp"
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.DictWriter(fh, fieldnames=SUMMARY_COLUMNS)
            w.writeheader()
            for r in rows:
                w.writerow({k: r.get(k, "") for k in SUMMARY_COLUMNS})
        os.replace(tmp, path)
    except OSError as exc:
        raise SpecmatchError(f"cannot write the summary into '{out}': {exc.strerror}") from None
    return path
