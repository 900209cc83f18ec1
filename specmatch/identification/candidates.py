"""Candidate files: the one reader every command uses (``identify``, ``mixture``, the app).

Format: one structure per line, a SMILES optionally followed by whitespace and a
name::

    # products of the hydration (a comment line)
    CC(C)(O)C1CCCCC1   tertiary alcohol after a hydride shift
    CC(O)C1CCCCC1      secondary alcohol   # a trailing comment
    C#Cc1ccc2ccccc2c1  2-ethynylnaphthalene

``#`` starts a comment only at the start of a line or after whitespace: inside a
SMILES it is a triple bond, so a SMILES is never cut. Blank lines are skipped.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from ..errors import SpecmatchError
from ..safeio import read_text

__all__ = ["CandidateLine", "parse_candidates", "read_candidates"]

#: a comment: '#' at the start of the line or after whitespace
_COMMENT = re.compile(r"(^|\s)#.*$")
#: a candidate file larger than this is not a candidate list (common sense limit)
MAX_BYTES = 1 << 20


@dataclass(frozen=True)
class CandidateLine:
    """One candidate read from a file: its SMILES as written, a name and the line number."""

    smiles: str
    name: str
    line: int


def parse_candidates(text: str, source: str = "the candidate list") -> list[CandidateLine]:
    """Parse candidate-file text (see the module docstring); raises SpecmatchError when empty."""
    out: list[CandidateLine] = []
    for n, raw in enumerate(text.splitlines(), 1):
        line = _COMMENT.sub("", raw).strip()
        if not line:
            continue
        parts = line.split(None, 1)
        smiles = parts[0]
        name = parts[1].strip() if len(parts) > 1 else smiles
        out.append(CandidateLine(smiles, name, n))
    if not out:
        raise SpecmatchError(f"{source} lists no structures; write one SMILES per line "
                             "(optionally followed by a name)")
    return out


def read_candidates(path: str | Path) -> list[CandidateLine]:
    """Read a candidate file; every problem is a SpecmatchError that says what to do."""
    p = Path(path)
    try:
        if p.is_dir():
            raise SpecmatchError(f"candidate file '{path}' is a folder; give a text file, one SMILES per line")
        if p.stat().st_size > MAX_BYTES:
            raise SpecmatchError(f"candidate file '{path}' is larger than {MAX_BYTES // 1024} KiB; "
                                 "a candidate list is one SMILES per line")
        # the guarded reader refuses devices and FIFOs and never reads past its limit
        # (a /dev/zero reports size 0 and would otherwise be read without end)
        # decoded like every other text input (BOM-aware UTF-8/16/32); no Latin-1 guess,
        # since a misread name or SMILES would be silently wrong
        text = read_text(p, kind="candidates", legacy_8bit=False)
    except FileNotFoundError:
        raise SpecmatchError(f"candidate file '{path}' not found") from None
    except OSError as exc:
        raise SpecmatchError(f"cannot read candidate file '{path}': {exc.strerror}") from None
    return parse_candidates(text, f"candidate file '{path}'")
