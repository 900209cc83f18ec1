"""The one guarded way specmatch reads a user's file: regular files only, bounded reads.

Every reader of user input goes through :func:`read_bytes` or :func:`read_text`:

- only regular files are read; a directory, character or block device, FIFO
  (named pipe) or socket is refused by name ("'/dev/zero' is a character device,
  not a file"), so nothing blocks on a pipe or reads a device forever;
- each kind of input has a size limit (:data:`LIMITS`, bytes). The read itself is
  bounded: at most ``limit + 1`` bytes are ever read, even when ``stat`` reports a
  wrong size (``/proc`` files say 0 bytes and then stream);
- text is decoded once, here: a byte-order mark selects UTF-8, UTF-16 or UTF-32;
  BOM-less UTF-16 (every other byte NUL) is recognised; other 8-bit text is read
  as Latin-1 (old instrument exports); binary data is refused with a hint.

The limits can be changed per kind with an environment variable
``SPECMATCH_MAX_<KIND>_MB`` (for example ``SPECMATCH_MAX_SPECTRUM_MB=200``);
:func:`limit` reads it on every call, so tests and servers can set it at run time.
"""

from __future__ import annotations

import codecs
import os
import stat
from pathlib import Path
from typing import Iterator

from .errors import SpecmatchError

__all__ = ["LIMITS", "limit", "check_file", "read_bytes", "read_head", "read_text", "decode_text",
           "sha256_file", "text_encoding"]

_MIB = 1024 * 1024

#: Default size limit in bytes per kind of input. Sizes are for the file as
#: given (a zip counts compressed; its extraction has its own limits in
#: ``spectra/archive.py``). Chosen well above real data: a 1D JCAMP-DX export of
#: 256k points is 1 to 6 MB, a zipped 1D experiment folder a few MB, a peak list
#: a few kB.
LIMITS: dict[str, int] = {
    "spectrum": 64 * _MIB,     # JCAMP-DX, nmrML, NMRPipe, x,y text; files inside instrument folders
    "archive": 256 * _MIB,     # zip of an instrument folder (compressed size)
    "peaklist": 8 * _MIB,      # CSV/TSV peak lists
    "candidates": 4 * _MIB,    # candidate SMILES / molfile / SDF files
    "manifest": 16 * _MIB,     # batch manifests (CSV)
    "parameters": 8 * _MIB,    # instrument parameter files (acqus, procs, procpar)
    "config": 1 * _MIB,        # settings files
    "spin_system": 1 * _MIB,   # JSON spin systems (``simulate --spin-system``)
    "batch": 256 * _MIB,       # JSON-lines / SMILES-lines inputs of ``rank --batch``, ``predict --batch``
}

_CHUNK = 1 << 20


def limit(kind: str) -> int:
    """Size limit in bytes for `kind` (``SPECMATCH_MAX_<KIND>_MB`` overrides it)."""
    if kind not in LIMITS:
        raise ValueError(f"unknown input kind {kind!r}; one of {', '.join(LIMITS)}")
    env = os.environ.get(f"SPECMATCH_MAX_{kind.upper()}_MB")
    if env:
        try:
            mb = float(env)
        except ValueError:
            raise SpecmatchError(
                f"SPECMATCH_MAX_{kind.upper()}_MB={env!r} is not a number of megabytes") from None
        if not (mb > 0 and mb < 1e6):
            raise SpecmatchError(
                f"SPECMATCH_MAX_{kind.upper()}_MB={env!r} should be a positive number of megabytes")
        return int(mb * _MIB)
    return LIMITS[kind]


def _what(mode: int) -> str | None:
    """Name of a non-regular file type, None for a regular file."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "a directory"
    if stat.S_ISCHR(mode):
        return "a character device"
    if stat.S_ISBLK(mode):
        return "a block device"
    if stat.S_ISFIFO(mode):
        return "a FIFO (named pipe)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _fmt(n: int) -> str:
    return f"{n / _MIB:,.1f} MB" if n >= _MIB else f"{n:,} bytes"


def _cannot_read(p: Path, exc: OSError) -> SpecmatchError:
    """The one message for a file that cannot be opened or stat'ed."""
    if isinstance(exc, FileNotFoundError):
        return SpecmatchError(f"cannot read '{p}': no such file")
    if isinstance(exc, PermissionError):
        return SpecmatchError(f"cannot read '{p}': permission denied")
    return SpecmatchError(f"cannot read '{p}': {exc.strerror or exc}")


def check_file(path: str | os.PathLike, *, kind: str) -> Path:
    """Raise unless `path` names an existing regular file within the size limit.

    Returns the path. Symbolic links are followed (the target is checked).
    """
    p = Path(path)
    try:
        st = os.stat(p)
    except OSError as exc:
        raise _cannot_read(p, exc) from None
    what = _what(st.st_mode)
    if what is not None:
        hint = "; give the file inside it, or a zip of it" if what == "a directory" else ""
        raise SpecmatchError(f"'{p}' is {what}, not a file{hint}")
    cap = limit(kind)
    if st.st_size > cap:
        raise SpecmatchError(
            f"'{p}' is {_fmt(st.st_size)}, above the {_fmt(cap)} limit for a {kind} file; "
            f"check it is the right file (or raise SPECMATCH_MAX_{kind.upper()}_MB)")
    return p


def _open(p: Path) -> int:
    # O_NONBLOCK: a FIFO swapped in after the check must not block the open.
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_BINARY", 0)
    try:
        fd = os.open(p, flags)
    except OSError as exc:
        raise _cannot_read(p, exc) from None
    what = _what(os.fstat(fd).st_mode)
    if what is not None:  # changed between the check and the open
        os.close(fd)
        raise SpecmatchError(f"'{p}' is {what}, not a file")
    return fd


