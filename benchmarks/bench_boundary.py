"""Benchmark: hostile and careless inputs at the boundary, wall time and peak memory.

Run:  .venv/bin/python benchmarks/bench_boundary.py [--rows 10000] [--junk-mb 200]

Each case runs the CLI in a child process (``python -m specmatch ...``) and reports
its exit code, wall time and the child's own peak resident size (``wait4``); the
inputs are made here (invented: random shifts, zeros) and printed with the case:

- ``peaks /dev/zero`` and ``identify --c13 /dev/zero`` (a device named as a spectrum);
- a 1H peak list CSV of ``--rows`` rows (random shifts 0.5-9.5 ppm, integral 1,
  singlets) through ``peaks`` and ``identify --mixture``;
- a ``--junk-mb`` MB text file of x,y junk (sparse: no disk used) through ``peaks``;
- a batch manifest whose only row names /dev/zero.

Targets (the "done when" of the hostile-input work): exit 2 within seconds and under
300 MB for /dev/zero; the many-row peak list answered or refused within 10 s. Times
are wall clock on whatever machine runs this; a busy machine inflates them.
"""

from __future__ import annotations

import argparse
import os
import random
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def run(args: list[str], timeout: float = 300) -> tuple[int, float, float, str]:
    """(exit code, wall s, peak resident MB, last stderr line) of one CLI run."""
    import threading

    with tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        child = subprocess.Popen([sys.executable, "-m", "specmatch", *args], cwd=ROOT,
                                 stdout=subprocess.DEVNULL, stderr=err)
        timer = threading.Timer(timeout, child.kill)
        timer.start()
        try:
            _, status, usage = os.wait4(child.pid, 0)
        finally:
            timer.cancel()
        wall = time.perf_counter() - t0
        child.returncode = os.waitstatus_to_exitcode(status)
        err.seek(0)
        lines = err.read().decode(errors="replace").strip().splitlines()
    return child.returncode, wall, usage.ru_maxrss / 1024, (lines[-1] if lines else "")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=10_000, help="rows of the big peak list")
    ap.add_argument("--junk-mb", type=int, default=200, help="size of the junk text file")
    args = ap.parse_args(argv)
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"python {sys.version.split()[0]}, cpus {os.cpu_count()}, load average {load:.1f}")
    with tempfile.TemporaryDirectory() as tmp:
        t = Path(tmp)
        rng = random.Random(0)
        csv = t / "many_1H.csv"
        csv.write_text("shift,integral,multiplicity,j\n"
                       + "".join(f"{rng.uniform(0.5, 9.5):.4f},1,s,\n" for _ in range(args.rows)))
        junk = t / "junk.txt"
        with open(junk, "wb") as fh:
            fh.write(b"1.0,2.0\nxx,yy\n" * 1000)
            fh.truncate(args.junk_mb * 1024 * 1024)
        manifest = t / "m.csv"
        manifest.write_text("sample_id,substrate,reagent,c13\nZ-1,C=CC,HBr,/dev/zero\n")
        store = f"sqlite:///{t / 's.sqlite'}"
        reaction = ["--substrate", "C=CC", "--reagent", "HBr"]
        cases = [
            ("peaks /dev/zero", ["peaks", "/dev/zero"], 2, 300),
            ("identify --c13 /dev/zero", ["identify", *reaction, "--c13", "/dev/zero"], 2, 300),
            (f"peaks, 1H CSV of {args.rows:,} rows ({csv.stat().st_size / 1e3:.0f} kB)",
             ["peaks", str(csv), "--nucleus", "1H"], None, None),
            (f"identify --mixture, 1H CSV of {args.rows:,} rows",
             ["identify", *reaction, "--h1", str(csv), "--mixture"], None, None),
            (f"peaks, {args.junk_mb} MB of x,y junk text", ["peaks", str(junk)], 2, None),
            ("batch, a manifest row naming /dev/zero",
             ["batch", str(manifest), "--store", store, "--out", str(t / "out"), "--workers", "0"],
             None, 300),
        ]
        print(f"{'case':58s} {'exit':>4s} {'wall s':>7s} {'peak MB':>8s}  message")
        ok = True
        for label, cli, want_code, max_mb in cases:
            code, wall, mb, msg = run(cli)
            good = (want_code is None or code == want_code) and (max_mb is None or mb < max_mb) \
                and wall < 10 and "Traceback" not in msg
            ok &= good
            print(f"{label:58s} {code:4d} {wall:7.2f} {mb:8.0f}  {msg[:90]}{'' if good else '  <- MISSED'}")
    print("all within the targets" if ok else "some case missed its target")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
