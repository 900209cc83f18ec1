"""Safe extraction of an uploaded instrument folder (zip archive).

Rejected before anything is written: absolute paths, drive letters, ``..``
components, symbolic links, device entries, more than `max_files` entries, more
than `max_bytes` uncompressed, and entries that expand more than `max_ratio`
times (archive bombs). Sizes are checked again while extracting, since the sizes
in the central directory can lie.
"""

from __future__ import annotations

import io
import stat
import zipfile
from pathlib import Path, PurePosixPath

from ..errors import SpecmatchError

DEFAULT_MAX_BYTES = 512 * 1024 * 1024
DEFAULT_MAX_FILES = 2000
DEFAULT_MAX_RATIO = 200.0
_CHUNK = 1 << 20


def _safe_name(name: str) -> PurePosixPath:
    if "\x00" in name:
        raise SpecmatchError(f"archive entry {name!r} has a NUL byte in its name; refusing to extract")
    norm = name.replace("\\", "/")
    p = PurePosixPath(norm)
    if norm.startswith("/") or (len(norm) > 1 and norm[1] == ":"):
        raise SpecmatchError(f"archive entry '{name}' has an absolute path; refusing to extract")
    if any(part == ".." for part in p.parts):
        raise SpecmatchError(f"archive entry '{name}' points outside the folder ('..'); refusing to extract")
    return p


def extract_archive(zip_path_or_bytes: str | Path | bytes, dest: str | Path, *,
                    max_bytes: int = DEFAULT_MAX_BYTES, max_files: int = DEFAULT_MAX_FILES,
                    max_ratio: float = DEFAULT_MAX_RATIO) -> list[Path]:
    """Extract a zip archive into `dest` safely.

    Parameters
    ----------
    zip_path_or_bytes
        Path of the zip file or its contents.
    dest
        Directory to extract into (created if needed).
    max_bytes
        Largest total uncompressed size accepted.
    max_files
        Largest number of entries accepted.
    max_ratio
        Largest uncompressed/compressed ratio accepted for an entry larger than
        1 MiB (small files may compress better than this harmlessly).

    Returns
    -------
    list of Path
        The extracted files.
    """
    try:
        if isinstance(zip_path_or_bytes, (bytes, bytearray)):
            zf = zipfile.ZipFile(io.BytesIO(zip_path_or_bytes))
        else:
            zf = zipfile.ZipFile(zip_path_or_bytes)
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise SpecmatchError(f"cannot open the zip archive: {exc}") from None
    dest = Path(dest)
    with zf:
        infos = zf.infolist()
        if len(infos) > max_files:
            raise SpecmatchError(
                f"the archive has {len(infos):,} entries, more than the limit of {max_files:,}; "
                "zip only the experiment folder")
        total = 0
        plan = []
        for info in infos:
            rel = _safe_name(info.filename)
            mode = (info.external_attr >> 16) & 0xFFFF
            if stat.S_ISLNK(mode):
                raise SpecmatchError(f"archive entry '{info.filename}' is a symbolic link; refusing to extract")
            # Only Unix-made entries carry a file type; zero type bits mean "plain file".
            if stat.S_IFMT(mode) and not (stat.S_ISREG(mode) or stat.S_ISDIR(mode)):
                raise SpecmatchError(f"archive entry '{info.filename}' is not a regular file; refusing to extract")
            total += info.file_size
            if total > max_bytes:
                raise SpecmatchError(
                    f"the archive expands to more than {max_bytes:,} bytes; refusing to extract "
                    "(possible archive bomb)")
            if (info.file_size > _CHUNK and info.compress_size
                    and info.file_size / info.compress_size > max_ratio):
                raise SpecmatchError(
                    f"archive entry '{info.filename}' expands {info.file_size / info.compress_size:,.0f} "
                    "times; refusing to extract (possible archive bomb)")
            plan.append((info, rel))
        dest.mkdir(parents=True, exist_ok=True)
        root = dest.resolve()
        written: list[Path] = []
        done = 0
        for info, rel in plan:
            target = (root / Path(*rel.parts)) if rel.parts else root
            if root != target and root not in target.resolve().parents:
                raise SpecmatchError(f"archive entry '{info.filename}' points outside the folder")
            if info.is_dir():
                target.mkdir(parents=True, exist_ok=True)
                continue
            target.parent.mkdir(parents=True, exist_ok=True)
            try:
                with zf.open(info) as src, open(target, "wb") as out:
                    size = 0
                    while True:
                        chunk = src.read(_CHUNK)
                        if not chunk:
                            break
                        size += len(chunk)
                        done += len(chunk)
                        # The directory's sizes can be forged: count what really comes out.
                        if size > info.file_size or done > max_bytes:
                            raise SpecmatchError(
                                f"archive entry '{info.filename}' is larger than the archive says; "
                                "refusing to extract (possible archive bomb)")
                        out.write(chunk)
            except (zipfile.BadZipFile, OSError, EOFError, NotImplementedError, RuntimeError) as exc:
                raise SpecmatchError(f"cannot extract '{info.filename}' from the archive: {exc}") from None
            except Exception as exc:  # zlib.error and friends from damaged archives
                if isinstance(exc, SpecmatchError):
                    raise
                raise SpecmatchError(f"cannot extract '{info.filename}' from the archive: {exc}") from None
            written.append(target)
    return written
