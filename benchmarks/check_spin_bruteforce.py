#!/usr/bin/env python3
"""Independent check of specmatch.prediction.spin against brute force.

The brute force builds the full 2**n Hamiltonian from Kronecker products of Pauli
matrices (no composite particles, no clusters, no Fz blocks), diagonalises it with
numpy.linalg.eigh and takes every transition of F+ = sum I+_i. Random spin systems
(2-7 spins, random shifts within 0-3 ppm, random couplings -18..+18 Hz on random
pairs, some magnetically equivalent sets) at 43-400 MHz are compared line by line:
the two line lists are pooled and cut where neighbouring lines are 0.1 Hz or more
apart; per piece, summed intensity and weighted position are compared, and the worst position
and intensity differences are printed (target: 0.05 Hz and 2% of the largest line).

    python benchmarks/check_spin_bruteforce.py [--systems 300] [--seed 1]
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # small matrices: threads only cost
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import numpy as np  # noqa: E402

from specmatch.prediction.spin import simulate_spins  # noqa: E402

SX = np.array([[0, 0.5], [0.5, 0]])
SY = np.array([[0, -0.5j], [0.5j, 0]])
SZ = np.array([[0.5, 0], [0, -0.5]])
SP = np.array([[0, 1.0], [0, 0]])


def _op(single, k, n):
    out = np.array([[1.0]])
    for i in range(n):
        out = np.kron(out, single if i == k else np.eye(2))
    return out


def brute_force(shifts_ppm, J, f):
    n = len(shifts_ppm)
    nu = np.asarray(shifts_ppm) * f
    Ix = [_op(SX, k, n) for k in range(n)]
    Iy = [_op(SY, k, n) for k in range(n)]
    Iz = [_op(SZ, k, n) for k in range(n)]
    H = sum(nu[k] * Iz[k] for k in range(n)).astype(complex)
    for a in range(n):
        for b in range(a + 1, n):
            if J[a, b]:
                H = H + J[a, b] * (Ix[a] @ Ix[b] + Iy[a] @ Iy[b] + Iz[a] @ Iz[b])
    E, V = np.linalg.eigh(H)
    Fp = sum(_op(SP, k, n) for k in range(n))
    T = V.conj().T @ Fp @ V  # <a|F+|b>: a gains one quantum
    P = np.abs(T) ** 2
    up, lo = np.nonzero(P > 1e-9)
    hz = E[up] - E[lo]
    inten = P[up, lo] / 2.0 ** (n - 1)
    return hz, inten


GAP_HZ = 0.1


def _binned(hz, inten, width=0.05):
    order = np.argsort(hz)
    hz, inten = hz[order], inten[order]
    groups, cur = [], [0]
    for i in range(1, len(hz)):
        if hz[i] - hz[cur[-1]] < width:
            cur.append(i)
        else:
            groups.append(cur)
            cur = [i]
    groups.append(cur)
    return [(np.average(hz[g], weights=inten[g]) if inten[g].sum() > 0 else hz[g].mean(), inten[g].sum())
            for g in groups]


def random_system(rng):
    n = int(rng.integers(2, 8))
    shifts = list(rng.uniform(0.5, 3.5, n))
    # magnetically equivalent sets now and then (a CH3, a CH2)
    if n >= 3 and rng.random() < 0.5:
        k = int(rng.integers(2, min(4, n) + 1))
        shifts[1:k] = [shifts[0]] * (k - 1)
    J = np.zeros((n, n))
    for a in range(n):
        for b in range(a + 1, n):
            if rng.random() < 0.6:
                J[a, b] = J[b, a] = rng.uniform(-18, 18)
    if n >= 3 and shifts[1] == shifts[0]:
        # make the equal-shift set magnetically equivalent: same J to every other spin
        k = sum(1 for s in shifts if s == shifts[0])
        for b in range(k, n):
            J[1:k, b] = J[b, 1:k] = J[0, b]
    return np.array(shifts), J


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--systems", type=int, default=300)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    fields = (43.0, 60.0, 80.0, 100.0, 300.0, 400.0)
    worst_pos = (0.0, None)
    worst_int = (0.0, None)
    t_fast = t_brute = 0.0
    print(f"inputs: {args.systems} random systems, seed {args.seed}, 2-7 spins, shifts 0.5-3.5 ppm, "
          f"|J| <= 18 Hz, fields {fields} MHz, OPENBLAS_NUM_THREADS={os.environ.get('OPENBLAS_NUM_THREADS')}")
    for k in range(args.systems):
        shifts, J = random_system(rng)
        f = float(rng.choice(fields))
        t0 = time.perf_counter()
        fast = simulate_spins(shifts, J, f)
        t1 = time.perf_counter()
        bh, bi = brute_force(shifts, J, f)
        t2 = time.perf_counter()
        t_fast += t1 - t0
        t_brute += t2 - t1
        big = float(bi.max())
        # clusters of the union of both line lists (gaps < GAP_HZ chain lines together):
        # per cluster, summed intensity and intensity-weighted position of each list
        hz_all = np.concatenate([bh, fast.hz])
        w_all = np.concatenate([bi, fast.intensity])
        src = np.concatenate([np.zeros(bh.size, bool), np.ones(fast.hz.size, bool)])
        o = np.argsort(hz_all)
        hz_all, w_all, src = hz_all[o], w_all[o], src[o]
        cid = np.concatenate([[0], np.cumsum(np.diff(hz_all) >= GAP_HZ)])
        for c in np.unique(cid):
            sel = cid == c
            r, g = sel & ~src, sel & src
            ri, gi = w_all[r].sum(), w_all[g].sum()
            if max(ri, gi) < 0.005 * big:
                continue  # lines below 0.5% of the largest are not compared by position
            dint = abs(gi - ri) / big
            dpos = abs(np.average(hz_all[g], weights=w_all[g]) - np.average(hz_all[r], weights=w_all[r])) \
                if ri > 0 and gi > 0 else np.inf
            if dpos > worst_pos[0]:
                worst_pos = (dpos, (k, len(shifts), f))
            if dint > worst_int[0]:
                worst_int = (dint, (k, len(shifts), f))
        if abs(fast.intensity.sum() - len(shifts)) > 1e-6:
            print(f"system {k}: intensities sum to {fast.intensity.sum()} not {len(shifts)}")
            return 1
    print(f"worst position difference: {worst_pos[0]:.4f} Hz (system, spins, MHz = {worst_pos[1]})")
    print(f"worst intensity difference: {100 * worst_int[0]:.3f}% of the largest line "
          f"(system, spins, MHz = {worst_int[1]})")
    print(f"time: specmatch {t_fast:.2f} s, brute force {t_brute:.2f} s")
    ok = worst_pos[0] <= 0.05 and worst_int[0] <= 0.02
    print("PASS" if ok else "FAIL", "(targets 0.05 Hz, 2%)")
    return 0 if ok else 1


if __name__ == "__main__":
    raise SystemExit(main())
