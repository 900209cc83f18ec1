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

The figures of the batch run are in-sample when the input is the development
file (the tables were fitted on it). ``--cv`` adds the cross-validated figures
that predict held-out data: 5 folds grouped by InChIKey block, 13C increment
tables refitted, the 13C neighbour layer refitted and the environment-code tables
rebuilt without the fold (the machinery of ``benchmarks/fit_hose.py``, with the
shrinkage and radius of the shipped tables and the layer's penalty), overall and per class of carbon (CH3/CH2/CH/C, sp3/sp2/sp,
alpha O / alpha halogen, ring size). ``--cache FILE`` reuses fit_hose's pickle.
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
    ap.add_argument("--workers", default="", help="pass --workers to the batch command")
    ap.add_argument("--cv", action="store_true", help="also print cross-validated figures (several minutes)")
    ap.add_argument("--cache", help="fit_hose.py pickle of records and out-of-fold increments")
    ap.add_argument("--oof-h1-increments", action="store_true",
                    help="--cv: refit the 1H increments without each fold too (the honest 1H figure)")
    a = ap.parse_args()
    recs = [json.loads(line) for line in open(a.data, encoding="utf-8")][: a.limit or None]
    tmp = tempfile.mkdtemp()
    src, out = os.path.join(tmp, "in.smi"), os.path.join(tmp, "out.jsonl")
    with open(src, "w") as fh:
        fh.writelines(r["smiles"] + "\n" for r in recs)
    cmd = specmatch_cmd() + ["predict", "--batch", src, "--out", out] + (["--workers", a.workers] if a.workers else [])
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
    if a.cv:
        cross_validated(a)


def carbon_class(mol, atom: int) -> list[str]:
    """The classes a carbon's error is reported under."""
    at = mol.GetAtomWithIdx(atom)
    h = at.GetTotalNumHs()
    out = [("C", "CH", "CH2", "CH3", "CH4")[min(h, 4)]]
    orders = {b.GetBondTypeAsDouble() for b in at.GetBonds()}
    out.append("sp" if 3.0 in orders else "sp2" if (at.GetIsAromatic() or 2.0 in orders) else "sp3")
    nbr = {n.GetSymbol() for n in at.GetNeighbors()}
    if "O" in nbr:
        out.append("alpha O")
    if nbr & {"F", "Cl", "Br", "I"}:
        out.append("alpha halogen")
    ri = mol.GetRingInfo()
    size = ri.MinAtomRingSize(atom)
    out.append(f"ring {size if size <= 7 else '8+'}" if size else "acyclic")
    return out


def proton_class(mol, atom: int, exchangeable: bool, twin: bool) -> list[str]:
    """The classes a proton's error is reported under (by the atom carrying it)."""
    if exchangeable:
        return ["OH/NH/SH"]
    at = mol.GetAtomWithIdx(atom)
    orders = {b.GetBondTypeAsDouble() for b in at.GetBonds()}
    nbr = [n.GetSymbol() for n in at.GetNeighbors()]
    if at.GetIsAromatic():
        out = ["aromatic"]
        ri = mol.GetRingInfo()
        if any(ri.NumAtomRings(n.GetIdx()) > 1 for n in at.GetNeighbors() if n.GetIsAromatic()):
            out.append("aromatic beside a ring fusion")
    elif 3.0 in orders:
        out = ["alkyne"]
    elif any(b.GetBondTypeAsDouble() == 2.0 and b.GetOtherAtom(at).GetSymbol() == "O" for b in at.GetBonds()):
        out = ["aldehyde"]
    elif 2.0 in orders:
        out = ["alkene"]
    else:
        out = [("CH4", "CH3", "CH2", "CH")[4 - min(at.GetTotalNumHs(), 4)] if at.GetTotalNumHs() else "C"]
    dist = Chem.GetDistanceMatrix(mol)[atom]
    near = {a.GetSymbol() for a in mol.GetAtoms() if 0 < dist[a.GetIdx()] <= 2}
    if "F" in near:
        out.append("F within 2 bonds")
    if near & {"Cl", "Br", "I"}:
        out.append("Cl/Br/I within 2 bonds")
    if "O" in nbr or "N" in nbr:
        out.append("alpha O/N")
    size = mol.GetRingInfo().MinAtomRingSize(atom)
    if not at.GetIsAromatic():
        out.append(f"ring {size if size <= 7 else '8+'}" if size else "acyclic")
    if twin:
        out.append("geometry twins (diastereotopic, cis/trans)")
    return out


