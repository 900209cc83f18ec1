"""Benchmark: a 1H spectrum from file to multiplets (``peaks_from_file``).

Targets (issue 5): 64k points <= 0.3 s, 256k points <= 1 s.

The input is a synthetic 400 MHz 1H spectrum in CDCl3 (invented: an ethyl group,
an isopropyl group, a few singlets, CHCl3, water, TMS, noise), written as JCAMP-DX
with specmatch's own writer in the ordinate form given. Time is wall clock for
read + decode + baseline + noise + picking + referencing + multiplets + flags,
median of `--repeat` runs after one warm-up run (imports excluded).

    python benchmarks/bench_peaks.py [--form DIFDUP] [--repeat 5]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from specmatch.spectra import Spectrum, peaks_from_file, write_jcampdx  # noqa: E402

FREQ = 400.13


def _lor(ppm, c, w_hz, area):
    hw = w_hz / 2
    return area / (np.pi * hw) / (1 + (((ppm - c) * FREQ) / hw) ** 2)


def _multiplet(ppm, c, n_h, pattern, j_hz):
    k = len(pattern)
    return sum(_lor(ppm, c + (i - (k - 1) / 2) * j_hz / FREQ, 1.0, n_h * a / sum(pattern))
               for i, a in enumerate(pattern))


def synthetic(n: int) -> Spectrum:
    ppm = np.linspace(12.0, -1.0, n)
    y = (_multiplet(ppm, 3.65, 2, [1, 3, 3, 1], 7.1) + _multiplet(ppm, 1.21, 3, [1, 2, 1], 7.1)
         + _multiplet(ppm, 4.02, 1, [1, 6, 15, 20, 15, 6, 1], 6.2) + _multiplet(ppm, 1.17, 6, [1, 1], 6.2)
         + _lor(ppm, 2.10, 1.0, 3) + _lor(ppm, 5.30, 1.0, 0.1)
         + _lor(ppm, 7.26, 1.0, 0.05) + _lor(ppm, 1.56, 3.0, 0.1) + _lor(ppm, 0.0, 1.0, 0.3))
    y = y / y.max() + np.random.default_rng(0).normal(0, 3e-4, n)
    return Spectrum("1H", ppm, y, FREQ, "CDCl3", f"synthetic {n} points")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--form", default="DIFDUP", choices=["AFFN", "PAC", "SQZ", "DIF", "DUP", "DIFDUP"])
    ap.add_argument("--repeat", type=int, default=5)
    args = ap.parse_args(argv)
    targets = {65536: 0.3, 262144: 1.0}
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"python {sys.version.split()[0]}, numpy {np.__version__}, cpus {os.cpu_count()}, "
          f"load average {load:.1f} (timings are wall clock; a busy machine inflates them)")
    print(f"input: synthetic 400.13 MHz 1H spectrum, JCAMP-DX {args.form}, median of {args.repeat} runs")
    ok = True
    with tempfile.TemporaryDirectory() as tmp:
        for n, limit in targets.items():
            path = Path(tmp) / f"h1_{n}.jdx"
            write_jcampdx(synthetic(n), path, form=args.form)
            peaks_from_file(path)  # warm-up (lazy imports, caches)
            times, cpu = [], []
            for _ in range(args.repeat):
                t0, c0 = time.perf_counter(), time.process_time()
                pl = peaks_from_file(path)
                times.append(time.perf_counter() - t0)
                cpu.append(time.process_time() - c0)
            med = statistics.median(times)
            comp = pl.compound_multiplets()
            desc = ", ".join(f"{m.shift:.2f} {m.multiplicity}" for m in comp)
            verdict = "ok" if med <= limit else "SLOW"
            ok &= med <= limit
            print(f"{n:>7,} points  file {path.stat().st_size / 1e6:5.2f} MB  "
                  f"median {med:.3f} s (min {min(times):.3f}, cpu {statistics.median(cpu):.3f})  "
                  f"target <= {limit:.1f} s  {verdict}")
            print(f"         {len(pl.peaks)} lines, {len(pl.multiplets)} multiplets; compound: {desc}")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
