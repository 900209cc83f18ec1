"""JCAMP-DX 4.24 / 5.x / 6.0 NMR files: read to a Spectrum or PeakList, write a Spectrum.

Reading is our own labelled-data-record parser and ASDF decoder (``asdf.py``). It
was checked against nmrglue's ``nmrglue.jcampdx`` reader (see
``tests/test_spectra_jcampdx.py``); ours is used because nmrglue's reader takes
file names only, reports problems as warnings and returns ``None``, does not check
NPOINTS/FIRSTX/LASTX/FIRSTY, rejects blanks between pseudo-digits, and has no
XYPOINTS or PEAK TABLE support. Every problem ends in a
:class:`~specmatch.errors.SpecmatchError` naming the line.

Supported: XYDATA ``(X++(Y..Y))`` in AFFN, PAC, SQZ, DIF, DUP, DIFDUP (with the DIF
Y-check); XYPOINTS and PEAK TABLE ``(XY..XY)``, ``(XYW..XYW)``, ``(XYM..XYM)``;
NTUPLES with real/imaginary pages; x in Hz (via ``.OBSERVE FREQUENCY`` and
``.SHIFT REFERENCE`` or ``$OFFSET``) or ppm; several blocks (LINK); CR, LF, CRLF.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ..errors import SpecmatchError
from .asdf import FORMS, decode_xy_lines, encode_xy_lines
from .model import Peak, PeakList, Spectrum

__all__ = ["read_jcampdx", "write_jcampdx", "parse_blocks", "normalise_nucleus", "looks_like_jcampdx"]


@dataclass
class LDR:
    """One labelled data record: ``##LABEL= value`` and its continuation lines."""

    label: str  # normalised: upper case, no blanks, dashes, slashes, underscores
    value: str
    line_no: int
    lines: list[str] = field(default_factory=list)
    line_nos: list[int] = field(default_factory=list)


@dataclass
class Block:
    """A ``##TITLE= ... ##END=`` block; records in file order."""

    records: list[LDR] = field(default_factory=list)
    line_no: int = 0
    closed: bool = False

    def get(self, label: str, default: str | None = None) -> str | None:
        for r in self.records:
            if r.label == label:
                return r.value.strip()
        return default

    def first(self, label: str) -> LDR | None:
        for r in self.records:
            if r.label == label:
                return r
        return None


def _norm_label(raw: str) -> str:
    return re.sub(r"[\s\-/_]", "", raw).upper()


def _decode_text(data: bytes | str) -> str:
    if isinstance(data, str):
        return data
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return data.decode("latin-1")


def looks_like_jcampdx(head: bytes | str) -> bool:
    """True if the first non-blank text of a file is a ``##LABEL=`` record."""
    text = _decode_text(head[:4096]) if isinstance(head, bytes) else head[:4096]
    return bool(re.match(r"\s*##[^=\n\r]*=", text.lstrip("\ufeff")))


def parse_blocks(text: str, *, source: str = "") -> list[Block]:
    """Split JCAMP-DX text into blocks of labelled data records.

    Nested blocks (a LINK block holding several spectra) are returned flat, in the
    order their ``##TITLE=`` appears. Comments (``$$`` to end of line) are removed.
    """
    blocks: list[Block] = []
    stack: list[Block] = []
    current: LDR | None = None
    for line_no, raw in enumerate(text.splitlines(), start=1):
        line = raw.split("$$", 1)[0]
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("##"):
            label, sep, value = stripped[2:].partition("=")
            if not sep:
                raise SpecmatchError(
                    f"{_loc(source, line_no)}: expected '##LABEL= value', found {stripped[:40]!r}")
            label = _norm_label(label)
            if label == "TITLE":
                blk = Block(line_no=line_no)
                blocks.append(blk)
                stack.append(blk)
            if not stack:
                raise SpecmatchError(
                    f"{_loc(source, line_no)}: record '##{label}=' outside a block; a JCAMP-DX "
                    "block starts with '##TITLE='")
            current = LDR(label, value, line_no)
            stack[-1].records.append(current)
            if label == "END":
                stack[-1].closed = True
                stack.pop()
                current = None
            continue
        if current is None:
            raise SpecmatchError(
                f"{_loc(source, line_no)}: text outside any block: {stripped[:40]!r}")
        current.lines.append(line)
        current.line_nos.append(line_no)
    if not blocks:
        raise SpecmatchError(f"{source or 'file'}: no '##TITLE=' record; this is not a JCAMP-DX file")
    return blocks


