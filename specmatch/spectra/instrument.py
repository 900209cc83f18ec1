"""Instrument data folders (read with nmrglue) and nmrML.

Recognised inside a folder (or an extracted zip), in this order:

1. JCAMP-DX files (``*.jdx``, ``*.dx``, ``*.jcamp``);
2. processed 1D data with its parameter files: a ``pdata/<n>/`` folder with
   ``1r`` and ``procs`` (acquisition parameters from ``acqus`` two levels up);
3. NMRPipe spectra (``*.ft``, ``*.ft1``);
4. nmrML (``*.nmrML``);
5. raw FIDs: a ``fid`` with ``procpar`` (Agilent/Varian) or with ``acqus``.
   They are processed simply: exponential line broadening (0.3 Hz 1H, 1 Hz 13C),
   zero filling, Fourier transform, the phase given in the parameters, else an
   automatic ACME phase (nmrglue's ``autops``, scipy's simplex).

nmrglue is imported here only, so ``import specmatch.spectra`` stays light.
nmrML is read with the standard library (``xml.etree``, ``base64``, ``zlib``)
because nmrglue's nmrML reader needs ``xmltodict``, which is not a dependency.
"""

from __future__ import annotations

import base64
import re
import warnings
import zlib
from pathlib import Path

import numpy as np

from .. import safeio
from ..errors import SpecmatchError
from .experiment import classify_experiment
from .jcampdx import check_frequency, normalise_nucleus
from .types import PeakList, Spectrum

MAX_DEPTH = 6

#: phase parameters beyond this (degrees) are not a phase but damage: phased automatically
#: instead (first-order phases of real data stay within a few thousand degrees, common practice)
MAX_PHASE_DEG = 1e5


#: most directory entries looked at in an instrument folder (an experiment folder holds tens)
MAX_ENTRIES = 5000


def folder_files(root: Path) -> list[Path]:
    """Regular files (no symbolic links) up to MAX_DEPTH levels below `root`; the walk is
    bounded, so a huge tree (a home folder, /proc) is refused quickly instead of scanned."""
    import os

    out: list[Path] = []
    seen = 0
    for dirpath, dirnames, filenames in os.walk(root, followlinks=False):
        depth = len(Path(dirpath).relative_to(root).parts)
        if depth >= MAX_DEPTH:
            dirnames[:] = []
        seen += len(dirnames) + len(filenames)
        if seen > MAX_ENTRIES:
            raise SpecmatchError(
                f"'{root}' holds more than {MAX_ENTRIES:,} entries; give the experiment folder "
                "(or a zip of it), not a whole data tree")
        for name in filenames:
            p = Path(dirpath) / name
            if not p.is_symlink() and p.is_file():
                out.append(p)
    return sorted(out)


def folder_zip(root: Path) -> bytes:
    """An instrument folder as zip bytes, the same bytes for the same files.

    Used to keep a copy of a folder input (the store holds files, not trees): entries
    in sorted order, named relative to the folder's parent (as a zip of the folder made
    by hand would be), a fixed time stamp; compressed size under the archive limit.
    """
    import io
    import zipfile

    limit = safeio.limit("archive")
    files = folder_files(root)
    if not files:
        raise SpecmatchError(f"'{root}' is a folder that holds no files; give the experiment folder "
                             "with its data, or the spectrum file itself")
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w", zipfile.ZIP_DEFLATED) as zf:
        for f in files:
            info = zipfile.ZipInfo(f.relative_to(root.parent).as_posix(), date_time=(1980, 1, 1, 0, 0, 0))
            info.compress_type = zipfile.ZIP_DEFLATED
            zf.writestr(info, safeio.read_bytes(f, kind="archive"))
            if buf.tell() > limit:
                raise SpecmatchError(f"the instrument folder '{root}' is larger than {limit // (1024 * 1024)} MB "
                                     "compressed; give the processed experiment folder only")
    return buf.getvalue()


