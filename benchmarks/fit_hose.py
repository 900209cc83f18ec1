#!/usr/bin/env python3
"""Fit the HOSE-code correction tables on the nmrshiftdb2 development part.

    python benchmarks/fit_hose.py ../shared/reference/nmrshiftdb2_dev.jsonl [--write]

What it does
------------
* For every record with a complete spectrum, the increment prediction (no
  correction) is paired with the measured shifts as ``../shared/tools/specbench.py``
  pairs them (13C within the attached-H count in shift order, 1H in shift order):
  the residual of each predicted signal is measured minus predicted.
* Residuals are grouped by the signal's environment code at radius 1..R
  (``specmatch.prediction.hose``): count, mean and spread, with residuals clipped
  at +-CLIP so misassigned record entries do not dominate a code.
* Cross-validation, 5 folds grouped by InChIKey connectivity block (the same
  folds as ``fit_c13_tables.py``): for 13C the increment tables are refitted
  without the fold (``fit_c13_tables.fit``), the code table is built from the
  other folds' residuals and the fold is predicted; for 1H the shipped
  increment tables are used (few parameters; the code table is still rebuilt out
  of fold). The shrinkage k, the largest radius and the minimum count are chosen
  by this cross-validation, and the sigma scale so that 68 % of out-of-fold
  errors fall within one sigma.
* ``--write`` builds the tables from all records with the shipped increment
  tables and writes ``specmatch/prediction/tables/hose_c13.csv.gz`` and
  ``hose_h1.csv.gz`` with a provenance header.

Data: nmrshiftdb2 (Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582).
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import os
import sys
import time
from collections import defaultdict

import numpy as np

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.join(ROOT, "benchmarks"))

from specmatch.errors import SpecmatchError  # noqa: E402
from specmatch.prediction.c13.predictor import predict_carbons  # noqa: E402
from specmatch.prediction.h1.predictor import predict_protons  # noqa: E402
from specmatch.prediction.hose import (TABLE_DIR, MolCodes, environment_smiles, fold_of_block, rank_tags,  # noqa: E402
                                       write_table)
from specmatch.structures import parse_structure  # noqa: E402

H_OF = {"S": 0, "D": 1, "T": 2, "Q": 3}
CLIP = {"13C": 10.0, "1H": 1.0}
RADII = 5
FOLDS = 5


def fold_of(block: str) -> int:
    return fold_of_block(block)


def is_core(rec, mol) -> bool:
    return (mol.GetNumHeavyAtoms() <= 12 and "aromatic" not in rec["classes"]
            and "carbonyl" not in rec["classes"])


# ------------------------------------------------------------------ pairing
def pair_c13(pred: list[float], hyd: list[int], obs: list[tuple[float, int]]) -> list[float]:
    """Measured shift for each predicted carbon (specbench pairing)."""
    y = [float("nan")] * len(pred)
    go: dict[int, list[float]] = defaultdict(list)
    for s, h in obs:
        go[h].append(s)
    gp: dict[int, list[int]] = defaultdict(list)
    for k, h in enumerate(hyd):
        gp[h].append(k)
    if set(go) == set(gp) and all(len(go[k]) == len(gp[k]) for k in go):
        for h, members in gp.items():
            for x, s in zip(sorted(members, key=lambda i: pred[i]), sorted(go[h])):
                y[x] = s
    else:
        for x, s in zip(sorted(range(len(pred)), key=lambda i: pred[i]), sorted(s for s, _ in obs)):
            y[x] = s
    return y


def pair_sorted(pred: list[float], obs: list[float]) -> list[float]:
    y = [float("nan")] * len(pred)
    for x, s in zip(sorted(range(len(pred)), key=lambda i: pred[i]), sorted(obs)):
        y[x] = s
    return y


# ------------------------------------------------------------------ data
def load(path: str, limit: int = 0):
    """Per record: signals of both nuclei with increment predictions and codes."""
    from rdkit import Chem, RDLogger

    RDLogger.DisableLog("rdApp.*")
    c13, h1 = [], []
    for n, line in enumerate(open(path, encoding="utf-8")):
        if limit and n >= limit:
            break
        rec = json.loads(line)
        m = Chem.MolFromSmiles(rec["smiles"])
        if m is None:
            continue
        try:
            st = parse_structure(rec["smiles"])
        except SpecmatchError:
            continue
        block = rec["inchikey"].split("-")[0]
        core = is_core(rec, m)
        codes = MolCodes(st.mol)
        cls = st.symmetry_classes
        if rec["c13"]:
            spec = max(rec["c13"], key=len)
            if len(spec) == sum(1 for a in m.GetAtoms() if a.GetSymbol() == "C"):
                carbons, _ = predict_carbons(st, correction=False)
                sig = []
                for c, tag in zip(carbons, rank_tags([cls[c.atoms[0]] for c in carbons], [c.shift for c in carbons])):
                    cs = [x + tag for x in codes.codes(c.atoms[0], RADII)]
                    sig.append((c.atoms, c.shift, c.sigma, c.hydrogens, cs, c.atoms[0]))
                obs = [(float(s), H_OF.get(letter, -1)) for s, letter, _ in spec]
                c13.append({"block": block, "fold": fold_of(block), "core": core, "signals": sig,
                            "obs": obs, "smiles": rec["smiles"]})
        if rec["h1"]:
            spec = max(rec["h1"], key=len)
            if len(spec) == sum(a.GetTotalNumHs() for a in m.GetAtoms()):
                groups, _ = predict_protons(st, correction=False)
                sig = []
                for g, tag in zip(groups, rank_tags([cls[g.atoms[0]] for g in groups], [g.shift for g in groups])):
                    cs = [x + tag for x in codes.codes(g.atoms[0], RADII)]
                    sig.append((g.count, g.shift, g.sigma, g.exchangeable, cs, g.atoms[0]))
                h1.append({"block": block, "fold": fold_of(block), "core": core, "signals": sig,
                           "obs": [float(s) for s, _ in spec], "smiles": rec["smiles"]})
    return c13, h1


def examples(recs, keys) -> dict[tuple[int, str], str]:
    """(radius, code) -> the environment of its first atom in the records, as a SMILES fragment."""
    out: dict[tuple[int, str], str] = {}
    for rec in recs:
        mol = None
        for sg in rec["signals"]:
            for r, code in enumerate(sg[4], start=1):
                if (r, code) in keys and (r, code) not in out:
                    if mol is None:
                        mol = parse_structure(rec["smiles"]).mol
                    out[(r, code)] = environment_smiles(mol, sg[5], r)
    return out


# ------------------------------------------------------------------ residuals
def residuals_c13(rec, shifts=None):
    """(signal index, residual) for one record; shifts default to the stored predictions."""
    sig = rec["signals"]
    pred, hyd, owner = [], [], []
    for k, sg in enumerate(sig):
        atoms, shift, h = sg[0], sg[1], sg[3]
        s = shift if shifts is None else shifts[k]
        for _ in atoms:
            pred.append(s)
            hyd.append(h)
            owner.append(k)
    y = pair_c13(pred, hyd, rec["obs"])
    acc: dict[int, list[float]] = defaultdict(list)
    for k, p, yy in zip(owner, pred, y):
        acc[k].append(yy - p)
    return {k: float(np.mean(v)) for k, v in acc.items()}, pred, y


def residuals_h1(rec, shifts=None):
    sig = rec["signals"]
    pred, owner = [], []
    for k, sg in enumerate(sig):
        count, shift = sg[0], sg[1]
        s = shift if shifts is None else shifts[k]
        pred += [s] * count
        owner += [k] * count
    y = pair_sorted(pred, rec["obs"])
    acc: dict[int, list[float]] = defaultdict(list)
    for k, p, yy in zip(owner, pred, y):
        acc[k].append(yy - p)
    return {k: float(np.mean(v)) for k, v in acc.items()}, pred, y


def build(recs, nucleus, resid_of, by_fold: bool = False):
    """(radius, code) -> [n, sum, sumsq] of clipped residuals (plus per-fold sums if asked)."""
    clip = CLIP[nucleus]
    stats: dict[tuple[int, str], list] = {}
    for rec in recs:
        res = resid_of(rec)
        f = rec["fold"]
        for k, r in res.items():
            if not np.isfinite(r):
                continue
            r = max(-clip, min(clip, r))
            for rad, code in enumerate(rec["signals"][k][4], start=1):
                e = stats.get((rad, code))
                if e is None:
                    e = stats[(rad, code)] = [0, 0.0, 0.0, {}]
                e[0] += 1
                e[1] += r
                e[2] += r * r
                if by_fold:
                    ef = e[3].setdefault(f, [0, 0.0, 0.0])
                    ef[0] += 1
                    ef[1] += r
                    ef[2] += r * r
    return stats


def fold_text(folds) -> str:
    """Per-fold statistics as written in the table: fold:n:mean:sd joined by ';'."""
    out = []
    for f in sorted(folds):
        n, s, ss = folds[f]
        m = s / n
        out.append(f"{f}:{n}:{m:.4f}:{max(ss / n - m * m, 0.0) ** 0.5:.4f}")
    return ";".join(out)


def finish(stats, min_n):
    """(radius, code) -> (n, mean, sd) for codes seen at least min_n times."""
    out = {}
    for key, (n, s, ss, _) in stats.items():
        if n >= min_n:
            mean = s / n
            var = max(ss / n - mean * mean, 0.0)
            out[key] = (int(n), mean, var ** 0.5)
    return out


def corrected(signals, table, k, radius, scale=1.0):
    """Corrected shifts and sigmas of a record's signals."""
    shifts, sigmas = [], []
    for sg in signals:
        shift, base_sigma, codes = sg[1], sg[2], sg[4]
        corr, var, depth = 0.0, base_sigma * base_sigma, 0
        for rad in range(1, radius + 1):
            e = table.get((rad, codes[rad - 1]))
            if e is None:
                break
            n, mean, sd = e
            w = n / (n + k)
            corr = w * mean + (1 - w) * corr
            var = w * (n * sd * sd + var) / (n + 1) + (1 - w) * var  # as HoseTable.correct
            depth = rad
        shifts.append(shift + corr)
        sigmas.append(var ** 0.5 * (scale if depth else 1.0))
    return shifts, sigmas