def _loc(source: str, line_no: int) -> str:
    return f"{source}: line {line_no:,}" if source else f"line {line_no:,}"


# ----------------------------------------------------------------------- nucleus, numbers
_NUCLEUS_RE = re.compile(r"^\W*(\d+)\s*([A-Za-z]{1,2})\W*$|^\W*([A-Za-z]{1,2})\s*(\d+)\W*$")


def normalise_nucleus(text: str | None) -> str | None:
    """'^13C', '<13C>', '13C', 'C13', 'proton' ... -> '13C' / '1H' (others kept)."""
    if not text:
        return None
    t = text.strip().strip("<>^ ")
    low = t.lower()
    if low in ("proton", "h", "1h"):
        return "1H"
    if low in ("carbon", "c", "13c"):
        return "13C"
    m = _NUCLEUS_RE.match(text.strip())
    if m:
        mass, sym = (m.group(1), m.group(2)) if m.group(1) else (m.group(4), m.group(3))
        return f"{int(mass)}{sym[0].upper()}{sym[1:].lower()}"
    return t or None


def _num(block: Block, label: str, source: str) -> float | None:
    r = block.first(label)
    if r is None or not r.value.strip():
        return None
    txt = r.value.strip().strip("<>")
    try:
        return float(txt.replace("D", "E").replace("d", "e"))
    except ValueError:
        raise SpecmatchError(
            f"{_loc(source, r.line_no)}: '##{label}=' should be a number, found {txt[:30]!r}") from None


def _nums(value: str) -> list[float | None]:
    out: list[float | None] = []
    for part in value.split(","):
        part = part.strip()
        try:
            out.append(float(part))
        except ValueError:
            out.append(None)
    return out


def _strs(value: str) -> list[str]:
    return [p.strip() for p in value.split(",")]


_DATATYPE_RANK = {"NMRSPECTRUM": 0, "NMRPEAKTABLE": 2, "NMRPEAKASSIGNMENTS": 3, "NMRFID": 4}


def _data_record(block: Block) -> LDR | None:
    for lab in ("XYDATA", "DATATABLE", "XYPOINTS", "PEAKTABLE"):
        r = block.first(lab)
        if r is not None:
            return r
    return None


# ------------------------------------------------------------------------------ reading
def read_jcampdx(data: bytes | str, *, source: str = "", nucleus: str | None = None) -> Spectrum | PeakList:
    """Read a JCAMP-DX NMR file (contents as bytes or text).

    Parameters
    ----------
    data
        File contents.
    source
        File name, for messages and :attr:`Spectrum.source`.
    nucleus
        What the user says the nucleus is; used only when the file does not say.

    Returns
    -------
    Spectrum or PeakList
        A Spectrum for XYDATA / NTUPLES / XYPOINTS, a PeakList for a PEAK TABLE.
    """
    text = _decode_text(data)
    blocks = parse_blocks(text, source=source)
    candidates = []
    for i, b in enumerate(blocks):
        rec = _data_record(b)
        if rec is None:
            continue
        dtype = _norm_label(b.get("DATATYPE", "") or "")
        if "FID" in dtype:
            rank = 4
        elif "PEAK" in dtype or rec.label == "PEAKTABLE":
            rank = 2
        elif dtype.startswith("NMR") or not dtype:
            rank = 0 if dtype else 1
        elif "LINK" in dtype:
            continue
        else:
            rank = 5
        candidates.append((rank, i, b))
    if not candidates:
        raise SpecmatchError(
            f"{source or 'file'}: no spectrum data found: expected an '##XYDATA=', '##DATA TABLE=', "
            "'##XYPOINTS=' or '##PEAK TABLE=' record")
    candidates.sort(key=lambda t: (t[0], t[1]))
    rank, _, block = candidates[0]
    if rank == 4:
        raise SpecmatchError(
            f"{source or 'file'}: this JCAMP-DX file holds a time-domain FID only; export the "
            "processed (Fourier-transformed, phased) spectrum, or upload the instrument folder as a zip")
    if rank == 5:
        raise SpecmatchError(
            f"{source or 'file'}: the data block is '##DATA TYPE= {block.get('DATATYPE')}', not an NMR spectrum")
    notes: list[str] = []
    n_spectra = sum(1 for c in candidates if c[0] in (0, 1))
    if n_spectra > 1:
        notes.append(f"the file holds {n_spectra} spectra; the first was read "
                     f"('{block.get('TITLE', '')}')")
    return _read_block(block, blocks, source=source, nucleus=nucleus, notes=notes)


