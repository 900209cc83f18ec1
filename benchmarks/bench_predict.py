#!/usr/bin/env python3
"""Prediction benchmark: 13C/1H accuracy by scope, 13C sigma coverage, batch throughput.

    /work/venv/bin/python benchmarks/bench_predict.py ../shared/reference/nmrshiftdb2_dev.jsonl [--limit N]

It runs the documented batch command once over the whole file
(``specmatch predict --batch IN --out OUT``, wall time with start-up included) and
pairs predicted with measured shifts the way ``shared/tools/specbench.py`` does:
carbons within the same attached-H count in shift order (all carbons in shift
order if the H counts disagree), protons in shift order. Sigma coverage is the
share of paired carbons whose error is within 1 (and 2) predicted sigma.

Scopes: core = no aromatic ring, no carbonyl, at most 12 heavy atoms; wide = all.
Data: nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time

from rdkit import Chem, RDLogger

RDLogger.DisableLog("rdApp.*")
H_OF = {"S": 0, "D": 1, "T": 2, "Q": 3}


def specmatch_cmd() -> list[str]:
    exe = os.environ.get("SPECMATCH") or shutil.which("specmatch")
    return exe.split() if exe else [sys.executable, "-m", "specmatch"]


def pair_carbons(row: dict, spec: list) -> list[tuple[float, float]]:
    """(|error|, sigma) per carbon, or [] if the counts do not match."""
    pred: dict[int, list[tuple[float, float]]] = {}
    for c in row["carbons"]:
        for _ in c["atoms"]:
            pred.setdefault(c["hydrogens"], []).append((c["shift"], c["sigma"]))
    obs: dict[int, list[float]] = {}
    for s, letter, _ in spec:
        obs.setdefault(H_OF.get(letter, -1), []).append(s)
    if set(obs) == set(pred) and all(len(obs[k]) == len(pred[k]) for k in obs):
        groups = [(sorted(pred[k]), sorted(obs[k])) for k in obs]
    else:
        p = sorted(x for v in pred.values() for x in v)
        o = sorted(s for s, _, _ in spec)
        if len(p) != len(o):
            return []
        groups = [(p, o)]
    return [(abs(ps - o), sig) for p, o in groups for (ps, sig), o in zip(p, o)]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("data", help="nmrshiftdb2 JSON lines (e.g. ../shared/reference/nmrshiftdb2_dev.jsonl)")
    ap.add_argument("--limit", type=int, default=0, help="first N records only")
    a = ap.parse_args()
    recs = [json.loads(line) for line in open(a.data, encoding="utf-8")][: a.limit or None]
    tmp = tempfile.mkdtemp()
    src, out = os.path.join(tmp, "in.smi"), os.path.join(tmp, "out.jsonl")
    with open(src, "w") as fh:
        fh.writelines(r["smiles"] + "\n" for r in recs)
    cmd = specmatch_cmd() + ["predict", "--batch", src, "--out", out]
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    if proc.returncode != 0:
        raise SystemExit(f"'{' '.join(cmd)}' exited {proc.returncode}: {proc.stderr[-2000:]}")
    rows = [json.loads(line) for line in open(out, encoding="utf-8") if line.strip()]
    print(f"input: {a.data} ({len(recs)} records); command: {' '.join(cmd[:-4])} --batch IN.smi --out OUT.jsonl")
    print(f"machine: {os.cpu_count()} cores, load average {load:.1f} at start, python {platform.python_version()}")
    stats = {s: {"c": [], "h": [], "failed": 0, "n": 0} for s in ("core", "wide")}
    for r, p in zip(recs, rows):
        m = Chem.MolFromSmiles(r["smiles"])
        core = (m is not None and m.GetNumHeavyAtoms() <= 12 and "aromatic" not in r["classes"]
                and "carbonyl" not in r["classes"])
        scopes = ("core", "wide") if core else ("wide",)
        for s in scopes:
            stats[s]["n"] += 1
        if not p.get("ok"):
            for s in scopes:
                stats[s]["failed"] += 1
            continue
        cerr = []
        if r["c13"]:
            spec = max(r["c13"], key=len)
            if len(spec) == sum(1 for x in m.GetAtoms() if x.GetSymbol() == "C"):
                cerr = pair_carbons(p, spec)
        herr = []
        if r["h1"]:
            spec = max(r["h1"], key=len)
            if len(spec) == sum(x.GetTotalNumHs() for x in m.GetAtoms()):
                pred = sorted(h["shift"] for h in p["protons"] for _ in range(int(h["count"])))
                obs = sorted(s for s, _ in spec)
                if len(pred) == len(obs):
                    herr = [abs(x - y) for x, y in zip(pred, obs)]
        for s in scopes:
            stats[s]["c"] += cerr
            stats[s]["h"] += herr
    for s in ("core", "wide"):
        c, h = stats[s]["c"], stats[s]["h"]
        mae_c = sum(e for e, _ in c) / len(c) if c else float("nan")
        in1 = sum(e <= sig for e, sig in c) / len(c) if c else float("nan")
        in2 = sum(e <= 2 * sig for e, sig in c) / len(c) if c else float("nan")
        mae_h = sum(h) / len(h) if h else float("nan")
        print(f"{s:4s}: {stats[s]['n']} molecules, failed {stats[s]['failed']}; 13C MAE {mae_c:.2f} ppm over "
              f"{len(c)} carbons, within 1 sigma {in1:.3f}, within 2 sigma {in2:.3f}; 1H MAE {mae_h:.3f} ppm "
              f"over {len(h)} protons")
    print(f"throughput: {len(recs) / wall:.0f} molecules/s ({len(recs)} molecules in {wall:.1f} s, start-up included)")


if __name__ == "__main__":
    main()
