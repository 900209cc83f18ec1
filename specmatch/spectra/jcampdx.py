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
from .experiment import classify_experiment, resolve_solvent
from .types import Peak, PeakList, Spectrum

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


def _decode_text(data: bytes | str, name: str = "file") -> str:
    if isinstance(data, str):
        return data
    from ..safeio import decode_text

    return decode_text(data, name=name)


def looks_like_jcampdx(head: bytes | str) -> bool:
    """True if the first non-blank text of a file is a ``##LABEL=`` record."""
    if isinstance(head, bytes):
        try:
            text = _decode_text(head[:4096])
        except SpecmatchError:
            return False
    else:
        text = head[:4096]
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
        v = float(txt.replace("D", "E").replace("d", "e"))
    except ValueError:
        raise SpecmatchError(
            f"{_loc(source, r.line_no)}: '##{label}=' should be a number, found {txt[:30]!r}") from None
    if not np.isfinite(v):
        raise SpecmatchError(
            f"{_loc(source, r.line_no)}: '##{label}= {txt[:30]}' is not a finite number; the header "
            "is damaged")
    return v


def _factor(value: float | None, label: str, source: str) -> float:
    """XFACTOR / YFACTOR / an NTUPLES FACTOR: 1 when absent, refused when zero or non-finite."""
    if value is None:
        return 1.0
    if value == 0 or not np.isfinite(value):
        raise SpecmatchError(
            f"{source}: '##{label}= {value:g}' would scale every value to "
            f"{'zero' if value == 0 else 'a non-finite number'}; the header is damaged")
    return float(value)


#: Most points read from one spectrum (4 Mi: 16x a large 1D 1H acquisition).
MAX_POINTS = 4 * 1024 * 1024

#: Plausible observe frequencies (MHz) per nucleus: from the smallest benchtop
#: magnets (~40 MHz 1H) down to field-cycling and up past 1.2 GHz 1H; 13C is
#: gamma(13C)/gamma(1H) = 0.2515 of the 1H frequency (common practice).
FREQUENCY_RANGE_MHZ = {"1H": (1.0, 1500.0), "13C": (0.25, 380.0)}


def check_frequency(freq: float | None, nucleus: str | None, source: str) -> None:
    """Refuse an observe frequency no spectrometer has for this nucleus."""
    if freq is None:
        return
    lo, hi = FREQUENCY_RANGE_MHZ.get(nucleus or "", (0.1, 1500.0))
    if not (np.isfinite(freq) and lo <= freq <= hi):
        raise SpecmatchError(
            f"{source}: an observe frequency of {freq:g} MHz is not plausible for "
            f"{nucleus or 'this nucleus'} (expected {lo:g} to {hi:g} MHz); the header is damaged")


def _nums(value: str) -> list[float | None]:
    out: list[float | None] = []
    for part in value.split(","):
        part = part.strip()
        try:
            v = float(part)
        except ValueError:
            out.append(None)
            continue
        if not np.isfinite(v):
            raise SpecmatchError(f"'{value.strip()[:60]}' holds a non-finite number; the header is damaged")
        out.append(v)
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
    text = _decode_text(data, source or "file")
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
    return _read_block(block, blocks, source=source, nucleus=nucleus, notes=notes,
                       embedded=embedded_parameters(text, blocks))


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
                notes: list[str], embedded: dict[str, str]) -> Spectrum | PeakList:
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
    check_frequency(freq, nuc, source)
    declared = next((v for v in (_inherited(block, blocks, lab) for lab in _SOLVENT_LABELS)
                     if v and v.strip().strip("<>").strip()), None)
    solvent, solvent_notes = resolve_solvent(declared, _first(embedded, _SOLVENT_LABELS))
    notes.extend(solvent_notes)
    src = f"{source} (JCAMP-DX {block.get('JCAMPDX', '?').split()[0] if block.get('JCAMPDX') else '?'})"

    if block.first("NTUPLES") is not None:
        x_hz_or_ppm, y, xunits = _read_ntuples(block, source, notes)
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
            x_hz_or_ppm, y = _read_xydata(block, rec, source, notes)
    ppm = _to_ppm(block, x_hz_or_ppm, xunits, freq, source)
    if ppm[0] < ppm[-1]:
        ppm, y = ppm[::-1], y[::-1]
    if np.isinf(y).any():
        raise SpecmatchError(
            f"cannot read '{source}': {int(np.isinf(y).sum()):,} ordinates are infinite (a number too "
            "large for the format, or YFACTOR too large); the file is damaged")
    if not np.all(np.isfinite(y)):
        bad = int(np.sum(~np.isfinite(y)))
        notes.append(f"{bad:,} unknown ordinates ('?') were set to 0")
        y = np.where(np.isfinite(y), y, 0.0)
    if nuc is None:
        raise SpecmatchError(
            f"{source}: the file does not say which nucleus it is (no '##.OBSERVE NUCLEUS='); "
            "give it with --nucleus 1H or --nucleus 13C")
    prog = next((v.strip().strip("<>").strip() for v in
                 (_inherited(block, blocks, lab) for lab in _PULSE_LABELS)
                 if v and v.strip().strip("<>").strip()), None) or _first(embedded, _PULSE_LABELS)
    experiment, exp_notes = classify_experiment(nuc, prog, block.get("TITLE"), y)
    notes.extend(exp_notes)
    return Spectrum(nucleus=nuc, ppm=np.ascontiguousarray(ppm, dtype=float),
                    intensity=np.ascontiguousarray(y, dtype=float), frequency_mhz=freq,
                    solvent=solvent, source=src, experiment=experiment,
                    meta={"title": block.get("TITLE") or "", "warnings": tuple(notes),
                          "shift_reference": block.get(".SHIFTREFERENCE"),
                          "pulse_program": prog or ""})