def _inherited(block: Block, blocks: list[Block], label: str) -> str | None:
    """A record from this block, else from the first block that has it (LINK parent)."""
    v = block.get(label)
    if v:
        return v
    for b in blocks:
        v = b.get(label)
        if v:
            return v
    return None


def _read_block(block: Block, blocks: list[Block], *, source: str, nucleus: str | None,
                notes: list[str]) -> Spectrum | PeakList:
    nuc = normalise_nucleus(_inherited(block, blocks, ".OBSERVENUCLEUS")
                            or _inherited(block, blocks, "$NUC1"))
    if nuc is None:
        nuc = nucleus
    freq = _num(block, ".OBSERVEFREQUENCY", source)
    if freq is None:
        parent = next((b for b in blocks if b.get(".OBSERVEFREQUENCY")), None)
        freq = _num(parent, ".OBSERVEFREQUENCY", source) if parent else None
    if freq is None:
        for lab in ("$SF", "$SFO1", "$BF1"):
            freq = _num(block, lab, source)
            if freq:
                break
    if freq is not None and freq <= 0:
        raise SpecmatchError(f"{source}: .OBSERVE FREQUENCY must be positive, found {freq:g}")
    solvent = (_inherited(block, blocks, ".SOLVENTNAME") or _inherited(block, blocks, "$SOLVENT") or "")
    solvent = solvent.strip().strip("<>").strip() or None
    src = f"{source} (JCAMP-DX {block.get('JCAMPDX', '?').split()[0] if block.get('JCAMPDX') else '?'})"

    if block.first("NTUPLES") is not None:
        x_hz_or_ppm, y, xunits = _read_ntuples(block, source)
    else:
        rec = _data_record(block)
        assert rec is not None
        kind = re.sub(r"\s", "", rec.value).upper()
        if rec.label == "PEAKTABLE" or (rec.label == "XYPOINTS" and "PEAK" in _norm_label(block.get("DATATYPE", "") or "")):
            return _read_peak_table(block, rec, source=source, nucleus=nuc, freq=freq,
                                    solvent=solvent, src=src, notes=notes)
        xunits = (block.get("XUNITS") or "").upper()
        if rec.label == "XYPOINTS" or kind.startswith("(XY..XY)"):
            x_hz_or_ppm, y = _read_xypoints(block, rec, source)
        else:
            if not re.fullmatch(r"\(X\+\+\((Y\.\.Y|R\.\.R|I\.\.I)\)\)", kind):
                raise SpecmatchError(
                    f"{_loc(source, rec.line_no)}: expected '(X++(Y..Y))' after '##{rec.label}=', "
                    f"found {rec.value.strip()[:30]!r}")
            x_hz_or_ppm, y = _read_xydata(block, rec, source)
    ppm = _to_ppm(block, x_hz_or_ppm, xunits, freq, source)
    if ppm[0] < ppm[-1]:
        ppm, y = ppm[::-1], y[::-1]
    if not np.all(np.isfinite(y)):
        bad = int(np.sum(~np.isfinite(y)))
        notes.append(f"{bad:,} unknown ordinates ('?') were set to 0")
        y = np.where(np.isfinite(y), y, 0.0)
    if nuc is None:
        raise SpecmatchError(
            f"{source}: the file does not say which nucleus it is (no '##.OBSERVE NUCLEUS='); "
            "give it with --nucleus 1H or --nucleus 13C")
    experiment = "1D"
    what = " ".join(block.get(k) or "" for k in ("TITLE", ".PULSESEQUENCE", "$PULPROG")).upper()
    # DEPT-135 unless the text names another DEPT angle (DEPT-90, DEPT-45 are not handled).
    if "DEPT" in what and not re.search(r"DEPT\W?(90|45)", what):
        experiment = "DEPT-135"
    return Spectrum(nucleus=nuc, ppm=np.ascontiguousarray(ppm, dtype=float),
                    intensity=np.ascontiguousarray(y, dtype=float), frequency_mhz=freq,
                    solvent=solvent, source=src, experiment=experiment,
                    meta={"title": block.get("TITLE") or "", "warnings": tuple(notes),
                          "shift_reference": block.get(".SHIFTREFERENCE")})