def read_folder(root: Path, *, nucleus: str | None = None, label: str | None = None) -> Spectrum | PeakList:
    """The spectrum held in an instrument folder (see module docstring for the order)."""
    label = label or root.name
    files = folder_files(root)

    def where(p: Path) -> str:
        rel = p.relative_to(root).as_posix()
        return label if rel == "." else f"{label}/{rel}"

    if not files:
        raise SpecmatchError(f"'{label}' holds no files")
    from .jcampdx import read_jcampdx

    # Every readable data set, in order of preference; a folder may hold several
    # experiments (1H, 13C, DEPT): the first that fits the claimed nucleus wins.
    readers = []
    for p in files:
        if p.suffix.lower() in (".jdx", ".dx", ".jcamp"):
            readers.append(lambda p=p: read_jcampdx(safeio.read_bytes(p, kind="spectrum"), source=where(p), nucleus=nucleus))
    for p in files:
        if p.name == "1r" and (p.parent / "procs").exists():
            readers.append(lambda d=p.parent: read_bruker_pdata(d, label=where(d), nucleus=nucleus))
    for p in files:
        if p.suffix.lower() in (".ft", ".ft1"):
            readers.append(lambda p=p: read_nmrpipe_bytes(safeio.read_bytes(p, kind="spectrum"), source=where(p), nucleus=nucleus))
    for p in files:
        if p.suffix.lower() == ".nmrml":
            readers.append(lambda p=p: read_nmrml(safeio.read_bytes(p, kind="spectrum"), source=where(p), nucleus=nucleus))
    processed = {p.parent for p in files if p.name == "1r"}
    for p in files:
        if p.name == "fid" and (p.parent / "procpar").exists():
            readers.append(lambda d=p.parent: read_varian_fid(d, label=where(d), nucleus=nucleus))
        elif p.name == "fid" and (p.parent / "acqus").exists() and not any(
                d.parent.parent == p.parent for d in processed):
            readers.append(lambda d=p.parent: read_bruker_fid(d, label=where(d), nucleus=nucleus))
    found: list[str] = []
    first_error: SpecmatchError | None = None
    for read in readers:
        try:
            result = read()
        except SpecmatchError as exc:
            first_error = first_error or exc
            continue
        if nucleus is None or result.nucleus == nucleus:
            return result
        found.append(f"{result.nucleus} ({result.source})")
    if found:
        raise SpecmatchError(
            f"'{label}' holds no {nucleus} spectrum; found: {', '.join(found[:6])}")
    if first_error is not None:
        raise first_error
    names = ", ".join(sorted({p.name for p in files})[:12])
    raise SpecmatchError(
        f"'{label}' holds no spectrum specmatch can read (found: {names}); expected a JCAMP-DX file, "
        "pdata/1/1r with procs, an NMRPipe .ft file, nmrML, or fid with procpar/acqus")


def _ng():
    try:
        import nmrglue as ng
    except ImportError:  # pragma: no cover - nmrglue is a dependency
        raise SpecmatchError("reading instrument folders needs the nmrglue package (pip install nmrglue)") from None
    return ng


def _guard(folder: Path, data_names: tuple[str, ...], param_names: tuple[str, ...],
           *, bruker: bool = False) -> None:
    """Size and file-type checks (``safeio``) on the files nmrglue is about to read;
    with ``bruker``, the parameter files are also checked to end every value they open
    (:func:`check_bruker_parameters`)."""
    for name in data_names:
        if (folder / name).exists():
            safeio.check_file(folder / name, kind="spectrum")
    for name in param_names:
        if (folder / name).exists():
            safeio.check_file(folder / name, kind="parameters")
            if bruker:
                check_bruker_parameters(safeio.read_text(folder / name, kind="parameters"),
                                        name=str(folder / name))


_LINE_BREAK = re.compile(r"\r\n|\r|\n")
_ARRAY_SIZE = re.compile(r"\.\.\s*(\d+)\s*\)")


def check_bruker_parameters(text: str, *, name: str) -> None:
    """Refuse a Bruker parameter file (acqus, procs) with an unterminated value.

    nmrglue's parser reads on past the end of the file, for ever, when a ``<string``
    lacks its ``>`` or an array ``(0..N)`` gives fewer than N + 1 values (a truncated or
    hand-edited file); it also stops at the first blank line. This walks the text the
    same way and raises a SpecmatchError naming the line instead of letting the read hang.
    """
    lines = _LINE_BREAK.split(text)
    i = 0
    while i < len(lines):
        line = lines[i].rstrip()
        i += 1
        if line == "" or line.startswith("##END="):
            return  # where the parser stops
        if not line.startswith("##$") or "=" not in line:
            continue
        value = line[line.index("=") + 1:].lstrip()
        start = i
        if "<" in value:
            while ">" not in value:
                if i >= len(lines):
                    raise SpecmatchError(
                        f"'{name}' line {start}: the text value opened by '<' is never closed "
                        "by '>'; the parameter file is damaged (copy it again from the instrument)")
                value += lines[i].rstrip()
                i += 1
        elif "(" in value:
            m = _ARRAY_SIZE.search(line)
            if m is None:
                continue  # the parser gives up on this line alone
            want = int(m.group(1)) + 1
            got = len(line[line.index(")") + 1:].split()) if ")" in line else 0
            while got < want:
                if i >= len(lines):
                    raise SpecmatchError(
                        f"'{name}' line {start}: the array declares {want:,} values but the file "
                        f"ends after {got:,}; the parameter file is truncated or damaged")
                got += len(lines[i].rstrip().split())
                i += 1


