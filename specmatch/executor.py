"""The one way specmatch runs many independent tasks: in this process, on local worker
processes, or on a Dask cluster.

Every batch (``specmatch batch``, ``rank --batch``, ``predict --batch``) calls
:func:`run_tasks` with a top-level task function and its items; the function's
result or its error message comes back for each item, so one bad item never stops
the others.

Worker policy (the same for every batch)
----------------------------------------
1. A Dask scheduler given (``--scheduler``): the tasks run on that cluster.
2. ``workers`` given (``--workers N``), else ``$SPECMATCH_WORKERS``: 0 runs in this
   process, N >= 1 starts N local worker processes (never more than there are tasks).
3. Otherwise automatic: ``min(available CPUs, MAX_AUTO_WORKERS, tasks // per_worker)``
   processes, where ``per_worker`` is the caller's estimate of how many tasks pay for
   a worker's start-up (importing specmatch and RDKit takes about a second); fewer
   than two means this process.

Local workers are *spawned* (they start clean: no copied database connections, locks
or threads of the parent), unless the caller asks for ``fork=True``: a caller whose
process holds no connections, locks or threads (``predict --batch``, ``rank --batch``)
forks, so workers start in milliseconds with the parent's imports and tables already
loaded (where the platform can fork; elsewhere they are spawned). Forked workers over a
list of items are fed by :class:`_Forked` (two pipes per worker, chunks sent as item
positions, no threads or multiprocessing machinery); other local runs use
``concurrent.futures``. They end with their parent whatever stops it: on Linux each
worker asks the kernel for SIGTERM when its parent dies (``prctl(PR_SET_PDEATHSIG)``),
so a SIGKILL of the parent takes the workers with it; SIGTERM, SIGHUP and Ctrl-C in the
parent stop the workers before :func:`run_tasks` re-raises (as :class:`Stopped` or
``KeyboardInterrupt``). Workers ignore Ctrl-C themselves (the parent decides), and a
worker stopped by SIGTERM removes its scratch folder (:func:`scratch_dir`) first. The
parent removes the whole scratch folder of a run on every exit it lives through, and
the next run removes folders left by runs that were killed outright.
"""

from __future__ import annotations

import os
import shutil
import signal
import sys
import tempfile
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any, Callable, Iterable, Iterator, Sequence

from .errors import SpecmatchError

if TYPE_CHECKING:
    import concurrent.futures as cf

# concurrent.futures (and with it logging, threading, multiprocessing) is imported only
# when processes run: an inline run (small batches, --workers 0) starts without it

__all__ = ["MAX_AUTO_WORKERS", "Outcome", "Plan", "Stopped", "plan_workers", "run_tasks",
           "scratch_dir"]

ENV_WORKERS = "SPECMATCH_WORKERS"
MAX_AUTO_WORKERS = 4
"""Most local processes the automatic policy starts (memory: ~150 MB each)."""
SCRATCH_PREFIX = "specmatch-run-"
STOP_SIGNALS = tuple(s for s in (getattr(signal, "SIGTERM", None), getattr(signal, "SIGHUP", None))
                     if s is not None)
WORKER_DIED = ("a worker process died (crash or out of memory) while this task was queued or "
               "running; run it again to retry")


class Stopped(KeyboardInterrupt):
    """The parent process was asked to stop (SIGTERM, SIGHUP); finished work is kept."""

    def __init__(self, signum: int):
        super().__init__(signum)
        self.signum = signum

    @property
    def name(self) -> str:
        return signal.Signals(self.signum).name


@dataclass(frozen=True)
class Plan:
    """Where the tasks run: ``kind`` is "inline", "processes" or "dask"."""

    kind: str
    workers: int
    scheduler: Any = None

    def describe(self) -> str:
        if self.kind == "inline":
            return "in this process"
        if self.kind == "dask":
            return f"on the Dask cluster at {self.scheduler}"
        return f"on {self.workers} local worker process{'es' if self.workers != 1 else ''}"


@dataclass(frozen=True)
class Outcome:
    """One task's outcome: ``ok`` with ``value``, or not ok with ``error`` (a message)."""

    index: int
    ok: bool
    value: Any = None
    error: str = ""


def _available_cpus() -> int:
    try:
        return len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return os.cpu_count() or 1