def _read_xydata(block: Block, rec: LDR, source: str) -> tuple[np.ndarray, np.ndarray]:
    xfactor = _num(block, "XFACTOR", source) or 1.0
    yfactor = _num(block, "YFACTOR", source) or 1.0
    firstx = _num(block, "FIRSTX", source)
    lastx = _num(block, "LASTX", source)
    npoints = _num(block, "NPOINTS", source)
    firsty = _num(block, "FIRSTY", source)
    dec = decode_xy_lines(rec.lines, rec.line_nos, source=source)
    return _check_and_axis(dec, xfactor, yfactor, firstx, lastx, npoints, firsty, source, rec)


def _check_and_axis(dec, xfactor, yfactor, firstx, lastx, npoints, firsty, source, rec):
    n = len(dec.y)
    if npoints is not None:
        want = int(round(npoints))
        if want < 1:
            raise SpecmatchError(f"{source}: ##NPOINTS= {npoints:g} is not a positive count")
    else:
        want = n
    # Abscissa step from the header, else from the X written on the lines.
    if firstx is not None and lastx is not None and want > 1:
        deltax = (lastx - firstx) / (want - 1)
    elif len(dec.line_x) > 1 and dec.line_start[-1] > dec.line_start[0]:
        deltax = float(np.polyfit(dec.line_start, dec.line_x * xfactor, 1)[0])
        firstx = float(dec.line_x[0] * xfactor - dec.line_start[0] * deltax) if firstx is None else firstx
    else:
        raise SpecmatchError(f"{source}: ##FIRSTX= and ##LASTX= are needed to place the points")
    if firstx is None:
        firstx = float(dec.line_x[0] * xfactor)
    # X check: each line's abscissa must match the point it starts with.
    # Writers round (or truncate) X to the digits they print: allow one step of that.
    x_step = 10.0 ** (-dec.x_decimals) * abs(xfactor)
    tol = 0.6 * abs(deltax) + 1.01 * x_step + 1e-9 * max(abs(firstx), 1.0)
    expected = firstx + dec.line_start * deltax
    off = np.abs(dec.line_x * xfactor - expected) > tol
    if n != want:
        where = ""
        if off.any():
            k = int(np.argmax(off))
            where = (f"line {int(dec.line_numbers[k]):,}: X is {dec.line_x[k]:g} where "
                     f"{expected[k] / xfactor:g} was expected (points missing or extra before it); ")
        if n < want:
            raise SpecmatchError(
                f"cannot read '{source}': {where}'{rec.value.strip()}' data ends after {n:,} of "
                f"{want:,} points; the export may be truncated")
        raise SpecmatchError(
            f"cannot read '{source}': {where}'{rec.value.strip()}' holds {n:,} points but "
            f"##NPOINTS= says {want:,}; the file is damaged or was edited")
    if off.any():
        k = int(np.argmax(off))
        raise SpecmatchError(
            f"cannot read '{source}': line {int(dec.line_numbers[k]):,}: X is {dec.line_x[k]:g} "
            f"but the point it starts with should be at {expected[k] / xfactor:g} "
            "(from ##FIRSTX=, ##LASTX=, ##NPOINTS=); lines are missing, repeated or out of order")
    y = dec.y * yfactor
    if firsty is not None and np.isfinite(y[0]):
        scale = max(float(np.nanmax(np.abs(y))) if n else 0.0, abs(firsty), 1e-300)
        if abs(y[0] - firsty) > 1e-3 * scale + abs(yfactor):
            raise SpecmatchError(
                f"cannot read '{source}': ##FIRSTY= {firsty:g} but the first ordinate decodes to "
                f"{y[0]:g}; YFACTOR or the data lines are damaged")
    x = firstx + np.arange(n) * deltax
    return x, y