_SOLVENT_LABELS = (".SOLVENTNAME", "$SOLVENT", "$SLVNT", "$SOLVENTNAME")
_PULSE_LABELS = (".PULSESEQUENCE", "$PULPROG", "$PULSEPROGRAM", "$EXPERIMENT")
_EMBEDDED_LDR = re.compile(r"^[ \t]*\$\$[ \t]*##([^=\r\n]{1,40})=[ \t]*([^\r\n]*)", re.M)
_COMMENT_SOLVENT = re.compile(r"^[ \t]*\$\$[ \t]*solvent[ \t]*[=:][ \t]*([^\r\n$]+)", re.M | re.I)
_PLAIN_LDR = re.compile(r"^[ \t]*(?:\$\$[ \t]*)?##([^=\r\n]{1,40})=[ \t]*([^\r\n]*)", re.M)
MAX_EMBEDDED_BYTES = 4 * 1024 * 1024


def _first(d: dict[str, str], labels: tuple[str, ...]) -> str | None:
    for lab in labels:
        v = (d.get(lab) or "").strip().strip("<>").strip()
        if v:
            return v
    return None


def embedded_parameters(text: str, blocks: list[Block]) -> dict[str, str]:
    """Parameters a file carries besides its own records: instrument parameter files
    copied into ``$$`` comment lines (``$$ ##$SOLVENT= <CDCl3>``), comment notes
    (``$$solvent=CDCL3``) and BASE64-embedded parameter files (``##$PARAMETER FILE=
    (header, BASE64, ...)``). First occurrence of each label wins."""
    out: dict[str, str] = {}

    def take(pattern: re.Pattern, chunk: str) -> None:
        for m in pattern.finditer(chunk):
            lab = _norm_label(m.group(1))
            val = m.group(2).split("$$", 1)[0].strip()
            if val and lab not in out:
                out[lab] = val

    if "$$" in text:
        take(_EMBEDDED_LDR, text)
        m = _COMMENT_SOLVENT.search(text)
        if m and ".SOLVENTNAME" not in out:
            out[".SOLVENTNAME"] = m.group(1).strip()
    import base64
    import binascii

    budget = MAX_EMBEDDED_BYTES
    for b in blocks:
        for r in b.records:
            if r.label != "$PARAMETERFILE" or "BASE64" not in r.value.upper() or budget <= 0:
                continue
            raw = "".join(ln.strip() for ln in r.lines)[:budget]
            budget -= len(raw)
            try:
                decoded = base64.b64decode(raw[: len(raw) - len(raw) % 4], validate=False)
            except (binascii.Error, ValueError):
                continue
            take(_PLAIN_LDR, decoded.decode("latin-1"))
    return out


