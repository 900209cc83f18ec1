"""Benchmark: product ratios of 1H mixtures of real isomer pairs.

Default (peak lists): pairs of constitutional isomers (same formula and
functional classes, at most PAIRS_PER_FORMULA per formula) that both have a
complete experimental 1H list in the shared nmrshiftdb2 development part
(nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582); figures per
half of the major component's InChIKey connectivity block (nothing here is
fitted on either half; MODEL_SD_FLOOR was set by hand). For every pair and every true major
fraction in 0.95, 0.90, 0.80, 0.70, 0.60, 0.50 a 1H peak list is built from the
EXPERIMENTAL shifts: one multiplet per set of equivalent protons (+-0.015 ppm),
integral = fraction x protons, multiplets of the two compounds closer than
0.03 ppm merged into one (what a 400 MHz spectrum would integrate together),
OH lines left in. The ratio is estimated from the candidates' PREDICTED
spectra (``estimate_mixture(peaklist=...)``).

Figures printed per half (fit / held-back): share within 3 percentage points
(target >= 80%), mean |error|, coverage of the reported 95% interval (target
85-100%) and of +-1 sd, and failed tasks (target none); also for the core scope and for
the pairs whose records list every proton (a record may list a CH2 as one proton).

``--spectra``: the older synthetic full-spectrum benchmark (six curated pairs in
tests/data/mixture_isomer_pairs.json, simulated 400 MHz spectra from
experimental shifts, fitted with the predicted spectra).

usage: python benchmarks/bench_mixture.py [--limit N] [--half fit|held_back] [--dump FILE] [--reversed] [--spectra [--seeds N] [--snr S] [--quick]]
"""

from __future__ import annotations

import argparse
import json
import os
import time
from pathlib import Path

# one BLAS thread: the fit multiplies tall, thin matrices, for which threading only
# adds overhead (and on a shared machine far more); must be set before numpy loads
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")

import numpy as np  # noqa: E402

DATA = Path(__file__).resolve().parents[1] / "tests" / "data" / "mixture_isomer_pairs.json"
RATIOS = (0.95, 0.90, 0.80, 0.70, 0.60, 0.50)


#: the CDCl3 lines masked by the fit (ppm, +- half width): a multiplet under them is not "clear"
MASKED = ((7.26, 0.02), (1.56, 0.03), (0.0, 0.02))


def _resolved(groups_a, groups_b, frequency_mhz: float = 400.0, margin_hz: float = 3.0) -> bool:
    """Each side has a multiplet clear of every multiplet of the other side and of the masks."""
    from specmatch.prediction.simulate import sticks_1h

    def spans(gs):
        out = []
        for g in gs:
            pos, _ = sticks_1h(g, frequency_mhz)
            out.append((pos.min() - margin_hz / frequency_mhz, pos.max() + margin_hz / frequency_mhz))
        return out

    sa, sb = spans(groups_a), spans(groups_b)
    masks = [(c - h, c + h) for c, h in MASKED]

    def clear(mine, other):
        return any(all(hi < lo2 or lo > hi2 for lo2, hi2 in other) for lo, hi in mine)

    return clear(sa, sb + masks) and clear(sb, sa + masks)


#: peak-list tasks: multiplet half-width and merge distance (ppm), common practice at 400 MHz
HALF_WIDTH_PPM = 0.015
MERGE_PPM = 0.03


#: at most this many pairs per molecular formula (so a few large isomer families do not dominate)
PAIRS_PER_FORMULA = 3


