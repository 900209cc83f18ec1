"""Peak lists typed or exported as CSV/TSV, and two-column x,y text spectra.

A peak list has a header naming its columns (any order, case-insensitive):
``shift`` (or ppm, delta, shift_ppm), and optionally ``intensity`` (height),
``integral`` (or nH, H), ``multiplicity`` (mult), ``j`` (j_hz, couplings: several
separated by ',' ';' or '/' inside quotes), ``hydrogens`` (attached H, 13C) and
``flag``. Text with exactly two numeric columns and no header word for shift is
read as a spectrum (ppm, intensity).
"""

from __future__ import annotations

import csv
import io
import re
from pathlib import Path

import numpy as np

from .. import safeio
from ..errors import SpecmatchError
from ..prediction.multiplicity import normalise as normalise_multiplicity
from .types import Multiplet, Peak, PeakList, Spectrum

_COLS = {
    "shift": ("shift", "ppm", "delta", "shift_ppm", "shift ppm", "δ", "cs", "chemical shift", "position"),
    "intensity": ("intensity", "height", "int", "y", "amplitude"),
    "integral": ("integral", "nh", "h", "area", "integration", "n_h"),
    "multiplicity": ("multiplicity", "mult", "m", "pattern"),
    "j": ("j", "j_hz", "j hz", "j(hz)", "coupling", "couplings", "j_values"),
    "hydrogens": ("hydrogens", "attached_h", "nh_attached", "multiplicity_dept", "dept", "hcount"),
    "flag": ("flag", "note"),
    "from": ("from_ppm", "from", "start_ppm", "range_start", "lo_ppm", "high_ppm"),
    "to": ("to_ppm", "to", "end_ppm", "range_end", "hi_ppm", "low_ppm"),
}
_NUM = re.compile(r"^[+-]?(\d+(?:\.\d*)?|\.\d+)([eE][+-]?\d+)?$")
_MULT_OK = re.compile(r"^(s|br\s?s|d|t|q|quint|sext|sept|hept|m|[dtq]{2,4})$")


#: most peaks (rows) a peak list may hold. Real 1H/13C peak lists have tens to a few
#: hundred lines; longer lists are spectra saved as text, and every later stage
#: (assignment, mixture fit) is sized for lists of this order.
MAX_PEAKS = 2000
#: most points an x,y text spectrum may hold (as for JCAMP-DX, ``jcampdx.MAX_POINTS``)
MAX_XY_POINTS = 4 * 1024 * 1024
#: shifts accepted per nucleus (ppm): beyond any 1H/13C signal of an organic compound
SHIFT_RANGE_PPM = {"1H": (-5.0, 25.0), "13C": (-50.0, 400.0)}
#: largest integral or intensity accepted (raw areas of processing programs reach ~1e9)
MAX_INTEGRAL = 1e12
#: largest coupling constant accepted (1J(CH) is up to about 250 Hz)
MAX_J_HZ = 300.0


def _check_points(n: int, src: str) -> None:
    if n > MAX_XY_POINTS:
        raise SpecmatchError(
            f"'{src}' holds {n:,} x,y points; at most {MAX_XY_POINTS:,} are read. Reduce the "
            "resolution or export the spectrum as JCAMP-DX")


def _text(path_or_text: str | Path | bytes) -> tuple[str, str]:
    if isinstance(path_or_text, bytes):
        return safeio.decode_text(path_or_text, name="peak list"), "peak list"
    if isinstance(path_or_text, Path) or ("\n" not in str(path_or_text) and Path(str(path_or_text)).exists()):
        p = Path(path_or_text)
        return safeio.read_text(p, kind="peaklist"), p.name
    return str(path_or_text), "peak list"


