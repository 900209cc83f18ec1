#!/usr/bin/env python3
"""1H prediction figures on the nmrshiftdb2 development part: accuracy, sigma coverage, speed.

Data: nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582), development
part ../shared/reference/nmrshiftdb2_dev.jsonl; records whose largest 1H list has
one shift per hydrogen. Protons are paired in shift order within each molecule
(as ../shared/tools/specbench.py does). Note that the tables were refined on this
same file (benchmarks/fit_h1_tables.py prints the cross-validated figures).

Usage::

    python benchmarks/bench_h1.py [--data PATH]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
DEFAULT_DATA = ROOT.parent / "shared" / "reference" / "nmrshiftdb2_dev.jsonl"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--data", type=Path, default=DEFAULT_DATA)
    a = ap.parse_args()
    t0 = time.perf_counter()
    from specmatch.prediction.h1.predictor import TABLES_VERSION, predict_protons
    from specmatch.structures import parse_structure
    t_import = time.perf_counter() - t0

    recs = [json.loads(x) for x in open(a.data, encoding="utf-8")]
    smiles = [r["smiles"] for r in recs]
    t1 = time.perf_counter()
    structures = [parse_structure(s) for s in smiles]
    t2 = time.perf_counter()
    preds = [predict_protons(s)[0] for s in structures]
    t3 = time.perf_counter()

    err = {"core": [], "wide": []}
    within = {"core": [], "wide": []}
    n_mol = {"core": 0, "wide": 0}
    for r, st, groups in zip(recs, structures, preds):
        if not r["h1"]:
            continue
        spec = max(r["h1"], key=len)
        mol = st.mol
        if len(spec) != sum(x.GetTotalNumHs() for x in mol.GetAtoms()):
            continue
        pred = sorted((g.shift, g.sigma) for g in groups for _ in range(g.count))
        obs = sorted(s for s, _ in spec)
        e = np.abs(np.array([p for p, _ in pred]) - np.array(obs))
        inside = e <= np.array([s for _, s in pred])
        core = (mol.GetNumHeavyAtoms() <= 12 and "aromatic" not in r["classes"]
                and "carbonyl" not in r["classes"])
        for scope in ("core", "wide") if core else ("wide",):
            err[scope].append(e)
            within[scope].append(inside)
            n_mol[scope] += 1
    print(f"data: {a.data} ({len(recs)} records); 1H tables {TABLES_VERSION}")
    for scope in ("core", "wide"):
        e = np.concatenate(err[scope])
        w = np.concatenate(within[scope])
        print(f"{scope}: {n_mol[scope]} molecules, {len(e)} protons, MAE {e.mean():.3f} ppm, "
              f"median {np.median(e):.3f}, share within 1 sigma {w.mean():.3f}, within 0.3 ppm {(e <= 0.3).mean():.3f}")
    n = len(recs)
    print(f"import {t_import * 1e3:.0f} ms; perception {1e3 * (t2 - t1) / n:.2f} ms/molecule; "
          f"1H prediction {1e3 * (t3 - t2) / n:.3f} ms/molecule ({n} molecules)")


if __name__ == "__main__":
    main()