def _read_xydata(block: Block, rec: LDR, source: str, notes: list[str]) -> tuple[np.ndarray, np.ndarray]:
    xfactor = _factor(_num(block, "XFACTOR", source), "XFACTOR", source)
    yfactor = _factor(_num(block, "YFACTOR", source), "YFACTOR", source)
    firstx = _num(block, "FIRSTX", source)
    lastx = _num(block, "LASTX", source)
    npoints = _num(block, "NPOINTS", source)
    firsty = _num(block, "FIRSTY", source)
    deltax = _num(block, "DELTAX", source)
    _check_count(npoints, "NPOINTS", source)
    dec = decode_xy_lines(rec.lines, rec.line_nos, source=source)
    return _check_and_axis(dec, xfactor, yfactor, firstx, lastx, npoints, firsty, source, rec,
                           notes, deltax_header=deltax)


def _check_count(npoints: float | None, label: str, source: str) -> None:
    if npoints is None:
        return
    if not np.isfinite(npoints) or npoints < 1 or npoints != round(npoints):
        raise SpecmatchError(f"{source}: '##{label}= {npoints:g}' is not a positive whole number of points")
    if npoints > MAX_POINTS:
        raise SpecmatchError(
            f"{source}: '##{label}= {npoints:,.0f}' is more than the {MAX_POINTS:,} points specmatch "
            "reads; export the spectrum at a lower resolution")


