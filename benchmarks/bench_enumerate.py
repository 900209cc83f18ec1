"""Time per reaction of `enumerate_products` (target: <= 50 ms up to 20 heavy atoms, no xTB).

Run:  /work/venv/bin/python benchmarks/bench_enumerate.py [--repeats N] [--no-xtb]

Prints every input, its heavy-atom count, the number of candidates, the median CPU time of
this process and the median and worst wall time over N repeats (after one warm-up call that
loads the data tables), and then the time with GFN2-xTB refinement (first call, uncached cation
energies) if tblite is installed. The machine load is printed too: on a shared machine the wall
time includes waiting for a core, the CPU time does not.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

from rdkit import Chem

from specmatch.reactions import enumerate_products

REACTIONS = [
    ("C=CC", "HBr"),
    ("C=CC(C)C", "HCl"),
    ("C=CC(C)(C)C", "HCl"),
    ("C=CC(C)CC", "HBr"),
    ("C=CC1CCCCC1", "H2O/H2SO4"),
    ("C=CC1CCC1", "HBr"),
    ("C=C(C)C1CCC1", "HCl"),
    ("C=CC=C", "HBr"),
    ("C=Cc1ccccc1", "HBr/ROOR"),
    ("CC1=CCCCC1", "BH3;H2O2,NaOH"),
    ("C=CC(C)(C)C", "Hg(OAc)2,H2O;NaBH4"),
    ("C=CC=C", "Br2"),
    ("CC1=CCCCC1", "Br2/H2O"),
    ("CC(O)C(C)(C)C", "HBr"),
    ("CC1CCCCC1O", "H2SO4, heat"),
    ("C=C(C)C", "MeOH/H+"),
    # larger substrates, up to 20 heavy atoms
    ("CC1=CCC(CC1)C(C)=C", "HCl"),                       # limonene, 10
    ("CC(C)CCCC(C)CCCC(C)CCCC(C)=CC", "HBr"),            # C20 trisubstituted alkene, 20
    ("C=CC(C)(C)CC(C)(C)CC1CCCCC1C", "H2O/H2SO4"),       # 18, shifts next to quaternary centres
    ("CC1(C)C2CCC1(C)C(O)C2", "H2SO4, heat"),           # borneol, bicyclic, 11
    ("CCCCCCC(O)C(C)(C)CCCCCC", "HBr"),                 # 17
    ("C=CC(C)c1ccc(cc1)C(C)(C)C", "HCl"),               # 15, benzylic after hydride shift
    ("CC(=CCCC(=CCCC(C)(C)O)C)C", "H2O/H2SO4"),         # 15, two C=C plus OH
]


def _time(substrate: str, reagent: str, repeats: int, use_xtb: bool = False) -> tuple[float, float, float, int]:
    """(median CPU ms, median wall ms, worst wall ms, number of candidates)."""
    wall, cpu = [], []
    n = 0
    for _ in range(repeats):
        c0, t0 = time.process_time(), time.perf_counter()
        res = enumerate_products(substrate, reagent, use_xtb=use_xtb)
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        n = len(res.candidates)
    return statistics.median(cpu) * 1e3, statistics.median(wall) * 1e3, max(wall) * 1e3, n


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeats", type=int, default=5)
    ap.add_argument("--no-xtb", action="store_true")
    args = ap.parse_args()
    enumerate_products("C=CC", "HBr")  # warm-up: data tables, RDKit
    print(f"load average (1 min) {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores; repeats {args.repeats}")
    print(f"{'substrate':<34}{'reagent':<22}{'heavy':>6}{'cands':>7}{'cpu/ms':>8}{'wall/ms':>9}{'max wall':>10}")
    rows = []
    for s, r in REACTIONS:
        heavy = Chem.MolFromSmiles(s).GetNumHeavyAtoms()
        cpu, med, worst, n = _time(s, r, args.repeats)
        rows.append((heavy, cpu, med))
        print(f"{s:<34}{r:<22}{heavy:>6}{n:>7}{cpu:>8.1f}{med:>9.1f}{worst:>10.1f}")
    cpus = [c for h, c, _ in rows if h <= 20]
    walls = [w for h, _, w in rows if h <= 20]
    print(f"\nwithout xTB, {len(cpus)} reactions <= 20 heavy atoms (target <= 50 ms per reaction):")
    print(f"  CPU time : median {statistics.median(cpus):.1f} ms, slowest {max(cpus):.1f} ms")
    print(f"  wall time: median {statistics.median(walls):.1f} ms, slowest {max(walls):.1f} ms")
    if args.no_xtb:
        return
    from specmatch.reactions.xtb import available

    if not available():
        print("with xTB: tblite is not installed (pip install 'specmatch[xtb]'); skipped")
        return
    print("\nwith GFN2-xTB refinement (first call: cation energies not cached; then cached):")
    for s, r in [("C=CC(C)C", "HCl"), ("C=CC(C)CC", "HBr"), ("C=C(C)C1CCC1", "HCl"), ("C=CCCC", "HBr")]:
        _, first, _, n = _time(s, r, 1, use_xtb=True)
        _, cached, _, _ = _time(s, r, 1, use_xtb=True)
        res = enumerate_products(s, r, use_xtb=True)
        print(f"  {s:<20}{r:<8} first {first:>8.0f} ms wall   cached {cached:>6.1f} ms wall   {res.ranked_by}")


if __name__ == "__main__":
    main()
