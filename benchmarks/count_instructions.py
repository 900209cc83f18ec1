"""Instructions per molecule of ``predict --batch``, counted by valgrind's callgrind.

Usage::

    python benchmarks/count_instructions.py ../shared/reference/nmrshiftdb2_dev.jsonl --scope core --limit 200
    python benchmarks/count_instructions.py FILE --baseline /tmp/base   # another source tree as well

On a machine shared with other work, wall and CPU times follow the load; the number of
instructions executed does not (to within a fraction of a percent between runs), so it
is the figure to compare two versions of the predictor under load. Prints its inputs,
then for each tree:

- start-up: instructions of a process that imports the predictor, loads its tables and
  warms it (``prediction.batch.warm``), as a worker inherits it, and predicts nothing;
- per molecule: (instructions with N molecules - start-up) / N, the molecules predicted
  in that process with ``predict_line`` (the batch worker's task) after
  ``worker_setup`` (collector off, as in a forked worker);
- the whole one-molecule command ``python -m specmatch predict --batch`` (start-up of
  the command as a user runs it).

Needs ``valgrind`` on the PATH (Debian package ``valgrind``). The scope is that of
``../shared/tools/specbench.py`` (core: no aromatic ring, no carbonyl, at most 12 heavy
atoms). Under callgrind a run is some 50 times slower: 200 molecules take about a minute.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
from pathlib import Path

_RUNNER = """
import sys
from specmatch.prediction.batch import predict_line, warm, worker_setup
warm()
worker_setup()
n = int(sys.argv[2])
lines = open(sys.argv[1], encoding="utf-8").read().split("\\n")[:n]
rows = [predict_line(line) for line in lines]
"""


def _smiles(path: str, scope: str, limit: int) -> list[str]:
    # the same selection as bench_speed.py (and specbench's scopes)
    sys.path.insert(0, str(Path(__file__).resolve().parent))
    from bench_speed import _smiles as select

    return select(path, scope, limit)


def _count(cmd: list[str], env: dict[str, str], tmp: str, cwd: str) -> int:
    out = os.path.join(tmp, "callgrind.out")
    # run in the tree: ``python -m`` puts the working folder first on the path
    p = subprocess.run(["valgrind", "--tool=callgrind", f"--callgrind-out-file={out}", *cmd],
                       capture_output=True, text=True, env=env, cwd=cwd)
    if p.returncode != 0:
        raise SystemExit(f"valgrind run failed ({p.returncode}): {p.stderr[-2000:]}")
    m = re.search(r"Collected\s*:\s*(\d+)", p.stderr)
    if not m:
        raise SystemExit("valgrind printed no instruction count")
    return int(m.group(1))


def _tree(label: str, tree: str, smi: str, n: int, tmp: str) -> None:
    tree = os.path.abspath(tree)
    env = dict(os.environ)
    env["PYTHONPATH"] = tree + (os.pathsep + env["PYTHONPATH"] if env.get("PYTHONPATH") else "")
    runner = os.path.join(tmp, "runner.py")
    Path(runner).write_text(_RUNNER, encoding="utf-8")
    start = _count([sys.executable, runner, smi, "0"], env, tmp, tree)
    full = _count([sys.executable, runner, smi, str(n)], env, tmp, tree)
    one = os.path.join(tmp, "one.smi")
    Path(one).write_text("CC(C)C(C)O\n", encoding="utf-8")
    command = _count([sys.executable, "-m", "specmatch", "predict", "--batch", one, "--out",
                      os.path.join(tmp, "one.jsonl"), "--workers", "0"], env, tmp, tree)
    print(f"{label}: start-up (tables loaded, warm) {start / 1e6:.1f} M; "
          f"per molecule {(full - start) / n / 1e6:.3f} M ({n} molecules); "
          f"whole one-molecule command {command / 1e6:.1f} M instructions")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("file", help="a JSONL file with 'smiles' and 'classes' per record (the dev split)")
    ap.add_argument("--scope", choices=("core", "wide"), default="core")
    ap.add_argument("--limit", type=int, default=200)
    ap.add_argument("--baseline", metavar="DIR", help="another specmatch source tree, counted first")
    a = ap.parse_args(argv)
    if not shutil.which("valgrind"):
        print("valgrind not found: install it (Debian package valgrind)", file=sys.stderr)
        return 2
    smiles = _smiles(a.file, a.scope, a.limit)
    print(f"input: {a.file} scope={a.scope} molecules={len(smiles)} python={sys.version.split()[0]} "
          f"PYTHONDONTWRITEBYTECODE={os.environ.get('PYTHONDONTWRITEBYTECODE', '')!r} "
          "(unset, a bytecode cache spares the compile share of the start-up)")
    with tempfile.TemporaryDirectory() as tmp:
        smi = os.path.join(tmp, "in.smi")
        Path(smi).write_text("\n".join(smiles) + "\n", encoding="utf-8")
        if a.baseline:
            _tree(f"baseline {a.baseline}", a.baseline, smi, len(smiles), tmp)
        _tree("this tree", str(Path(__file__).resolve().parent.parent), smi, len(smiles), tmp)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
