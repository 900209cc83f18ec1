"""Speed of prediction: per-stage time per molecule, the whole batch command, start-up.

Usage::

    python benchmarks/bench_speed.py ../shared/reference/nmrshiftdb2_dev.jsonl --scope core
    python benchmarks/bench_speed.py FILE --limit 500 --stages-only     # quick, in-process only

Prints its inputs (file, scope, molecules, CPUs), then

- per stage, CPU milliseconds per molecule measured in this process on fresh caches:
  parse (``mol_from_text``), perceive (``perceive``: symmetry, stereo, diastereotopic
  groups), the shared graph view, 13C increments + correction, 1H sites + correction,
  the whole ``predict_structure`` and the JSON row;
- the whole command ``specmatch predict --batch IN --out OUT`` (one process start, default
  worker policy, and ``--workers 0``) in molecules/s, start-up included;
- the start-up time of ``specmatch --help`` and of a one-molecule ``predict --batch``
  (best of 5, wall and CPU); where Python writes no bytecode (``PYTHONDONTWRITEBYTECODE``
  set: every start then compiles specmatch's modules again), also the one-molecule
  start-up with a bytecode cache in a temporary folder, which shows that share;
- with ``--baseline DIR`` (another source tree of specmatch, e.g. a checkout of the
  previous commit: ``git worktree add /tmp/base HEAD~3``), the whole command of that
  tree and of this one, alternately, ``--rounds`` times each, wall and CPU seconds
  (the processes' user + system time): on a shared machine the CPU time is the figure
  to compare, the wall time follows the load. Both trees run with this interpreter.

The scopes are those of ``../shared/tools/specbench.py`` (core: no aromatic ring, no
carbonyl, at most 12 heavy atoms; wide: every record). Figures depend on the machine and
its load: compare runs made on the same machine.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path


def _smiles(path: str, scope: str, limit: int) -> list[str]:
    from rdkit import Chem, RDLogger

    RDLogger.DisableLog("rdApp.*")
    out = []
    with open(path, encoding="utf-8") as fh:
        for line in fh:
            rec = json.loads(line)
            if scope == "core":
                m = Chem.MolFromSmiles(rec["smiles"])
                if m is None or m.GetNumHeavyAtoms() > 12 or "aromatic" in rec["classes"] \
                        or "carbonyl" in rec["classes"]:
                    continue
            out.append(rec["smiles"])
            if limit and len(out) >= limit:
                break
    return out


def _stages(smiles: list[str]) -> None:
    from specmatch.errors import SpecmatchError
    from specmatch.prediction import predict_structure
    from specmatch.prediction.c13.predictor import predict_carbons
    from specmatch.prediction.h1.predictor import predict_protons
    from specmatch.prediction.hose import MolCodes, load_table
    from specmatch.structures.graph import graph_of
    from specmatch.structures.molecule import mol_from_text, perceive

    load_table("13C"), load_table("1H")
    mols, structs = [], []
    t = time.process_time()
    for s in smiles:
        try:
            mols.append((s, mol_from_text(s)))
        except SpecmatchError:
            pass
    t_parse = time.process_time() - t
    t = time.process_time()
    for s, m in mols:
        structs.append(perceive(m, s))
    t_perc = time.process_time() - t
    n = len(structs)
    t = time.process_time()
    for st in structs:
        graph_of(st)
    t_graph = time.process_time() - t
    t = time.process_time()
    codes = [MolCodes(st.mol) for st in structs]
    t_codes = time.process_time() - t
    t = time.process_time()
    for st, c in zip(structs, codes):
        predict_carbons(st, codes=c)
    t_c = time.process_time() - t
    t = time.process_time()
    for st, c in zip(structs, codes):
        predict_protons(st, codes=c)
    t_h = time.process_time() - t
    # the whole prediction on freshly perceived structures (graph view not yet built)
    fresh = [perceive(m, s) for s, m in mols]
    t = time.process_time()
    preds = [predict_structure(st, geometry=False) for st in fresh]
    t_all = time.process_time() - t
    from specmatch.prediction.batch import row_json

    t = time.process_time()
    for p in preds:
        row_json(p, p.smiles)  # the batch command's row text (json.dumps of to_dict, written directly)
    t_json = time.process_time() - t
    print(f"stages, CPU ms per molecule ({n} molecules, this process; CPU time: the machine may be shared):")
    for name, v in (("parse (mol_from_text)", t_parse), ("perceive (Structure)", t_perc),
                    ("graph view", t_graph), ("environment-code builder", t_codes),
                    ("13C (environments, sums, correction)", t_c),
                    ("1H (sites, sums, multiplets, correction)", t_h),
                    ("predict_structure, whole", t_all), ("row to JSON", t_json)):
        print(f"  {name:42s} {1000 * v / max(n, 1):7.3f}")
    total = t_parse + t_perc + t_all + t_json
    print(f"  {'parse + perceive + predict + JSON':42s} {1000 * total / max(n, 1):7.3f}"
          f"  ({n / total:.0f} molecules/s in one process)")


def _command(smiles: list[str], workers: str | None, tree: str | None = None) -> tuple[float, float]:
    """Wall and CPU seconds (user + system of the command and its workers) of one
    ``predict --batch`` run; ``tree``: run that source tree's specmatch instead."""
    if tree:
        cmd = [sys.executable, "-m", "specmatch"]
        env = {**os.environ, "PYTHONPATH": os.path.abspath(tree)}
    else:
        exe = shutil.which("specmatch", path=str(Path(sys.executable).parent)) or shutil.which("specmatch")
        cmd = [exe] if exe else [sys.executable, "-m", "specmatch"]
        env = None
    with tempfile.TemporaryDirectory() as tmp:
        src, out = os.path.join(tmp, "in.smi"), os.path.join(tmp, "out.jsonl")
        Path(src).write_text("\n".join(smiles) + "\n", encoding="utf-8")
        args = cmd + ["predict", "--batch", src, "--out", out] + (["--workers", workers] if workers else [])
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        p = subprocess.run(args, capture_output=True, text=True, env=env, cwd=tree or None)
        wall = time.perf_counter() - t
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        if p.returncode not in (0, 1):
            sys.exit(f"{' '.join(args)} exited {p.returncode}: {p.stderr[-2000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def cmd_of_specmatch() -> list[str]:
    """The ``specmatch`` command of this interpreter's environment."""
    exe = shutil.which("specmatch", path=str(Path(sys.executable).parent)) or shutil.which("specmatch")
    return [exe] if exe else [sys.executable, "-m", "specmatch"]


def _startup(args: list[str] | None = None, env: dict[str, str] | None = None) -> tuple[float, float]:
    """Best wall and CPU seconds of 5 runs of ``specmatch ARGS`` (default ``--help``),
    with environment ``env`` (default: this one)."""
    cmd = cmd_of_specmatch()
    best, best_cpu = float("inf"), float("inf")
    for _ in range(5):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        t = time.perf_counter()
        subprocess.run(cmd + (args or ["--help"]), capture_output=True, env=env)
        best = min(best, time.perf_counter() - t)
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        best_cpu = min(best_cpu, after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return best, best_cpu


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("records", help="nmrshiftdb2-style JSON lines (smiles, classes)")
    ap.add_argument("--scope", choices=("core", "wide"), default="core")
    ap.add_argument("--limit", type=int, default=0, help="first N molecules of the scope (0: all)")
    ap.add_argument("--stages-only", action="store_true", help="skip the whole-command and start-up runs")
    ap.add_argument("--baseline", metavar="DIR", help="another specmatch source tree to compare with (alternate runs)")
    ap.add_argument("--rounds", type=int, default=2, help="with --baseline: runs of each tree (default 2)")
    ap.add_argument("--workers", default="0", help="with --baseline: the --workers of the compared runs (default 0)")
    a = ap.parse_args()
    smiles = _smiles(a.records, a.scope, a.limit)
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:
        cpus = os.cpu_count() or 1
    print(f"input: {a.records} scope={a.scope} molecules={len(smiles)} cpus={cpus} "
          f"python={sys.version.split()[0]} SPECMATCH_WORKERS={os.environ.get('SPECMATCH_WORKERS', '')!r} "
          f"PYTHONDONTWRITEBYTECODE={os.environ.get('PYTHONDONTWRITEBYTECODE', '')!r} "
          f"load average {os.getloadavg()[0]:.1f}")
    if a.baseline:
        _compare(smiles, a.baseline, a.rounds, a.workers)
        return
    _stages(smiles)
    if a.stages_only:
        return
    for workers in (None, "0"):
        wall, cpu = _command(smiles, workers)
        what = "default workers" if workers is None else f"--workers {workers}"
        print(f"whole command, {what}: {len(smiles) / wall:.0f} molecules/s ({wall:.2f} s wall, "
              f"{cpu:.2f} s CPU, start-up included)")
    wall, cpu = _startup()
    print(f"start-up, specmatch --help (best of 5): {wall:.2f} s wall, {cpu:.2f} s CPU")
    with tempfile.TemporaryDirectory() as tmp:
        src = os.path.join(tmp, "one.smi")
        Path(src).write_text("CC(C)CO\n", encoding="utf-8")
        one = ["predict", "--batch", src, "--out", os.path.join(tmp, "one.jsonl")]
        wall, cpu = _startup(one)
        print(f"start-up, one-molecule predict --batch (best of 5): {wall:.2f} s wall, {cpu:.2f} s CPU")
        if sys.dont_write_bytecode:
            # no bytecode is written here (PYTHONDONTWRITEBYTECODE, or an editable install
            # that has never been run with it off): every start compiles specmatch's own
            # modules; the same start with a bytecode cache (filled by the first of the runs)
            # shows that share
            env = {**os.environ, "PYTHONDONTWRITEBYTECODE": "", "PYTHONPYCACHEPREFIX": os.path.join(tmp, "pyc")}
            subprocess.run(cmd_of_specmatch() + one, capture_output=True, env=env)
            wall, cpu = _startup(one, env)
            print(f"start-up, the same with a bytecode cache (PYTHONPYCACHEPREFIX, best of 5): "
                  f"{wall:.2f} s wall, {cpu:.2f} s CPU")


def _compare(smiles: list[str], baseline: str, rounds: int, workers: str) -> None:
    """The whole command of the baseline tree and of this one, alternately."""
    here = str(Path(__file__).resolve().parents[1])
    runs: dict[str, list[tuple[float, float]]] = {"baseline": [], "this tree": []}
    for _ in range(rounds):
        runs["baseline"].append(_command(smiles, workers, baseline))
        runs["this tree"].append(_command(smiles, workers, here))
    print(f"whole command, --workers {workers}, {rounds} alternate runs each (best; CPU = user + system):")
    for name, tree in (("baseline", baseline), ("this tree", here)):
        wall = min(w for w, _ in runs[name])
        cpu = min(c for _, c in runs[name])
        print(f"  {name:10s} {tree}: {len(smiles) / wall:.0f} molecules/s wall ({wall:.2f} s), "
              f"{len(smiles) / cpu:.0f} molecules per CPU second ({cpu:.2f} s)")
    print(f"  load average at the end {os.getloadavg()[0]:.1f}")


if __name__ == "__main__":
    main()
