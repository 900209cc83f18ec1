#!/usr/bin/env python3
"""Stereo layer benchmark: accuracy before/after on the records that carry stereo, its share of
the batch time, and the ensemble time for a 12-heavy-atom candidate.

    .venv/bin/python benchmarks/bench_stereo.py ../shared/reference/nmrshiftdb2_dev.jsonl [--limit N]

* Accuracy: for every record whose SMILES passes ``needs_stereo_layer`` (two or more specified
  stereocentres, one on a ring or two bonded), the 13C and 1H predictions are paired with the
  measured shifts as in ``bench_predict.py`` (carbons within the same attached-H count in shift
  order, protons in shift order), once without and once with the layer. Mean absolute errors are
  printed side by side; the layer should help, or at least not hurt.
* Batch share: all records are predicted in-process twice, with the layer (cold 3D cache) and
  without, and the difference is the layer's share of the prediction time. ``predict --batch``
  runs without the layer unless ``--stereo-3d`` is given; its throughput with start-up is
  measured by ``bench_predict.py``.
* Ensemble time: cold ETKDG + MMFF94 ensemble for menthol (12 heavy atoms) and for
  cis-4-tert-butylcyclohexanol, with the cache cleared.

Data: nmrshiftdb2, Kuhn & Schloerer, Magn. Reson. Chem. 2015, 53, 582.
"""

from __future__ import annotations

import argparse
import json
import platform
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from specmatch import SpecmatchError  # noqa: E402
from specmatch.prediction import Prediction, predict_structure  # noqa: E402
from specmatch.prediction import stereo  # noqa: E402
from specmatch.prediction.c13.predictor import predict_carbons  # noqa: E402
from specmatch.prediction.h1.predictor import predict_protons  # noqa: E402
from specmatch.structures import parse_structure  # noqa: E402

H_OF = {"S": 0, "D": 1, "T": 2, "Q": 3}


def c13_errors(pred: Prediction, spec: list) -> list[float]:
    got: dict[int, list[float]] = {}
    for c in pred.carbons:
        got.setdefault(c.hydrogens, []).extend([c.shift] * len(c.atoms))
    obs: dict[int, list[float]] = {}
    for s, letter, _ in spec:
        obs.setdefault(H_OF.get(letter, -1), []).append(s)
    if set(obs) == set(got) and all(len(obs[k]) == len(got[k]) for k in obs):
        pairs = [(p, o) for k in obs for p, o in zip(sorted(got[k]), sorted(obs[k]))]
    else:
        allp = sorted(x for v in got.values() for x in v)
        allo = sorted(x for v in obs.values() for x in v)
        if len(allp) != len(allo):
            return []
        pairs = list(zip(allp, allo))
    return [abs(p - o) for p, o in pairs]


def h1_errors(pred: Prediction, spec: list) -> list[float]:
    got = sorted(x for g in pred.protons if not g.exchangeable for x in [g.shift] * (g.count // max(1, len(g.atoms)) * len(g.atoms)))
    obs = sorted(s for s, _ in spec)
    if len(got) != len(obs):
        return []
    return [abs(p - o) for p, o in zip(got, obs)]


def plain(structure) -> Prediction:
    carbons, _ = predict_carbons(structure)
    protons, _ = predict_protons(structure)
    return Prediction(structure.smiles, structure.canonical_smiles, tuple(carbons), tuple(protons))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("data", type=Path)
    ap.add_argument("--limit", type=int, default=0, help="only the first N records (0 = all)")
    args = ap.parse_args()
    rows = [json.loads(line) for line in args.data.read_text(encoding="utf-8").splitlines() if line.strip()]
    if args.limit:
        rows = rows[: args.limit]
    print(f"input: {args.data} ({len(rows)} records); python {platform.python_version()}; {platform.machine()}")

    # ---------------------------------------------------------------- ensemble time (cold)
    from rdkit.Chem import AllChem  # noqa: F401  (import time is start-up, not ensemble time)

    for name, smi in (("menthol (12 heavy atoms)", "CC(C)[C@@H]1CC[C@@H](C)C[C@H]1O"),
                      ("cis-4-tert-butylcyclohexanol (11)", "CC(C)(C)[C@H]1CC[C@@H](O)CC1")):
        stereo.conformer_ensemble.cache_clear()
        t0 = time.perf_counter()
        ens = stereo.conformer_ensemble(Chem_canon(smi))
        dt = time.perf_counter() - t0
        print(f"ensemble {name}: {dt:.2f} s, {len(ens.weights)} conformers kept", flush=True)

    # ---------------------------------------------------------------- parse once
    structures = []
    for r in rows:
        try:
            structures.append((r, parse_structure(r["smiles"])))
        except SpecmatchError:
            continue
    gated = [(r, s) for r, s in structures if stereo.needs_stereo_layer(s)]
    print(f"records with a relative configuration the layer uses: {len(gated)} of {len(structures)}", flush=True)

    # ---------------------------------------------------------------- time: all records, layer off / on
    t0 = time.perf_counter()
    plains = {id(s): plain(s) for _, s in structures}
    t_off = time.perf_counter() - t0
    stereo.conformer_ensemble.cache_clear()
    stereo._features_for.cache_clear()
    t0 = time.perf_counter()
    with_layer = {id(s): predict_structure(s) for _, s in structures}
    t_on = time.perf_counter() - t0
    share = (t_on - t_off) / t_on if t_on > 0 else 0.0
    print(f"in-process prediction of {len(structures)} records (structures parsed beforehand, cold 3D cache): "
          f"{t_off:.2f} s without the layer ({len(structures) / t_off:.0f} molecules/s), {t_on:.2f} s with "
          f"({len(structures) / t_on:.0f} molecules/s); the layer's share {share:.1%}; "
          f"{(t_on - t_off) / max(1, len(gated)):.2f} s per molecule that uses it", flush=True)

    # ---------------------------------------------------------------- accuracy on gated records
    before_c, after_c, before_h, after_h = [], [], [], []
    for r, s in gated:
        p0, p1 = plains[id(s)], with_layer[id(s)]
        for spec in r["c13"][:1]:
            e0, e1 = c13_errors(p0, spec), c13_errors(p1, spec)
            if e0 and e1:
                before_c += e0
                after_c += e1
        for spec in r["h1"][:1]:
            e0, e1 = h1_errors(p0, spec), h1_errors(p1, spec)
            if e0 and e1:
                before_h += e0
                after_h += e1
    mae = lambda v: sum(v) / len(v) if v else float("nan")  # noqa: E731
    print(f"13C MAE on those records: {mae(before_c):.2f} ppm without the layer, {mae(after_c):.2f} ppm with "
          f"({len(after_c)} carbons)")
    print(f" 1H MAE on those records: {mae(before_h):.3f} ppm without the layer, {mae(after_h):.3f} ppm with "
          f"({len(after_h)} protons)")


def Chem_canon(smiles: str) -> str:  # noqa: N802 - small helper, reads like RDKit
    from rdkit import Chem

    return Chem.MolToSmiles(Chem.MolFromSmiles(smiles))


if __name__ == "__main__":
    main()
