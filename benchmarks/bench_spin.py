#!/usr/bin/env python3
"""Time of the exact 1H simulation (coupling network + spin simulation) per molecule.

Prints, per molecule and field, the number of proton spins, of lines, and the best
of ``--repeat`` wall-clock times after one warm-up (the first call pays for imports
and basis caches). Targets: a 12-spin molecule under 1 s, a typical candidate
(<= 20 protons) under 100 ms.

    python benchmarks/bench_spin.py [--repeat 3] [--fields 60,400]
    python benchmarks/bench_spin.py --demo-fit a   # whole-spectrum fit of a demo 1H file

``--demo-fit KEY`` fits the demo case's 1H JCAMP-DX file with every compound the
generator put in the tube (products and trace substrate) as candidates through
``estimate_mixture`` (the exact second-order whole-spectrum fit) and prints the reduced
chi-square over the signal points, the fractions with their sd next to the truth, the
integral ratio and the time; ``--first-order`` adds the first-order fit for comparison.
``--from-table`` instead polishes the exact fit from the shifts the demo spectrum was made
with (``sample_spectra/shift_values.csv``), with no search: what the model reaches when the
search has found the right places (the rest of the gap is the search's). ``--perturb K:I:PPM``
(with ``--from-table``) moves group I of candidate K (0-based, the prediction's group order)
PPM off its table shift first and fits twice: polish only, then with the residual-guided
relocation (``fit_spectrum(..., relocate=True)``): whether the fit finds its way back.

    python benchmarks/bench_spin.py --demo-fit b --from-table --perturb 1:3:0.25

``--h1-sigma-scale S`` (with ``--demo-fit``) sets the 1H code table's sigma scale to S for
this run only (the prediction sigmas set the search bounds and priors): how robust the
search is to a table change that moves sigmas but not the spectrum.

    python benchmarks/bench_spin.py --demo-fit b --h1-sigma-scale 0.90
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # small matrices: threads only cost on a shared machine
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from specmatch.prediction import predict  # noqa: E402
from specmatch.prediction.couplings import coupling_network  # noqa: E402
from specmatch.prediction.spin import simulate_spins  # noqa: E402

MOLECULES = [
    ("CCC(C)(Br)CC", "3-bromo-3-methylpentane"),
    ("CC(Br)C(C)CC", "2-bromo-3-methylpentane"),
    ("CCCCCC", "hexane (14 H)"), ("CCCCBr", "1-bromobutane (9 H)"), ("CCC(C)CC", "3-methylpentane (14 H)"),
    ("CC(C)CCBr", "1-bromo-3-methylbutane (11 H)"),
    ("CCCC(C)Br", "2-bromopentane (11 H)"),
    ("CCCCO", "butan-1-ol"),
    ("OCCCCCC", "hexan-1-ol (13 H on C)"),
    ("CC(O)C1CCCCC1", "1-cyclohexylethan-1-ol"),
    ("CCC1(O)CCCCC1", "1-ethylcyclohexan-1-ol"),
    ("C=CC1CCCCC1", "vinylcyclohexane"),
    ("CC(C)(C)c1ccccc1", "tert-butylbenzene"),
    ("Cc1ccc(Cl)cc1", "4-chlorotoluene"),
    ("CCOC(=O)CC(C)C", "ethyl isovalerate"),
    ("CC(C)CC(C)(C)O", "2,4-dimethylpentan-2-ol"),
]


def demo_fit(key: str, first_order: bool = False) -> int:
    import numpy as np

    from specmatch.demo import demo_case
    from specmatch.identification.mixture.estimate import estimate_mixture
    from specmatch.identification.mixture.spectrum_fit import fit_spectrum
    from specmatch.spectra import read_jcampdx

    case = demo_case(key)
    spec = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    truth = {**case.truth, **case.impurities}
    cands = list(truth)
    tot = sum(truth.values())
    print(f"inputs: {case.h1.name} ({spec.frequency_mhz} MHz), candidates {cands}, "
          f"truth {[round(truth[c] / tot, 4) for c in cands]}; estimate_mixture (solvent CDCl3: "
          f"TMS, CHCl3, water masked, free lines beside them)")
    t0, c0 = time.perf_counter(), time.process_time()
    est = estimate_mixture(cands, spectrum=spec, solvent="CDCl3")
    fit = est.fit
    print(f"fit: reduced chi-square {fit.chi2_red:.2f} (inflation x{fit.inflation:.2f}), "
          f"fractions {np.round(est.fractions, 4)} +- {np.round(est.uncertainties, 4)}, "
          f"width {fit.width_hz:.2f} Hz, {time.perf_counter() - t0:.0f} s wall, {time.process_time() - c0:.0f} s CPU")
    print(f"  ratio {est.ratio_text}; {fit.notes[-1] if fit.notes else 'first-order fit'}")
    if est.integral_ratio is not None:
        ir = est.integral_ratio
        print(f"  integral ratio {np.round(ir.fractions, 4)} +- {np.round(ir.uncertainties, 4)} ({ir.ratio_text}); "
              f"fit - integral = {np.round(np.array(est.fractions) - np.array(ir.fractions), 4)}, "
              f"disagreement flagged: {est.disagreement}")
    for w in est.warnings:
        print(f"  warning: {w}")
    if first_order:
        preds = [predict(s) for s in cands]
        t0 = time.perf_counter()
        fo = fit_spectrum(spec.ppm, spec.intensity, [p.protons for p in preds], frequency_mhz=spec.frequency_mhz,
                          masks_ppm=[(-0.03, 0.03), (7.23, 7.29), (1.545, 1.575)],
                          extra_lines_ppm=[("water", 1.56), ("TMS", 0.0)])
        print(f"first order only: reduced chi-square {fo.chi2_red:.2f}, fractions {np.round(fo.fractions, 4)} "
              f"+- {np.round(fo.fractions_sd, 4)}, {time.perf_counter() - t0:.0f} s")
    return 0


def demo_fit_from_table(key: str, perturb: str | None = None) -> int:
    import numpy as np

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "sample_spectra"))
    import make_demo

    from specmatch.demo import demo_case
    from specmatch.identification.mixture.estimate import _masks, _prepare_candidates, _try_process
    from specmatch.identification.mixture.spectrum_fit import fit_spectrum
    from specmatch.spectra import read_jcampdx

    case = demo_case(key)
    spec = read_jcampdx(case.h1.read_bytes(), source=case.h1.name)
    truth = {**case.truth, **case.impurities}
    cands = list(truth)
    tot = sum(truth.values())
    rows = make_demo.read_table()
    start = [list(make_demo.group_shifts(smi, rows)[1]) for smi in cands]
    runs = [False]
    if perturb:
        try:
            k, i, d = perturb.split(":")
            start[int(k)][int(i)] += float(d)
        except (ValueError, IndexError):
            print(f"--perturb {perturb}: expected K:I:PPM with K < {len(cands)} and I a group of candidate K")
            return 2
        runs = [False, True]
        print(f"perturbed: candidate {k} group {i} moved {float(d):+g} ppm off its table shift")
    print(f"inputs: {case.h1.name} ({spec.frequency_mhz} MHz), candidates {cands}, "
          f"truth {[round(truth[c] / tot, 4) for c in cands]}; exact fit polished from the shift table's "
          f"values (no search), masks as estimate_mixture (solvent CDCl3)")
    cs = _prepare_candidates(cands, None)
    warnings: list[str] = []
    masks, names, lines = _masks(_try_process(spec, "CDCl3", warnings), "CDCl3", warnings, cs)
    for relocate in runs:
        t0, c0 = time.perf_counter(), time.process_time()
        fit = fit_spectrum(spec.ppm, spec.intensity, [c.groups for c in cs], frequency_mhz=spec.frequency_mhz,
                           masks_ppm=masks, extra_lines_ppm=lines, predictions=[c.pred for c in cs],
                           start_shifts=start, relocate=relocate)
        err = [abs(fit.shifts_ppm[j] - start[g.component][g.index]) for j, g in enumerate(fit.groups)]
        print(f"from the table{' with relocation' if relocate else ''}: reduced chi-square {fit.chi2_red:.2f}, "
              f"fractions {np.round(fit.fractions, 4)} +- {np.round(fit.fractions_sd, 4)}, largest shift move "
              f"{max(err):.4f} ppm, masked {names}, {time.perf_counter() - t0:.0f} s wall, "
              f"{time.process_time() - c0:.1f} s CPU")
    return 0


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--fields", default="60,400")
    ap.add_argument("--demo-fit", metavar="KEY", help="fit a demo case's 1H spectrum instead (a, b or c)")
    ap.add_argument("--first-order", action="store_true", help="with --demo-fit: also the first-order fit alone")
    ap.add_argument("--from-table", action="store_true",
                    help="with --demo-fit: polish from the demo's table shifts instead of searching")
    ap.add_argument("--perturb", metavar="K:I:PPM",
                    help="with --from-table: move group I of candidate K PPM off first, then fit with and "
                         "without the residual-guided relocation")
    ap.add_argument("--h1-sigma-scale", type=float, metavar="S",
                    help="with --demo-fit: the 1H code table's sigma scale for this run (robustness of the search)")
    args = ap.parse_args(argv)
    if args.h1_sigma_scale is not None:
        from specmatch.prediction.hose import load_table

        table = load_table("1H")
        if table is None or not args.h1_sigma_scale > 0:
            print("--h1-sigma-scale: needs the 1H code table and a positive scale")
            return 2
        print(f"1H code table sigma scale {table.sigma_scale:g} -> {args.h1_sigma_scale:g} (this run only)")
        table.sigma_scale = args.h1_sigma_scale
    if args.demo_fit and args.from_table:
        return demo_fit_from_table(args.demo_fit, args.perturb)
    if args.demo_fit:
        return demo_fit(args.demo_fit, args.first_order)
    fields = [float(x) for x in args.fields.split(",")]
    print(f"inputs: {len(MOLECULES)} molecules, fields {fields} MHz, best of {args.repeat}, "
          f"OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}")
    print(f"{'molecule':<28} {'SMILES':<18} {'spins':>5} {'MHz':>5} {'lines':>6} {'ms wall':>8} {'ms CPU':>8}")
    worst_typical = worst_cpu = worst_12 = 0.0
    for smi, name in MOLECULES:
        pred = predict(smi)
        net = coupling_network(pred)
        shifts = net.shifts([g.shift for g in pred.protons])
        for f in fields:
            simulate_spins(shifts, net.j_matrix(), f)  # warm-up
            best = best_cpu = float("inf")
            for _ in range(args.repeat):
                t0, c0 = time.perf_counter(), time.process_time()
                net2 = coupling_network(pred)
                lines = simulate_spins(net2.shifts([g.shift for g in pred.protons]), net2.j_matrix(), f)
                best = min(best, time.perf_counter() - t0)
                best_cpu = min(best_cpu, time.process_time() - c0)
            if net.n_spins <= 20:
                worst_typical = max(worst_typical, best)
                worst_cpu = max(worst_cpu, best_cpu)
            if net.n_spins >= 12:
                worst_12 = max(worst_12, best)
            print(f"{name:<28} {smi:<18} {net.n_spins:>5} {f:>5.0f} {lines.hz.size:>6} {1000 * best:>8.1f} "
                  f"{1000 * best_cpu:>8.1f}")
    print(f"slowest molecule with <= 20 protons: {1000 * worst_typical:.1f} ms wall, {1000 * worst_cpu:.1f} ms "
          f"CPU (target < 100 ms); slowest with >= 12 spins: {1000 * worst_12:.1f} ms wall (target < 1 s); "
          f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