def _nmrglue_call(what: str, fn, *args, **kwargs):
    """Run an nmrglue reader; its exceptions become one clear message."""
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return fn(*args, **kwargs)
    except SpecmatchError:
        raise
    except Exception as exc:  # nmrglue raises many types on damaged files
        raise SpecmatchError(f"cannot read {what}: {type(exc).__name__}: {exc}") from None


def _param(d: dict, key: str, default=None):
    v = d.get(key, default)
    if isinstance(v, list):
        v = v[0] if v else default
    return v


def read_bruker_pdata(pdata_dir: Path, *, label: str, nucleus: str | None = None) -> Spectrum:
    """Processed 1D data (``1r`` + ``procs``); nucleus and solvent from ``acqus``."""
    ng = _ng()
    expno = pdata_dir.parent.parent
    acqus_ok = (expno / "acqus").exists()
    _guard(pdata_dir, ("1r", "1i"), ("procs",), bruker=True)
    _guard(expno, (), ("acqus",), bruker=True)

    def _read():
        dic, data = ng.bruker.read_pdata(str(pdata_dir), read_acqus=False, scale_data=True)
        acq = ng.bruker.read_acqus_file(str(expno)) if acqus_ok else {}
        return dic, data, acq

    dic, data, acq = _nmrglue_call(f"'{label}' (processed data)", _read)
    data = np.asarray(data)
    if data.ndim != 1:
        raise SpecmatchError(f"'{label}' is {data.ndim}D; specmatch reads 1D spectra")
    procs = dic.get("procs", {})
    acqus = acq.get("acqus", {}) if isinstance(acq, dict) else {}
    try:
        sf = float(procs["SF"])
        offset = float(procs["OFFSET"])
        sw_p = float(procs["SW_p"])
    except (KeyError, TypeError, ValueError):
        raise SpecmatchError(f"'{label}': procs lacks SF, OFFSET or SW_p; cannot place the ppm axis") from None
    if not (np.isfinite(offset) and np.isfinite(sw_p) and sw_p > 0):
        raise SpecmatchError(f"'{label}': procs gives OFFSET {offset:g} ppm and SW_p {sw_p:g} Hz; "
                             "they must be finite and SW_p positive to place the ppm axis")
    n = len(data)
    if n == 0:
        raise SpecmatchError(f"'{label}': the processed data file holds no points")
    nuc = normalise_nucleus(str(acqus.get("NUC1", "")).strip("<>")) or nucleus
    if nuc is None:
        raise SpecmatchError(f"'{label}': no acqus with NUC1; give --nucleus 1H or 13C")
    check_frequency(sf, nuc, label)  # before dividing by it (SF 0 or inf)
    ppm = offset - np.arange(n) * (sw_p / sf) / n
    solvent = str(acqus.get("SOLVENT", "")).strip("<> ") or None
    pulprog = str(acqus.get("PULPROG", "")).strip("<> ")
    intensity = np.asarray(data, dtype=float).real
    if not np.all(np.isfinite(intensity)):
        raise SpecmatchError(f"'{label}': the processed data hold non-finite values "
                             "(check NC_proc in procs); reprocess the spectrum")
    title = ""
    if (pdata_dir / "title").is_file():
        title = safeio.read_text(pdata_dir / "title", kind="parameters")
    experiment, notes = classify_experiment(nuc, pulprog, title, intensity)
    return Spectrum(nucleus=nuc, ppm=ppm, intensity=intensity, frequency_mhz=sf,
                    solvent=solvent, source=f"{label} (processed 1D data)", experiment=experiment,
                    meta={"pulse_program": pulprog, "title": title.strip(), "warnings": tuple(notes)})