def _check_and_axis(dec, xfactor, yfactor, firstx, lastx, npoints, firsty, source, rec,
                    notes: list[str], deltax_header: float | None = None):
    """Abscissa and ordinates of an ``(X++(Y..Y))`` table, checked as the specification says.

    The abscissa comes from FIRSTX, LASTX and the number of points (DELTAX is a
    check). The X written at the start of each line is a checkpoint for the
    point count: successive line X values, in units of the point spacing, must
    advance by the number of points on the previous line. That comparison is
    relative, so an exporter's rounding drift or an offset origin of the line X
    values is reported in `notes`, not refused; a line that advances a whole
    point more or less than its predecessor's count (points missing or repeated)
    is refused with its line number.
    """
    n = len(dec.y)
    if n > MAX_POINTS:
        raise SpecmatchError(
            f"{source}: the table holds {n:,} points, more than the {MAX_POINTS:,} specmatch reads")
    want = int(npoints) if npoints is not None else n
    if n < 2:
        raise SpecmatchError(f"{source}: '{rec.value.strip()}' holds {n} point; a spectrum needs more")
    with np.errstate(over="ignore", invalid="ignore"):
        xs = dec.line_x * xfactor
    if not np.all(np.isfinite(xs)):
        raise SpecmatchError(
            f"cannot read '{source}': the line X values times XFACTOR ({xfactor:g}) are not finite "
            "numbers; the header is damaged")
    starts = dec.line_start
    # Abscissa step from the header (over the points the data really hold), else
    # from the X written on the lines.
    if firstx is not None and lastx is not None:
        if firstx == lastx:
            raise SpecmatchError(f"{source}: ##FIRSTX= and ##LASTX= are equal ({firstx:g}); the axis has no width")
        # Over the header's count, unless it is one off and the data's own count
        # agrees with DELTAX (an exporter counting the points wrongly).
        count = want if want > 1 else n
        if abs(n - want) == 1:
            by_data = (lastx - firstx) / (n - 1)
            by_header = (lastx - firstx) / (want - 1) if want > 1 else by_data
            ref = deltax_header if deltax_header else None
            count = want if (ref is not None and abs(by_header - ref) < abs(by_data - ref)) else n
        deltax = (lastx - firstx) / (count - 1)
    elif len(xs) > 1 and starts[-1] > starts[0]:
        deltax = float(np.polyfit(starts, xs, 1)[0])
        if firstx is None:
            firstx = float(xs[0] - starts[0] * deltax)
        notes.append("##FIRSTX= or ##LASTX= missing; the abscissa was fitted to the line X values")
    else:
        raise SpecmatchError(f"{source}: ##FIRSTX= and ##LASTX= are needed to place the points")
    if not np.isfinite(deltax) or deltax == 0:
        raise SpecmatchError(f"{source}: the abscissa step is not a finite non-zero number")
    # Rounding of the X written on a line: one unit of its last printed digit.
    x_step = 10.0 ** (-dec.x_decimals) * abs(xfactor)
    round_pts = x_step / abs(deltax)
    where = ""
    opposite = False
    if len(xs) > 1:
        steps = np.diff(xs) / deltax
        want_steps = np.diff(starts).astype(float)
        # The line X values may count in other units than FIRSTX/LASTX (point indices,
        # the opposite direction): one scale for all lines, read from the median step.
        use = want_steps > 0
        scale = float(np.median(steps[use] / want_steps[use])) if use.any() else 1.0
        if not np.isfinite(scale) or scale == 0 or abs(scale - 1.0) <= 0.01:
            scale = 1.0
        elif abs(scale + 1.0) <= 0.01:
            scale = -1.0
        steps = steps / scale
        # Half a point plus the rounding of two X values plus 0.1% drift per point.
        tol = 0.5 + round_pts / abs(scale) + 1e-3 * want_steps
        bad = np.abs(steps - want_steps) > tol
        if scale != 1.0:
            opposite = True  # offset and drift against FIRSTX are not meaningful then
            how = ("run opposite to ##FIRSTX= -> ##LASTX= (they count points)" if scale == -1.0
                   else f"advance {scale:.4g} times the point spacing per point (other units)")
            notes.append(f"the line X values {how}; the abscissa follows FIRSTX, LASTX and the "
                         "point count")
        if bad.any():
            k = int(np.argmax(bad))
            gap = steps[k] - want_steps[k]
            line = int(dec.line_numbers[k + 1])
            where = (f"line {line:,}: its X ({dec.line_x[k + 1]:g}) is {abs(gap):.1f} points "
                     f"{'beyond' if gap > 0 else 'short of'} where the {int(want_steps[k])} points "
                     f"of the line before put it")
            if n == want or abs(n - want) > 1:
                kind = "missing" if gap > 0 else "repeated"
                raise SpecmatchError(
                    f"cannot read '{source}': {where}: points are {kind} (or lines out of order); "
                    "the file is damaged or was edited")
    if n != want:
        if abs(n - want) == 1 and not where:
            notes.append(f"##NPOINTS= says {want:,} but the data hold {n:,} points (consistent "
                         "line by line); read as the data hold")
        elif n < want:
            raise SpecmatchError(
                f"cannot read '{source}': {where + '; ' if where else ''}'{rec.value.strip()}' data "
                f"ends after {n:,} of {want:,} points; the export may be truncated")
        else:
            raise SpecmatchError(
                f"cannot read '{source}': {where + '; ' if where else ''}'{rec.value.strip()}' holds "
                f"{n:,} points but ##NPOINTS= says {want:,}; the file is damaged or was edited")
    if deltax_header is not None and np.isfinite(deltax_header) and deltax_header != 0:
        # DELTAX is a check only: a sign error or a mismatch over the span is noted.
        span_err = abs(deltax_header - deltax) * (n - 1) / abs(deltax)
        if span_err > 1.0:
            notes.append(f"##DELTAX= {deltax_header:g} disagrees with (LASTX - FIRSTX)/(points - 1) = "
                         f"{deltax:g}; the abscissa follows FIRSTX, LASTX and the point count")
    # Offset origin and drift of the line X values (in points): reported, not refused.
    with np.errstate(over="ignore", invalid="ignore"):
        dev = (xs - (firstx + starts * deltax)) / deltax
    slack = 0.5 + round_pts
    if opposite:
        dev = np.zeros(0)
    if len(dev) and abs(dev[0]) > slack:
        notes.append(f"the line X values are offset from ##FIRSTX= by {dev[0]:+,.1f} points (first "
                     f"line X {xs[0]:g}, FIRSTX {firstx:g}); the abscissa follows FIRSTX, LASTX and "
                     "the point count")
    if len(dev) > 1:
        drift = float(np.max(np.abs(dev - dev[0])))
        if drift > slack:
            notes.append(f"the line X values drift by up to {drift:.1f} points from FIRSTX + "
                         "i x DELTAX (exporter rounding); the abscissa follows FIRSTX, LASTX and "
                         "the point count")
    with np.errstate(over="ignore", invalid="ignore"):
        y = dec.y * yfactor
    inf = np.isinf(y)
    if inf.any():
        k = int(np.argmax(inf))
        line = int(dec.line_numbers[np.searchsorted(starts, k, side="right") - 1])
        raise SpecmatchError(
            f"cannot read '{source}': line {line:,}: an ordinate is infinite (too large for a "
            "number, or YFACTOR too large); the file is damaged")
    if firsty is not None and np.isfinite(y[0]):
        scale = max(float(np.nanmax(np.abs(y))) if n else 0.0, abs(firsty), 1e-300)
        if abs(y[0] - firsty) > 1e-3 * scale + abs(yfactor):
            raise SpecmatchError(
                f"cannot read '{source}': ##FIRSTY= {firsty:g} but the first ordinate decodes to "
                f"{y[0]:g}; YFACTOR or the data lines are damaged")
    with np.errstate(over="ignore", invalid="ignore"):
        x = firstx + np.arange(n) * deltax
    if not (np.isfinite(x[0]) and np.isfinite(x[-1])):
        raise SpecmatchError(
            f"cannot read '{source}': the abscissa from ##FIRSTX= {firstx:g} to ##LASTX= "
            f"{lastx if lastx is not None else float('nan'):g} leaves the range of numbers; the header is damaged")
    return x, y


