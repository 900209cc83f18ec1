#!/usr/bin/env python3
"""Refine the 13C increment tables on the nmrshiftdb2 development part.

Reproducible: the same data file and options give the same tables.

    /work/venv/bin/python benchmarks/fit_c13_tables.py ../shared/reference/nmrshiftdb2_dev.jsonl

Method
------
* Every carbon's shift is a sum of increments (``specmatch.prediction.c13.environment``
  names them); the starting values are the handbook numbers of
  ``specmatch/prediction/tables/c13_handbook.csv``.
* The records are not atom-mapped to the SMILES, so measured shifts are paired with
  predicted ones within the same attached-H count (the record's S/D/T/Q letters) in
  shift order - the optimal pairing for absolute error, and the one
  ``shared/tools/specbench.py`` uses. The pairing is redone after each fit (4 rounds).
* Each fit is a ridge regression toward the handbook values (penalty ``lambda`` per
  increment, in units of "carbons' worth of evidence": 1 for the main increments,
  1 for interaction corrections, which are shrunk toward 0), with Huber weights (4 ppm)
  and each carbon weighted by 1/sqrt(number of carbons of its molecule), so that
  small molecules (the products of the reactions specmatch is for) count
  so misassigned record entries do not pull the tables. An increment seen on few
  carbons stays close to its handbook value; a term without a handbook value is
  shrunk toward 0 (no effect).
* ``lambda`` is chosen by 5-fold cross-validation split by molecule (InChIKey
  connectivity block). The per-class sigma table is the 68.3 % quantile of the
  out-of-fold absolute errors, so sigmas describe molecules the fit did not see.

Citation for the data: nmrshiftdb2, Kuhn & Schlörer, Magn. Reson. Chem. 2015, 53, 582.
"""

from __future__ import annotations

import argparse
import csv
import datetime as _dt
import hashlib
import json
import os
import sys
import time
from collections import defaultdict

import numpy as np
import scipy.sparse as sp
from rdkit import Chem, RDLogger

RDLogger.DisableLog("rdApp.*")
ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
sys.path.insert(0, ROOT)
from specmatch.prediction.c13.environment import carbon_environments, is_correction  # noqa: E402

TABLES = os.path.join(ROOT, "specmatch", "prediction", "tables")
H_OF = {"S": 0, "D": 1, "T": 2, "Q": 3}
HUBER_PPM = 4.0
ROUNDS = 4
#: Penalty of interaction/correction terms relative to the main increments.
CORRECTION_PENALTY = 3.0
LAMBDA_CORRECTION: float | None = None
SIZE_WEIGHTING = False


def load(path: str):
    """Molecules with one complete 13C spectrum: (smiles, key, core?, envs, obs)."""
    out = []
    with open(path) as fh:
        for line in fh:
            r = json.loads(line)
            if not r["c13"]:
                continue
            m = Chem.MolFromSmiles(r["smiles"])
            if m is None:
                continue
            spec = max(r["c13"], key=len)
            n_c = sum(1 for a in m.GetAtoms() if a.GetSymbol() == "C")
            if len(spec) != n_c:
                continue
            core = (m.GetNumHeavyAtoms() <= 12 and "aromatic" not in r["classes"]
                    and "carbonyl" not in r["classes"])
            envs = carbon_environments(m)
            obs = [(float(s), H_OF.get(letter, -1)) for s, letter, _ in spec]
            out.append((r["smiles"], r["inchikey"].split("-")[0], core, envs, obs))
    return out


def read_handbook():
    prior, source = {}, {}
    with open(os.path.join(TABLES, "c13_handbook.csv"), newline="") as fh:
        for row in csv.DictReader(fh):
            prior[row["term"]] = float(row["shift_ppm"])
            source[row["term"]] = row["source"]
    return prior, source