def _process_fid(fid: np.ndarray, *, sw_hz: float, sf_mhz: float, nucleus: str,
                 p0: float | None, p1: float | None) -> np.ndarray:
    ng = _ng()
    lb_hz = 0.3 if nucleus == "1H" else 1.0
    fid = np.array(fid, dtype=complex)
    fid[0] *= 0.5  # the first point counts half in the discrete transform (no baseline offset)
    fid = ng.proc_base.em(fid, lb=lb_hz / sw_hz)
    size = 1 << int(np.ceil(np.log2(max(len(fid), 2)))) + 1
    fid = ng.proc_base.zf_size(fid, size)
    spec = ng.proc_base.fft(fid)
    if p0 is not None or p1 is not None:
        spec = ng.proc_base.ps(spec, p0=p0 or 0.0, p1=p1 or 0.0)
    else:
        spec = _nmrglue_call("the FID (automatic phasing)", ng.proc_autophase.autops, spec, "acme",
                             disp=False)
        if np.sum(spec.real) < 0:  # ACME can land 180 degrees off
            spec = -spec
    return np.asarray(spec.real, dtype=float)


def read_varian_fid(folder: Path, *, label: str, nucleus: str | None = None) -> Spectrum:
    """Agilent/Varian ``fid`` + ``procpar``: processed here (see module docstring)."""
    ng = _ng()
    _guard(folder, ("fid",), ("procpar",))
    dic, data = _nmrglue_call(f"'{label}' (Agilent/Varian fid)", ng.varian.read, str(folder))
    data = np.asarray(data)
    if data.ndim != 1:
        data = data.reshape(-1, data.shape[-1])
        if data.shape[0] != 1:
            raise SpecmatchError(f"'{label}' holds {data.shape[0]} FIDs; specmatch reads 1D spectra")
        data = data[0]
    pp = dic.get("procpar", {})

    def val(key, default=None, cast=float):
        try:
            v = cast(pp[key]["values"][0])
        except (KeyError, IndexError, TypeError, ValueError):
            return default
        # a non-finite number (inf, nan) is as good as absent: never let it reach the axis or phase
        return default if cast is float and not np.isfinite(v) else v

    sw = val("sw")
    sfrq = val("sfrq")
    if not sw or not sfrq:
        raise SpecmatchError(f"'{label}': procpar lacks sw or sfrq; cannot place the ppm axis")
    if sw <= 0:
        raise SpecmatchError(f"'{label}': procpar gives a spectral width sw of {sw:g} Hz; it must be positive. "
                             "Check the file, or export the processed spectrum as JCAMP-DX")
    nuc = normalise_nucleus(val("tn", None, str)) or nucleus
    if nuc is None:
        raise SpecmatchError(f"'{label}': procpar has no tn (nucleus); give --nucleus")
    check_frequency(sfrq, nuc, label)
    rp, lp = val("rp"), val("lp")
    if rp is not None and lp is not None and max(abs(rp), abs(lp)) > MAX_PHASE_DEG:
        rp = lp = None  # nonsense phase parameters: phase automatically instead
    phase_given = rp is not None and (rp != 0 or (lp or 0) != 0)
    spec = _process_fid(data, sw_hz=sw, sf_mhz=sfrq, nucleus=nuc,
                        p0=rp if phase_given else None, p1=lp if phase_given else None)
    if not np.all(np.isfinite(spec)):
        raise SpecmatchError(f"'{label}': the FID holds values that are not numbers; the file is damaged")
    n = len(spec)
    rfl, rfp = val("rfl", 0.0), val("rfp", 0.0)
    # rfl: distance (Hz) of the reference line from the right-hand (low-ppm) edge;
    # rfp: the reference line's frequency (Hz on the ppm scale).
    right_ppm = (rfp - rfl) / sfrq
    ppm = right_ppm + (sw / sfrq) * (1 - np.arange(n) / n)
    solvent = val("solvent", None, str)
    seq = val("seqfil", None, str) or val("pslabel", None, str)
    experiment, notes = classify_experiment(nuc, seq, None, spec)
    return Spectrum(nucleus=nuc, ppm=ppm, intensity=spec, frequency_mhz=sfrq, solvent=solvent,
                    source=f"{label} (Agilent/Varian fid, processed by specmatch)", experiment=experiment,
                    meta={"pulse_program": seq or "",
                          "warnings": ("FID processed by specmatch: exponential window, FT, "
                                       + ("phase from procpar" if phase_given else "automatic phase"),
                                       *notes)})


