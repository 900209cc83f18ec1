"""``specmatch simulate``: exact (second-order) 1H spectrum of a structure or a spin system."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from ..errors import SpecmatchError
from ._common import _open_out, _print_json

#: spectrometer fields accepted (MHz): below, no 1H instrument exists; above, none is built
FIELD_RANGE_MHZ = (10.0, 1500.0)


def _field(value: float | None, default: float | None) -> float:
    f = default if value is None else value
    if f is None:
        raise SpecmatchError("--spin-system needs --field MHZ (the 1H frequency, e.g. 60 or 400)")
    if not FIELD_RANGE_MHZ[0] <= f <= FIELD_RANGE_MHZ[1]:
        raise SpecmatchError(f"--field {f:g} MHz is outside {FIELD_RANGE_MHZ[0]:g}-{FIELD_RANGE_MHZ[1]:g} MHz; "
                             "give the 1H frequency of the spectrometer")
    return float(f)


def _read_spin_system(path: str):
    from ..prediction.spin import SpinSystem

    from .. import safeio

    text = safeio.read_text(path, kind="spin_system", legacy_8bit=False)
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise SpecmatchError(f"'{path}' is not valid JSON (line {exc.lineno}: {exc.msg})") from None
    return SpinSystem.from_json(data)


def _lines_json(lines) -> dict:
    return {"frequency_mhz": lines.frequency_mhz,
            "lines": [{"ppm": round(float(p), 6), "hz": round(float(h), 4), "intensity": round(float(i), 6)}
                      for p, h, i in zip(lines.ppm, lines.hz, lines.intensity)],
            "total_intensity": round(float(lines.intensity.sum()), 6)}


def cmd_simulate(args: argparse.Namespace) -> int:
    import numpy as np

    if args.spin_system and args.smiles:
        raise SpecmatchError("give either a SMILES or --spin-system FILE.json, not both")
    if args.width <= 0 or not np.isfinite(args.width):
        raise SpecmatchError("--width must be a positive line width in Hz")
    if args.spin_system:
        from ..prediction.spin import simulate_spins

        system = _read_spin_system(args.spin_system)
        f = _field(args.field, None)
        lines = simulate_spins(system.shifts_ppm, system.couplings_hz, f)
        if args.json or not args.out:
            _print_json(_lines_json(lines))
        if args.out:
            from ..prediction.simulate import default_axis, lorentzian_sum

            axis = default_axis("1H", args.points)
            y = lorentzian_sum(axis, lines.ppm, lines.intensity, args.width / f)
            _write(args.out, axis, y, f, f"spin system from {Path(args.spin_system).name}")
        return 0
    if not args.smiles:
        raise SpecmatchError("give a SMILES, or --spin-system FILE.json --field MHZ")
    from ..prediction import predict
    from ..prediction.simulate import default_axis, prediction_lines, simulate_1h

    f = _field(args.field, 400.0)
    pred = predict(args.smiles)
    lines = prediction_lines(pred, f)
    if args.json:
        out = _lines_json(lines)
        out["smiles"] = pred.canonical_smiles
        _print_json(out)
    if args.out:
        axis = default_axis("1H", args.points)
        y = simulate_1h(pred, axis, f, args.width)
        _write(args.out, axis, y, f, f"simulated 1H spectrum of {pred.canonical_smiles}")
    if not args.json:
        n = int(round(lines.intensity.sum()))
        print(f"{pred.canonical_smiles}: {lines.hz.size} lines at {f:g} MHz, {n} non-exchangeable protons"
              + (f"; written to {args.out}" if args.out else "; --out FILE.csv|.jdx writes the spectrum"))
    return 0


def _write(path: str, axis, y, f: float, what: str) -> None:
    suffix = Path(path).suffix.lower()
    if suffix == ".csv":
        with _open_out(path) as fh:
            fh.write(f"# {what} at {f:g} MHz (specmatch simulate; a simulation, not a measurement)\n")
            fh.write("ppm,intensity\n")
            for x, v in zip(axis, y):
                fh.write(f"{x:.6f},{v:.6g}\n")
        return
    if suffix in (".jdx", ".dx", ".jcamp"):
        from ..spectra import write_jcampdx
        from ..spectra.types import Spectrum

        spec = Spectrum(nucleus="1H", ppm=axis, intensity=y, frequency_mhz=f, solvent=None,
                        source=f"{Path(path).name} (JCAMP-DX)")
        try:
            write_jcampdx(spec, path, title=what, comments=["simulated by specmatch simulate; not a measurement"])
        except OSError as exc:
            raise SpecmatchError(f"cannot write '{path}': {exc.strerror}") from None
        return
    raise SpecmatchError(f"--out '{path}': use a .csv or .jdx file name")


def register(sub: argparse._SubParsersAction) -> None:
    """Add this module's subcommands to the ``specmatch`` parser."""
    p = sub.add_parser("simulate", help="exact second-order 1H spectrum of a structure or a spin system")
    p.add_argument("smiles", nargs="?", help="SMILES of the structure (shifts and couplings predicted)")
    p.add_argument("--spin-system", metavar="FILE.json",
                   help='{"shifts_ppm": [...], "couplings_hz": [[i, j, J], ...]} (0-based spins)')
    p.add_argument("--field", type=float, metavar="MHZ", help="1H frequency (default 400 for a SMILES)")
    p.add_argument("--json", action="store_true", help="print the lines as JSON")
    p.add_argument("--out", metavar="FILE", help="write the spectrum (.csv or .jdx)")
    p.add_argument("--width", type=float, default=1.0, metavar="HZ", help="line width for --out (default 1 Hz)")
    p.add_argument("--points", type=int, default=32768, help="points of the --out axis (12 to -0.5 ppm)")
    p.set_defaults(func=cmd_simulate)
