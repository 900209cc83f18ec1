"""Resumable batches: a manifest of samples run on a process pool or a Dask cluster.

A manifest is a CSV file, one row per sample::

    sample_id,substrate,reagent,c13,h1,dept135,solvent,alcohol,candidates
    S-001,C=CC(C)C,HBr,spectra/S-001_13C.jdx,spectra/S-001_1H.jdx,,CDCl3,,
    S-002,C=CCC,MeOH/H+,spectra/S-002_13C.jdx,,,CDCl3,CO,CC(C)OC;CCCCOC

``sample_id``, ``substrate`` and ``reagent`` are required; file paths are relative to
the manifest; ``candidates`` are extra SMILES separated by ``;``.

How a batch stays safe to interrupt
-----------------------------------
The parent process reads each row's files, hashes them, and computes the sample's
*input key* (SHA-256 over the sample id, its fields and its file hashes). Samples
whose (sample id, input key) is already in the store are skipped. The others go to
the workers with their file bytes (so the worker analyses exactly the bytes that
are saved, and needs no shared file system); each result comes back to the parent,
which saves it in one transaction as soon as it arrives. Killing the batch at any
moment therefore loses at most the samples still in flight, and a rerun does only
those. A row that fails (unreadable file, bad SMILES, anything) is recorded in
``summary.csv`` with its reason and the others go on; failed rows are retried on
the next run.
"""

from __future__ import annotations

import concurrent.futures as cf
import csv
import json
import os
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable, Mapping

from ..errors import SpecmatchError
from .records import canonical_json, input_key, sha256_hex, summarise

REQUIRED_COLUMNS = ("sample_id", "substrate", "reagent")
FILE_COLUMNS = ("c13", "h1", "dept135")
TEXT_COLUMNS = ("solvent", "alcohol")
MANIFEST_COLUMNS = (*REQUIRED_COLUMNS, *FILE_COLUMNS, *TEXT_COLUMNS, "candidates")
SUMMARY_COLUMNS = ("sample_id", "status", "verdict", "top_candidate", "probability", "error",
                   "analysis_id")
MAX_FILE_BYTES = 64 * 1024 * 1024
"""A spectrum file larger than this is refused (it is not a processed 1D spectrum)."""

Runner = Callable[[dict, str], Mapping[str, Any]]


# ------------------------------------------------------------------ the work of one sample
def run_sample(row: dict, base_dir: str) -> dict:
    """Analyse one manifest row with the identification pipeline; return ``Result.to_dict()``.

    ``row`` holds the manifest fields (``candidates`` as a list); if it carries
    ``_files`` (role -> ``{"name", "bytes"}``, as the batch runner sends them) the
    spectra are taken from there, otherwise from paths relative to ``base_dir``.
    Runs in a worker process, so it is a plain top-level function.
    """
    try:
        from ..identification import identify  # type: ignore[attr-defined]
    except ImportError:
        raise SpecmatchError("the identification stage is not available in this "
                             "installation of specmatch; update it") from None
    sent = row.get("_files") or {}
    with tempfile.TemporaryDirectory(prefix="specmatch-sample-") as tmp:
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


def _run_one(runner: Runner, row: dict, base_dir: str) -> tuple[str, str]:
    """Worker entry: ``("ok", json)`` or ``("failed", reason)``; never raises.

    Errors come back as text so that an exception class the parent cannot unpickle
    (or a result that is not JSON) fails this sample alone.
    """
    try:
        data = runner(row, base_dir)
        return "ok", canonical_json(dict(data))
    except SpecmatchError as exc:
        return "failed", str(exc)
    except Exception as exc:  # noqa: BLE001 - one bad sample must not stop the batch
        return "failed", f"internal error ({type(exc).__name__}: {exc})"


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
            data = _read_file(self.base, rel)
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