def read_bruker_fid(folder: Path, *, label: str, nucleus: str | None = None) -> Spectrum:
    """A raw ``fid`` with ``acqus`` (no processed data): processed here."""
    ng = _ng()
    _guard(folder, ("fid",), ("acqus",), bruker=True)
    dic, data = _nmrglue_call(f"'{label}' (fid)", ng.bruker.read, str(folder))
    data = np.asarray(data)
    if data.ndim != 1:
        raise SpecmatchError(f"'{label}' is {data.ndim}D; specmatch reads 1D spectra")
    data = _nmrglue_call(f"'{label}' (digital filter)", ng.bruker.remove_digital_filter, dic, data)
    acqus = dic.get("acqus", {})
    try:
        sw = float(acqus["SW_h"])
        sfo1 = float(acqus["SFO1"])
        bf1 = float(acqus.get("BF1", sfo1))
        o1 = float(acqus.get("O1", (sfo1 - bf1) * 1e6))
    except (KeyError, TypeError, ValueError):
        raise SpecmatchError(f"'{label}': acqus lacks SW_h or SFO1; cannot place the ppm axis") from None
    nuc = normalise_nucleus(str(acqus.get("NUC1", "")).strip("<>")) or nucleus
    if nuc is None:
        raise SpecmatchError(f"'{label}': acqus has no NUC1; give --nucleus")
    check_frequency(sfo1, nuc, label)
    spec = _process_fid(data, sw_hz=sw, sf_mhz=sfo1, nucleus=nuc, p0=None, p1=None)
    n = len(spec)
    centre = o1 / bf1
    ppm = centre + (sw / sfo1) * (0.5 - np.arange(n) / n)
    solvent = str(acqus.get("SOLVENT", "")).strip("<> ") or None
    pulprog = str(acqus.get("PULPROG", "")).strip("<> ")
    experiment, notes = classify_experiment(nuc, pulprog, None, spec)
    return Spectrum(nucleus=nuc, ppm=ppm, intensity=spec, frequency_mhz=sfo1, solvent=solvent,
                    source=f"{label} (fid, processed by specmatch)", experiment=experiment,
                    meta={"pulse_program": pulprog,
                          "warnings": ("FID processed by specmatch: exponential window, FT, automatic phase",
                                       *notes)})


def read_nmrpipe_bytes(data: bytes, *, source: str, nucleus: str | None = None) -> Spectrum:
    """A 1D NMRPipe spectrum (frequency domain), read with nmrglue."""
    ng = _ng()
    import os
    import tempfile

    fd, tmp = tempfile.mkstemp(suffix=".ft")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        dic, y = _nmrglue_call(f"'{source}' (NMRPipe)", ng.pipe.read, tmp)
    finally:
        os.unlink(tmp)
    y = np.asarray(y)
    if y.ndim != 1:
        raise SpecmatchError(f"'{source}' is {y.ndim}D; specmatch reads 1D spectra")
    if float(dic.get("FDF2FTFLAG", 1.0)) != 1.0:
        raise SpecmatchError(f"'{source}' is a time-domain NMRPipe file; Fourier transform it first")
    uc = _nmrglue_call(f"'{source}' (NMRPipe axis)", ng.pipe.make_uc, dic, y)
    ppm = np.asarray(uc.ppm_scale(), dtype=float)
    obs = float(dic.get("FDF2OBS", 0.0)) or None
    lab = str(dic.get("FDF2LABEL", "")).strip()
    nuc = normalise_nucleus(lab) if re.search(r"\d", lab) else None
    if nuc is None:
        nuc = nucleus
    if nuc is None:
        raise SpecmatchError(f"'{source}': the NMRPipe axis label '{lab}' does not name a nucleus; give --nucleus")
    check_frequency(obs, nuc, source)
    return Spectrum(nucleus=nuc, ppm=ppm, intensity=np.asarray(y.real, dtype=float), frequency_mhz=obs,
                    solvent=None, source=f"{source} (NMRPipe)")


