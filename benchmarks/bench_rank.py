#!/usr/bin/env python
"""Identification figures on the shared development tasks, measured with specbench.

Builds the tasks with ../shared/tools/specbench.py (isomer sets from the
nmrshiftdb2 development part: nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem.
2015, 53, 582), runs ``specmatch rank --batch`` on each set through specbench and
prints its figures: top-1 accuracy, mean probability on the true structure,
calibration error of the top-1 probability (10 bins) and throughput (whole
command, start-up included). Then the held-back half (by the hash used in
fit_error_model.py) is scored in-process, since the error model was fitted on
the other half.

Targets (issue 6): top-1 regio >= 0.97, formula >= 0.90, regio_wide >= 0.85;
calibration error <= 0.08 on each set; >= 50 tasks/s on regio_wide.

Pure or mixture (the hypotheses): pure tasks (the isomer-set tasks as they are)
and two-component tasks (13C: the lines of two members of a set together; 1H:
their multiplets with integrals in a 95:5 .. 50:50 ratio), built by
fit_error_model.hypothesis_tasks and split by InChIKey connectivity block; the
shipped prior_mixture was fitted on the fit half. Printed per nucleus and half:
pure samples called pure and right (target >= 90%), two-component samples named
correctly (target >= 75%), pure samples called mixtures (target <= 8%),
calibration error of the top hypothesis's probability (10 bins).

usage: python benchmarks/bench_rank.py [--tasks DIR] [--sets regio,formula,...] [--limit N]
                                       [--hypotheses-only]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# dev tasks: the environment-code correction corrects each molecule out of its fold (child processes inherit)
os.environ.setdefault("SPECMATCH_CROSS_VALIDATED", "1")
SHARED = ROOT.parent / "shared"
TARGETS = {"regio": 0.97, "formula": 0.90, "regio_wide": 0.85, "regio_h1": None}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--tasks", default=os.path.join(tempfile.gettempdir(), "specmatch_bench_tasks"))
    ap.add_argument("--dev", default=str(SHARED / "reference" / "nmrshiftdb2_dev.jsonl"))
    ap.add_argument("--sets", default="regio,formula,regio_wide,regio_h1")
    ap.add_argument("--limit", type=int, default=0)
    ap.add_argument("--hypotheses-only", action="store_true", help="only the pure/mixture figures")
    a = ap.parse_args()
    if a.hypotheses_only:
        hypothesis_bench(a)
        return
    bench = SHARED / "tools" / "specbench.py"
    tdir = Path(a.tasks)
    if not (tdir / "regio_wide.jsonl").exists():
        subprocess.run([sys.executable, str(bench), "tasks", a.dev, str(tdir)], check=True)
    env = dict(os.environ)
    exe = Path(sys.executable).with_name("specmatch")
    if exe.exists():
        env.setdefault("SPECMATCH", str(exe))
    print(f"inputs: {a.dev}; tasks in {tdir}; specmatch = {env.get('SPECMATCH', 'python -m specmatch')}")
    from specmatch.identification.errormodel import load_error_model

    from specmatch.identification.errormodel import tables_digest

    m = load_error_model()
    same = m.tables_sha256 == tables_digest()
    print(f"error model {m.version} ({m.fitted_on}); tables {m.tables_version}; "
          f"fitted with the installed tables: {'yes' if same else 'NO - refit with benchmarks/fit_error_model.py'}")
    for name in a.sets.split(","):
        path = tdir / f"{name}.jsonl"
        cmd = [sys.executable, str(bench), "rank", str(path)] + (["--limit", str(a.limit)] if a.limit else [])
        p = subprocess.run(cmd, capture_output=True, text=True, env=env)
        if p.returncode:
            print(p.stderr[-2000:])
            continue
        out = p.stdout.strip().splitlines()
        print(f"== {name} (target top-1 {TARGETS.get(name)})")
        for line in out:
            print("   " + line)
    # held-back half, in-process
    sys.path.insert(0, str(ROOT / "benchmarks"))
    from fit_error_model import Scorer, held_back

    print("held-back half (not used by the fit), in-process:")
    for name in a.sets.split(","):
        tasks = [json.loads(l) for l in open(tdir / f"{name}.jsonl")]
        from rdkit import Chem

        for t in tasks:
            t["truth"] = Chem.MolToSmiles(Chem.MolFromSmiles(t["truth"]), isomericSmiles=False)
        sc = Scorer([t for t in tasks if held_back(t["id"])])
        f = Scorer.figures(sc.raw(m), m)
        print(f"   {name:10s} n={f['n']:4d} top1={f['top1']:.3f} ece={f['ece']:.3f} "
              f"mean log p(true)={f['mean_log_p_true']:.3f}")
    hypothesis_bench(a)


def hypothesis_bench(a) -> None:
    """Pure/mixture figures on both halves with the shipped model."""
    sys.path.insert(0, str(ROOT / "benchmarks"))
    import fit_error_model as fem
    from specmatch.identification.errormodel import load_error_model

    m = load_error_model()
    dev = Path(a.dev)
    tdir = Path(tempfile.gettempdir()) / "specmatch_fit_tasks"
    tdir.mkdir(parents=True, exist_ok=True)
    sets = fem.build_tasks(dev, tdir)
    htasks = fem.hypothesis_tasks(sets, fem.record_index(dev), a.limit)
    pm = m.hypotheses.prior_mixture
    print(f"pure/mixture hypotheses (prior_mixture {pm:.4f}; targets: pure called pure and right >= 0.90, "
          "mixtures named >= 0.75, pure called mixture <= 0.08):")
    for nucleus in ("13C", "1H"):
        for half in ("fit", "held_back"):
            sc = {k: fem.HypothesisScorer([t for t in htasks[f"{k}_{nucleus}"] if t["half"] == half], m)
                  for k in ("pure", "mixed")}
            f = fem.hypothesis_figures(sc["pure"].outcomes(pm), sc["mixed"].outcomes(pm))
            print(f"   {nucleus:3s} {half:9s} pure n={f['n_pure']:4d} called pure and right {f['pure_called_pure_right']:.3f}, "
                  f"called mixture {f['pure_called_mixture']:.3f}; mixed n={f['n_mixed']:4d} named "
                  f"{f['mixed_named']:.3f}; calibration error {f['ece']:.3f}; mean log p(truth) "
                  f"{f['mean_log_p_truth']:.3f}")


if __name__ == "__main__":
    main()
