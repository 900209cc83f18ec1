"""Per-sample runners for the batch tests (no tests here).

They stand in for the identify pipeline so the batch machinery (pool, Dask,
resume, failures) is tested on its own; they must live in an importable module
because worker processes import them by name.
"""

from __future__ import annotations

import hashlib
import os
import time

from specmatch import __version__
from specmatch.errors import SpecmatchError


def echo_runner(row: dict, base_dir: str) -> dict:
    """A result dict of the identify shape built from the row and its file bytes.

    The verdict's probability is derived from the file bytes, so a test can check
    that the worker saw exactly the bytes of the manifest's files. A substrate
    'FAIL' raises like a bad structure would; 'CRASH' raises a non-specmatch error;
    'DIE' ends the worker process.
    """
    if row["substrate"] == "FAIL":
        raise SpecmatchError(f"'{row['substrate']}' is not a valid SMILES")
    if row["substrate"] == "CRASH":
        raise RuntimeError("worker blew up")
    if row["substrate"] == "DIE":
        os._exit(3)  # the worker process dies, as on a segfault or an out-of-memory kill
    digest = "".join(hashlib.sha256(f["bytes"]).hexdigest()[:8]
                     for _, f in sorted(row["_files"].items()))
    delay = float(os.environ.get("SPECMATCH_TEST_SAMPLE_DELAY_S", "0"))
    if delay:
        time.sleep(delay)
    cands = [row["substrate"] + "Br", *row.get("candidates", [])]
    return {
        "inputs": {"substrate": row["substrate"], "reagent": row["reagent"],
                   "solvent": row.get("solvent") or None},
        "versions": {"specmatch": __version__, "prediction_tables": "none (test runner)"},
        "candidates": [{"smiles": s, "probability": 1.0 / len(cands)} for s in cands],
        "verdict": {"word": "tentative", "top": cands[0], "p_top": 1.0 / len(cands)},
        "files_seen": digest,
        "worker_pid": os.getpid(),
    }
