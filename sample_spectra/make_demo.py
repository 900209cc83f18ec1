#!/usr/bin/env python3
"""Regenerate the invented demo spectra in this folder (deterministic, fixed seed).

The scenario is INVENTED: a fictional "Larchmere fragrance-intermediates pilot
plant" and two crude reaction samples. The spectra are simulated, not measured:

* shift values come from ``shift_values.csv`` in this folder (experimental
  nmrshiftdb2 values where the compound is in the shared data, with record ids;
  otherwise values marked there as estimated/invented);
* 1H spectra are exact (second order) spin simulations at the spectrometer field:
  each compound's proton groups are those of ``specmatch.prediction.predict``, their
  shifts are the table's (column ``atoms`` says which row is which group), their
  couplings the network of ``specmatch.prediction.couplings``
  (``specmatch.prediction.simulate.prediction_lines``); lines are Lorentzian
  (``lorentzian_sum``); exchangeable OH is one broad line;
* what is in each tube (product ratio, trace substrate) is taken from
  ``specmatch.demo`` so that the files and the app's description agree;
* files are written with the library's own writer ``specmatch.spectra.write_jcampdx``.

Run from the repository root or from here::

    python sample_spectra/make_demo.py

Rerunning overwrites the files with identical content.
"""

from __future__ import annotations

import csv
import sys
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))  # a source checkout without an install

from specmatch.demo import LAB_NAME, demo_cases  # noqa: E402
from specmatch.prediction import predict  # noqa: E402
from specmatch.prediction.simulate import lorentzian_sum, prediction_lines  # noqa: E402
from specmatch.spectra import write_jcampdx  # noqa: E402
from specmatch.spectra.types import Spectrum  # noqa: E402

SEED = 20260419
JCAMP_FORM = "DIFDUP"  # compressed (X++(Y..Y)) form; smaller files, same numbers

# --- acquisition parameters of the invented spectrometer (typical values, common practice)
H1_MHZ = 400.13
C13_MHZ = 100.61
H1_AXIS = (12.0, -0.5, 32768)  # ppm high, ppm low, points
C13_AXIS = (220.0, -5.0, 65536)
H1_WIDTH_HZ = 0.9  # full width at half height after mild apodisation
C13_WIDTH_HZ = 2.0  # with 1 Hz exponential line broadening
OH_WIDTH_HZ = 6.0  # exchange-broadened OH (common practice: 5-20 Hz in CDCl3)
WATER_WIDTH_HZ = 4.0
H1_NOISE = 5e-4  # noise SD in units of one proton's singlet height (of a 0.9 Hz line)
C13_NOISE = 1.2e-2  # noise SD in units of one protonated carbon's line height
DEPT_NOISE = 1.0e-2



@dataclass(frozen=True)
class Acquisition:
    """Field-dependent parameters of an invented spectrometer."""

    h1_mhz: float
    c13_mhz: float
    h1_axis: tuple
    h1_width_hz: float
    h1_noise: float
    c13_width_hz: float
    c13_noise: float
    dept_noise: float
    label: str


#: the high-field instrument of cases (a) and (b), and an invented 60 MHz benchtop
#: instrument (permanent magnet: broader lines, more noise; typical values, common practice)
ACQUISITION = {
    400: Acquisition(H1_MHZ, C13_MHZ, H1_AXIS, H1_WIDTH_HZ, H1_NOISE, C13_WIDTH_HZ, C13_NOISE, DEPT_NOISE,
                     "400 MHz"),
    60: Acquisition(60.0, 15.09, (12.0, -0.5, 16384), 1.6, 2.5e-3, 2.5, 2.0e-2, 2.0e-2, "60 MHz benchtop"),
}

# 13C lines are not quantitative under routine conditions (NOE, relaxation): the
# invented relative response per carbon by attached H count (common practice:
# quaternary carbons appear weak).
C13_RESPONSE = {0: 0.35, 1: 0.9, 2: 1.0, 3: 1.0}

