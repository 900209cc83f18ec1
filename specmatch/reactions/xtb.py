"""Optional GFN2-xTB refinement of cation energies the empirical scale cannot order.

Needs the optional ``tblite`` package (``pip install 'specmatch[xtb]'``). Used only for cations
that compete within ``shift.xtb_window_kcal_mol`` (default 2 kcal/mol) on the empirical scale:
the two ends of a close 1,2-shift, sibling shift targets, and competing protonation sites.

Procedure per cation (cached per canonical SMILES): RDKit ETKDG embedding (fixed seed),
MMFF94 pre-optimisation (UFF if MMFF lacks parameters), then a short GFN2-xTB optimisation
(L-BFGS on the tblite gradient, at most 40 steps, ALPB water as implicit solvent; the step cap
keeps a secondary cation from sliding into a bridged or shifted structure), then the energy.

Within a cluster of close cations the refined energy is the cluster's mean empirical energy plus
``XTB_SCALE`` times the xTB deviation from the cluster's mean xTB energy, clamped to the window
around the empirical value: xTB reorders cations inside the band, it never overturns the scale.
"""

from __future__ import annotations

import math
import os
from functools import lru_cache

# tblite's OpenMP threads fight over shared cores (100x slower on 2 busy cores): one thread
# unless the user set OMP_NUM_THREADS. Must happen before the library loads (import of this module).
os.environ.setdefault("OMP_NUM_THREADS", "1")

HARTREE_KCAL = 627.509
#: damping of xTB energy differences (implicit solvent still overstates ion-pair-free
#: gas-like spreads; model choice)
XTB_SCALE = 0.5
MAX_OPT_STEPS = 40


def available() -> bool:
    """True if the optional tblite package can be imported."""
    try:
        import tblite.interface  # noqa: F401
    except Exception:
        return False
    return True


@lru_cache(maxsize=2048)
def cation_energy_kcal(smiles: str) -> float | None:
    """GFN2-xTB energy (kcal/mol) of a cation given as SMILES, or None if the set-up fails."""
    import numpy as np
    from rdkit import Chem
    from rdkit.Chem import AllChem
    from scipy.optimize import minimize
    from tblite.interface import Calculator

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return None
    charge = Chem.GetFormalCharge(mol)
    unpaired = sum(a.GetNumRadicalElectrons() for a in mol.GetAtoms())
    mh = Chem.AddHs(mol)
    params = AllChem.ETKDGv3()
    params.randomSeed = 0xC0FFEE
    if AllChem.EmbedMolecule(mh, params) != 0:
        return None
    if AllChem.MMFFHasAllMoleculeParams(mh):
        AllChem.MMFFOptimizeMolecule(mh, maxIters=500)
    else:
        AllChem.UFFOptimizeMolecule(mh, maxIters=500)
    numbers = np.array([a.GetAtomicNum() for a in mh.GetAtoms()])
    x0 = mh.GetConformer().GetPositions() / 0.529177210903  # Angstrom -> Bohr
    calc = Calculator("GFN2-xTB", numbers, x0, charge=float(charge), uhf=unpaired)
    calc.set("verbosity", 0)
    calc.add("alpb-solvation", "water")
    last: list = [None]

    def energy_grad(flat: np.ndarray) -> tuple[float, np.ndarray]:
        calc.update(positions=flat.reshape(-1, 3))
        res = calc.singlepoint(last[0]) if last[0] is not None else calc.singlepoint()
        last[0] = res  # previous wavefunction as the SCF guess
        return float(res.get("energy")), np.asarray(res.get("gradient")).ravel()

    try:
        opt = minimize(energy_grad, x0.ravel(), jac=True, method="L-BFGS-B",
                       options={"maxiter": MAX_OPT_STEPS, "gtol": 1e-4})
        e = float(opt.fun)
    except Exception:  # SCF failure etc.: fall back to the empirical scale for this cation
        return None
    return e * HARTREE_KCAL if math.isfinite(e) else None


def refine_network(net, *, window: float, warnings: list[str]) -> int:
    """Set ``xtb_energy`` on close competing cations of `net`; returns how many were refined."""
    nodes = net.nodes
    pairs: set[tuple[str, str]] = set()

    def close(a: str, b: str) -> None:
        na, nb = nodes[a], nodes[b]
        if a != b and not na.radical and not nb.radical and abs(na.energy - nb.energy) <= window:
            pairs.add((min(a, b), max(a, b)))

    for src, lst in net.shifts.items():
        for s in lst:
            close(src, s.target)
        for i in range(len(lst)):
            for j in range(i + 1, len(lst)):
                close(lst[i].target, lst[j].target)
    groups: dict[str, list[str]] = {}
    for e in net.entries:
        groups.setdefault(e.info.get("group", ""), []).append(e.key)
    for keys in groups.values():
        for i in range(len(keys)):
            for j in range(i + 1, len(keys)):
                close(keys[i], keys[j])
    if not pairs:
        return 0
    parent: dict[str, str] = {}

    def find(x: str) -> str:
        parent.setdefault(x, x)
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for a, b in pairs:
        parent[find(a)] = find(b)
    clusters: dict[str, list[str]] = {}
    for k in parent:
        clusters.setdefault(find(k), []).append(k)
    refined = 0
    failed = []
    for members in clusters.values():
        energies = {k: cation_energy_kcal(k) for k in members}
        ok = [k for k, v in energies.items() if v is not None]
        failed += [k for k, v in energies.items() if v is None]
        if len(ok) < 2:
            continue
        mean_emp = sum(nodes[k].energy for k in ok) / len(ok)
        mean_x = sum(energies[k] for k in ok) / len(ok)  # type: ignore[misc]
        for k in ok:
            value = mean_emp + XTB_SCALE * (energies[k] - mean_x)  # type: ignore[operator]
            lo, hi = nodes[k].energy - window, nodes[k].energy + window
            nodes[k].xtb_energy = min(max(value, lo), hi)
            refined += 1
    if failed:
        warnings.append(f"GFN2-xTB failed for {len(failed)} cation(s); the empirical scale was kept for them")
    return refined