def peaklist_tasks(limit: int = 0) -> tuple[list[dict], Path]:
    """Per isomer pair (same formula and classes, both with a complete experimental 1H
    list, same half by connectivity block) and true major fraction: the merged multiplets."""
    import sys

    root = Path(__file__).resolve().parents[1]
    sys.path.insert(0, str(root / "benchmarks"))
    from fit_error_model import SHARED, block_held_back, formula_mates, record_index

    sys.path.insert(0, str(SHARED / "tools"))
    dev = SHARED / "reference" / "nmrshiftdb2_dev.jsonl"
    index = record_index(dev)
    # every class (the saturated in-scope pairs alone are too few), both halves
    mates = formula_mates(index, scope=None, same_half=False)
    per_formula: dict[str, int] = {}
    pairs = []
    for a in sorted(mates):
        for b in mates[a]:
            f = index[a]["formula"]
            if b <= a or per_formula.get(f, 0) >= PAIRS_PER_FORMULA:
                continue
            per_formula[f] = per_formula.get(f, 0) + 1
            pairs.append((a, b, "held_back" if block_held_back(index[a]["block"]) else "fit"))
    # a record may list one proton fewer than the molecule has (record_index allows it, for
    # an unreported OH); when the missing one is a C-H of a CH2/CH3 or of a symmetric pair the
    # listed integrals are not those of the compound: such tasks are also counted apart
    from rdkit import Chem

    every_h = {}
    for a, b, _ in pairs:
        for smi in (a, b):
            mol = Chem.MolFromSmiles(smi)
            every_h[smi] = sum(m["integral"] for m in index[smi]["h1"]) >= sum(at.GetTotalNumHs() for at in mol.GetAtoms())
    out = []
    for a, b, half in pairs[: limit or None]:
        for fa in RATIOS:
            rows = sorted([(m["shift"], m["integral"] * fa) for m in index[a]["h1"]]
                          + [(m["shift"], m["integral"] * (1 - fa)) for m in index[b]["h1"]])
            merged: list[list[float]] = []
            for sh, i in rows:
                if merged and sh - merged[-1][1] <= MERGE_PPM:
                    merged[-1][1] = sh
                    merged[-1][2] += i
                else:
                    merged.append([sh, sh, i])
            core = not ({"aromatic", "carbonyl"} & set(index[a]["classes"]))
            out.append({"a": a, "b": b, "fa": fa, "half": half, "multiplets": merged, "core": core,
                        "every_h": every_h[a] and every_h[b]})
    return out, dev