# --- solvent and reference lines, CDCl3 (values: common practice)
CHCL3_1H_PPM = 7.26
WATER_1H_PPM = 1.56
CDCL3_13C_PPM = 77.16
CDCL3_JCD_HZ = 32.0  # 1:1:1 triplet of CDCl3
TMS_PPM = 0.0
# amounts relative to one molecule of product (area units = protons / carbons)
CHCL3_AREA = 0.06
WATER_AREA = 0.35
TMS_1H_AREA = 0.25
TMS_13C_HEIGHT = 0.25
CDCL3_LINE_HEIGHT = 2.6


@dataclass(frozen=True)
class Row:
    case: str
    compound: str
    smiles: str
    nucleus: str
    label: str
    atoms: str
    shift_ppm: float
    count: int
    hydrogens: int | None
    multiplicity: str
    couplings: tuple[tuple[int, float], ...]
    source: str


def read_table(path: Path = HERE / "shift_values.csv") -> list[Row]:
    """The documented shift values (comment lines start with '#')."""
    with open(path, encoding="utf-8") as fh:
        lines = [ln for ln in fh if not ln.startswith("#")]
    rows = []
    for rec in csv.DictReader(lines):
        couplings = tuple(
            (int(n), float(j))
            for n, j in (part.split("x") for part in rec["couplings_hz"].split(";") if part.strip())
        )
        rows.append(Row(
            case=rec["case"], compound=rec["compound"], smiles=rec["smiles"],
            nucleus=rec["nucleus"], label=rec["label"], atoms=rec.get("atoms", ""),
            shift_ppm=float(rec["shift_ppm"]),
            count=int(rec["count"]),
            hydrogens=int(rec["hydrogens"]) if rec["hydrogens"] else None,
            multiplicity=rec["multiplicity"] or "", couplings=couplings, source=rec["source"],
        ))
    return rows


def _axis(spec: tuple[float, float, int]) -> np.ndarray:
    return np.linspace(spec[0], spec[1], spec[2])


def _header(case, what: str) -> tuple[str, list[str]]:
    title = f"INVENTED DEMO DATA - {LAB_NAME} - batch {case.sample_id} - {what}"
    comments = [
        "Invented demo scenario: the plant, the batch and this spectrum are fictional.",
        "Simulated by specmatch sample_spectra/make_demo.py from sample_spectra/shift_values.csv",
        "(experimental nmrshiftdb2 values where available - nmrshiftdb2, Kuhn & Schlörer,",
        "Magn. Reson. Chem. 2015, 53, 582 - otherwise values marked there as estimated).",
        "Mixture: " + ", ".join(f"{smi} {frac:.0%}" for smi, frac in case.truth.items())
        + "".join(f"; trace {smi} {frac:.0%}" for smi, frac in case.impurities.items()),
        "Not for any use other than trying out the software.",
    ]
    return title, comments


def _fractions(case) -> dict[str, float]:
    """Mole fraction per SMILES in the tube (products, then trace impurities)."""
    return {**case.truth, **case.impurities}


def group_shifts(smiles: str, rows: list[Row]):
    """The compound's prediction and one shift per predicted proton group, from the table.

    Each 1H row names its group by heavy atoms (``"4;8:a"``); every non-exchangeable
    group must have exactly one row, so the simulated spin system is the predicted one.
    """
    pred = predict(smiles)
    index: dict[str, int] = {}
    seen: dict[tuple, int] = {}
    twins = {}
    for g in pred.protons:
        twins[g.atoms] = twins.get(g.atoms, 0) + 1
    for gi, g in enumerate(pred.protons):
        key = ";".join(str(a) for a in g.atoms)
        k = seen.get(g.atoms, 0)
        seen[g.atoms] = k + 1
        index[f"{key}:{'ab'[k]}" if twins[g.atoms] > 1 else key] = gi
    shifts = [g.shift for g in pred.protons]
    mapped: dict[int, Row] = {}
    for r in rows:
        if r.smiles != smiles or r.nucleus != "1H":
            continue
        if r.atoms not in index:
            raise SystemExit(f"shift_values.csv: {smiles} row '{r.label}' names group '{r.atoms}', "
                             f"the prediction has {sorted(index)}")
        gi = index[r.atoms]
        if pred.protons[gi].count != r.count:
            raise SystemExit(f"shift_values.csv: {smiles} row '{r.label}': {r.count} H, the group has "
                             f"{pred.protons[gi].count}")
        shifts[gi] = r.shift_ppm
        mapped[gi] = r
    missing = [gi for gi, g in enumerate(pred.protons) if gi not in mapped]
    if missing:
        raise SystemExit(f"shift_values.csv: {smiles} has no row for groups {missing}")
    return pred, shifts, mapped


