"""Batch throughput: 1,000 synthetic samples on a local pool (1 and 2 workers) and Dask.

Run:  .venv/bin/python benchmarks/bench_batch.py [--samples 1000] [--workload rank|identify|noop]

What one synthetic sample is (this text is printed at the start of a run):
- setup (not timed): for each of a few alkene + reagent pairs, the enumeration stage
  lists the candidate products; each sample picks one pair and one of its candidates
  as the "true" product, and gets an invented 13C peak list (CSV file) made from
  that product's predicted shifts plus Gaussian noise (sigma 1 ppm, seeded by the
  sample number). Nothing here is measured data.
- per sample (timed), in the batch runner: the parent reads and hashes the CSV file
  and sends it to a worker; the worker parses it and ranks the pair's candidates
  against it (``workload=rank``: specmatch.identification.rank, whose per-candidate
  predictions are cached in each worker after first use, so this is mostly
  scoring) or runs the whole pipeline (``workload=identify``: enumeration,
  prediction, ranking, from the reaction and the peak list) or nothing
  (``workload=noop``: the batch machinery alone); the parent saves the
  result and the file in a fresh SQLite store (WAL, synchronous=FULL, results that
  finish together share one commit).
- wall time is that of run_batch (through specmatch.executor, the one batch runner),
  including starting the local worker processes (spawn) and checking each saved
  result into the audit chain; the Dask LocalCluster (2 worker processes, 1 thread each) runs in a
  process of its own and is started before the clock, as an existing cluster
  would be (its workers still import specmatch on their first sample, inside the
  clock).
"""

from __future__ import annotations

import argparse
import csv
import io
import os
import random
import shutil
import sys
import tempfile
import time
from pathlib import Path

from specmatch import __version__

REACTIONS = [  # (substrate SMILES, reagent) - invented benchmark set
    ("C=CC(C)C", "HBr"),
    ("C=CCC(C)C", "HCl"),
    ("C=CC1CCCCC1", "H2O/H2SO4"),
    ("CC(C)=CC", "HBr"),
    ("C=C(C)CC", "HI"),
    ("C=CC(C)(C)C", "HCl"),
    ("C=CCCC", "MeOH/H2SO4"),
    ("C1=CCCCC1", "HBr"),
]


def _peaks(data: bytes) -> list[float]:
    rows = csv.DictReader(io.StringIO(data.decode("utf-8")))
    return [float(r["shift_ppm"]) for r in rows]


def rank_sample(row: dict, base_dir: str) -> dict:
    """Rank the given candidates against the sample's 13C peak list (light workload)."""
    from specmatch.identification import rank

    ppm = _peaks(row["_files"]["c13"]["bytes"])
    ranking = rank(row["candidates"], c13=ppm)
    out = ranking.to_dict()
    out["inputs"] = {"substrate": row["substrate"], "reagent": row["reagent"],
                     "solvent": row.get("solvent") or None}
    out["versions"] = {"specmatch": __version__, "prediction_tables": "shipped"}
    out["bench_finished_at"] = time.time()  # for the steady-state rate (first to last result)
    return out


def noop_sample(row: dict, base_dir: str) -> dict:
    """No chemistry: a fixed small result (measures the batch machinery alone)."""
    return {"inputs": {"substrate": row["substrate"], "reagent": row["reagent"]},
            "versions": {"specmatch": __version__},
            "candidates": [{"smiles": s, "probability": 1 / len(row["candidates"])}
                           for s in row["candidates"]],
            "verdict": {"word": "none", "top": row["candidates"][0]},
            "bench_finished_at": time.time()}


def identify_sample(row: dict, base_dir: str) -> dict:
    """The whole identify pipeline from the reaction and the 13C peak list."""
    from specmatch.identification import identify

    ppm = _peaks(row["_files"]["c13"]["bytes"])
    out = identify(substrate=row["substrate"], reagent=row["reagent"], c13=ppm,
                   solvent=row.get("solvent") or None).to_dict()
    out["bench_finished_at"] = time.time()
    return out


def _host_cluster(addresses, stop) -> None:
    """Run a LocalCluster in its own process until told to stop (like a running cluster)."""
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster:
        addresses.put(cluster.scheduler_address)
        stop.wait()


