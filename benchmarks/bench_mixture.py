"""Benchmark: product ratios from synthetic crude 1H spectra of real isomer pairs.

Inputs: ``tests/data/mixture_isomer_pairs.json`` - experimental 1H shifts of six
positional-isomer pairs (products of HX addition and acid-catalysed hydration)
from nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582). For every
pair and every true major fraction a synthetic 400 MHz CDCl3 spectrum is built
from the EXPERIMENTAL shifts (first-order multiplets, vicinal J drawn uniformly
in 6.5-7.5 Hz, 1.0 Hz lines, white noise, baseline, CHCl3 7.26, water 1.56,
TMS 0.00, one exchange-averaged OH line); the fit uses the PREDICTED spectra of
the candidates (``specmatch.prediction.predict``), so the refinement has to
absorb the prediction error.

Figures printed:
* |estimated - true| fraction (percentage points), per pair and over the
  well-resolved pairs (every candidate has a multiplet that overlaps no multiplet
  of the other at the experimental shifts); target: <= 3 pp;
* coverage: share of cases whose reported 95% interval contains the truth
  (target ~95%), and of the +-1 sd interval (~68%);
* pure samples (major fraction 1.0): major estimate (target > 97%) and whether
  the absent candidate's fraction is within its 95% interval of zero;
* agreement of the classical integral ratio.

usage: python benchmarks/bench_mixture.py [--seeds N] [--snr S] [--quick]
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


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--seeds", type=int, default=2, help="noise/J draws per pair and ratio (default 2)")
    ap.add_argument("--snr", type=float, default=500.0, help="tallest compound line / noise sd (default 500)")
    ap.add_argument("--quick", action="store_true", help="ratios 0.9 and 0.6 only, one seed")
    args = ap.parse_args()

    from specmatch.identification.mixture import estimate_mixture
    from specmatch.identification.mixture.synth import experimental_groups, synthetic_spectrum
    from specmatch.prediction import predict
    from specmatch.spectra.model import PeakList

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
              f"within 3 pp: {100 * within3:.0f}%;  coverage 95%-interval {100 * cov95:.0f}%, 1-sd {100 * cov68:.0f}%")
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