def plan_workers(n_tasks: int, workers: int | None = None, scheduler: Any = None, *,
                 per_worker: int = 1) -> Plan:
    """Apply the worker policy (module docstring) to a batch of ``n_tasks`` tasks."""
    if scheduler is not None:
        return Plan("dask", 0, scheduler)
    if workers is None:
        env = os.environ.get(ENV_WORKERS, "").strip()
        if env:
            if not env.isdigit():
                raise SpecmatchError(f"{ENV_WORKERS}={env!r} is not a number of worker processes; "
                                     "set it to 0 (this process) or a count such as 2")
            workers = int(env)
    if workers is not None:
        if workers < 0:
            raise SpecmatchError(f"--workers {workers}: give 0 (this process) or a positive count")
        n = min(workers, max(n_tasks, 1))
        return Plan("inline", 0) if n == 0 else Plan("processes", n)
    n = min(_available_cpus(), MAX_AUTO_WORKERS, n_tasks // max(1, per_worker))
    return Plan("processes", n) if n >= 2 else Plan("inline", 0)


# ------------------------------------------------------------------ worker side
_SCRATCH: Path | None = None  # this process's scratch folder (set in workers and inline runs)


def scratch_dir() -> str | None:
    """A folder for temporary files of the current task, removed whatever ends the run.

    In a local worker or an inline run it lies inside the run's scratch folder (which
    the parent removes on exit); elsewhere (a Dask worker) it is None: use the system
    temporary folder with a context manager.
    """
    if _SCRATCH is None:
        return None
    _SCRATCH.mkdir(parents=True, exist_ok=True)
    return str(_SCRATCH)


def _die_with_parent() -> None:
    """Ask Linux to send this process SIGTERM when its parent dies (no-op elsewhere)."""
    if not sys.platform.startswith("linux"):
        return
    import ctypes

    try:
        libc = ctypes.CDLL(None, use_errno=True)
        libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)  # 1 = PR_SET_PDEATHSIG
    except (OSError, AttributeError):  # no prctl: the parent's handlers still stop us
        pass


def _on_worker_term(signum, frame) -> None:  # pragma: no cover - runs in workers
    if _SCRATCH is not None:
        shutil.rmtree(_SCRATCH, ignore_errors=True)
    os._exit(128 + signum)


def _worker_init(parent_pid: int, scratch_root: str | None, init: Callable[[], Any] | None) -> None:
    global _SCRATCH
    _die_with_parent()
    if os.getppid() != parent_pid:  # the parent died before we asked to follow it
        os._exit(1)
    for s in STOP_SIGNALS:  # a forked worker inherits the parent's handlers: back to the default
        signal.signal(s, signal.SIG_DFL)
    signal.signal(signal.SIGTERM, _on_worker_term)
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C goes to the whole group: parent decides
    if scratch_root:
        _SCRATCH = Path(scratch_root) / f"worker-{os.getpid()}"
    if init is not None:
        init()


def _call(fn: Callable[[Any], Any], item: Any) -> tuple[bool, Any]:
    """Run one task; its error comes back as text (an exception class the parent cannot
    unpickle, or a result that is not picklable, then fails this task alone)."""
    try:
        return True, fn(item)
    except SpecmatchError as exc:
        return False, str(exc)
    except Exception as exc:  # noqa: BLE001 - one bad task must not stop the batch
        return False, f"internal error ({type(exc).__name__}: {exc})"


def _call_chunk(fn: Callable[[Any], Any], items: Sequence[Any]) -> list[tuple[bool, Any]]:
    return [_call(fn, item) for item in items]


# ------------------------------------------------------------------ parent side
def _sweep_stale_scratch() -> None:
    """Remove scratch folders of runs whose parent no longer exists (killed outright)."""
    try:
        entries = list(Path(tempfile.gettempdir()).glob(SCRATCH_PREFIX + "*"))
    except OSError:
        return
    for d in entries:
        try:
            pid = int(d.name[len(SCRATCH_PREFIX):].split("-")[0])
        except ValueError:
            continue
        if pid == os.getpid():
            continue
        try:
            os.kill(pid, 0)
            continue  # still running
        except ProcessLookupError:
            shutil.rmtree(d, ignore_errors=True)
        except PermissionError:  # another user's live process
            continue