def _h1_lines(rows: list[Row], fractions: dict[str, float], frequency_mhz: float = None,
              widths: tuple[float, float] = None):
    """Per signal: (row, positions_ppm, areas, width_hz), from the exact simulation.

    Lines are attributed to the group that moves them most (their largest shift
    derivative), which is what a chemist integrates as "that multiplet".
    """
    f = H1_MHZ if frequency_mhz is None else frequency_mhz
    width, oh_width = widths or (H1_WIDTH_HZ, OH_WIDTH_HZ)
    out = []
    for smi, frac in fractions.items():
        if not frac or not any(r.smiles == smi and r.nucleus == "1H" for r in rows):
            continue
        pred, shifts, mapped = group_shifts(smi, rows)
        lines = prediction_lines(pred, f, shifts=shifts)
        owner = lines.owner()
        for gi, r in sorted(mapped.items()):
            g = pred.protons[gi]
            if g.exchangeable:
                out.append((r, np.array([r.shift_ppm]), np.array([float(r.count)]) * frac, oh_width))
                continue
            sel = owner == gi
            if not sel.any():  # every line of this group is shared out to strongly coupled partners
                out.append((r, np.array([r.shift_ppm]), np.zeros(1), width))
                continue
            out.append((r, lines.ppm[sel], lines.intensity[sel] * frac, width))
    return out


def _area_to_height(area: np.ndarray, width_hz: float) -> np.ndarray:
    # heights such that a line of width w carries the same area as a singlet of
    # width H1_WIDTH_HZ with height = area (so "1 proton" has height 1 when sharp)
    return area * (H1_WIDTH_HZ / width_hz)


def _acq(case) -> Acquisition:
    return ACQUISITION[int(round(case.frequency_mhz)) if case.frequency_mhz < 100 else 400]


def make_h1(case, rows: list[Row], rng: np.random.Generator) -> tuple[Spectrum, list[dict]]:
    acq = _acq(case)
    f = acq.h1_mhz
    x = _axis(acq.h1_axis)
    y = np.zeros_like(x)
    oh_width = OH_WIDTH_HZ * acq.h1_width_hz / H1_WIDTH_HZ
    signals = _h1_lines(rows, _fractions(case), f, (acq.h1_width_hz, oh_width))
    for _, pos, area, width in signals:
        y += lorentzian_sum(x, pos, _area_to_height(area, width), width / f)
    extras = [  # (label, ppm, area, width_hz, flag)
        ("CHCl3 (residual solvent)", CHCL3_1H_PPM, CHCL3_AREA, acq.h1_width_hz, "solvent"),
        ("H2O", WATER_1H_PPM, WATER_AREA, WATER_WIDTH_HZ * acq.h1_width_hz / H1_WIDTH_HZ, "water"),
        ("TMS", TMS_PPM, TMS_1H_AREA, acq.h1_width_hz, "TMS"),
    ]
    for _, ppm, area, width, _ in extras:
        y += lorentzian_sum(x, np.array([ppm]), _area_to_height(np.array([area]), width), width / f)
    y += 2e-4 + 1.5e-4 * (x - 5.0) / 6.0  # slight baseline offset and tilt
    y += rng.normal(0.0, acq.h1_noise, x.size)
    title, comments = _header(case, f"1H NMR, CDCl3, {acq.label} (simulated)")
    spec = Spectrum(nucleus="1H", ppm=x, intensity=y, frequency_mhz=f, solvent="CDCl3",
                    source=f"{case.h1.name} (JCAMP-DX)", experiment="1D",
                    meta={"title": title, "comments": comments, "origin": LAB_NAME,
                          "owner": "specmatch demo (invented)"})
    return spec, _h1_peaklist(signals, extras, f)