class Design:
    """Sparse carbons x terms count matrix with per-molecule row ranges."""

    def __init__(self, mols, prior):
        terms = dict.fromkeys(prior)
        rows, cols, vals = [], [], []
        self.mol_rows, self.h, self.kind, self.core = [], [], [], []
        self.terms_of_row = []
        r = 0
        for _, _, core, envs, _ in mols:
            start = r
            for e in envs:
                counts: dict[str, int] = defaultdict(int)
                for t in e.terms:
                    counts[t] += 1
                    if t not in terms:
                        terms[t] = None
                self.terms_of_row.append(tuple(counts))
                for t, c in counts.items():
                    rows.append(r)
                    cols.append(t)
                    vals.append(c)
                self.h.append(e.hydrogens)
                self.kind.append(e.kind)
                self.core.append(core)
                r += 1
            self.mol_rows.append((start, r))
        self.names = list(terms)
        idx = {t: k for k, t in enumerate(self.names)}
        self.idx = idx
        self.X = sp.csr_matrix((vals, (rows, [idx[c] for c in cols])), shape=(r, len(self.names)))
        self.prior = np.array([prior.get(t, _default_prior(t)) for t in self.names])
        # class origins are anchors, not effects: let the data place them freely
        # interaction corrections need more evidence than the main increments
        self.is_corr = np.array([is_correction(t) for t in self.names])
        self.is_base = np.array([":base" in t for t in self.names])
        # per-carbon weight: optionally 1/sqrt(carbons in the molecule), so small
        # molecules are not drowned by large ones
        self.size = np.concatenate([np.full(b - a, b - a) for a, b in self.mol_rows]).astype(float)
        self.h = np.array(self.h)
        self.core = np.array(self.core)


def _default_prior(term: str) -> float:
    """Origin of a class without a handbook value: a typical shift of that class."""
    if term.startswith("har:base"):
        return 130.0
    if term.startswith("co:") and term.endswith(":base"):
        return 175.0
    return 0.0


def assign(pred: np.ndarray, mols, design: Design, which) -> np.ndarray:
    """Measured shift paired with each predicted carbon (same H count, shift order)."""
    y = np.full(len(pred), np.nan)
    for m in which:
        a, b = design.mol_rows[m]
        obs = mols[m][4]
        p = pred[a:b]
        h = design.h[a:b]
        groups_o: dict[int, list[float]] = defaultdict(list)
        for s, hh in obs:
            groups_o[hh].append(s)
        groups_p: dict[int, list[int]] = defaultdict(list)
        for k, hh in enumerate(h):
            groups_p[int(hh)].append(k)
        if set(groups_o) == set(groups_p) and all(len(groups_o[k]) == len(groups_p[k]) for k in groups_o):
            for k, members in groups_p.items():
                order = sorted(members, key=lambda x: p[x])
                for x, s in zip(order, sorted(groups_o[k])):
                    y[a + x] = s
        else:
            order = np.argsort(p, kind="stable")
            for x, s in zip(order, sorted(s for s, _ in obs)):
                y[a + x] = s
    return y


def penalties(design: Design, lam: float, lam_corr: float) -> np.ndarray:
    """Ridge penalty per term: class origins almost free, corrections ``lam_corr``."""
    return np.where(design.is_base, 0.01 * lam, np.where(design.is_corr, lam_corr, lam))


def fit(design: Design, mols, train: np.ndarray, lam: float, beta0: np.ndarray | None = None):
    """Ridge toward the handbook values with Huber weights; pairing re-done each round."""
    X = design.X
    rows = np.concatenate([np.arange(*design.mol_rows[m]) for m in train])
    beta = design.prior.copy() if beta0 is None else beta0.copy()
    Xt = X[rows]
    support = np.asarray((Xt != 0).sum(axis=0)).ravel()
    pen = penalties(design, lam, LAMBDA_CORRECTION if LAMBDA_CORRECTION is not None else lam * CORRECTION_PENALTY)
    size_w = 1.0 / np.sqrt(design.size[rows]) if SIZE_WEIGHTING else np.ones(len(rows))
    size_w *= len(rows) / size_w.sum()
    for _ in range(ROUNDS):
        y = assign(X @ beta, mols, design, train)[rows]
        w = np.ones(len(rows))
        for _inner in range(2):
            r = y - Xt @ beta
            w = np.minimum(1.0, HUBER_PPM / np.maximum(np.abs(r), 1e-9)) * size_w
            Xw = Xt.multiply(w[:, None]).tocsr()
            A = (Xw.T @ Xt).toarray() + np.diag(pen)
            rhs = Xw.T @ y + pen * design.prior
            beta = np.linalg.solve(A, rhs)
    return beta, support