@contextmanager
def _stop_on_signals() -> Iterator[None]:
    """Turn SIGTERM/SIGHUP into :class:`Stopped` in the main thread, for the duration."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def handler(signum, frame):
        raise Stopped(signum)

    old = {}
    for s in STOP_SIGNALS:
        try:
            old[s] = signal.signal(s, handler)
        except (ValueError, OSError):
            pass
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)


def _start_method(fork: bool) -> str:
    import multiprocessing

    return "fork" if fork and "fork" in multiprocessing.get_all_start_methods() else "spawn"


class _Local:
    """A local process pool (spawned, or forked on request) that is replaced when a worker
    dies and stopped hard on exit."""

    remote = False

    def __init__(self, n: int, scratch: str, init: Callable[[], Any] | None, fork: bool = False):
        self.n, self.scratch, self.init = n, scratch, init
        self.method = _start_method(fork)
        self.pool = self._make()

    def _make(self) -> cf.ProcessPoolExecutor:
        import concurrent.futures as cf
        import concurrent.futures.process  # noqa: F401 - cf.process below
        import multiprocessing

        return cf.ProcessPoolExecutor(max_workers=self.n,
                                      mp_context=multiprocessing.get_context(self.method),
                                      initializer=_worker_init,
                                      initargs=(os.getpid(), self.scratch, self.init))

    def submit(self, fn: Callable, *args: Any) -> Any:
        import concurrent.futures.process as cfp

        try:
            return self.pool.submit(fn, *args)
        except cfp.BrokenProcessPool:
            self.pool.shutdown(wait=False, cancel_futures=True)
            self.pool = self._make()
            return self.pool.submit(fn, *args)

    def wait_some(self, pending: Iterable[Any]) -> Iterable[Any]:
        import concurrent.futures as cf

        return cf.wait(list(pending), return_when=cf.FIRST_COMPLETED)[0]

    def close(self, *, clean: bool) -> None:
        if clean:
            self.pool.shutdown(wait=True)
            return
        # interrupted: do not wait for running tasks; end the workers now
        procs = list((getattr(self.pool, "_processes", None) or {}).values())
        self.pool.shutdown(wait=False, cancel_futures=True)
        for p in procs:
            if p.is_alive():
                p.terminate()
        deadline = time.monotonic() + 5
        for p in procs:
            p.join(max(0.0, deadline - time.monotonic()))
            if p.is_alive():
                p.kill()
                p.join(1)


def _can_fork() -> bool:
    return hasattr(os, "fork") and sys.platform.startswith("linux")


def _read_exact(fd: int, n: int) -> bytes | None:
    """``n`` bytes from a pipe, None at its end."""
    data = b""
    while len(data) < n:
        got = os.read(fd, n - len(data))
        if not got:
            return None
        data += got
    return data


def _write_all(fd: int, data: bytes) -> None:
    view = memoryview(data)
    while view:
        view = view[os.write(fd, view):]


def _encode_results(start: int, results: list[tuple[bool, Any]]) -> bytes:
    """A result frame (length, then the pickled chunk); a value that cannot be pickled
    fails its own task only."""
    import pickle

    try:
        payload = pickle.dumps((start, results), pickle.HIGHEST_PROTOCOL)
    except Exception:  # noqa: BLE001 - find the task(s) whose value does not pickle
        safe = []
        for ok, value in results:
            try:
                pickle.dumps(value, pickle.HIGHEST_PROTOCOL)
                safe.append((ok, value))
            except Exception as exc:  # noqa: BLE001
                safe.append((False, f"worker failure ({type(exc).__name__}: {exc})"))
        payload = pickle.dumps((start, safe), pickle.HIGHEST_PROTOCOL)
    return len(payload).to_bytes(8, "little") + payload


class _Worker:
    __slots__ = ("pid", "task_w", "result_r", "inflight", "buf")

    def __init__(self, pid: int, task_w: int, result_r: int):
        self.pid, self.task_w, self.result_r = pid, task_w, result_r
        self.inflight: list[tuple[int, int]] = []  # chunks sent, in order: (first, end) item
        self.buf = bytearray()


def _release_in_order(group: list[Outcome], buffered: dict[int, Outcome], next_out: int
                      ) -> tuple[list[Outcome], int]:
    """Park ``group`` in ``buffered`` and take out the run of outcomes that continues at
    ``next_out`` (ordered output: a later chunk may finish first)."""
    for o in group:
        buffered[o.index] = o
    out = []
    while next_out in buffered:
        out.append(buffered.pop(next_out))
        next_out += 1
    return out, next_out


def _chunk_spans(n_items: int, chunk: int, workers: int) -> list[tuple[int, int]]:
    """(first, end) item spans: ``chunk`` items each, shrinking toward the end of the batch.

    A span is at most the items left over four times the workers, so the last spans are
    small (down to a quarter of ``chunk``) and the workers finish together: with equal
    spans one worker may still run a whole span after the other has run out of work.
    """
    spans, first = [], 0
    smallest = max(1, chunk // 4)
    while first < n_items:
        size = max(smallest, min(chunk, -(-(n_items - first) // (4 * max(1, workers)))))
        spans.append((first, min(n_items, first + size)))
        first += size
    return spans


class _Forked:
    """Local workers forked from this process and fed over two pipes each: the workers
    inherit the item list, so a chunk is sent as two numbers and comes back as one
    pickled list of results. No threads, queues or multiprocessing machinery (their
    imports and per-chunk hops cost more than a small batch's tasks); a worker that
    dies fails its own chunks with :data:`WORKER_DIED` and is replaced."""

    DEPTH = 2  # chunks queued per worker: one running, one waiting

    def __init__(self, n: int, scratch: str, init: Callable[[], Any] | None, fn: Callable[[Any], Any],
                 items: Sequence[Any]):
        self.n, self.scratch, self.init, self.fn, self.items = n, scratch, init, fn, items
        self.workers: dict[int, _Worker] = {}  # by result pipe
        for _ in range(n):
            self._start()

    def _start(self) -> None:
        task_r, task_w = os.pipe()
        result_r, result_w = os.pipe()
        for stream in (sys.stdout, sys.stderr):  # a buffered line must not be written twice
            try:
                stream.flush()
            except (OSError, ValueError, AttributeError):
                pass
        parent = os.getpid()
        pid = os.fork()
        if pid == 0:  # pragma: no cover - runs in the worker
            code = 0
            try:
                os.close(task_w)
                os.close(result_r)
                for w in self.workers.values():  # the other workers' pipe ends: their EOFs must reach them
                    for fd in (w.task_w, w.result_r):
                        try:
                            os.close(fd)
                        except OSError:
                            pass
                _worker_init(parent, self.scratch, self.init)
                while True:
                    head = _read_exact(task_r, 16)
                    if head is None:
                        break  # the parent closed the pipe: no more work
                    first, end = int.from_bytes(head[:8], "little"), int.from_bytes(head[8:], "little")
                    _write_all(result_w, _encode_results(first, _call_chunk(self.fn, self.items[first:end])))
            except BaseException:  # noqa: BLE001 - the worker ends here whatever happens
                code = 1
            finally:
                os._exit(code)
        os.close(task_r)
        os.close(result_w)
        self.workers[result_r] = _Worker(pid, task_w, result_r)

    def _send(self, w: _Worker, first: int, end: int) -> None:
        w.inflight.append((first, end))
        _write_all(w.task_w, first.to_bytes(8, "little") + end.to_bytes(8, "little"))

    def _lost(self, w: _Worker) -> list[tuple[int, int]]:
        """Forget a worker whose result pipe ended; its unfinished chunks."""
        del self.workers[w.result_r]
        for fd in (w.task_w, w.result_r):
            try:
                os.close(fd)
            except OSError:
                pass
        try:
            os.waitpid(w.pid, 0)
        except ChildProcessError:
            pass
        return w.inflight

    def drive(self, ordered: bool, chunk: int) -> Iterator[list[Outcome]]:
        import pickle
        import select

        todo = _chunk_spans(len(self.items), chunk, len(self.workers))
        todo.reverse()  # popped from the end: first chunk first
        buffered: dict[int, Outcome] = {}
        next_out = 0
        while True:
            # top up: each worker keeps DEPTH chunks queued (16 bytes each: a pipe never fills)
            for w in list(self.workers.values()):
                while todo and len(w.inflight) < self.DEPTH:
                    try:
                        self._send(w, *todo.pop())
                    except OSError:  # the worker is gone: the end of its result pipe shows it
                        break
            if not any(w.inflight for w in self.workers.values()):
                return
            ready, _, _ = select.select(list(self.workers), [], [])
            group: list[Outcome] = []
            for fd in ready:
                w = self.workers[fd]
                data = os.read(fd, 1 << 20)
                if not data:  # the worker died: in its first chunk (a worker reads the next one
                    # only after answering), so that one fails and the ones queued behind it go again
                    lost = self._lost(w)
                    if lost:
                        first, end = lost[0]
                        group += [Outcome(i, False, None, WORKER_DIED) for i in range(first, end)]
                        todo += reversed(lost[1:])
                    if todo:  # work left: a fresh worker takes its place
                        self._start()
                    continue
                w.buf += data
                while len(w.buf) >= 8:
                    size = int.from_bytes(w.buf[:8], "little")
                    if len(w.buf) < 8 + size:
                        break
                    first, results = pickle.loads(w.buf[8:8 + size])
                    del w.buf[:8 + size]
                    w.inflight.pop(0)
                    for i, (ok, value) in enumerate(results, start=first):
                        group.append(Outcome(i, ok, value if ok else None, "" if ok else str(value)))
            if ordered:
                group, next_out = _release_in_order(group, buffered, next_out)
            if group:
                yield group

    def close(self, *, clean: bool) -> None:
        workers = list(self.workers.values())
        self.workers = {}
        for w in workers:
            try:
                os.close(w.task_w)  # end of work: a waiting worker exits
            except OSError:
                pass
            if not clean:
                try:
                    os.kill(w.pid, signal.SIGTERM)
                except ProcessLookupError:
                    pass
        deadline = time.monotonic() + 5
        for w in workers:
            while True:
                try:
                    done, _ = os.waitpid(w.pid, os.WNOHANG)
                except ChildProcessError:
                    break
                if done:
                    break
                if time.monotonic() > deadline:
                    try:
                        os.kill(w.pid, signal.SIGKILL)
                        os.waitpid(w.pid, 0)
                    except (ProcessLookupError, ChildProcessError):
                        pass
                    break
                time.sleep(0.002)
            try:
                os.close(w.result_r)
            except OSError:
                pass


class _Dask:
    """Dask's own futures API (its concurrent.futures wrapper costs a thread hop per task)."""

    remote = True

    def __init__(self, scheduler: Any):
        try:
            from distributed import Client, as_completed
        except ImportError:
            raise SpecmatchError("--scheduler needs Dask: install 'specmatch[distributed]'") from None
        if isinstance(scheduler, Client):
            self.client, self.own = scheduler, False
        else:
            try:
                self.client, self.own = Client(scheduler, timeout="10s"), True
            except (OSError, TimeoutError, ValueError) as exc:
                raise SpecmatchError(
                    f"cannot reach the Dask scheduler at '{scheduler}' ({exc}); start one "
                    "('dask scheduler') or run without --scheduler") from None
        self.n = sum(w.get("nthreads", 1)
                     for w in self.client.scheduler_info()["workers"].values()) or 1
        self.finished = as_completed()

    def submit(self, fn: Callable, *args: Any) -> Any:
        fut = self.client.submit(fn, *args, pure=False)
        self.finished.add(fut)
        return fut

    def wait_some(self, pending: Iterable[Any]) -> Iterable[Any]:
        return self.finished.next_batch(block=True)

    def close(self, *, clean: bool) -> None:
        if not clean:
            for fut in list(self.finished.futures):
                fut.cancel()
        if self.own:
            self.client.close()


def run_tasks(fn: Callable[[Any], Any], items: Iterable[Any], plan: Plan, *,
              ordered: bool = False, chunk: int = 1, initializer: Callable[[], Any] | None = None,
              fork: bool = False) -> Iterator[list[Outcome]]:
    """Run ``fn(item)`` for every item; yield the outcomes in groups as they finish.

    Parameters
    ----------
    fn
        A top-level (importable) function of one argument: workers import it by name.
    items
        Consumed lazily, a few per worker ahead (memory stays bounded); an item may be
        prepared by the iterator itself (files read in the parent, say).
    plan
        From :func:`plan_workers`.
    ordered
        Yield outcomes in item order (else as they finish).
    chunk
        Items sent to a worker at once (small tasks: fewer round trips).
    initializer
        Run once in each local worker (warm caches); a top-level function.
    fork
        Fork local workers instead of spawning them (module docstring): only for callers
        whose process holds no database connection, lock or thread; warm the caches in
        the parent first and the workers inherit them.

    Each group holds the tasks that finished together (a caller saving results can
    commit a group in one transaction). A task that raised gives an
    :class:`Outcome` with ``ok=False`` and the message; a worker that died fails its
    tasks with a message saying so and a fresh pool goes on with the rest. Stopped by
    a signal, the workers are ended and the scratch folder removed before
    :class:`Stopped` (or ``KeyboardInterrupt``) propagates.
    """
    global _SCRATCH
    _sweep_stale_scratch()
    scratch = tempfile.mkdtemp(prefix=f"{SCRATCH_PREFIX}{os.getpid()}-")
    chunk = max(1, int(chunk))
    try:
        with _stop_on_signals():
            if plan.kind == "inline":
                before, _SCRATCH = _SCRATCH, Path(scratch) / "inline"
                try:
                    if initializer is not None:
                        initializer()
                    for i, item in enumerate(items):
                        ok, value = _call(fn, item)
                        yield [Outcome(i, ok, value if ok else None, "" if ok else value)]
                finally:
                    _SCRATCH = before
                return
            if plan.kind == "processes" and fork and _can_fork() and isinstance(items, (list, tuple)):
                forked = _Forked(plan.workers, scratch, initializer, fn, items)
                clean = False
                try:
                    yield from forked.drive(ordered, chunk)
                    clean = True
                finally:
                    forked.close(clean=clean)
                return
            pool: Any = _Dask(plan.scheduler) if plan.kind == "dask" else _Local(
                plan.workers, scratch, initializer, fork)
            clean = False
            try:
                yield from _drive(pool, fn, items, ordered, chunk)
                clean = True
            finally:
                pool.close(clean=clean)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)