def _chunks(path: str | os.PathLike, kind: str) -> Iterator[bytes]:
    """The file's bytes in blocks; raises once more than the limit has been read."""
    p = check_file(path, kind=kind)
    cap = limit(kind)
    fd = _open(p)
    got = 0
    try:
        while got <= cap:
            try:
                chunk = os.read(fd, min(_CHUNK, cap + 1 - got))
            except BlockingIOError:  # pragma: no cover - regular files never block
                continue
            except OSError as exc:
                raise SpecmatchError(f"cannot read '{p}': {exc.strerror or exc}") from None
            if not chunk:
                return
            got += len(chunk)
            if got > cap:
                break
            yield chunk
    finally:
        os.close(fd)
    raise SpecmatchError(
        f"'{p}' is larger than the {_fmt(cap)} limit for a {kind} file; check it is the right "
        f"file (or raise SPECMATCH_MAX_{kind.upper()}_MB)")


def read_bytes(path: str | os.PathLike, *, kind: str) -> bytes:
    """Contents of a regular file, refused above the limit for `kind`.

    Parameters
    ----------
    path
        File to read.
    kind
        One of :data:`LIMITS` (``"spectrum"``, ``"peaklist"``, ...).

    Raises
    ------
    SpecmatchError
        Not a regular file, missing, unreadable, or larger than the limit
        (checked on the bytes actually read, not only on ``stat``).
    """
    return b"".join(_chunks(path, kind))


def sha256_file(path: str | os.PathLike, *, kind: str) -> str:
    """SHA-256 (hex) of a regular file, streamed: same checks and limit as :func:`read_bytes`,
    memory of one block."""
    import hashlib  # here: every command reads its input through this module, few hash it (~1 ms of start-up)

    h = hashlib.sha256()
    for chunk in _chunks(path, kind):
        h.update(chunk)
    return h.hexdigest()


def read_head(path: str | os.PathLike, n: int = 4096, *, kind: str) -> bytes:
    """The first `n` bytes of a regular file (same checks as :func:`read_bytes`)."""
    p = check_file(path, kind=kind)
    fd = _open(p)
    try:
        return os.read(fd, n)
    except OSError as exc:
        raise SpecmatchError(f"cannot read '{p}': {exc.strerror or exc}") from None
    finally:
        os.close(fd)


_BOMS = (
    (codecs.BOM_UTF32_LE, "utf-32-le", "UTF-32"),
    (codecs.BOM_UTF32_BE, "utf-32-be", "UTF-32"),
    (codecs.BOM_UTF8, "utf-8", "UTF-8"),
    (codecs.BOM_UTF16_LE, "utf-16-le", "UTF-16"),
    (codecs.BOM_UTF16_BE, "utf-16-be", "UTF-16"),
)


def _bomless_utf16(data: bytes) -> str | None:
    """'utf-16-le'/'utf-16-be' when the text looks like BOM-less UTF-16 (ASCII
    characters with a NUL beside each), else None."""
    sample = data[:4096]
    if len(sample) < 8:
        return None
    even, odd = sample[0::2], sample[1::2]
    if odd.count(0) > 0.9 * len(odd) and even.count(0) < 0.1 * len(even):
        return "utf-16-le"
    if even.count(0) > 0.9 * len(even) and odd.count(0) < 0.1 * len(odd):
        return "utf-16-be"
    return None


def text_encoding(head: bytes) -> str | None:
    """'UTF-8', 'UTF-16' or 'UTF-32' when the first bytes carry a byte-order mark (or
    look like BOM-less UTF-16), else None."""
    for bom, _, label in _BOMS:
        if head.startswith(bom):
            return label
    return "UTF-16" if _bomless_utf16(head) else None


def decode_text(data: bytes, *, name: str = "file", legacy_8bit: bool = True) -> str:
    """Text of file contents: BOM-aware UTF-8/16/32, UTF-8, else Latin-1; binary refused.

    Parameters
    ----------
    data
        File contents.
    name
        File name for messages.
    legacy_8bit
        Read text that is not UTF-8 as Latin-1 (old instrument exports). False for
        inputs whose values become keys or paths (manifests, JSON lines): a wrong
        guess there would be silently wrong, so such text is refused with a hint.
    """
    for bom, codec, label in _BOMS:
        if data.startswith(bom):
            try:
                return data[len(bom):].decode(codec)
            except UnicodeDecodeError as exc:
                raise SpecmatchError(
                    f"'{name}' starts with a {label} byte-order mark but is not valid {label} "
                    f"(byte {exc.start:,}); save it again as UTF-8 text") from None
    guess = _bomless_utf16(data)
    if guess:
        try:
            return data.decode(guess)
        except UnicodeDecodeError:
            raise SpecmatchError(
                f"'{name}' looks like UTF-16 text without a byte-order mark but does not decode; "
                "save it again as UTF-8 text") from None
    if b"\x00" in data[:65536]:
        raise SpecmatchError(
            f"'{name}' holds binary data (NUL bytes), not text; if it is text in another encoding "
            "(UTF-16, UTF-32), save it again as UTF-8")
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        if not legacy_8bit:
            raise SpecmatchError(
                f"'{name}' is not UTF-8 text (byte {exc.start:,} is not valid UTF-8); "
                "save it again as UTF-8") from None
        # Older instrument software writes 8-bit text (Latin-1 / Windows-1252).
        return data.decode("latin-1")


def read_text(path: str | os.PathLike, *, kind: str, legacy_8bit: bool = True) -> str:
    """Decoded text of a regular file (see :func:`read_bytes`, :func:`decode_text`)."""
    data = read_bytes(path, kind=kind)
    return decode_text(data, name=str(path), legacy_8bit=legacy_8bit)