def read_manifest(path: str | os.PathLike) -> list[Sample]:
    """Read and check a manifest; rows with a problem carry ``error`` and are not run.

    Raises
    ------
    SpecmatchError
        If the file cannot be read or lacks a required column.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")  # spreadsheet exports add a BOM
    except OSError as exc:
        raise SpecmatchError(f"cannot read the manifest '{path}': {exc.strerror}") from None
    except UnicodeDecodeError:
        raise SpecmatchError(f"cannot read the manifest '{path}': it is not UTF-8 text; "
                             "save it as CSV UTF-8") from None
    reader = csv.DictReader(text.splitlines())
    header = [h.strip().lower() for h in (reader.fieldnames or [])]
    missing = [c for c in REQUIRED_COLUMNS if c not in header]
    if missing:
        raise SpecmatchError(
            f"the manifest '{path}' has no column {', '.join(repr(m) for m in missing)}; "
            f"its first line must name the columns: {','.join(MANIFEST_COLUMNS)}")
    if not any(c in header for c in FILE_COLUMNS):
        raise SpecmatchError(f"the manifest '{path}' names no spectrum column; "
                             f"give at least one of {', '.join(FILE_COLUMNS)}")
    base = path.parent
    samples: list[Sample] = []
    seen: dict[str, int] = {}
    for n, raw in enumerate(reader, start=2):
        row = {(k or "").strip().lower(): (v or "").strip() for k, v in raw.items()
               if isinstance(v, str) or v is None}
        if not any(row.values()):
            continue  # blank line
        sid = row.get("sample_id", "")
        fields: dict[str, Any] = {c: row.get(c, "") for c in (*REQUIRED_COLUMNS, *TEXT_COLUMNS)}
        fields["candidates"] = [s.strip() for s in row.get("candidates", "").split(";") if s.strip()]
        for c in FILE_COLUMNS:
            fields[c] = row.get(c, "")
        s = Sample(line=n, sample_id=sid or f"(line {n})", fields=fields, base=base)
        samples.append(s)
        if not sid:
            s.error = f"line {n}: no sample_id; give every sample its own id"
            continue
        if sid in seen:
            s.error = f"sample_id '{sid}' appears again (first on line {seen[sid]}); ids must be unique"
            continue
        seen[sid] = n
        empty = [c for c in ("substrate", "reagent") if not fields[c]]
        if empty:
            s.error = f"line {n}: no {' or '.join(empty)}"
            continue
        if not any(fields[c] for c in FILE_COLUMNS):
            s.error = f"line {n}: no spectrum file (columns {', '.join(FILE_COLUMNS)})"
            continue
        try:
            for role in FILE_COLUMNS:
                if fields[role]:
                    s.files[role] = (fields[role], sha256_hex(_read_file(base, fields[role])))
        except SpecmatchError as exc:
            s.error = str(exc)
            continue
        s.key = input_key(sid, {k: v for k, v in fields.items() if k not in FILE_COLUMNS},
                          {role: digest for role, (_, digest) in s.files.items()})
    return samples


def _read_file(base: Path, rel: str) -> bytes:
    p = (base / rel)
    try:
        size = p.stat().st_size
        if size > MAX_FILE_BYTES:
            raise SpecmatchError(f"'{rel}' is {size / 1e6:.0f} MB; a processed 1D spectrum is far "
                                 "smaller: check the path")
        return p.read_bytes()
    except FileNotFoundError:
        raise SpecmatchError(f"'{rel}' not found (paths are relative to the manifest, "
                             f"here {base})") from None
    except IsADirectoryError:
        raise SpecmatchError(f"'{rel}' is a folder; give the spectrum file (zip a data folder)") from None
    except OSError as exc:
        raise SpecmatchError(f"cannot read '{rel}': {exc.strerror}") from None


# ---------------------------------------------------------------------- executors
class _InProcess(cf.Executor):
    """Runs each task at submit time (``--workers 0``: debugging, no pickling)."""

    def submit(self, fn, /, *args, **kwargs):  # type: ignore[override]
        fut: cf.Future = cf.Future()
        try:
            fut.set_result(fn(*args, **kwargs))
        except BaseException as exc:  # noqa: BLE001
            fut.set_exception(exc)
        return fut


def _local_executor(workers: int) -> cf.Executor:
    if workers == 0:
        return _InProcess()
    import multiprocessing

    # spawn: workers start clean (no copied locks, connections or threads of the parent)
    return cf.ProcessPoolExecutor(max_workers=workers,
                                  mp_context=multiprocessing.get_context("spawn"))


class _Pool:
    """What the driver needs from a pool: submit, wait for some, shut down."""

    remote = False

    def __init__(self, make: Callable[[], cf.Executor]):
        self.make = make
        self.executor = make()

    def submit(self, fn: Callable, *args: Any) -> Any:
        try:
            return self.executor.submit(fn, *args)
        except cf.process.BrokenProcessPool:
            # a worker died (crash, out of memory): its samples have failed; go on with a new pool
            self.executor.shutdown(wait=False, cancel_futures=True)
            self.executor = self.make()
            return self.executor.submit(fn, *args)

    def wait_some(self, pending: Iterable[Any]) -> Iterable[Any]:
        return cf.wait(list(pending), return_when=cf.FIRST_COMPLETED)[0]

    def __enter__(self) -> "_Pool":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.executor.shutdown(wait=True, cancel_futures=True)


class _DaskPool(_Pool):
    """Dask's own futures API (its concurrent.futures wrapper costs a thread hop per task)."""

    remote = True

    def __init__(self, client: Any):
        from distributed import as_completed

        self.client = client
        self.finished = as_completed()

    def submit(self, fn: Callable, *args: Any) -> Any:
        fut = self.client.submit(fn, *args, pure=False)
        self.finished.add(fut)
        return fut

    def wait_some(self, pending: Iterable[Any]) -> Iterable[Any]:
        return self.finished.next_batch(block=True)

    def __exit__(self, *exc: Any) -> None:
        pass  # the client is closed by whoever opened it


