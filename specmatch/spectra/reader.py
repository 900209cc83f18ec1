"""One entry point for every spectrum file: :func:`read_spectrum` and :func:`peaks_from_file`.

The format is recognised from the contents (a zip archive, ``##`` records of
JCAMP-DX, nmrML XML, an NMRPipe header, else CSV/TSV text), not from the file
name alone, so a renamed file still reads.
"""

from __future__ import annotations

import hashlib
import tempfile
from pathlib import Path

from .. import safeio
from ..errors import SpecmatchError
from .types import PeakList, Spectrum

#: largest total size a zip may expand to (its own bombs/entries checks in archive.py)
MAX_FILE_BYTES = 256 * 1024 * 1024
_ZIP_MAGIC = (b"PK\x03\x04", b"PK\x05\x06")


def input_kind(path: str | Path) -> str:
    """The ``safeio`` kind of a spectrum input: ``"archive"`` for a zip (by its first
    bytes, not its name), else ``"spectrum"``."""
    head = safeio.read_head(path, 8, kind="archive")
    return "archive" if head.startswith(_ZIP_MAGIC) else "spectrum"


def read_input_bytes(path: str | Path) -> bytes:
    """Bytes of a spectrum input file through the guarded reader: a zip under the
    archive limit, anything else under the spectrum limit (``safeio.LIMITS``).

    Every place that takes a spectrum file by path (readers, batch manifests, the
    store's copy of the inputs) reads it here, so one file meets one limit. An
    instrument folder comes back as a zip of its files
    (:func:`specmatch.spectra.instrument.folder_zip`), which reads back the same.
    """
    p = Path(path)
    if p.is_dir() and not p.is_symlink():
        from .instrument import folder_zip

        return folder_zip(p)
    return safeio.read_bytes(path, kind=input_kind(path))


def input_sha256(path: str | Path) -> str:
    """SHA-256 (hex) of a spectrum input, streamed through the guarded reader.

    A file: the hash of its bytes (what the store keeps and checks). An instrument
    folder: the hash of its zip (:func:`read_input_bytes`; sorted entries, fixed time
    stamps), so the same folder always gives the same hash, a changed file changes it,
    and the copy the store keeps matches the record.
    """
    p = Path(path)
    if not p.is_dir():
        return safeio.sha256_file(p, kind=input_kind(p))
    return hashlib.sha256(read_input_bytes(p)).hexdigest()


def input_name(path: str | Path) -> str:
    """The name an input is recorded and kept under: the file's name, a folder's name
    with ``.zip`` (the store keeps a folder as a zip of it)."""
    p = Path(path)
    return p.name + ".zip" if p.is_dir() else p.name


def _load(path_or_bytes: str | Path | bytes, name: str | None) -> tuple[bytes, str]:
    """File contents (see :func:`read_input_bytes`) and the name for messages."""
    if isinstance(path_or_bytes, (bytes, bytearray)):
        return bytes(path_or_bytes), name or "upload"
    p = Path(path_or_bytes)
    return read_input_bytes(p), name or p.name


def read_spectrum(path_or_bytes: str | Path | bytes, *, name: str | None = None,
                  nucleus: str | None = None) -> Spectrum | PeakList:
    """Read a spectrum file of any supported format.

    Parameters
    ----------
    path_or_bytes
        A file path, an instrument folder path, or file contents.
    name
        File name for messages (and format hints) when contents are given.
    nucleus
        What the user says the nucleus is: used when the file does not say, and
        checked against it when it does.

    Returns
    -------
    Spectrum or PeakList
        A PeakList for files that hold peaks only (CSV peak lists, JCAMP-DX
        PEAK TABLE).
    """
    if nucleus is not None and nucleus not in ("1H", "13C"):
        raise SpecmatchError(f"nucleus '{nucleus}' is not supported; use 1H or 13C")
    if not isinstance(path_or_bytes, (bytes, bytearray)) and Path(path_or_bytes).is_dir():
        from .instrument import read_folder

        result = read_folder(Path(path_or_bytes), nucleus=nucleus)
        return _check_claim(result, nucleus)
    data, src = _load(path_or_bytes, name)
    if not data.strip():
        raise SpecmatchError(f"'{src}' is empty")
    head = data[:4096]
    if head.startswith(b"PK\x03\x04") or head.startswith(b"PK\x05\x06"):
        from .archive import extract_archive
        from .instrument import read_folder

        with tempfile.TemporaryDirectory(prefix="specmatch-") as tmp:
            extract_archive(data, tmp, max_bytes=MAX_FILE_BYTES, max_files=2000)
            result = read_folder(Path(tmp), nucleus=nucleus, label=src)
        return _check_claim(result, nucleus)
    from .jcampdx import looks_like_jcampdx, read_jcampdx

    if looks_like_jcampdx(head):
        return _check_claim(read_jcampdx(data, source=src, nucleus=nucleus), nucleus)
    stripped = head.lstrip(b"\xef\xbb\xbf \t\r\n")
    if stripped.startswith(b"<") and b"nmrML" in data[:65536]:
        from .instrument import read_nmrml

        return _check_claim(read_nmrml(data, source=src, nucleus=nucleus), nucleus)
    if len(data) >= 2048 and _is_nmrpipe(data):
        from .instrument import read_nmrpipe_bytes

        return _check_claim(read_nmrpipe_bytes(data, source=src, nucleus=nucleus), nucleus)
    if b"\x00" in head and safeio.text_encoding(head) is None:
        raise SpecmatchError(
            f"'{src}' is a binary file specmatch does not recognise; supported: JCAMP-DX (.jdx/.dx), "
            "a zip of the instrument folder, NMRPipe .ft, nmrML, CSV/TSV peak lists, x,y text")
    from .peaklist_io import read_peak_csv

    return _check_claim(read_peak_csv(data, nucleus=nucleus, name=src), nucleus)