def fold_of(key: str, k: int = 5) -> int:
    return int(hashlib.md5(key.encode()).hexdigest(), 16) % k


def q68(x) -> float:
    return float(np.quantile(np.abs(x), 0.683)) if len(x) else float("nan")


def coverage_bucket(min_support: float) -> str:
    return "well" if min_support >= 100 else ("thin" if min_support >= 10 else "rare")


def describe(term: str) -> str:
    """A chemist's reading of an increment name."""
    p = term.split(":")
    cls = p[0]
    names = {"a": "alpha", "b": "beta", "g": "gamma", "d": "delta", "a'": "alpha' (far side)",
             "b'": "beta' (far side)", "g'": "gamma' (far side)"}
    if p[1] == "base":
        return {"allene": "allene central carbon", "sp3": "sp3 carbon origin (methane-like)", "ene": "alkene carbon origin (ethylene)",
                "ar": "benzene carbon", "yne": "alkyne carbon origin (acetylene)", "cn": "nitrile carbon"}.get(cls, term)
    if "@" in term:
        base, cond = term.rsplit("@", 1)
        if cond.startswith("via-"):
            return f"correction to '{describe(base)}' when reached through {cond[4:]}"
        if cond.startswith("H"):
            return f"correction to '{describe(base)}' on a carbon with {cond[1:]} H"
        return f"correction to '{describe(base)}' on a carbon with {cond} heavy neighbours"
    if cls == "sp3" and p[1] == "b" and p[2][:1] == "C" and p[2][1:2].isdigit():
        via, what = p[2].split(">")
        return f"beta {what} through an sp3 carbon with {via[1:]} heavy neighbours (correction)"
    if cls == "sp3":
        if p[1] == "exo":
            return f"ring carbon: {names[p[2]]} {p[3]} outside its ring(s) (correction to the chain value)"
        if p[1].startswith("xring"):
            return f"carbon is a member of a {p[1][5:]}-membered ring (one term per ring)"
        if p[1] == "bridged":
            return f"bridged ring system ({p[2]}), smallest ring {p[3]}"
        if p[1] == "sig":
            return f"class value for the neighbour set {p[2]} (non-additivity of the first shell)"
        if p[1].startswith("allyl-cis"):
            return ("substituent cis across the neighbouring C=C, geometry unknown" if p[1].endswith("?")
                    else f"{p[2]} cis across the neighbouring C=C{' (in a ring)' if 'ring' in p[1] else ''} "
                         "(gamma-cis effect)")
        if p[1] == "gem" and "+" in p[2]:
            a_, b_ = p[2].split("+")
            return f"geminal {a_} and {b_} on the carbon (non-additivity)"
        if p[1] == "a":
            return f"alpha {p[2]} on an sp3 carbon with {p[3]} other heavy substituent(s) (0-1 terminal, 2-3 internal)"
        if p[1] == "b":
            via, what = p[2].split(">")
            return f"beta {what} reached through {via}"
        if p[1] in ("g", "d"):
            return f"{names[p[1]]} {p[2]}"
        if p[1] == "steric":
            return f"branching: carbon with {p[2]} heavy neighbours next to an sp3 carbon with {p[3]}"
        if p[1].startswith("ring") and len(p) > 2:
            return f"carbon in a {p[1][4:]}-membered ring ({'8+' if p[1][4:] == '8' else p[1][4:]}), {p[2]}"
        if p[1].startswith("rings"):
            return f"carbon shared by {p[1][5:]}{'+' if p[1][5:] == '3' else ''} rings (fusion/bridgehead)"
        if p[1].startswith("nb-ring"):
            return f"neighbour in a {p[1][7:]}-membered ring not containing the carbon"
        if p[1] == "gem":
            return f"geminal pair {p[2]} on the carbon (non-additivity)"
        if p[1] == "vic":
            return f"vicinal pair {p[2]} (one on the carbon, one on a neighbour)"
        if p[1] == "bgem":
            return f"geminal pair {p[2]} on a neighbouring carbon"
    if cls == "allene":
        return f"allene centre: {names.get(p[1], p[1])} {p[2]}"
    if cls == "ene" and p[1] in ("pattern", "sig", "gem", "gem'", "vic", "bridged", "allene-end", "ketene-end"):
        q = p[2] if len(p) > 2 else ""
        return {"pattern": f"substitution pattern: {q[:1]} substituent(s) here, {q[1:]} on the partner",
                "sig": f"class value for substituents {q}",
                "gem": f"geminal pair {q} on this carbon", "gem'": f"geminal pair {q} on the partner",
                "vic": f"heteroatoms on both carbons ({q})", "bridged": "double bond in a bridged ring system",
                "allene-end": "terminal carbon of an allene",
                "ketene-end": "terminal carbon of a ketene (C=C=O)"}[p[1]]
    if cls == "ene" and p[1].startswith("ring") and len(p) > 2:
        return f"double bond in a {p[1][4:]}-membered ring, carbon with {p[2][1:]} H"
    if cls in ("ene", "yne"):
        if p[1] in names:
            return f"{names[p[1]]} {p[2]}"
        if p[1] == "cis":
            return "cis correction per cis pair of substituents"
        if p[1] == "cis?":
            return "double bond of unassigned geometry (half cis)"
        if p[1].startswith("ring"):
            return f"double bond in a {p[1][4:]}-membered ring"
        if p[1].startswith("exo"):
            return f"exocyclic double bond, {'partner' if p[1].endswith(chr(39)) else 'this carbon'} in a ring"
        if p[1].startswith("H"):
            return f"alkene carbon with {p[1][1:]} H"
    if cls in ("ar", "har"):
        if p[1] == "2":
            return f"second-shell atom {p[2]} of a substituent, {p[3]}"
        if p[1].startswith("fused"):
            return f"fused {p[1][5:]}-membered ring at the {p[2]} position"
        if p[1].startswith("base"):
            return (f"aromatic ring carbon, {p[1][4:-1]}-membered ring with {p[1][-1]}, "
                    + (f"{p[2][2:]} bond(s) from the ring O" if p[2] != "dO0" else "no ring heteroatom"))
        if p[1] == "=O":
            return f"exocyclic C=O on the ring, {p[2]}"
        return f"{p[2]} substituent {p[1]}"
    if cls == "co":
        if p[2] == "base":
            return f"carbonyl class {p[1]}"
        if p[2] in names:
            return f"{'ketone/aldehyde' if p[1] == 'one' else 'acid-derivative'} carbonyl: {names[p[2]]} {p[3]}"
        if p[2].startswith("ring"):
            return f"carbonyl carbon in a {p[2][4:]}-membered ring"
    if cls == "other":
        return f"no table for {p[1]}: rough class value"
    if cls == "cn" and p[1] in names:
        return f"nitrile carbon: {names[p[1]]} {p[2]}"
    return term


