"""Small helpers shared by the command handlers (output, progress, files)."""

from __future__ import annotations

import json
import sys
from typing import Any

from ..errors import SpecmatchError


#: set by a batch handler whose output is written and closed: the ``specmatch`` command
#: then ends without the interpreter's teardown (see :func:`specmatch.cli.console_main`)
FAST_EXIT = False


def _fast_exit_after() -> None:
    """Ask :func:`specmatch.cli.console_main` to skip the teardown once this command returns.

    Freeing a batch's caches (thousands of predictions and RDKit molecules) and the
    correction tables one object at a time costs 0.1-0.2 s at exit, a fifth of a
    710-molecule ``predict --batch``; the operating system frees the memory at once.
    """
    global FAST_EXIT
    FAST_EXIT = True


def _print_json(obj: Any) -> None:
    json.dump(obj, sys.stdout, indent=2, ensure_ascii=False, default=str)
    sys.stdout.write("\n")


class _NoBar:
    """Stand-in for a disabled progress bar."""

    def __enter__(self) -> "_NoBar":
        return self

    def __exit__(self, *exc: object) -> None:
        return None

    def update(self, n: int = 1) -> None:
        return None


def _progress(total: int, desc: str):
    """A progress bar on stderr for long batches (silent for short ones or non-TTY)."""
    if total < 200 or not sys.stderr.isatty():
        return _NoBar()  # tqdm (and the numpy it pulls in) costs 0.3 s of start-up for nothing
    from tqdm import tqdm

    return tqdm(total=total, desc=desc, unit="item", file=sys.stderr,
                disable=total < 200 or not sys.stderr.isatty(), leave=False)


def _read_lines(path: str) -> list[str]:
    """Lines of a ``--batch`` input (guarded reader, ``batch`` limit, UTF-8 or a BOM)."""
    from .. import safeio

    return safeio.read_text(path, kind="batch", legacy_8bit=False).splitlines()


def _open_out(path: str):
    try:
        return open(path, "w", encoding="utf-8")
    except OSError as exc:
        raise SpecmatchError(f"cannot write '{path}': {exc.strerror}") from None
