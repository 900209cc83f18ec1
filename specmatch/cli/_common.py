"""Small helpers shared by the command handlers (output, progress, files)."""

from __future__ import annotations

import json
import sys
from typing import Any

from ..errors import SpecmatchError


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