def _read_xypoints(block: Block, rec: LDR, source: str) -> tuple[np.ndarray, np.ndarray]:
    xfactor = _num(block, "XFACTOR", source) or 1.0
    yfactor = _num(block, "YFACTOR", source) or 1.0
    vals = _table_values(rec, 2, source)
    x = vals[:, 0] * xfactor
    y = vals[:, 1] * yfactor
    npoints = _num(block, "NPOINTS", source)
    if npoints is not None and int(round(npoints)) != len(x):
        raise SpecmatchError(
            f"cannot read '{source}': '##XYPOINTS=' holds {len(x):,} points but ##NPOINTS= says "
            f"{int(round(npoints)):,}; the export may be truncated")
    if len(x) < 2:
        raise SpecmatchError(f"{source}: '##XYPOINTS=' needs at least two points")
    return x, y


_TABLE_NUM = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?|\?")


def _table_values(rec: LDR, width: int, source: str) -> np.ndarray:
    """Numbers of an (XY..XY)-style table: groups 'x, y[, w]' separated by ';' or
    blanks, or plain blank-separated numbers taken `width` at a time ('?' -> NaN)."""
    rows: list[list[float]] = []
    flat: list[float] = []
    for text, line_no in zip(rec.lines, rec.line_nos):
        text = re.sub(r"\s*,\s*", ",", text.strip())
        if not text:
            continue
        groups = [g for g in re.split(r"[;\s]+", text) if g]
        for g in groups:
            parts = g.split(",")
            nums = []
            for p in parts:
                if not _TABLE_NUM.fullmatch(p):
                    raise SpecmatchError(
                        f"{_loc(source, line_no)}: expected numbers like 'x, y' in the table "
                        f"after '##{rec.label}=', found {p[:20]!r}")
                nums.append(np.nan if p == "?" else float(p))
            if len(parts) == 1:
                flat.extend(nums)
            else:
                if len(nums) < 2:
                    raise SpecmatchError(f"{_loc(source, line_no)}: a table entry needs x and y")
                rows.append(nums)
    if flat:
        if rows or len(flat) % width:
            raise SpecmatchError(
                f"{_loc(source, rec.line_no)}: the table after '##{rec.label}=' mixes entries "
                f"or has {len(flat)} numbers, not a multiple of {width}")
        rows = [flat[i:i + width] for i in range(0, len(flat), width)]
    if not rows:
        raise SpecmatchError(f"{_loc(source, rec.line_no)}: the table after '##{rec.label}=' is empty")
    w = max(len(r) for r in rows)
    return np.array([r + [np.nan] * (w - len(r)) for r in rows], dtype=float)


def _read_peak_table(block: Block, rec: LDR, *, source: str, nucleus: str | None, freq: float | None,
                     solvent: str | None, src: str, notes: list[str]) -> PeakList:
    kind = re.sub(r"\s", "", rec.value).upper()
    width = 3 if kind.startswith("(XYW") or kind.startswith("(XYM") else 2
    vals = _table_values(rec, width, source)
    xfactor = _num(block, "XFACTOR", source) or 1.0
    yfactor = _num(block, "YFACTOR", source) or 1.0
    x = vals[:, 0] * xfactor
    xunits = (block.get("XUNITS") or "PPM").upper()
    ppm = _to_ppm(block, x, xunits, freq, source)
    y = vals[:, 1] * yfactor
    w = vals[:, 2] if vals.shape[1] > 2 and kind.startswith("(XYW") else None
    if nucleus is None:
        raise SpecmatchError(
            f"{source}: the peak table does not say which nucleus it is; give --nucleus 1H or 13C")
    peaks = []
    for i in np.argsort(-ppm):
        wid = None
        if w is not None and np.isfinite(w[i]):
            wid = float(w[i]) * (freq if xunits == "PPM" and freq else 1.0)
        peaks.append(Peak(shift=round(float(ppm[i]), 4),
                          intensity=float(y[i]) if np.isfinite(y[i]) else None, width_hz=wid))
    return PeakList(nucleus=nucleus, peaks=tuple(peaks), frequency_mhz=freq, solvent=solvent,
                    reference="as given in the file", source=src, warnings=tuple(notes))