def _drive(pool: Any, fn: Callable, items: Iterable[Any], ordered: bool,
           chunk: int) -> Iterator[list[Outcome]]:
    import concurrent.futures as cf
    import concurrent.futures.process  # noqa: F401 - cf.process below

    # a few chunks queued per worker hide the round trip (a scheduler's is longer);
    # only in flight, so memory stays bounded and an interruption loses little
    window = max(32, 8 * pool.n) if pool.remote else max(8, 4 * pool.n)
    it = enumerate(items)
    pending: dict[Any, list[int]] = {}
    exhausted = False
    buffered: dict[int, Outcome] = {}
    next_out = 0

    def top_up() -> None:
        nonlocal exhausted
        # ordered: results waiting for an earlier one count too, so a slow task cannot
        # make the buffer grow without bound
        while not exhausted and len(pending) + len(buffered) // chunk < window:
            group: list[tuple[int, Any]] = []
            for i, item in it:
                group.append((i, item))
                if len(group) >= chunk:
                    break
            if not group:
                exhausted = True
                return
            fut = pool.submit(_call_chunk, fn, [x for _, x in group])
            pending[fut] = [i for i, _ in group]

    top_up()
    while pending:
        finished = pool.wait_some(pending)
        group_out: list[Outcome] = []
        for fut in finished:
            idx = pending.pop(fut)
            try:
                results = fut.result()
            except cf.process.BrokenProcessPool:
                results = [(False, WORKER_DIED)] * len(idx)
            except cf.CancelledError:
                results = [(False, "cancelled")] * len(idx)
            except Exception as exc:  # noqa: BLE001 - pickling failed, a worker was lost...
                results = [(False, f"worker failure ({type(exc).__name__}: {exc})")] * len(idx)
            for i, (ok, value) in zip(idx, results):
                group_out.append(Outcome(i, ok, value if ok else None, "" if ok else str(value)))
        if ordered:
            group_out, next_out = _release_in_order(group_out, buffered, next_out)
        # after the buffer is flushed: with nothing in flight it is empty, so this
        # always sends more while items are left
        top_up()
        if group_out:
            yield group_out