def _dask_client(scheduler: Any) -> tuple[Any, bool, int]:
    try:
        from distributed import Client
    except ImportError:
        raise SpecmatchError("--scheduler needs Dask: install 'specmatch[distributed]'") from None
    if isinstance(scheduler, Client):
        client, own = scheduler, False
    else:
        try:
            client, own = Client(scheduler, timeout="10s"), True
        except (OSError, TimeoutError, ValueError) as exc:
            raise SpecmatchError(f"cannot reach the Dask scheduler at '{scheduler}' ({exc}); "
                                 "start one ('dask scheduler') or run without --scheduler") from None
    nthreads = sum(w.get("nthreads", 1) for w in client.scheduler_info()["workers"].values()) or 1
    return client, own, nthreads


# ----------------------------------------------------------------------- the batch
@dataclass
class BatchSummary:
    rows: list[dict[str, Any]]
    summary_path: Path | None
    store_url: str

    def count(self, status: str) -> int:
        return sum(1 for r in self.rows if r["status"] == status)


def run_batch(manifest: str | os.PathLike, out_dir: str | os.PathLike | None = None, *,
              workers: int | None = None, scheduler: Any = None, store: Any = None,
              runner: Runner | None = None, progress: bool | None = None,
              user: str | None = None) -> BatchSummary:
    """Run every sample of a manifest; save each result as it finishes; write summary.csv.

    Parameters
    ----------
    manifest
        The CSV manifest (see the module docstring).
    out_dir
        Where ``summary.csv`` goes (default: ``<manifest name>_results`` beside it).
    workers
        Local worker processes (default: the number of CPUs; 0 runs in this process).
    scheduler
        Address of a Dask distributed scheduler (or a ``distributed.Client``); when
        given, samples run on that cluster instead of local processes.
    store
        A :class:`~specmatch.store.store.Store`, a URL, or None for the configured store.
    runner
        The per-sample function, ``runner(row, base_dir) -> dict``; a top-level
        (importable) function. Default :func:`run_sample`, the whole identify pipeline.
    progress
        Show a progress bar on stderr (default: when stderr is a terminal).
    """
    from tqdm import tqdm

    from .store import Store, open_store

    runner = runner or run_sample
    manifest = Path(manifest)
    own_store = not isinstance(store, Store)
    st = open_store(store) if own_store else store
    try:
        samples = read_manifest(manifest)
        base_dir = str(manifest.parent.resolve())
        done = st.done_keys([s.key for s in samples if s.key])
        results: dict[int, dict[str, Any]] = {}
        earlier: dict[int, str] = {}
        todo: list[int] = []
        for i, s in enumerate(samples):
            if s.error:
                results[i] = _row(s, "failed", error=s.error)
            elif (s.sample_id, s.key) in done:
                earlier[i] = done[(s.sample_id, s.key)]
            else:
                todo.append(i)
        if earlier:
            for i, rec in zip(earlier, st.get_many(list(earlier.values()))):
                results[i] = _row(samples[i], "done-earlier", record=rec)

        bar = tqdm(total=len(samples), initial=len(results), desc="batch", unit="sample",
                   file=sys.stderr, disable=(None if progress is None else not progress),
                   dynamic_ncols=True)
        client = None
        try:
            if todo:
                pool: _Pool
                if scheduler is not None:
                    dask_client, own_client, slots = _dask_client(scheduler)
                    client = dask_client if own_client else None
                    pool = _DaskPool(dask_client)
                else:
                    n = (os.cpu_count() or 1) if workers is None else max(0, int(workers))
                    n = min(n, len(todo)) if n else 0
                    pool, slots = _Pool(lambda: _local_executor(n)), max(1, n)
                _drive(pool, slots, todo, samples, base_dir, runner, st, user, results, bar)
        except KeyboardInterrupt:
            # what finished is saved; say so in the summary, then stop as asked
            write_summary([results.get(i) or _row(s, "not-run") for i, s in enumerate(samples)],
                          Path(out_dir) if out_dir else manifest.parent / f"{manifest.stem}_results")
            raise
        finally:
            bar.close()
            if client is not None:
                client.close()
    finally:
        if own_store:
            st.close()
    rows = [results.get(i) or _row(s, "not-run") for i, s in enumerate(samples)]
    out = Path(out_dir) if out_dir else manifest.parent / f"{manifest.stem}_results"
    path = write_summary(rows, out)
    return BatchSummary(rows=rows, summary_path=path, store_url=st.display_url)