def errors_of(recs, nucleus, shifts_of):
    """Absolute errors (specbench pairing) by scope, plus (error, sigma) pairs."""
    out = {"core": [], "wide": []}
    zs = []
    for rec in recs:
        shifts, sigmas = shifts_of(rec)
        if nucleus == "13C":
            _, pred, y = residuals_c13(rec, shifts)
            sig_atom = [s for sg, s in zip(rec["signals"], sigmas) for _ in sg[0]]
        else:
            _, pred, y = residuals_h1(rec, shifts)
            sig_atom = [s for sg, s in zip(rec["signals"], sigmas) for _ in range(sg[0])]
        e = [abs(a - b) for a, b in zip(pred, y) if np.isfinite(b)]
        out["wide"] += e
        if rec["core"]:
            out["core"] += e
        zs += [(abs(a - b), s) for a, b, s in zip(pred, y, sig_atom) if np.isfinite(b)]
    return out, zs


# ------------------------------------------------------------------ 13C out-of-fold increments
def oof_increment_shifts(path: str, c13, limit: int):
    """Per record and signal: the increment prediction with the tables refitted without its fold.

    The per-atom prediction of the refitted tables is the sum of the atom's terms
    (``fit_c13_tables.Design``); the shipped predictor's extra steps (nearest-type
    fallback, diastereotopic split) are carried over as the difference between the
    shipped prediction and the shipped tables' plain sum.
    """
    import fit_c13_tables as f13

    # the settings the shipped tables were fitted with (fit_c13_tables.py defaults)
    f13.LAMBDA_CORRECTION, f13.SIZE_WEIGHTING = 1.0, True
    mols = f13.load(path)
    if limit:
        keep = {r["smiles"] for r in c13}
        mols = [m for m in mols if m[0] in keep]
    prior, _ = f13.read_handbook()
    design = f13.Design(mols, prior)
    from specmatch.prediction.c13.tables import VALUE

    shipped = np.array([VALUE.get(t, 0.0) for t in design.names])
    base = design.X @ shipped
    row_of: dict[tuple[str, int], int] = {}
    for m, (smi, _, _, envs, _) in enumerate(mols):
        a, _ = design.mol_rows[m]
        for k, e in enumerate(envs):
            row_of[(smi, e.atom)] = a + k
    folds = np.array([fold_of(m[1]) for m in mols])
    out: dict[tuple[int, str], list[float]] = {}
    for f in range(FOLDS):
        t0 = time.perf_counter()
        train = np.flatnonzero(folds != f)
        beta, _ = f13.fit(design, mols, train, 1.0)
        pred = design.X @ beta
        for rec in c13:
            out[(f, rec["smiles"])] = [
                sg[1] + (pred[row_of[(rec["smiles"], sg[0][0])]] - base[row_of[(rec["smiles"], sg[0][0])]])
                if (rec["smiles"], sg[0][0]) in row_of else sg[1] for sg in rec["signals"]]
        print(f"  13C increments refitted without fold {f} ({time.perf_counter() - t0:.0f} s)", flush=True)
    return out