def cross_validated(a) -> None:
    """Out-of-fold 13C/1H errors with the shipped correction settings, per class."""
    import pickle

    import numpy as np

    sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
    import fit_hose as fh
    from dev_exclusions import H1_EXCLUDED
    from specmatch.prediction.hose import load_layer, load_table

    t0 = time.perf_counter()
    if a.cache and os.path.exists(a.cache):
        with open(a.cache, "rb") as f:
            cached = pickle.load(f)
        (c13, h1), oof = cached["records"], cached["oof"]
    else:
        c13, h1 = fh.load(a.data, a.limit)
        oof = fh.oof_increment_shifts(a.data, c13, a.limit)
    fh.add_features(c13)
    layer = None
    shipped = load_layer("13C")
    if shipped is not None:
        # the shipped layer's settings, read from its provenance line
        import re

        got = re.search(r"ridge penalty (\S+) per weight, features seen on >= (\d+) signals", shipped.provenance)
        layer = (float(got.group(1)), int(got.group(2))) if got else (10.0, 3)
    print(f"\ncross-validated ({fh.FOLDS} folds grouped by InChIKey block; 13C increments and neighbour "
          f"layer refitted out of fold, code tables rebuilt out of fold; {time.perf_counter() - t0:.0f} s to load)")
    oof_h1 = fh.oof_h1_increment_shifts(h1) if a.oof_h1_increments else None
    for nucleus, recs in (("13C", c13), ("1H", h1)):
        table = load_table(nucleus)
        k, radius = (table.shrink, table.max_radius) if table else (1.0, 0)
        per_class: dict[str, list[float]] = {}
        scope = {"core": [], "wide": [], "core-": [], "wide-": []}
        base = {"core": [], "wide": [], "core-": [], "wide-": []}
        resid_of = (lambda r: fh.residuals_c13(r)[0]) if nucleus == "13C" else (lambda r: fh.residuals_h1(r)[0])
        for f in range(fh.FOLDS):
            # 13C: increments refitted and the neighbour layer fitted without the fold
            train, test = fh.fold_split(recs, f, oof, layer) if nucleus == "13C" else fh.fold_split(recs, f, oof_h1)
            if nucleus == "1H":  # as fit_hose.py: records whose listed shifts are not of their structure
                train = [r for r in train if r.get("id") not in H1_EXCLUDED]
            stats = fh.finish(fh.build(train, nucleus, resid_of), 1)
            for rec in test:
                shifts, _ = fh.corrected(rec["signals"], stats, k, radius)
                for which, sh in ((scope, shifts), (base, [s[1] for s in rec["signals"]])):
                    if nucleus == "13C":
                        _, pred, y = fh.residuals_c13(rec, sh)
                    else:
                        _, pred, y = fh.residuals_h1(rec, sh)
                    e = [abs(p - o) for p, o in zip(pred, y) if o == o]  # unpaired (NaN) left out
                    which["wide"] += e
                    if rec["core"]:
                        which["core"] += e
                    if rec.get("id") not in H1_EXCLUDED:
                        which["wide-"] += e
                        if rec["core"]:
                            which["core-"] += e
                if nucleus == "1H":
                    mol = Chem.MolFromSmiles(rec["smiles"])
                    _, pred, y = fh.residuals_h1(rec, shifts)
                    owners = [sg for sg in rec["signals"] for _ in range(sg[0])]
                    for sg, p, o in zip(owners, pred, y):
                        if o == o:
                            for c in proton_class(mol, sg[5], sg[3], "|" in sg[4][0]):
                                per_class.setdefault(c, []).append(abs(p - o))
                if nucleus == "13C":
                    mol = Chem.MolFromSmiles(rec["smiles"])
                    _, pred, y = fh.residuals_c13(rec, shifts)
                    atoms = [x for sg in rec["signals"] for x in sg[0]]
                    for atom, p, o in zip(atoms, pred, y):
                        if o != o:
                            continue
                        for c in carbon_class(mol, atom):
                            per_class.setdefault(c, []).append(abs(p - o))
        fmt = ".2f" if nucleus == "13C" else ".3f"
        print(f"{nucleus}: MAE core {np.mean(scope['core']):{fmt}} ({len(scope['core'])} signals), wide "
              f"{np.mean(scope['wide']):{fmt}} ({len(scope['wide'])}); increments"
              f"{' + neighbour layer' if nucleus == '13C' and layer else ''} alone core "
              f"{np.mean(base['core']):{fmt}}, wide {np.mean(base['wide']):{fmt}} (k={k:g}, radius<={radius})")
        if nucleus == "1H":
            print(f"    1H increments {'refitted out of fold' if oof_h1 else 'as shipped (they have seen every record)'}; "
                  f"without the {len(H1_EXCLUDED)} records of benchmarks/dev_exclusions.py: core "
                  f"{np.mean(scope['core-']):.3f}, wide {np.mean(scope['wide-']):.3f}")
            wide_sum = sum(scope["wide"])
            for c in sorted(per_class, key=lambda c: -sum(per_class[c])):
                v = per_class[c]
                print(f"    {c:44s} {len(v):5d} protons  MAE {np.mean(v):.3f}  95th percentile {np.quantile(v, 0.95):.2f} ppm"
                      f"  {100 * sum(v) / wide_sum:4.1f}% of the wide error")
        for c in sorted(per_class, key=lambda c: -len(per_class[c])) if nucleus == "13C" else ():
            v = per_class[c]
            print(f"    {c:14s} {len(v):6d} carbons  MAE {np.mean(v):.2f}  95th percentile {np.quantile(v, 0.95):.1f} ppm")


if __name__ == "__main__":
    main()