_DTYPES = {"float32": "<f4", "float64": "<f8", "complex64": "<c8", "complex128": "<c16",
           "int32": "<i4", "int64": "<i8"}


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def read_nmrml(data: bytes, *, source: str, nucleus: str | None = None) -> Spectrum:
    """An nmrML file: the processed spectrum if present, else the FID (processed here)."""
    import xml.etree.ElementTree as ET

    try:
        root = ET.fromstring(data)
    except ET.ParseError as exc:
        raise SpecmatchError(f"cannot read '{source}': the nmrML XML is malformed ({exc})") from None
    if _local(root.tag) != "nmrML":
        raise SpecmatchError(f"'{source}' is XML but not nmrML (root element <{_local(root.tag)}>)")
    elems = list(root.iter())
    by = {}
    for e in elems:
        by.setdefault(_local(e.tag), []).append(e)
    nuc = None
    for e in by.get("acquisitionNucleus", []):
        nuc = normalise_nucleus(e.get("name", ""))
    nuc = nuc or nucleus
    freq = None
    for e in by.get("irradiationFrequency", []):
        try:
            freq = float(e.get("value"))
        except (TypeError, ValueError):
            pass
    if freq and freq > 1e5:  # given in Hz
        freq /= 1e6
    if freq is not None:
        check_frequency(freq, nuc, source)
    sw = None
    for e in by.get("sweepWidth", []):
        try:
            sw = float(e.get("value"))
        except (TypeError, ValueError):
            pass
    solvent = None
    for e in by.get("solventType", []) + by.get("solvent", []):
        solvent = e.get("name") or (e.text or "").strip() or solvent
    if nuc is None:
        raise SpecmatchError(f"'{source}': nmrML has no acquisitionNucleus; give --nucleus")
    spec_arrays = by.get("spectrumDataArray", [])
    if spec_arrays:
        arr = _binary(spec_arrays[0], source)
        npts = None
        for e in by.get("spectrum1D", []):
            if e.get("numberOfDataPoints"):
                npts = int(e.get("numberOfDataPoints"))
        if np.iscomplexobj(arr):
            arr = arr.real
        if npts and len(arr) == 2 * npts:
            xy = arr.reshape(-1, 2)
            x, y = xy[:, 0], xy[:, 1]
        else:
            x = None
            y = arr
            for e in by.get("xAxis", []):
                try:
                    lo, hi = float(e.get("startValue")), float(e.get("endValue"))
                    x = np.linspace(lo, hi, len(y))
                except (TypeError, ValueError):
                    pass
            if x is None:
                raise SpecmatchError(f"'{source}': the nmrML spectrum has no x axis (xAxis startValue/endValue)")
        if freq and np.max(np.abs(x)) > 1000:  # axis in Hz
            x = x / freq
        if x[0] < x[-1]:
            x, y = x[::-1], y[::-1]
        return Spectrum(nucleus=nuc, ppm=np.asarray(x, float), intensity=np.asarray(y, float),
                        frequency_mhz=freq, solvent=solvent, source=f"{source} (nmrML spectrum)")
    fids = by.get("fidData", [])
    if not fids:
        raise SpecmatchError(f"'{source}': nmrML holds neither spectrumDataArray nor fidData")
    fid = _binary(fids[0], source)
    if not np.iscomplexobj(fid):
        fid = fid[0::2] + 1j * fid[1::2]
    if not sw or not freq:
        raise SpecmatchError(f"'{source}': nmrML lacks sweepWidth or irradiationFrequency; cannot process the FID")
    spec = _process_fid(np.asarray(fid, dtype=complex), sw_hz=sw, sf_mhz=freq, nucleus=nuc, p0=None, p1=None)
    n = len(spec)
    ppm = (sw / freq) * (0.5 - np.arange(n) / n)
    return Spectrum(nucleus=nuc, ppm=ppm, intensity=spec, frequency_mhz=freq, solvent=solvent,
                    source=f"{source} (nmrML FID, processed by specmatch)",
                    meta={"warnings": ("nmrML FID processed by specmatch; the carrier offset is not known, "
                                       "referencing relies on TMS or the solvent line",)})


def _binary(elem, source: str) -> np.ndarray:
    fmt = (elem.get("byteFormat") or "float64").lower()
    dtype = _DTYPES.get(fmt)
    if dtype is None:
        raise SpecmatchError(f"'{source}': nmrML byteFormat '{fmt}' is not supported")
    try:
        raw = base64.b64decode((elem.text or "").strip(), validate=False)
        if (elem.get("compressed") or "").lower() == "true":
            raw = zlib.decompress(raw)
    except (ValueError, zlib.error) as exc:
        raise SpecmatchError(f"cannot read '{source}': the nmrML binary data is damaged ({exc})") from None
    size = np.dtype(dtype).itemsize
    if len(raw) % size:
        raise SpecmatchError(f"cannot read '{source}': nmrML binary data is {len(raw)} bytes, not a multiple of {size}")
    return np.frombuffer(raw, dtype=dtype).copy()