def diastereotopic_split(mols) -> tuple[float, int]:
    """Median measured split of diastereotopic twin carbons.

    Only molecules where the twins are the only carbons of their H count are used,
    so the two measured lines are known to be theirs.
    """
    from specmatch.structures import parse_structure

    splits = []
    for smi, _, _, envs, obs in mols:
        st = parse_structure(smi)
        pairs = [(a, b) for a, b in st.diastereotopic_pairs
                 if st.mol.GetAtomWithIdx(a).GetSymbol() == "C" and st.mol.GetAtomWithIdx(b).GetSymbol() == "C"]
        if len(pairs) != 1:
            continue
        a, b = pairs[0]
        h = st.mol.GetAtomWithIdx(a).GetTotalNumHs()
        same_h = [e.atom for e in envs if e.hydrogens == h]
        if sorted(same_h) == sorted((a, b)):
            vals = [s for s, hh in obs if hh == h]
            if len(vals) == 2:
                splits.append(abs(vals[0] - vals[1]))
    return (float(np.median(splits)) if splits else 0.0), len(splits)


def evaluate(pred, mols, design, which):
    y = assign(pred, mols, design, which)
    rows = np.concatenate([np.arange(*design.mol_rows[m]) for m in which])
    return rows, y[rows] - pred[rows]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("data", help="nmrshiftdb2 development part (JSON lines)")
    ap.add_argument("--lambdas", default="1", help="ridge penalties of the main increments, comma-separated; "
                    "the best by cross-validation is used (0.3 fits the dev data marginally better but lets "
                    "the handbook terms drift far from their meaning)")
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--write", action="store_true", help="write the tables (otherwise only report)")
    ap.add_argument("--correction-lambda", type=float, default=1.0,
                    help="penalty of interaction corrections (signature, pattern, ring-exo, ...)")
    ap.add_argument("--no-size-weighting", dest="size_weighting", action="store_false",
                    help="do not weight carbons by 1/sqrt(carbons in their molecule)")
    ap.add_argument("--tables-out", default=TABLES, help="directory the tables are written to")
    a = ap.parse_args()
    global LAMBDA_CORRECTION, SIZE_WEIGHTING
    LAMBDA_CORRECTION, SIZE_WEIGHTING = a.correction_lambda, a.size_weighting
    t0 = time.perf_counter()
    mols = load(a.data)
    prior, prior_src = read_handbook()
    design = Design(mols, prior)
    n_mol = len(mols)
    folds = np.array([fold_of(m[1], a.folds) for m in mols])
    print(f"data: {a.data}; {n_mol} molecules with a complete 13C spectrum, {design.X.shape[0]} carbons, "
          f"{design.X.shape[1]} increment terms ({time.perf_counter() - t0:.1f} s)")
    allm = np.arange(n_mol)
    rows, res0 = evaluate(design.X @ design.prior, mols, design, allm)
    print(f"handbook values only: MAE {np.mean(np.abs(res0)):.2f} ppm (core "
          f"{np.mean(np.abs(res0[design.core[rows]])):.2f})")
    best = None
    oof_by_lam = {}
    for lam in [float(x) for x in a.lambdas.split(",")]:
        oof = np.full(design.X.shape[0], np.nan)
        minsup = np.zeros(design.X.shape[0])
        for f in range(a.folds):
            train, test = allm[folds != f], allm[folds == f]
            beta, support = fit(design, mols, train, lam)
            rws, r = evaluate(design.X @ beta, mols, design, test)
            oof[rws] = r
            for rr in rws:
                minsup[rr] = min((support[design.idx[t]] for t in design.terms_of_row[rr] if not is_correction(t)),
                                 default=0)
        mae = np.nanmean(np.abs(oof))
        mae_core = np.nanmean(np.abs(oof[design.core]))
        print(f"lambda {lam:g}: cross-validated MAE {mae:.3f} ppm (core {mae_core:.3f}), "
              f"share within 3 ppm {np.nanmean(np.abs(oof) <= 3):.3f}")
        oof_by_lam[lam] = (oof, minsup)
        if best is None or mae < best[1]:
            best = (lam, mae)
    lam = best[0]
    oof, minsup = oof_by_lam[lam]
    beta, support = fit(design, mols, allm, lam)
    rows, res = evaluate(design.X @ beta, mols, design, allm)
    print(f"chosen lambda {lam:g}; in-sample MAE {np.mean(np.abs(res)):.3f} (core {np.mean(np.abs(res[design.core[rows]])):.3f})")
    # sigma table from out-of-fold errors
    groups: dict[str, list[float]] = defaultdict(list)
    for r_ in range(design.X.shape[0]):
        b = coverage_bucket(minsup[r_])
        k, h = design.kind[r_], design.h[r_]
        groups[f"{k}:H{h}:{b}"].append(oof[r_])
        groups[f"{k}:*:{b}"].append(oof[r_])
        groups[f"*:*:{b}"].append(oof[r_])
    sigma_rows = []
    for key in sorted(groups):
        v = np.array(groups[key])
        if len(v) >= 30:
            sigma_rows.append((key, round(max(0.5, q68(v)), 2), len(v)))
    sig = {k: s for k, s, _ in sigma_rows}

    def sigma_of(kind, h, b):
        for key in (f"{kind}:H{h}:{b}", f"{kind}:*:{b}", f"*:*:{b}"):
            if key in sig:
                return sig[key]
        return 10.0

    cover = np.mean([abs(oof[r_]) <= sigma_of(design.kind[r_], design.h[r_], coverage_bucket(minsup[r_]))
                     for r_ in range(len(oof))])
    print(f"sigma table: {len(sigma_rows)} classes; out-of-fold share within 1 sigma {cover:.3f}")
    by_kind = defaultdict(list)
    for r_ in range(len(oof)):
        by_kind[design.kind[r_]].append(abs(oof[r_]))
    for k, v in sorted(by_kind.items()):
        print(f"  {k:6s} {len(v):6d} carbons, cross-validated MAE {np.mean(v):.2f} ppm")
    split, n_split = diastereotopic_split(mols)
    print(f"diastereotopic twin carbons: median measured split {split:.2f} ppm ({n_split} molecules)")
    if not a.write:
        return
    today = _dt.date.today().isoformat()
    os.makedirs(a.tables_out, exist_ok=True)
    with open(os.path.join(a.tables_out, "c13_increments.csv"), "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["term", "shift_ppm", "handbook_ppm", "n_carbons", "meaning", "source"])
        for k, t in enumerate(design.names):
            n = int(support[k])
            hb = prior.get(t)
            if n == 0:
                if hb is None:
                    continue
                src = prior_src[t]
            else:
                src = (f"fitted on the nmrshiftdb2 development part (../shared/reference): ridge toward the handbook "
                       f"value, lambda {lam:g} (corrections {LAMBDA_CORRECTION:g}, toward 0), 1/sqrt(n) molecule weights, Huber {HUBER_PPM:g} ppm, H-count pairing iterated {ROUNDS}x; "
                       f"{n} carbons; {today}; prior: {prior_src.get(t, 'none (0)')}")
            w.writerow([t, f"{beta[k]:.2f}", "" if hb is None else f"{hb:g}", n, describe(t), src])
        w.writerow(["split:diastereotopic", f"{split:.2f}", "", n_split,
                    "shift difference between diastereotopic twin carbons (two lines, +/- half)",
                    f"median measured split in the nmrshiftdb2 development part, molecules whose twins are "
                    f"the only carbons of their H count; {n_split} molecules; {today}"])
    with open(os.path.join(a.tables_out, "c13_sigma.csv"), "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["class", "sigma_ppm", "n_carbons", "source"])
        for key, s, n in sigma_rows:
            w.writerow([key, f"{s:.2f}", n, f"68.3% quantile of out-of-fold absolute errors ({a.folds}-fold by "
                        f"molecule, lambda {lam:g}) on the nmrshiftdb2 development part; {n} carbons; {today}"])
    print(f"wrote {a.tables_out}/c13_increments.csv and c13_sigma.csv ({time.perf_counter() - t0:.0f} s)")


if __name__ == "__main__":
    main()