def with_shifts(rec, shifts):
    return {**rec, "signals": [(sg[0], s, *sg[2:]) for sg, s in zip(rec["signals"], shifts)]}


def cross_validate(recs, nucleus, grid, oof=None):
    """Out-of-fold errors for every (k, radius, min_n) of the grid, and the increments alone."""
    resid_of = (lambda r: residuals_c13(r)[0]) if nucleus == "13C" else (lambda r: residuals_h1(r)[0])
    results = {g: ({"core": [], "wide": []}, []) for g in grid}
    base = ({"core": [], "wide": []}, [])
    for f in range(FOLDS):
        if oof is not None:
            fold_recs = [with_shifts(r, oof[(f, r["smiles"])]) for r in recs]
        else:
            fold_recs = recs
        train = [r for r in fold_recs if r["fold"] != f]
        test = [r for r in fold_recs if r["fold"] == f]
        stats = build(train, nucleus, resid_of)
        e, z = errors_of(test, nucleus, lambda r: ([s[1] for s in r["signals"]], [s[2] for s in r["signals"]]))
        for s in ("core", "wide"):
            base[0][s].extend(e[s])
        base[1].extend(z)
        tables = {}
        for (k, radius, min_n) in grid:
            if min_n not in tables:
                tables[min_n] = finish(stats, min_n)
            e, z = errors_of(test, nucleus, lambda r: corrected(r["signals"], tables[min_n], k, radius))
            for s in ("core", "wide"):
                results[(k, radius, min_n)][0][s].extend(e[s])
            results[(k, radius, min_n)][1].extend(z)
    return base, results