def _read_ntuples(block: Block, source: str) -> tuple[np.ndarray, np.ndarray, str]:
    """The real page of an NTUPLES block (x in its own units, y scaled)."""
    symbols = _strs(block.get("SYMBOL") or "")
    if not symbols or symbols == [""]:
        raise SpecmatchError(f"{source}: NTUPLES block without '##SYMBOL='")
    def col(label: str) -> list:
        v = block.get(label)
        return _nums(v) if v else [None] * len(symbols)
    factors, firsts, lasts, dims = col("FACTOR"), col("FIRST"), col("LAST"), col("VARDIM")
    units = _strs(block.get("UNITS") or "") + [""] * len(symbols)
    pages = [r for r in block.records if r.label == "DATATABLE"]
    if not pages:
        raise SpecmatchError(f"{source}: NTUPLES block without '##DATA TABLE=' pages")
    kind_2d = (block.get("NTUPLES") or "").upper()
    if "ND " in kind_2d or "2D" in kind_2d or any("F1" in (r.value or "").upper()
                                                 for r in block.records if r.label == "PAGE"):
        raise SpecmatchError(
            f"{source}: this is a 2D NMR data set ('##NTUPLES= {block.get('NTUPLES')}'); "
            "specmatch reads 1D 1H and 13C spectra")
    upper = [s.upper() for s in symbols]
    xi = upper.index("X") if "X" in upper else 0
    chosen = None
    for rec in pages:
        kind = re.sub(r"\s", "", rec.value).upper()
        m = re.match(r"\(X\+\+\((\w)\.\.(\w)\)\)", kind)
        if not m:
            raise SpecmatchError(
                f"{_loc(source, rec.line_no)}: expected a page like '(X++(R..R)), XYDATA', found "
                f"{rec.value.strip()[:40]!r}")
        if m.group(1) in ("R", "Y"):
            chosen = (rec, m.group(1))
            break
    if chosen is None:
        raise SpecmatchError(f"{source}: the NTUPLES block has no real (R) page")
    rec, sym = chosen
    yi = upper.index(sym) if sym in upper else 1
    def at(lst, i):
        return lst[i] if i < len(lst) else None
    dec = decode_xy_lines(rec.lines, rec.line_nos, source=source)
    x, y = _check_and_axis(dec, at(factors, xi) or 1.0, at(factors, yi) or 1.0, at(firsts, xi),
                           at(lasts, xi), at(dims, yi) or at(dims, xi), None, source, rec)
    return x, y, (at(units, xi) or "").upper()


def _to_ppm(block: Block, x: np.ndarray, xunits: str, freq: float | None, source: str) -> np.ndarray:
    u = xunits.upper().replace(" ", "")
    if u in ("PPM", ""):
        return np.asarray(x, dtype=float)
    if u in ("HZ", "HERTZ"):
        if not freq:
            raise SpecmatchError(
                f"{source}: x is in Hz but the file has no '##.OBSERVE FREQUENCY=' to convert to ppm")
        ref = block.get(".SHIFTREFERENCE")
        if ref:
            parts = _strs(ref.strip().strip("()"))
            try:
                point = int(float(parts[2]))
                value = float(parts[3])
            except (IndexError, ValueError):
                raise SpecmatchError(
                    f"{source}: '##.SHIFT REFERENCE= {ref}' should read (INTERNAL|EXTERNAL, compound, "
                    "point number, shift in ppm)") from None
            if not 1 <= point <= len(x):
                raise SpecmatchError(
                    f"{source}: '##.SHIFT REFERENCE=' names point {point:,} but there are {len(x):,}")
            return value + (x - x[point - 1]) / freq
        offset = _num(block, "$OFFSET", source)
        if offset is not None:
            return offset + (x - x[0]) / freq
        return x / freq
    raise SpecmatchError(
        f"{source}: x units '{xunits}' are neither HZ nor PPM; a time-domain FID has to be processed first")


# ------------------------------------------------------------------------------ writing
def _nucleus_label(nucleus: str) -> str:
    m = re.match(r"(\d+)([A-Za-z]+)", nucleus)
    return f"^{m.group(1)}{m.group(2)}" if m else nucleus