def _drive(pool: _Pool, slots: int, todo: list[int], samples: list[Sample],
           base_dir: str, runner: Runner, store: Any, user: str | None,
           results: dict[int, dict[str, Any]], bar: Any) -> None:
    """Keep a few samples per worker in flight; save each result the moment it arrives."""
    # a few queued per worker hide the round trip (a scheduler's is longer); in flight
    # only, so memory stays bounded and an interruption loses little
    window = max(32, 8 * slots) if pool.remote else max(8, 4 * slots)
    pending: dict[Any, int] = {}  # future -> sample index
    inflight: dict[int, dict[str, tuple[str, bytes]]] = {}  # file bytes of running samples only
    queue = iter(todo)
    failed = 0
    try:
        with pool:
            def top_up() -> None:
                nonlocal failed
                for i in queue:
                    try:
                        inflight[i] = samples[i].load()
                    except SpecmatchError as exc:  # the file went away or changed meanwhile
                        failed += 1
                        results[i] = _row(samples[i], "failed", error=str(exc))
                        bar.update()
                        continue
                    task = samples[i].task(inflight[i])
                    pending[pool.submit(_run_one, runner, task, base_dir)] = i
                    if len(pending) >= window:
                        return

            top_up()
            while pending:
                finished = pool.wait_some(pending)
                to_save: list[tuple[int, dict]] = []
                for fut in finished:
                    i = pending.pop(fut)
                    files = {rel: b for rel, b in inflight.pop(i).values()}
                    try:
                        status, payload = fut.result()
                    except cf.process.BrokenProcessPool:
                        status, payload = "failed", (
                            "a worker process died (crash or out of memory) while this sample was "
                            "queued or running; run the batch again to retry it")
                    except Exception as exc:  # noqa: BLE001 - pickling failed, worker lost...
                        status, payload = "failed", f"worker failure ({type(exc).__name__}: {exc})"
                    if status == "ok":
                        to_save.append((i, payload, files))
                    else:
                        failed += 1
                        results[i] = _row(samples[i], "failed", error=payload)
                        bar.update()
                if to_save:
                    # results that finished together share one transaction (one fsync)
                    datas = [json.loads(payload) for _, payload, _ in to_save]
                    ids = store.save_many([
                        {"record": data, "data_json": payload, "files": files,
                         "sample_id": samples[i].sample_id, "user": user,
                         "input_key": samples[i].key, "skip_if_done": True}
                        for (i, payload, files), data in zip(to_save, datas)])
                    for (i, _, _), data, aid in zip(to_save, datas, ids):
                        results[i] = _row(samples[i], "done", data=data, analysis_id=aid)
                    bar.update(len(to_save))
                if failed:
                    bar.set_postfix(failed=failed, refresh=False)
                top_up()
    except BaseException:
        for fut in pending:
            fut.cancel()
        raise