def _h1_peaklist(signals, extras, f: float = H1_MHZ) -> list[dict]:
    """What a chemist would report: resolved multiplets, overlapping ones merged."""
    items = []
    for r, pos, area, width in signals:
        half = 2.0 * width / f
        # extent of the visible lines (second-order spectra have faint lines far out)
        vis = pos[area >= 0.02 * area.max()] if area.max() > 0 else pos
        items.append({"lo": float(vis.min()) - half, "hi": float(vis.max()) + half,
                      "area": float(area.sum()), "centre": r.shift_ppm,
                      "mult": r.multiplicity, "j": sorted({j for _, j in r.couplings}, reverse=True),
                      "flag": None})
    for label, ppm, area, width, flag in extras:
        half = 2.0 * width / f
        items.append({"lo": ppm - half, "hi": ppm + half, "area": area, "centre": ppm,
                      "mult": "br s" if flag == "water" else "s", "j": [], "flag": flag})
    items.sort(key=lambda d: d["lo"])
    merged: list[list[dict]] = []
    for it in items:
        if merged and it["lo"] <= max(m["hi"] for m in merged[-1]) and it["flag"] is None \
                and all(m["flag"] is None for m in merged[-1]):
            merged[-1].append(it)
        else:
            merged.append([it])
    out = []
    for grp in merged:
        area = sum(g["area"] for g in grp)
        if area < 0.02:  # too weak to report (trace substrate multiplets)
            continue
        single = len(grp) == 1
        centre = sum(g["centre"] * g["area"] for g in grp) / area
        out.append({
            "shift_ppm": round(centre, 3),
            "from_ppm": round(max(g["hi"] for g in grp), 3),
            "to_ppm": round(min(g["lo"] for g in grp), 3),
            "integral": area,
            "multiplicity": grp[0]["mult"] if single else "m",
            "j_hz": ";".join(f"{j:.1f}" for j in grp[0]["j"]) if single and grp[0]["mult"] != "m" else "",
            "flag": grp[0]["flag"] or "",
        })
    # integrals as a chemist normalises them: compound signals sum to one molecule's H count
    n_h = max(sum(r.count for r in (s[0] for s in signals) if r.smiles == smi)
              for smi in {s[0].smiles for s in signals})
    total = sum(p["integral"] for p in out if not p["flag"])
    for p in out:
        p["integral"] = round(p["integral"] * n_h / total, 2)
    return sorted(out, key=lambda p: -p["shift_ppm"])


def _c13_lines(case, rows: list[Row], dept: bool):
    """(row, shift, height) of every compound carbon line."""
    out = []
    for smi, frac in _fractions(case).items():
        for r in rows:
            if r.smiles != smi or r.nucleus != "13C":
                continue
            if dept:
                if r.hydrogens == 0:
                    continue
                sign = -1.0 if r.hydrogens == 2 else 1.0
                out.append((r, r.shift_ppm, sign * r.count * frac))
            else:
                out.append((r, r.shift_ppm, C13_RESPONSE[r.hydrogens or 0] * r.count * frac))
    return out