def main_peaklists(limit: int, half: str | None = None, dump: str | None = None, reverse: bool = False) -> None:
    from specmatch.errors import SpecmatchError
    from specmatch.identification.mixture import estimate_mixture
    from specmatch.prediction import predict
    from specmatch.spectra.types import Multiplet, PeakList

    tasks, dev = peaklist_tasks(limit)
    if half:
        tasks = [t for t in tasks if t["half"] == half]
    print(f"inputs: {dev}; {len({(t['a'], t['b']) for t in tasks})} isomer pairs with experimental 1H, "
          f"true major fractions {', '.join(f'{r:.2f}' for r in RATIOS)}; multiplets +-{HALF_WIDTH_PPM} ppm, "
          f"merged within {MERGE_PPM} ppm; candidates given {'minor first' if reverse else 'major first'}")
    print(f"predictor: {predict('CCO').tables_version}")
    rows = []
    t0 = time.time()
    for t in tasks:
        mults = tuple(Multiplet((lo + hi) / 2, (lo - HALF_WIDTH_PPM, hi + HALF_WIDTH_PPM), i, "m")
                      for lo, hi, i in t["multiplets"])
        pl = PeakList("1H", (), mults, frequency_mhz=400.0, solvent="CDCl3", source="bench peak list")
        # the major compound is listed first unless --reversed (the estimate must not care)
        j = 1 if reverse else 0
        try:
            est = estimate_mixture([t["b"], t["a"]] if reverse else [t["a"], t["b"]], peaklist=pl, solvent="CDCl3")
        except SpecmatchError as exc:
            rows.append({**t, "error": str(exc)})
            continue
        lo, hi = est.interval_95[j]
        rows.append({**t, "est": est.fractions[j], "sd": est.uncertainties[j], "lo": lo, "hi": hi, "error": None})
    groups = ([(h, None) for h in ("fit", "held_back", None)] + [(h, True) for h in ("fit", "held_back", None)]
              + [(h, "every_h") for h in ("fit", "held_back", None)])
    for half, core in groups:
        if core is True and half == "fit":
            print("core scope (no aromatic ring, no carbonyl, as specbench's core):")
        if core == "every_h" and half == "fit":
            print("pairs whose two records list every proton (no integral short by one H):")
        sel = [r for r in rows if (half is None or r["half"] == half)
               and (core is None or (r["core"] if core is True else r["every_h"]))]
        ok = [r for r in sel if r["error"] is None]
        if not sel:
            continue
        err = np.array([abs(r["est"] - r["fa"]) for r in ok]) * 100
        cov95 = np.mean([r["lo"] - 1e-9 <= r["fa"] <= r["hi"] + 1e-9 for r in ok]) if ok else float("nan")
        cov68 = np.mean([abs(r["est"] - r["fa"]) <= r["sd"] for r in ok]) if ok else float("nan")
        print(f"{half or 'all':<10} tasks {len(sel):4d}: within 3 pp {100 * np.mean(err <= 3.0):.1f}% (target >= 80%), "
              f"mean |error| {err.mean():.2f} pp, 95% interval covers {100 * cov95:.0f}% (target 85-100%), "
              f"1 sd covers {100 * cov68:.0f}%, failed {len(sel) - len(ok)}")
    worst = sorted((r for r in rows if r["error"] is None), key=lambda r: -abs(r["est"] - r["fa"]))[:5]
    print("largest errors:")
    for r in worst:
        print(f"   {r['a']} / {r['b']} true {r['fa']:.2f} est {r['est']:.3f} [{r['lo']:.3f}, {r['hi']:.3f}] ({r['half']})")
    for r in rows:
        if r["error"]:
            print(f"   FAILED {r['a']} / {r['b']} {r['fa']:.2f}: {r['error']}")
    print(f"time: {time.time() - t0:.0f} s for {len(rows)} estimates")
    if dump:
        Path(dump).write_text("\n".join(json.dumps(r) for r in rows) + "\n", encoding="utf-8")
        print(f"per-task rows written to {dump}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--limit", type=int, default=0, help="peak lists: at most this many isomer pairs")
    ap.add_argument("--half", choices=("fit", "held_back"), default=None,
                    help="peak lists: only this half (develop on 'fit'; the held-back half is the honest figure)")
    ap.add_argument("--dump", default=None, help="peak lists: write one JSON line per task to this file")
    ap.add_argument("--reversed", action="store_true",
                    help="peak lists: give the candidates minor first (the figures must not depend on the order)")
    ap.add_argument("--spectra", action="store_true", help="the synthetic full-spectrum benchmark instead")
    ap.add_argument("--seeds", type=int, default=2, help="noise/J draws per pair and ratio (default 2)")
    ap.add_argument("--snr", type=float, default=500.0, help="tallest compound line / noise sd (default 500)")
    ap.add_argument("--quick", action="store_true", help="ratios 0.9 and 0.6 only, one seed")
    args = ap.parse_args()
    if not args.spectra:
        main_peaklists(args.limit, args.half, args.dump, args.reversed)
        return

    from specmatch.identification.mixture import estimate_mixture
    import sys

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from mixture_synth import experimental_groups, synthetic_spectrum  # test helper, not production code
    from specmatch.prediction import predict
    from specmatch.spectra.types import PeakList

    data = json.loads(DATA.read_text(encoding="utf-8"))
    recs = {r["nmrshiftdb2_id"]: r for r in data["records"]}
    ratios = (0.90, 0.60) if args.quick else RATIOS
    seeds = 1 if args.quick else args.seeds
    print(f"data: {DATA.name} ({data['source']})")
    print(f"pairs: {len(data['pairs'])}; true major fractions: {', '.join(f'{r:.2f}' for r in ratios)} "
          f"and 1.00 (pure); seeds per case: {seeds}; SNR {args.snr:.0f}; 400 MHz; line width 1.0 Hz")
    print(f"predictor: {predict('CCO').tables_version}; OPENBLAS_NUM_THREADS={os.environ['OPENBLAS_NUM_THREADS']}")
    print()
    rows = []
    t0 = time.time()
    for pair in data["pairs"]:
        a, b = recs[pair["major"]], recs[pair["minor"]]
        for ratio in (*ratios, 1.0):
            for seed in range(seeds if ratio < 1.0 else 1):
                rng = np.random.default_rng(1000 * pair["major"] % 9973 + 17 * seed + int(100 * ratio))
                ga, oha = experimental_groups(a, rng=rng)
                gb, ohb = experimental_groups(b, rng=rng)
                sp = synthetic_spectrum(
                    [ga, gb], [ratio, 1.0 - ratio], oh_shifts_ppm=[oha, ohb],
                    oh_per_molecule=[1 if "O" in a["smiles"] else 0, 1 if "O" in b["smiles"] else 0],
                    snr=args.snr, rng=rng)
                # an empty peak list: solvent, water and TMS lines come from the solvent table
                t = time.time()
                est = estimate_mixture([a["smiles"], b["smiles"]], spectrum=sp,
                                       peaklist=PeakList("1H", (), frequency_mhz=400.0, solvent="CDCl3"),
                                       solvent="CDCl3", names=[a["name"], b["name"]])
                dt = time.time() - t
                f, sd = est.fractions[0], est.uncertainties[0]
                lo, hi = est.interval_95[0]
                ir = est.integral_ratio.fractions[0] if est.integral_ratio else float("nan")
                rows.append(dict(pair=pair["reaction"], names=f"{a['name']} / {b['name']}", ratio=ratio,
                                 est=f, sd=sd, lo=lo, hi=hi, lo_b=est.interval_95[1][0], integral=ir,
                                 disagree=est.disagreement, resolved=_resolved(ga, gb), seconds=dt))
    print(f"{'pair':<44}{'res':>4}{'true':>7}{'est':>8}{'sd':>7}{'err pp':>8}{'in95':>6}{'integral':>10}")
    for r in rows:
        err = 100 * (r["est"] - r["ratio"])
        inside = r["lo"] <= r["ratio"] <= r["hi"]
        print(f"{r['names'][:43]:<44}{'y' if r['resolved'] else 'n':>4}{r['ratio']:>7.2f}{r['est']:>8.3f}"
              f"{100 * r['sd']:>6.1f}%{err:>+8.1f}{'y' if inside else 'NO':>6}{r['integral']:>10.3f}"
              f"{'  disagree' if r['disagree'] else ''}")
    print()
    mixed = [r for r in rows if r["ratio"] < 1.0]
    pure = [r for r in rows if r["ratio"] == 1.0]
    for label, sel in (("well-resolved pairs", [r for r in mixed if r["resolved"]]),
                       ("overlapped pairs", [r for r in mixed if not r["resolved"]]),
                       ("all pairs", mixed)):
        if not sel:
            continue
        err = np.array([abs(r["est"] - r["ratio"]) for r in sel]) * 100
        cov95 = np.mean([r["lo"] <= r["ratio"] <= r["hi"] for r in sel])
        cov68 = np.mean([abs(r["est"] - r["ratio"]) <= r["sd"] for r in sel])
        within3 = np.mean(err <= 3.0)
        print(f"{label:<22} n={len(sel):<3} |error| mean {err.mean():.2f} pp, max {err.max():.2f} pp, "
              f"within 3 pp: {100 * within3:.1f}%;  coverage 95%-interval {100 * cov95:.0f}%, 1-sd {100 * cov68:.0f}%")
    if pure:
        worst = min(r["est"] for r in pure)
        absent_ok = np.mean([r["lo_b"] <= 0.0 + 1e-12 for r in pure])
        print(f"{'pure samples':<22} n={len(pure):<3} lowest major estimate {100 * worst:.1f}% (target > 97%); "
              f"absent candidate's 95% interval reaches 0 in {100 * absent_ok:.0f}% of cases")
    ints = [r for r in mixed if np.isfinite(r["integral"])]
    if ints:
        d = np.array([abs(r["integral"] - r["ratio"]) for r in ints]) * 100
        print(f"{'integral ratio':<22} n={len(ints):<3} |error| mean {d.mean():.2f} pp, max {d.max():.2f} pp; "
              f"flagged as disagreeing with the fit: {sum(r['disagree'] for r in rows)} of {len(rows)}")
    print(f"\ntime per estimate: mean {np.mean([r['seconds'] for r in rows]):.1f} s; total {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