def make_manifest(folder: Path, n: int) -> Path:
    from specmatch.prediction import predict
    from specmatch.reactions import enumerate_products

    sets = []
    for substrate, reagent in REACTIONS:
        cands = [c.smiles for c in enumerate_products(substrate, reagent).candidates][:6]
        sets.append((substrate, reagent, cands))
    (folder / "spectra").mkdir(parents=True, exist_ok=True)
    lines = ["sample_id,substrate,reagent,c13,solvent,candidates"]
    for i in range(n):
        rng = random.Random(i)
        substrate, reagent, cands = sets[i % len(sets)]
        true = cands[rng.randrange(len(cands))]
        shifts = sorted({round(c.shift + rng.gauss(0.0, 1.0), 2) for c in predict(true).carbons},
                        reverse=True)
        rel = f"spectra/B{i:04d}_13C.csv"
        (folder / rel).write_text("shift_ppm\n" + "\n".join(f"{s:.2f}" for s in shifts) + "\n")
        lines.append(f"B{i:04d},{substrate},{reagent},{rel},CDCl3,{';'.join(cands)}")
    m = folder / "bench_manifest.csv"
    m.write_text("\n".join(lines) + "\n")
    return m


def timed(label: str, manifest: Path, folder: Path, runner, **kw) -> tuple[float, float]:
    """(overall rate incl. start-up, steady rate from first to last result), samples/s."""
    from specmatch.store import open_store
    from specmatch.store.batch import run_batch

    store = folder / f"{label.replace(' ', '_')}.sqlite"
    t0 = time.perf_counter()
    res = run_batch(manifest, folder / f"out_{label.replace(' ', '_')}", store=f"sqlite:///{store}",
                    runner=runner, progress=False, **kw)
    wall = time.perf_counter() - t0
    done, failed = res.count("done"), res.count("failed")
    assert done + failed == len(res.rows)
    with open_store(f"sqlite:///{store}", read_only=True) as st:
        stamps = sorted(r.data["bench_finished_at"] for r in st.search(limit=None))
        t1 = time.perf_counter()
        report = st.verify()  # the whole audit trail: every link, file and trigger
        verify_s = time.perf_counter() - t1
    assert report.ok, report.problems[:3]
    steady = (len(stamps) - 1) / (stamps[-1] - stamps[0])
    overall = len(res.rows) / wall
    print(f"{label:<28} {len(res.rows):>5} samples  {wall:7.2f} s  {overall:7.1f} samples/s overall"
          f"  {steady:7.1f} samples/s steady  (done {done}, failed {failed}); "
          f"history verify {verify_s:.2f} s for {report.versions} versions", flush=True)
    return overall, steady


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--samples", type=int, default=1000)
    ap.add_argument("--workload", choices=["rank", "identify", "noop"], default="rank")
    args = ap.parse_args()
    runner = {"rank": rank_sample, "identify": identify_sample, "noop": noop_sample}[args.workload]

    print(__doc__.split("Run:")[0].strip().splitlines()[0])
    print(__doc__[__doc__.index("What one synthetic sample"):].rstrip())
    print(f"workload this run: {args.workload} - {runner.__doc__}")
    print(f"samples: {args.samples}; reactions: {', '.join(f'{s} + {r}' for s, r in REACTIONS)}")
    load = os.getloadavg() if hasattr(os, "getloadavg") else ("n/a",)
    print(f"machine: {os.cpu_count()} CPUs, load average {load[0]:.1f} at start (shared machine: "
          "other jobs compete for the CPUs)")
    folder = Path(tempfile.mkdtemp(prefix="specmatch-bench-batch-"))
    try:
        manifest = make_manifest(folder, args.samples)
        # the work alone, in this process, for reference (no pool, no store)
        from specmatch.store.batch import read_manifest

        samples = read_manifest(manifest)[:100]
        runner(samples[0].task(), str(folder))  # imports and caches outside the clock
        t0 = time.perf_counter()
        for s in samples:
            runner(s.task(), str(folder))
        per = (time.perf_counter() - t0) / len(samples)
        print(f"work alone (in-process, warm): {per * 1000:.1f} ms per sample")
        print()
        r1 = timed("local pool, 1 worker", manifest, folder, runner, workers=1)
        r2 = timed("local pool, 2 workers", manifest, folder, runner, workers=2)
        import multiprocessing

        ctx = multiprocessing.get_context("spawn")
        addresses, stop = ctx.Queue(), ctx.Event()
        host = ctx.Process(target=_host_cluster, args=(addresses, stop))
        host.start()
        try:
            address = addresses.get(timeout=120)
            rd = timed("Dask LocalCluster, 2 workers", manifest, folder, runner, scheduler=address)
        finally:
            stop.set()
            host.join(timeout=60)
        print()
        print("overall = samples / wall time of run_batch (start-up included); steady = results "
              "between the first and the last finished sample / their time span")
        print(f"scaling ratio, 2 vs 1 local workers: {r2[0] / r1[0]:.2f}x overall, "
              f"{r2[1] / r1[1]:.2f}x steady")
        print(f"scaling ratio, Dask 2 workers vs 1 local worker: {rd[0] / r1[0]:.2f}x overall, "
              f"{rd[1] / r1[1]:.2f}x steady")
        load = os.getloadavg() if hasattr(os, "getloadavg") else ("n/a",)
        print(f"load average at end: {load[0]:.1f}")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