def make_c13(case, rows: list[Row], rng: np.random.Generator, dept: bool = False) -> tuple[Spectrum, list[dict]]:
    acq = _acq(case)
    x = _axis(C13_AXIS)
    lines = _c13_lines(case, rows, dept)
    centres = [s for _, s, _ in lines]
    heights = [h for _, _, h in lines]
    flags = [None] * len(lines)
    if not dept:  # CDCl3 carries no H: absent from DEPT-135
        d = CDCL3_JCD_HZ / acq.c13_mhz
        centres += [CDCL3_13C_PPM + d, CDCL3_13C_PPM, CDCL3_13C_PPM - d]
        heights += [CDCL3_LINE_HEIGHT] * 3
        flags += ["solvent"] * 3
    centres.append(TMS_PPM)
    heights.append(TMS_13C_HEIGHT)
    flags.append("TMS")
    y = lorentzian_sum(x, np.array(centres), np.array(heights), acq.c13_width_hz / acq.c13_mhz)
    y += rng.normal(0.0, acq.dept_noise if dept else acq.c13_noise, x.size)
    mhz = f"{acq.c13_mhz:.1f} MHz"
    what = f"DEPT-135, CDCl3, {mhz} (simulated)" if dept else f"13C{{1H}} NMR, CDCl3, {mhz} (simulated)"
    title, comments = _header(case, what)
    path = case.dept135 if dept else case.c13
    spec = Spectrum(nucleus="13C", ppm=x, intensity=y, frequency_mhz=acq.c13_mhz, solvent="CDCl3",
                    source=f"{path.name} (JCAMP-DX)", experiment="DEPT-135" if dept else "1D",
                    meta={"title": title, "comments": comments, "origin": LAB_NAME,
                          "owner": "specmatch demo (invented)"})
    # peak list: lines a picker would see (height above 5x noise), DEPT H count where known
    peaks = []
    noise = acq.c13_noise
    for (r, s, h) in lines:
        if abs(h) < 5 * noise:
            continue
        peaks.append({"shift_ppm": s, "intensity": round(h, 3), "hydrogens": r.hydrogens, "flag": ""})
    for s, h, f in zip(centres[len(lines):], heights[len(lines):], flags[len(lines):]):
        peaks.append({"shift_ppm": round(s, 2), "intensity": round(h, 3), "hydrogens": "", "flag": f})
    # equal shifts of two compounds appear as one line
    uniq: dict[float, dict] = {}
    for p in peaks:
        key = round(float(p["shift_ppm"]), 1)
        if key in uniq and not p["flag"]:
            uniq[key]["intensity"] = round(uniq[key]["intensity"] + p["intensity"], 3)
        else:
            uniq[key] = p
    return spec, sorted(uniq.values(), key=lambda p: -float(p["shift_ppm"]))


def _write_csv(path: Path, case, what: str, fieldnames: list[str], rows: list[dict]) -> None:
    title, comments = _header(case, what)
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(f"# {title}\n")
        for c in comments:
            fh.write(f"# {c}\n")
        w = csv.DictWriter(fh, fieldnames=fieldnames, lineterminator="\n")
        w.writeheader()
        for r in rows:
            w.writerow({k: r.get(k, "") for k in fieldnames})