def sigma_scale(pairs) -> float:
    """Factor making 68.3 % of |error| / sigma fall within 1 (for corrected signals)."""
    ratios = np.array([e / s for e, s in pairs if s > 0])
    return float(np.quantile(ratios, 0.683)) if len(ratios) else 1.0


def mae(x) -> float:
    return float(np.mean(x)) if len(x) else float("nan")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("data", help="nmrshiftdb2 development part (JSON lines)")
    ap.add_argument("--write", action="store_true", help="write the tables into the package")
    ap.add_argument("--limit", type=int, default=0, help="only the first N records (while iterating)")
    ap.add_argument("--k", default="1,2,4,8", help="shrinkage values to try")
    ap.add_argument("--radii", default="3,4,5", help="largest radii to try")
    ap.add_argument("--min-n", default="1,2", help="minimum counts to try")
    ap.add_argument("--cache", help="pickle of the loaded records and out-of-fold increments (reused if present)")
    ap.add_argument("--no-oof-increments", action="store_true",
                    help="13C: use the shipped increments in every fold (faster, optimistic)")
    a = ap.parse_args()
    t0 = time.perf_counter()
    print(f"data: {a.data} (nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582)"
          f"{f', first {a.limit} records' if a.limit else ''}")
    import pickle

    cached = None
    if a.cache and os.path.exists(a.cache):
        with open(a.cache, "rb") as fh:
            cached = pickle.load(fh)
    c13, h1 = cached["records"] if cached else load(a.data, a.limit)
    print(f"records: 13C {len(c13)}, 1H {len(h1)}; codes radius 1..{RADII}; {FOLDS} folds by InChIKey block "
          f"({time.perf_counter() - t0:.0f} s)", flush=True)
    grid = [(float(k), int(r), int(m)) for k in a.k.split(",") for r in a.radii.split(",")
            for m in a.min_n.split(",")]
    chosen = {}
    for nucleus, recs in (("13C", c13), ("1H", h1)):
        oof = None
        if nucleus == "13C" and not a.no_oof_increments:
            oof = cached["oof"] if cached and cached.get("oof") else oof_increment_shifts(a.data, recs, a.limit)
            if a.cache and not cached:
                with open(a.cache, "wb") as fh:
                    pickle.dump({"records": (c13, h1), "oof": oof}, fh)
        base, results = cross_validate(recs, nucleus, grid, oof)
        unit = "ppm"
        fmt = ".2f" if nucleus == "13C" else ".3f"
        print(f"\n{nucleus} cross-validated MAE ({unit}), {FOLDS} folds grouped by InChIKey block"
              f"{' (increments refitted out of fold)' if oof is not None else ' (shipped increments)'}:")
        print(f"  increments only: core {mae(base[0]['core']):{fmt}} ({len(base[0]['core'])} signals), "
              f"wide {mae(base[0]['wide']):{fmt}} ({len(base[0]['wide'])})")
        best = min(grid, key=lambda g: mae(results[g][0]["wide"]) + mae(results[g][0]["core"]))
        for g in grid:
            e = results[g][0]
            mark = "  <- chosen" if g == best else ""
            print(f"  k={g[0]:g} radius<={g[1]} min_n={g[2]}: core {mae(e['core']):{fmt}}, "
                  f"wide {mae(e['wide']):{fmt}}{mark}")
        scale = sigma_scale(results[best][1])
        cover = np.mean([e <= s * scale for e, s in results[best][1]])
        print(f"  sigma scale {scale:.3f} (out-of-fold share within 1 sigma after scaling {cover:.3f})")
        chosen[nucleus] = (best, scale, mae(results[best][0]["core"]), mae(results[best][0]["wide"]))
    if a.write:
        today = _dt.date.today().isoformat()
        for nucleus, recs in (("13C", c13), ("1H", h1)):
            (k, radius, min_n), scale, cv_core, cv_wide = chosen[nucleus]
            resid_of = (lambda r: residuals_c13(r)[0]) if nucleus == "13C" else (lambda r: residuals_h1(r)[0])
            stats = build(recs, nucleus, resid_of, by_fold=True)
            table = finish(stats, min_n)
            example = examples(recs, {key for key in table if key[0] <= radius})
            rows = sorted((r, code, n, mean, sd, fold_text(stats[(r, code)][3]), example[(r, code)])
                          for (r, code), (n, mean, sd) in table.items() if r <= radius)
            name = "hose_c13.csv.gz" if nucleus == "13C" else "hose_h1.csv.gz"
            prov = [f"{nucleus} environment-code correction table (codes of growing radius, the sphere idea of HOSE codes, "
                    "Bremser, Anal. Chim. Acta 1978, 103, 355)",
                    f"fitted on the nmrshiftdb2 development part (../shared/reference/nmrshiftdb2_dev.jsonl; "
                    f"Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582), {len(recs)} records, {today}",
                    "codes: RDKit Morgan atom-environment identifiers of radius 1..R in hex (Morgan, J. Chem. Doc. "
                    "1965, 5, 107; Rogers & Hahn, J. Chem. Inf. Model. 2010, 50, 742), '|0'/'|1' = rank tag; "
                    "example = the environment of the first atom seen with the code, as a SMILES fragment",
                    "rows: residual (measured minus increment prediction, specbench pairing) per code: count, "
                    f"mean, sd; residuals clipped at +-{CLIP[nucleus]:g} ppm; codes seen >= {min_n} times",
                    f"chosen by 5-fold cross-validation grouped by InChIKey block: MAE core {cv_core:.3f}, "
                    f"wide {cv_wide:.3f} ppm",
                    "by_fold: the same statistics per development fold (md5 of the InChIKey block mod 5), "
                    "used with SPECMATCH_CROSS_VALIDATED=1 to correct development molecules out of fold",
                    "rebuilt by: python benchmarks/fit_hose.py "
                    "../shared/reference/nmrshiftdb2_dev.jsonl --write"]
            write_table(TABLE_DIR / name, rows, prov, k, radius, scale)
            size = os.path.getsize(TABLE_DIR / name)
            print(f"wrote {name}: {len(rows)} codes, {size / 1e6:.2f} MB")
    print(f"({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