def _dialect(text: str) -> str:
    first = next((ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")), "")
    if "\t" in first:
        return "\t"
    if ";" in first and "," not in first:
        return ";"
    if "," in first:
        return ","
    return " "


def read_peak_csv(path_or_text: str | Path | bytes, *, nucleus: str | None = None,
                  name: str | None = None) -> PeakList | Spectrum:
    """Read a CSV/TSV peak list (-> PeakList) or two-column x,y text (-> Spectrum).

    Parameters
    ----------
    path_or_text
        File path, file contents (bytes) or the text itself.
    nucleus
        "1H" or "13C"; a peak list does not say. If missing it is guessed from the
        shift range (any shift above 20 ppm means 13C) and a warning says so.
    name
        Name for messages.
    """
    text, src = _text(path_or_text)
    src = name or src
    sep = _dialect(text)
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise SpecmatchError(f"'{src}' is empty")
    if sep == " ":
        rows = [ln.split() for ln in lines]
    else:
        rows = [[c.strip() for c in r] for r in csv.reader(io.StringIO("\n".join(lines)), delimiter=sep)]
    header = [c.strip().lower() for c in rows[0]]
    has_header = not all(_NUM.match(c) for c in header if c)
    if not has_header:
        if all(len(r) == 2 for r in rows) and len(rows) >= 16:
            _check_points(len(rows), src)
            return _xy_spectrum(rows, src, nucleus)
        header = ["shift", "intensity", "integral"][: len(rows[0])] if len(rows[0]) <= 3 else []
        if not header:
            raise SpecmatchError(
                f"'{src}': no header line; add one naming the columns, e.g. 'shift,intensity,multiplicity,j'")
        data = rows
    else:
        data = rows[1:]
    col: dict[str, int] = {}
    for i, h in enumerate(header):
        for key, names in _COLS.items():
            if h in names and key not in col:
                col[key] = i
    if "shift" not in col:
        raise SpecmatchError(
            f"'{src}': no shift column; name it 'shift' (or ppm). Columns found: {', '.join(header)}")
    if has_header and len(header) == 2 and "intensity" in col and len(data) >= 64:
        _check_points(len(data), src)
        return _xy_spectrum(data, src, nucleus, start_line=2)
    if len(data) > MAX_PEAKS:
        raise SpecmatchError(
            f"'{src}' lists {len(data):,} peaks; a peak list may hold at most {MAX_PEAKS:,}. "
            "If this is a spectrum saved as text, give it as two columns (ppm, intensity) "
            "without other columns, or give the spectrum file itself")
    line_of: list[int] = []
    peaks: list[Peak] = []
    multiplets: list[Multiplet] = []
    for n, r in enumerate(data, start=2 if has_header else 1):
        def cell(key: str) -> str:
            i = col.get(key)
            return r[i].strip() if i is not None and i < len(r) else ""
        s = cell("shift")
        rng = re.fullmatch(r"\s*([+-]?\d+(?:\.\d*)?)\s*[-–]\s*([+-]?\d+(?:\.\d*)?)\s*", s)
        if rng:  # a range such as 1.20-1.35 (an unresolved multiplet)
            lo, hi = sorted((float(rng.group(1)), float(rng.group(2))))
            shift = 0.5 * (lo + hi)
        elif _NUM.match(s):
            shift = float(s)
            lo = hi = shift
        else:
            raise SpecmatchError(f"'{src}' line {n}: shift {s!r} is not a number (ppm)")
        r_from = _opt_float(cell("from"), src, n, "range start")
        r_to = _opt_float(cell("to"), src, n, "range end")
        if r_from is not None and r_to is not None:
            lo, hi = sorted((r_from, r_to))
        inten = _opt_float(cell("intensity"), src, n, "intensity")
        integral = _opt_float(cell("integral"), src, n, "integral")
        hyd = cell("hydrogens")
        hydrogens = None
        if hyd:
            h = hyd.upper().replace("C", "").replace("H", "") if hyd.upper() in ("C", "CH", "CH2", "CH3") else hyd
            hmap = {"": 1, "2": 2, "3": 3}
            if hyd.upper() == "C":
                hydrogens = 0
            elif hyd.upper() in ("CH", "CH2", "CH3"):
                hydrogens = hmap[h]
            elif hyd.isdigit():
                hydrogens = int(hyd)
            else:
                raise SpecmatchError(f"'{src}' line {n}: hydrogens {hyd!r} should be 0-3 or C/CH/CH2/CH3")
        flag = cell("flag") or None
        if integral is not None and not 0 < integral <= MAX_INTEGRAL:
            raise SpecmatchError(
                f"'{src}' line {n}: integral {integral:g} should be a positive number (at most "
                f"{MAX_INTEGRAL:g}); leave the cell empty if it is not known")
        if inten is not None and not abs(inten) <= MAX_INTEGRAL:
            raise SpecmatchError(f"'{src}' line {n}: intensity {inten:g} is not a plausible height")
        line_of.append(n)
        peaks.append(Peak(shift=shift, intensity=inten, flag=flag, hydrogens=hydrogens))
        mult = cell("multiplicity").lower()
        jtxt = cell("j")
        if mult or jtxt or integral is not None:
            mult = mult or "m"
            if not _MULT_OK.match(mult):
                raise SpecmatchError(
                    f"'{src}' line {n}: multiplicity {mult!r} is not one of s, d, t, q, quint, sext, sept, "
                    "m or a combination such as dd, dt, td")
            js = []
            for part in re.split(r"[,;/ ]+", jtxt.strip()):
                if not part:
                    continue
                if not _NUM.match(part):
                    raise SpecmatchError(f"'{src}' line {n}: J value {part!r} is not a number (Hz)")
                jv = float(part)
                if not 0.0 <= jv <= MAX_J_HZ:
                    raise SpecmatchError(
                        f"'{src}' line {n}: J value {part} Hz is outside 0 to {MAX_J_HZ:g} Hz")
                js.append(jv)
            multiplets.append(Multiplet(shift=shift, range=(lo, hi), integral=integral,
                                        multiplicity=normalise_multiplicity(mult),
                                        j_hz=tuple(js), flag=flag))
    if not peaks:
        raise SpecmatchError(f"'{src}' has a header but no peaks")
    warnings = []
    if nucleus is None:
        named = re.findall(r"(?<![0-9A-Za-z])(13C|1H)(?![0-9])", src, flags=re.I)
        if len(set(n.upper() for n in named)) == 1:
            nucleus = "13C" if named[0].upper() == "13C" else "1H"
            warnings.append(f"nucleus not given; {nucleus} taken from the file name")
        else:
            nucleus = "13C" if max(p.shift for p in peaks) > 20 else "1H"
            warnings.append(f"nucleus not given; {nucleus} assumed from the shift range")
    lo_ok, hi_ok = SHIFT_RANGE_PPM.get(nucleus, (-1e3, 1e3))
    for pk, n in zip(peaks, line_of):
        if not lo_ok <= pk.shift <= hi_ok:
            raise SpecmatchError(
                f"'{src}' line {n}: shift {pk.shift:g} ppm is outside the {nucleus} range "
                f"({lo_ok:g} to {hi_ok:g} ppm); check the number and the column")
    peaks.sort(key=lambda p: -p.shift)
    multiplets.sort(key=lambda m: -m.shift)
    return PeakList(nucleus=nucleus, peaks=tuple(peaks), multiplets=tuple(multiplets) if nucleus == "1H" else (),
                    reference="as given in the peak list", source=f"{src} (peak list)",
                    warnings=tuple(warnings))


def _opt_float(s: str, src: str, n: int, what: str) -> float | None:
    if not s:
        return None
    if not _NUM.match(s):
        raise SpecmatchError(f"'{src}' line {n}: {what} {s!r} is not a number")
    return float(s)


def _xy_spectrum(rows: list[list[str]], src: str, nucleus: str | None, start_line: int = 1) -> Spectrum:
    try:
        arr = np.array([[float(a), float(b)] for a, b in (r[:2] for r in rows)], dtype=float)
    except ValueError:
        for n, r in enumerate(rows, start=start_line):
            for c in r[:2]:
                if not _NUM.match(c):
                    raise SpecmatchError(f"'{src}' line {n}: {c!r} is not a number") from None
        raise SpecmatchError(f"'{src}': every line needs two numbers, ppm and intensity") from None
    if not np.all(np.isfinite(arr)):
        raise SpecmatchError(f"'{src}': the x,y text holds non-finite numbers")
    order = np.argsort(-arr[:, 0], kind="stable")
    ppm, y = arr[order, 0], arr[order, 1]
    if nucleus is None:
        span = ppm[0] - ppm[-1]
        nucleus = "13C" if span > 40 else "1H"
    return Spectrum(nucleus=nucleus, ppm=ppm, intensity=y, frequency_mhz=None, solvent=None,
                    source=f"{src} (x,y text)",
                    meta={"warnings": ("x,y text carries no frequency or solvent; give --solvent",)})