def write_manifest(cases, path: Path = HERE / "manifest.csv") -> None:
    """Batch manifest: one row per sample, paths relative to this folder."""
    fields = ["sample_id", "substrate", "reagent", "c13", "h1", "dept135", "solvent", "alcohol", "candidates"]
    with open(path, "w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=fields, lineterminator="\n")
        w.writeheader()
        for c in cases:
            base = {"substrate": c.substrate, "reagent": c.reagent, "solvent": c.solvent,
                    "alcohol": c.alcohol or "", "candidates": ""}
            w.writerow({**base, "sample_id": c.sample_id, "c13": c.c13.name, "h1": c.h1.name,
                        "dept135": c.dept135.name})
            w.writerow({**base, "sample_id": f"{c.sample_id}-peaklists", "c13": c.c13_csv.name,
                        "h1": c.h1_csv.name, "dept135": ""})


def _relocate(case, out: Path):
    """The case with its file paths moved into ``out`` (same file names)."""
    import dataclasses

    moved = {f: out / getattr(case, f).name for f in ("c13", "h1", "dept135", "c13_csv", "h1_csv")}
    return dataclasses.replace(case, **moved)


def main(argv: list[str] | None = None) -> int:
    import argparse

    ap = argparse.ArgumentParser(description="Regenerate the invented demo spectra (deterministic).")
    ap.add_argument("--out", type=Path, default=HERE,
                    help="folder to write into (default: this folder, overwriting the committed files)")
    ap.add_argument("--check", action="store_true",
                    help="do not write; run the identification on the committed files and print "
                         "verdict and ratio against what the generator put in the tube")
    args = ap.parse_args(argv)
    if args.check:
        return check()
    out = args.out.resolve()
    out.mkdir(parents=True, exist_ok=True)
    rows = read_table()
    cases = [_relocate(c, out) for c in demo_cases()]
    for i, case in enumerate(cases):
        rng = np.random.default_rng(SEED + i)
        case_rows = [r for r in rows if r.case == case.key]
        h1, h1_peaks = make_h1(case, case_rows, rng)
        c13, c13_peaks = make_c13(case, case_rows, rng)
        dept, _ = make_c13(case, case_rows, rng, dept=True)
        for spec, path in ((h1, case.h1), (c13, case.c13), (dept, case.dept135)):
            # JCAMP-DX files are ASCII: the attribution's umlaut is transliterated there
            comments = [c.replace("ö", "oe") for c in spec.meta["comments"]]
            write_jcampdx(spec, path, form=JCAMP_FORM, title=spec.meta["title"], comments=comments)
        acq = _acq(case)
        _write_csv(case.h1_csv, case, f"1H peak list (multiplets), CDCl3, {acq.label} (simulated)",
                   ["shift_ppm", "from_ppm", "to_ppm", "integral", "multiplicity", "j_hz", "flag"], h1_peaks)
        _write_csv(case.c13_csv, case,
                   f"13C peak list with DEPT-135 H counts, CDCl3, {acq.c13_mhz:.1f} MHz (simulated)",
                   ["shift_ppm", "intensity", "hydrogens", "flag"], c13_peaks)
        for p in (case.h1, case.c13, case.dept135, case.h1_csv, case.c13_csv):
            print(f"wrote {p} ({p.stat().st_size / 1024:.0f} KiB)")
    write_manifest(cases, out / "manifest.csv")
    print(f"wrote {out / 'manifest.csv'}")
    return 0


def check() -> int:
    """Print, per case, the inputs, the verdict and the ratio next to the truth (and the time)."""
    import time

    from specmatch.identification import identify
    from specmatch.spectra import peaks_from_file
    from specmatch.structures import canonical_smiles

    ok = True
    for case in demo_cases():
        t0 = time.perf_counter()
        lists = {role: peaks_from_file(path, nucleus="1H" if role == "h1" else "13C", solvent=case.solvent,
                                       dept135=role == "dept135") for role, path in case.files.items()}
        result = identify(substrate=case.substrate, reagent=case.reagent, solvent=case.solvent,
                          mixture=True, **lists)
        seconds = time.perf_counter() - t0
        top = result.verdict.top
        right = top == canonical_smiles(case.rearranged)
        ok &= right
        mix = result.mixture
        got = ", ".join(f"{s} {f:.1%}" for s, f in zip(mix.candidates, mix.fractions) if f >= 0.005) if mix else "-"
        print(f"case ({case.key}) {case.substrate} + {case.reagent}; files {', '.join(p.name for p in case.files.values())}")
        print(f"  truth:   {', '.join(f'{s} {f:.0%}' for s, f in case.truth.items())} (rearranged {case.rearranged})")
        print(f"  verdict: {result.verdict.text}  [{'rearranged first' if right else 'WRONG'}]")
        print(f"  ratio:   {got}  ({seconds:.1f} s, peak lists read from the JCAMP-DX files)")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