def _row(s: Sample, status: str, *, data: Mapping[str, Any] | None = None, record: Any = None,
         analysis_id: str | None = None, error: str | None = None) -> dict[str, Any]:
    verdict = top = prob = None
    if record is not None:
        verdict, top, prob, analysis_id = (record.verdict, record.top_smiles,
                                           record.top_probability, record.id)
    elif data is not None:
        sm = summarise(data)
        verdict, top, prob = sm.verdict, sm.top_smiles, sm.top_probability
    return {"sample_id": s.sample_id, "status": status, "verdict": verdict or "",
            "top_candidate": top or "", "probability": "" if prob is None else f"{prob:.4f}",
            "error": error or "", "analysis_id": analysis_id or ""}


def write_summary(rows: Iterable[Mapping[str, Any]], out_dir: str | os.PathLike) -> Path:
    """Write ``summary.csv`` (atomically: a reader never sees half a table)."""
    out = Path(out_dir)
    try:
        out.mkdir(parents=True, exist_ok=True)
        path = out / "summary.csv"
        tmp = out / ".summary.csv.tmp"
        with open(tmp, "w", newline="", encoding="utf-8") as fh:
            w = csv.DictWriter(fh, fieldnames=SUMMARY_COLUMNS)
            w.writeheader()
            for r in rows:
                w.writerow({k: r.get(k, "") for k in SUMMARY_COLUMNS})
        os.replace(tmp, path)
    except OSError as exc:
        raise SpecmatchError(f"cannot write the summary into '{out}': {exc.strerror}") from None
    return path


# -------------------------------------------------------------------------- CLI
def run_batch_command(args: Any) -> int:
    """``specmatch batch``: run the manifest, print the outcome; exit 1 if any row failed."""
    summary = run_batch(args.manifest, getattr(args, "out", None),
                        workers=getattr(args, "workers", None),
                        scheduler=getattr(args, "scheduler", None),
                        store=getattr(args, "store", None), user=getattr(args, "user", None))
    rows = summary.rows
    if getattr(args, "json", False):
        json.dump({"summary": str(summary.summary_path), "store": summary.store_url,
                   "samples": rows}, sys.stdout, indent=2)
        sys.stdout.write("\n")
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