def write_jcampdx(spectrum: Spectrum, path: str | Path, *, form: str = "DIFDUP",
                  title: str | None = None, comments: tuple[str, ...] | list[str] = ()) -> None:
    """Write a Spectrum as a JCAMP-DX 5.01 NMR SPECTRUM file with XYDATA.

    Parameters
    ----------
    spectrum
        Evenly spaced points, ppm descending. With a frequency the abscissa is
        written in Hz with a ``.SHIFT REFERENCE`` record, else in ppm.
    path
        File to write.
    form
        Ordinate form: DIFDUP (default, most compact), AFFN, PAC, SQZ, DIF, DUP.
    title
        ``##TITLE=``; default: the spectrum's source.
    comments
        Lines written as ``$$`` comments after the title (e.g. "invented demo data").
    """
    form = form.upper()
    if form not in FORMS:
        raise SpecmatchError(f"unknown JCAMP-DX form {form!r}; use one of {', '.join(FORMS)}")
    ppm = np.asarray(spectrum.ppm, dtype=float)
    y = np.asarray(spectrum.intensity, dtype=float)
    n = len(ppm)
    if n < 2 or len(y) != n:
        raise SpecmatchError("a spectrum to write needs at least two points and one intensity per point")
    if ppm[0] < ppm[-1]:
        ppm, y = ppm[::-1], y[::-1]
    step = np.diff(ppm)
    if np.max(np.abs(step - step.mean())) > 1e-6 * abs(step.mean()) + 1e-12:
        raise SpecmatchError("XYDATA needs evenly spaced points; resample the spectrum first")
    freq = spectrum.frequency_mhz
    if freq:
        x = ppm * freq
        xunits = "HZ"
    else:
        x = ppm
        xunits = "PPM"
    firstx, lastx = float(x[0]), float(x[-1])
    deltax = (lastx - firstx) / (n - 1)
    peak = float(np.max(np.abs(y))) if np.any(y) else 1.0
    # Integers up to ~1e8 keep 8 significant digits and lines compact.
    yfactor = peak / 1e8 if peak > 0 else 1.0
    yi = np.rint(y / yfactor).astype(np.int64)
    xs = (firstx + np.arange(n) * deltax)
    lines = [f"##TITLE= {title or spectrum.source or 'specmatch spectrum'}"]
    lines += [f"$$ {c}" for c in comments]
    lines += [
        "##JCAMP-DX= 5.01",
        "##DATA TYPE= NMR SPECTRUM",
        "##DATA CLASS= XYDATA",
        "##ORIGIN= specmatch",
        "##OWNER= public domain",
        f"##.OBSERVE NUCLEUS= {_nucleus_label(spectrum.nucleus)}",
    ]
    if freq:
        lines.append(f"##.OBSERVE FREQUENCY= {freq:.6f}")
    if spectrum.solvent:
        lines.append(f"##.SOLVENT NAME= {spectrum.solvent}")
    if spectrum.experiment and spectrum.experiment != "1D":
        lines.append(f"##.PULSE SEQUENCE= {spectrum.experiment}")
    if freq:
        lines.append(f"##.SHIFT REFERENCE= (INTERNAL, TMS, 1, {ppm[0]:.6f})")
    lines += [
        f"##XUNITS= {xunits}",
        "##YUNITS= ARBITRARY UNITS",
        "##XFACTOR= 1.0",
        f"##YFACTOR= {yfactor:.10g}",
        f"##FIRSTX= {firstx:.6f}",
        f"##LASTX= {lastx:.6f}",
        f"##DELTAX= {deltax:.9g}",
        f"##MAXY= {float(yi.max() * yfactor):.10g}",
        f"##MINY= {float(yi.min() * yfactor):.10g}",
        f"##NPOINTS= {n}",
        f"##FIRSTY= {float(yi[0] * yfactor):.10g}",
        "##XYDATA= (X++(Y..Y))",
    ]
    lines += encode_xy_lines(xs, yi, form)
    lines.append("##END=")
    try:
        Path(path).write_text("\n".join(lines) + "\n", encoding="ascii", errors="replace")
    except OSError as exc:
        raise SpecmatchError(f"cannot write '{path}': {exc.strerror}") from None