def _read_xypoints(block: Block, rec: LDR, source: str) -> tuple[np.ndarray, np.ndarray]:
    xfactor = _factor(_num(block, "XFACTOR", source), "XFACTOR", source)
    yfactor = _factor(_num(block, "YFACTOR", source), "YFACTOR", source)
    _check_count(_num(block, "NPOINTS", source), "NPOINTS", source)
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
    from .peaklist_io import MAX_PEAKS, SHIFT_RANGE_PPM

    if len(rec.lines) > MAX_PEAKS:
        raise SpecmatchError(
            f"{source}: the peak table has {len(rec.lines):,} lines; a peak list may hold at most "
            f"{MAX_PEAKS:,} peaks")
    vals = _table_values(rec, width, source)
    if len(vals) > MAX_PEAKS:
        raise SpecmatchError(
            f"{source}: the peak table lists {len(vals):,} peaks; at most {MAX_PEAKS:,} are read")
    xfactor = _factor(_num(block, "XFACTOR", source), "XFACTOR", source)
    yfactor = _factor(_num(block, "YFACTOR", source), "YFACTOR", source)
    x = vals[:, 0] * xfactor
    xunits = (block.get("XUNITS") or "PPM").upper()
    ppm = _to_ppm(block, x, xunits, freq, source)
    y = vals[:, 1] * yfactor
    w = vals[:, 2] if vals.shape[1] > 2 and kind.startswith("(XYW") else None
    if nucleus is None:
        raise SpecmatchError(
            f"{source}: the peak table does not say which nucleus it is; give --nucleus 1H or 13C")
    lo_ok, hi_ok = SHIFT_RANGE_PPM.get(nucleus, (-1e3, 1e3))
    bad = ~((ppm >= lo_ok) & (ppm <= hi_ok))
    if bad.any():
        raise SpecmatchError(
            f"{source}: the peak table lists a shift of {float(ppm[np.argmax(bad)]):g} ppm, outside the "
            f"{nucleus} range ({lo_ok:g} to {hi_ok:g} ppm); the table is damaged")
    peaks = []
    for i in np.argsort(-ppm):
        wid = None
        if w is not None and np.isfinite(w[i]):
            wid = float(w[i]) * (freq if xunits == "PPM" and freq else 1.0)
        peaks.append(Peak(shift=round(float(ppm[i]), 4),
                          intensity=float(y[i]) if np.isfinite(y[i]) else None, width_hz=wid))
    return PeakList(nucleus=nucleus, peaks=tuple(peaks), frequency_mhz=freq, solvent=solvent,
                    reference="as given in the file", source=src, warnings=tuple(notes))


def _read_ntuples(block: Block, source: str, notes: list[str]) -> tuple[np.ndarray, np.ndarray, str]:
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
    npoints = at(dims, yi) or at(dims, xi)
    _check_count(npoints, "VAR_DIM", source)
    dec = decode_xy_lines(rec.lines, rec.line_nos, source=source)
    x, y = _check_and_axis(dec, _factor(at(factors, xi), "FACTOR (X)", source),
                           _factor(at(factors, yi), f"FACTOR ({sym})", source), at(firsts, xi),
                           at(lasts, xi), npoints, None, source, rec, notes)
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