def _is_nmrpipe(data: bytes) -> bool:
    import struct

    for fmt in ("<f", ">f"):
        if abs(struct.unpack(fmt, data[8:12])[0] - 2.345) < 1e-3:
            return True
    return False


def _check_claim(result: Spectrum | PeakList, claimed: str | None) -> Spectrum | PeakList:
    if claimed and result.nucleus != claimed:
        raise SpecmatchError(
            f"{result.source}: the file says it is a {result.nucleus} spectrum but {claimed} was given; "
            f"check the file or drop --nucleus")
    if isinstance(result, Spectrum):
        from .processing import check_nucleus_range

        check_nucleus_range(result)
    return result


def peaks_from_file(path: str | Path | bytes, *, nucleus: str | None = None, solvent: str | None = None,
                    dept135: bool = False, name: str | None = None, total_h: float | None = None,
                    snr: float = 8.0) -> PeakList:
    """Read a file and return its peak list (processing a spectrum if needed).

    Parameters
    ----------
    path
        File, instrument folder, zip, or contents.
    nucleus
        "1H" / "13C" as the user says; checked against the file.
    solvent
        NMR solvent; default: the one named in the file.
    dept135
        The spectrum is a DEPT-135.
    total_h
        Normalise 1H integrals to this many H.
    snr
        Peak-picking threshold in noise units.
    """
    result = read_spectrum(path, name=name, nucleus=nucleus)
    if isinstance(result, PeakList):
        from dataclasses import replace

        from .processing import flag_peaklist

        if dept135:
            result = replace(result, experiment="DEPT-135")
        return flag_peaklist(result, solvent)
    from .processing import process_spectrum

    return process_spectrum(result, solvent=solvent, snr=snr, dept135=dept135, total_h=total_h)


def peaklist_to_dict(peaklist: PeakList) -> dict:
    """The JSON form of a peak list (``specmatch peaks --json``)."""
    out: dict = {
        "nucleus": peaklist.nucleus,
        "frequency_mhz": peaklist.frequency_mhz,
        "solvent": peaklist.solvent,
        "reference": peaklist.reference,
        "peaks": [_peak_dict(p) for p in peaklist.peaks],
    }
    if peaklist.nucleus == "1H" or peaklist.multiplets:
        out["multiplets"] = [
            {"shift": m.shift, "range": [m.range[0], m.range[1]], "integral": m.integral,
             "multiplicity": m.multiplicity, "j_hz": list(m.j_hz), "flag": m.flag}
            for m in peaklist.multiplets
        ]
    if peaklist.experiment != "1D":
        out["experiment"] = peaklist.experiment
    if peaklist.integral_unit:
        out["integral_unit"] = peaklist.integral_unit
    out["warnings"] = list(peaklist.warnings)
    out["source"] = peaklist.source
    return out


def _peak_dict(p) -> dict:
    d = {"shift": p.shift, "intensity": p.intensity, "flag": p.flag}
    if p.sign is not None:
        d["sign"] = p.sign
    if p.hydrogens is not None:
        d["hydrogens"] = p.hydrogens
    return d
