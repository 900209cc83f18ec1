"""Exact 1H spectra of coupled spin systems (second order, any field).

The high-resolution spin Hamiltonian in frequency units (Hz), for spins with
resonance offsets ``nu_i = delta_i * f`` (``f`` the spectrometer frequency, MHz)
and scalar couplings ``J_ij``:

    H = sum_i nu_i Iz_i + sum_{i<j} J_ij (Iz_i Iz_j + (I+_i I-_j + I-_i I+_j) / 2)

Line positions are differences of eigenvalues, intensities the squared matrix
elements of F+ = sum_i I+_i between eigenstates (Pople, Schneider & Bernstein,
"High-resolution Nuclear Magnetic Resonance", McGraw-Hill 1959, ch. 6). Three
standard reductions keep it cheap; none changes the result beyond the stated
tolerances:

1. **Magnetic equivalence -> composite particles.** Spins with the same shift and
   the same coupling to every other spin form a group whose total spin is a good
   quantum number. ``n`` equivalent spins 1/2 decompose into composite spins
   ``I = n/2, n/2 - 1, ...`` with multiplicities ``C(n, n/2-I) - C(n, n/2-I-1)``
   (e.g. a CH3 = one spin 3/2 + two spins 1/2); the spectrum is the
   multiplicity-weighted sum over the choices, and couplings inside a group never
   show (the usual treatment, e.g. J. D. Swalen, Prog. NMR Spectrosc. 1966, 1, 205;
   P. L. Corio, "Structure of High-Resolution NMR Spectra", Academic Press 1966).
2. **Weakly coupled clusters (X approximation).** Groups are joined into one
   cluster when their coupling is strong at this field (see :func:`is_strong`).
   A coupling between clusters only enters through the z-components: for every
   arrangement of the partner cluster's spins the cluster is diagonalised with
   its offsets moved by ``sum_k J_ik m_k`` (exact for the neglected flip-flop
   terms going to zero, Pople, Schneider & Bernstein 1959, the "X" notation).
3. **Total Fz blocks.** The Hamiltonian conserves total Fz, so each cluster is
   diagonalised block by block (``scipy.linalg.eigh``) and F+ only connects
   neighbouring blocks.

Lines closer than :data:`MERGE_HZ` are merged; the intensities of one spin system
sum to its number of spins.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import lru_cache
from math import comb

import numpy as np

from ..errors import SpecmatchError

__all__ = ["SpinLines", "SpinSystem", "simulate_spins", "is_strong", "merge_lines", "MERGE_HZ"]

#: lines closer than this (Hz) are merged into one (intensity-weighted position)
MERGE_HZ = 0.005
#: lines weaker than this share of one spin are dropped (forbidden combination lines)
MIN_INTENSITY = 1e-7
#: a coupling is treated exactly (same cluster) when |J| > WEAK_RATIO * |delta-nu| ...
WEAK_RATIO = 0.005
#: ... or when its second-order shift J**2 / (4 |delta-nu|) exceeds this (Hz). Both
#: bounds set what the X approximation may neglect: intensity errors of order
#: J / (2 delta-nu) and position errors of order J**2 / (4 delta-nu) (the AB case).
WEAK_SHIFT_HZ = 0.005
#: while (partner arrangements x cluster dimension) stays below this, a cluster is
#: re-diagonalised for every arrangement of its partners; beyond, the partners'
#: z-fields move its lines to first order (Hellmann-Feynman)
EXACT_BUDGET = 2048
#: clusters with more spins than this are cut at their weakest couplings (speed bound;
#: 2**8 states, the largest Fz block 70 x 70)
MAX_CLUSTER_SPINS = 8


@dataclass(frozen=True)
class SpinSystem:
    """Shifts (ppm) and couplings (Hz) of a set of spin-1/2 nuclei (0-based indices)."""

    shifts_ppm: tuple[float, ...]
    couplings_hz: tuple[tuple[int, int, float], ...] = ()

    @classmethod
    def from_json(cls, data: object) -> SpinSystem:
        """Check ``{"shifts_ppm": [...], "couplings_hz": [[i, j, J], ...]}`` and build the system."""
        if not isinstance(data, Mapping) or "shifts_ppm" not in data:
            raise SpecmatchError('a spin system is a JSON object {"shifts_ppm": [...], '
                                 '"couplings_hz": [[i, j, J], ...]}; "shifts_ppm" is missing')
        shifts = data["shifts_ppm"]
        if not isinstance(shifts, list) or not shifts:
            raise SpecmatchError('"shifts_ppm" must be a non-empty list of numbers (ppm)')
        try:
            sh = tuple(float(s) for s in shifts)
        except (TypeError, ValueError):
            raise SpecmatchError('"shifts_ppm" must contain numbers only') from None
        raw = data.get("couplings_hz", [])
        if not isinstance(raw, list):
            raise SpecmatchError('"couplings_hz" must be a list of [i, j, J] triples')
        cp = []
        for k, item in enumerate(raw):
            if not isinstance(item, (list, tuple)) or len(item) != 3:
                raise SpecmatchError(f'"couplings_hz" entry {k} is not an [i, j, J] triple')
            i, j, jv = item
            if not (isinstance(i, int) and isinstance(j, int)) or isinstance(i, bool) or isinstance(j, bool):
                raise SpecmatchError(f'"couplings_hz" entry {k}: spin indices must be integers (0-based)')
            try:
                jv = float(jv)
            except (TypeError, ValueError):
                raise SpecmatchError(f'"couplings_hz" entry {k}: J must be a number (Hz)') from None
            cp.append((i, j, jv))
        system = cls(sh, tuple(cp))
        system.check()
        return system

    def check(self) -> None:
        """Raise SpecmatchError for indices out of range, self-couplings or non-finite values."""
        n = len(self.shifts_ppm)
        if n == 0:
            raise SpecmatchError("a spin system needs at least one spin")
        if not all(np.isfinite(self.shifts_ppm)):
            raise SpecmatchError("shifts must be finite numbers (ppm)")
        for k, (i, j, jv) in enumerate(self.couplings_hz):
            if not (0 <= i < n and 0 <= j < n):
                raise SpecmatchError(f"coupling {k} ({i}, {j}) names a spin outside 0..{n - 1}")
            if i == j:
                raise SpecmatchError(f"coupling {k} couples spin {i} with itself; give two different spins")
            if not np.isfinite(jv) or abs(jv) > 1000.0:
                raise SpecmatchError(f"coupling {k}: J = {jv} Hz is not a plausible H-H coupling")

    def j_matrix(self) -> np.ndarray:
        n = len(self.shifts_ppm)
        J = np.zeros((n, n))
        for i, j, jv in self.couplings_hz:
            J[i, j] = J[j, i] = jv
        return J


@dataclass(frozen=True, eq=False)
class SpinLines:
    """Stick spectrum of a spin system.

    Attributes
    ----------
    frequency_mhz : float
    hz : ndarray
        Line positions, Hz from the reference (``ppm * frequency_mhz``), ascending.
    intensity : ndarray
        Relative intensities; they sum to the number of spins.
    dhz_dshift : ndarray, shape (lines, spins)
        Derivative of each line position (Hz) with respect to each spin's offset
        (Hz), from the Hellmann-Feynman theorem: ``<b|Iz_i|b> - <a|Iz_i|a>``. Rows
        sum to 1; a first-order line of spin i has a 1 in column i.
    """

    frequency_mhz: float
    hz: np.ndarray
    intensity: np.ndarray
    dhz_dshift: np.ndarray

    @property
    def ppm(self) -> np.ndarray:
        return self.hz / self.frequency_mhz

    def owner(self) -> np.ndarray:
        """Per line, the spin that contributes most to it (largest derivative)."""
        return np.argmax(self.dhz_dshift, axis=1) if self.hz.size else np.zeros(0, int)


# ----------------------------------------------------------------- equivalence
def equivalence_groups(nu: np.ndarray, J: np.ndarray, tol_hz: float = 1e-6) -> list[list[int]]:
    """Sets of magnetically equivalent spins: equal offsets, equal couplings to every other spin.

    Partition refinement: start from equal offsets, split a set while its members
    couple differently to some spin outside it, until nothing changes.
    """
    n = len(nu)
    key = np.round(nu / tol_hz).astype(np.int64) if n else np.zeros(0, np.int64)
    label = np.unique(key, return_inverse=True)[1].ravel() if n else np.zeros(0, int)
    while True:
        new_keys = []
        for i in range(n):
            outside = label != label[i]
            # couplings to outside spins, ordered by outside spin index
            new_keys.append((int(label[i]), tuple(np.round(J[i, outside] / 1e-6).astype(np.int64))))
        uniq: dict = {}
        new_label = np.array([uniq.setdefault(k, len(uniq)) for k in new_keys], int)
        if len(uniq) == len(np.unique(label)):
            break
        label = new_label
    groups: dict[int, list[int]] = {}
    for i in range(n):
        groups.setdefault(int(label[i]), []).append(i)
    return sorted(groups.values())


def is_strong(j_hz: float, dnu_hz: float) -> bool:
    """True if a coupling must be treated exactly at this shift difference (same cluster)."""
    j, d = abs(j_hz), abs(dnu_hz)
    if j == 0.0:
        return False
    if d == 0.0:
        return True
    return j > WEAK_RATIO * d or j * j / (4.0 * d) > WEAK_SHIFT_HZ


def _clusters(nu_g: np.ndarray, J_g: np.ndarray, reduce: bool) -> list[list[int]]:
    G = len(nu_g)
    if not reduce:
        return [list(range(G))]
    parent = list(range(G))

    def find(a):
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    for a in range(G):
        for b in range(a + 1, G):
            if is_strong(J_g[a, b], nu_g[a] - nu_g[b]):
                parent[find(a)] = find(b)
    while True:
        out: dict[int, list[int]] = {}
        for a in range(G):
            out.setdefault(find(a), []).append(a)
        clusters = sorted(out.values())
        merged = False
        # a group coupled unequally to the groups of a strongly coupled partner cluster
        # mixes that cluster's states differently for each of its own states (the X part
        # of ABX): no X approximation there, treat both together
        for c in clusters:
            for p in clusters:
                if p is c or len(p) < 2:
                    continue
                for g in c:
                    row = J_g[g, p]
                    if np.any(row != 0.0) and np.ptp(row) > 1e-9:
                        parent[find(g)] = find(p[0])
                        merged = True
                        break
                if merged:
                    break
            if merged:
                break
        if not merged:
            return clusters


# ---------------------------------------------------------- composite particles
@lru_cache(maxsize=64)
def composite_spins(n: int) -> tuple[tuple[float, int], ...]:
    """(total spin I, multiplicity) of n equivalent spins 1/2, largest I first."""
    out = []
    two_i = n
    while two_i >= 0:
        k = (n - two_i) // 2
        mult = comb(n, k) - (comb(n, k - 1) if k > 0 else 0)
        if mult > 0:
            out.append((two_i / 2.0, mult))
        two_i -= 2
    return tuple(out)


@lru_cache(maxsize=512)
def _basis(spins: tuple[float, ...]):
    """Product basis of composite spins grouped by total M (built once per spin tuple).

    Returns ``(blocks, flips, raises)``: per block (ascending M) the m-values
    (states x groups); per block the flip-flop elements ``(row, col, a, b, coef)``
    (``J_ab * coef`` is the element); per pair of neighbouring blocks the F+
    elements ``(row in upper block, col, value)``.
    """
    G = len(spins)
    S = np.array(spins, float)
    dims = np.round(2 * S + 1).astype(int)
    ms = [np.arange(-s, s + 0.5, 1.0) for s in spins]
    grid = np.array(list(itertools.product(*ms)), float).reshape(-1, G)
    # mixed-radix code of each state (index of m in each group), for lookups
    digits = np.round(grid + S).astype(np.int64)
    radix = np.concatenate([np.cumprod(dims[::-1])[::-1][1:], [1]]).astype(np.int64)
    code = digits @ radix
    tot2 = np.round(2 * grid.sum(axis=1)).astype(int)
    order = np.lexsort((code, tot2))
    grid, code, tot2 = grid[order], code[order], tot2[order]
    position = np.empty(int(np.prod(dims)), np.int64)  # code -> index inside its block
    levels = np.unique(tot2)
    blocks = []
    for tm in levels:
        idx = np.where(tot2 == tm)[0]
        position[code[idx]] = np.arange(idx.size)
        blocks.append((grid[idx], code[idx]))
    flips, raises = [], []
    for b, (m, c) in enumerate(blocks):
        rows, cols, pa, pb, coef = [], [], [], [], []
        for a in range(G):
            for q in range(a + 1, G):
                s = np.nonzero((m[:, a] < S[a] - 1e-9) & (m[:, q] > -S[q] + 1e-9))[0]
                if not s.size:
                    continue
                rows.append(position[c[s] + radix[a] - radix[q]])
                cols.append(s)
                pa.append(np.full(s.size, a))
                pb.append(np.full(s.size, q))
                coef.append(np.sqrt(S[a] * (S[a] + 1) - m[s, a] * (m[s, a] + 1))
                            * np.sqrt(S[q] * (S[q] + 1) - m[s, q] * (m[s, q] - 1)) / 2.0)
        cat = (lambda v, t: np.concatenate(v).astype(t) if v else np.zeros(0, t))
        flips.append((cat(rows, int), cat(cols, int), cat(pa, int), cat(pb, int), cat(coef, float)))
        if b + 1 < len(blocks):
            r_, c_, v_ = [], [], []
            for a in range(G):
                s = np.nonzero(m[:, a] < S[a] - 1e-9)[0]
                r_.append(position[c[s] + radix[a]])
                c_.append(s)
                v_.append(np.sqrt(S[a] * (S[a] + 1) - m[s, a] * (m[s, a] + 1)))
            raises.append((cat(r_, int), cat(c_, int), cat(v_, float)))
    return [m for m, _ in blocks], flips, raises


@lru_cache(maxsize=4096)
def _block_templates(spins: tuple[float, ...], j_key: bytes):
    """Per Fz block: the coupling part of the Hamiltonian (zz diagonal + flip-flops), and
    per pair of neighbouring blocks the dense F+ matrix; J enters as bytes of its array."""
    G = len(spins)
    J = np.frombuffer(j_key, float).reshape(G, G)
    Jt = np.triu(J, 1)
    blocks, flips, raises = _basis(spins)
    H0, Fs = [], []
    for b, m in enumerate(blocks):
        rows, cols, pa, pb, coef = flips[b]
        h = np.diag(np.einsum("sa,ab,sb->s", m, Jt, m))
        if rows.size:
            vals = coef * J[pa, pb]
            np.add.at(h, (rows, cols), vals)
            np.add.at(h, (cols, rows), vals)
        h.setflags(write=False)
        H0.append(h)
    for b in range(len(blocks) - 1):
        r_, c_, v_ = raises[b]
        F = np.zeros((blocks[b + 1].shape[0], blocks[b].shape[0]))
        np.add.at(F, (r_, c_), v_)
        F.setflags(write=False)
        Fs.append(F)
    return blocks, H0, Fs


def _cluster_lines(nu: np.ndarray, J: np.ndarray, spins: tuple[float, ...]):
    """Lines of one cluster of composite spins for a stack of offset vectors.

    ``nu`` is (A, groups): one row per arrangement of the partners' z-fields; every
    block is diagonalised for all rows at once (stacked ``numpy.linalg.eigh``, no
    per-matrix Python overhead). Returns (hz, intensity, d<Iz_g>, row) over all
    blocks and rows.
    """
    nu = np.atleast_2d(nu)
    A, G = nu.shape
    blocks, H0, Fs = _block_templates(spins, np.ascontiguousarray(J, float).tobytes())
    evals, evecs, zexp = [], [], []
    for b, m in enumerate(blocks):
        nb = m.shape[0]
        diag = nu @ m.T  # (A, nb): Zeeman part
        if nb == 1 or not np.any(H0[b] - np.diag(np.diag(H0[b]))):
            w = diag + np.diag(H0[b])[None, :]
            v = None  # product states are the eigenstates
            z = np.broadcast_to(m[None], (A, nb, G))
        else:
            H = np.repeat(H0[b][None], A, axis=0)
            ar = np.arange(nb)
            H[:, ar, ar] += diag
            w, v = np.linalg.eigh(H)
            z = np.einsum("aij,ig->ajg", v * v, m)  # <a|Iz_g|a>
        evals.append(w)
        evecs.append(v)
        zexp.append(z)
    hz, inten, dz, rows = [], [], [], []
    for b in range(len(blocks) - 1):
        F = Fs[b]
        lo_v, up_v = evecs[b], evecs[b + 1]
        if lo_v is None and up_v is None:
            T = np.broadcast_to(F[None], (A,) + F.shape)
        elif lo_v is None:
            T = np.swapaxes(up_v, 1, 2) @ F
        elif up_v is None:
            T = F[None] @ lo_v
        else:
            T = np.swapaxes(up_v, 1, 2) @ F @ lo_v
        P = T * T
        a_, up, lo = np.nonzero(P > MIN_INTENSITY)
        hz.append(evals[b + 1][a_, up] - evals[b][a_, lo])
        inten.append(P[a_, up, lo])
        dz.append(zexp[b + 1][a_, up] - zexp[b][a_, lo])
        rows.append(a_)
    if not hz:
        return np.zeros(0), np.zeros(0), np.zeros((0, G)), np.zeros(0, int)
    return np.concatenate(hz), np.concatenate(inten), np.concatenate(dz), np.concatenate(rows)


def merge_lines(hz: np.ndarray, inten: np.ndarray, d: np.ndarray, tol: float | None = None):
    """Merge chains of lines closer than ``tol`` Hz (default MERGE_HZ), intensity-weighted."""
    if hz.size == 0:
        return hz, inten, d
    tol = MERGE_HZ if tol is None else tol
    order = np.argsort(hz, kind="stable")
    hz, inten, d = hz[order], inten[order], d[order]
    starts = np.flatnonzero(np.concatenate([[True], np.diff(hz) >= tol]))
    w = np.add.reduceat(inten, starts)
    safe = np.where(w > 0, w, 1.0)
    pos = np.add.reduceat(inten * hz, starts) / safe
    dd = np.add.reduceat(inten[:, None] * d, starts, axis=0) / safe[:, None]
    return pos, w, dd


def simulate_spins(
    shifts_ppm: Sequence[float] | np.ndarray,
    couplings: Sequence[tuple[int, int, float]] | np.ndarray,
    frequency_mhz: float,
    *,
    reduce: bool = True,
    composite: bool = True,
    cluster_shifts_ppm: Sequence[float] | np.ndarray | None = None,
) -> SpinLines:
    """Exact stick spectrum of spin-1/2 nuclei with given shifts and couplings.

    Parameters
    ----------
    shifts_ppm : sequence of float
        One shift per spin.
    couplings : sequence of (i, j, J_hz) or ndarray (n, n)
        Scalar couplings (0-based spin indices), or the symmetric J matrix in Hz.
        Signs matter for strongly coupled systems (geminal sp3 couplings are negative).
    frequency_mhz : float
        Spectrometer 1H frequency (40-1200 MHz in practice).
    reduce : bool
        Use weakly coupled clusters (X approximation). ``False`` diagonalises
        every coupled set of groups as one system (still with composite particles
        and Fz blocks), the reference the reductions are checked against.
    composite : bool
        Treat magnetically equivalent groups as composite particles (``False``:
        every spin on its own, the full product space; same lines, slower).
    cluster_shifts_ppm : sequence of float, optional
        Shifts (one per spin) that decide which couplings are strong and where large
        clusters are cut (default: ``shifts_ppm``). A fit that moves the shifts passes
        fixed ones (the predicted shifts), so the spectrum is a continuous function of
        the shifts it moves: with the partition following the moving shifts, a cluster
        that is cut differently jumps.

    Returns
    -------
    SpinLines

    Raises
    ------
    SpecmatchError
        For a field that is not a positive number or inconsistent input.
    """
    f = float(frequency_mhz)
    if not np.isfinite(f) or f <= 0:
        raise SpecmatchError(f"spectrometer frequency must be a positive number of MHz, got {frequency_mhz}")
    delta = np.asarray(shifts_ppm, float).ravel()
    n = delta.size
    if isinstance(couplings, np.ndarray) and couplings.ndim == 2 and couplings.shape == (n, n):
        J = np.array(couplings, float)
    else:
        system = SpinSystem(tuple(float(x) for x in delta), tuple((int(i), int(j), float(v)) for i, j, v in couplings))
        system.check()
        J = system.j_matrix()
    if n == 0:
        return SpinLines(f, np.zeros(0), np.zeros(0), np.zeros((0, 0)))
    nu = delta * f
    if cluster_shifts_ppm is None:
        nu_ref = nu
    else:
        nu_ref = np.asarray(cluster_shifts_ppm, float).ravel() * f
        if nu_ref.shape != nu.shape or not np.all(np.isfinite(nu_ref)):
            raise SpecmatchError(f"cluster_shifts_ppm needs {n} finite shifts, one per spin")
    groups = equivalence_groups(nu, J) if composite else [[i] for i in range(n)]
    G = len(groups)
    size = np.array([len(g) for g in groups])
    rep = np.array([g[0] for g in groups], int)
    nu_g = nu[rep]
    nu_g_ref = nu_ref[rep]
    J_g = J[np.ix_(rep, rep)].copy()
    np.fill_diagonal(J_g, 0.0)  # couplings inside an equivalent group never show
    clusters = _clusters(nu_g_ref, J_g, reduce)
    if not reduce:
        # connected components of the coupling graph only (uncoupled sets are exact apart)
        clusters = _components(J_g)
    if reduce:
        clusters = [piece for c in clusters for piece in _split(c, nu_g_ref, J_g, size)]
    where = np.empty(G, int)
    for c, members in enumerate(clusters):
        where[members] = c
    all_hz, all_int, all_d = [], [], [np.zeros((0, n))]
    for members in clusters:
        mem = np.array(members)
        n_spins = int(size[mem].sum())
        units_size, units_j = _partner_units(mem, clusters, where, J_g, size)
        arrangements = _arrangements(units_size, units_j, len(mem))
        Jc = J_g[np.ix_(mem, mem)]
        choices = [composite_spins(int(size[g])) for g in mem]
        fields = np.array([fa for fa, _ in arrangements])  # (A, groups)
        probs = np.array([pa for _, pa in arrangements])
        spread = np.zeros((len(mem), n))
        for col, g in enumerate(mem):
            spread[col, groups[g]] = 1.0 / size[g]
        for combo in itertools.product(*choices):
            spins_all = tuple(s for s, _ in combo)
            mult = float(np.prod([m for _, m in combo]))
            # total spin 0 groups have no lines and exert no field: leave them out
            act = [k for k, sp in enumerate(spins_all) if sp > 0]
            if not act:
                continue
            spins = tuple(spins_all[k] for k in act)
            dim = int(np.prod([2 * sp + 1 for sp in spins]))
            Ja = Jc[np.ix_(act, act)]
            # re-diagonalise per partner arrangement while that stays cheap; beyond, the
            # partner fields move the lines to first order (Hellmann-Feynman)
            exact = len(arrangements) * dim <= EXACT_BUDGET
            base = nu_g[mem][None, :] + (fields if exact else 0.0)
            hz, inten, dz_a, row = _cluster_lines(base[:, act], Ja, spins)
            dz = np.zeros((hz.size, len(mem)))
            dz[:, act] = dz_a
            w = mult / 2.0 ** (n_spins - 1)
            d_full = dz @ spread  # per-spin derivative: a group's share split over its spins
            if exact:
                all_hz.append(hz)
                all_int.append(inten * w * probs[row])
                all_d.append(d_full)
                continue
            all_hz.append((hz[:, None] + dz @ fields.T).ravel())
            all_int.append((inten[:, None] * w * probs[None, :]).ravel())
            all_d.append(np.repeat(d_full, len(probs), axis=0))
    hz, inten, d = merge_lines(np.concatenate(all_hz), np.concatenate(all_int), np.concatenate(all_d))
    return SpinLines(f, hz, inten, d)


def _components(J_g: np.ndarray) -> list[list[int]]:
    G = J_g.shape[0]
    seen = np.zeros(G, bool)
    out = []
    for s in range(G):
        if seen[s]:
            continue
        stack, comp = [s], []
        seen[s] = True
        while stack:
            a = stack.pop()
            comp.append(a)
            for b in np.nonzero(J_g[a])[0]:
                if not seen[b]:
                    seen[b] = True
                    stack.append(int(b))
        out.append(sorted(comp))
    return sorted(out)


def _partner_units(mem, clusters, where, J_g, size) -> tuple[list[int], list[np.ndarray]]:
    """The partners whose z-field acts on a cluster: (spin count, couplings to the cluster's groups).

    A partner cluster that every group of ``mem`` couples to uniformly acts through its
    total M (exact); otherwise each of its groups acts through its own m (the usual
    X approximation, used for clusters that were cut to bound their size).
    """
    own = where[mem[0]]
    sizes, js = [], []
    for q, other in enumerate(clusters):
        if q == own:
            continue
        block = J_g[np.ix_(mem, other)]
        if not np.any(block != 0.0):
            continue
        if np.all(np.ptp(block, axis=1) <= 1e-9):
            sizes.append(int(size[other].sum()))
            js.append(block[:, 0].copy())
        else:
            for col, g in enumerate(other):
                if np.any(block[:, col] != 0.0):
                    sizes.append(int(size[g]))
                    js.append(block[:, col].copy())
    return sizes, js


def _split(members: list[int], nu_g: np.ndarray, J_g: np.ndarray, size: np.ndarray) -> list[list[int]]:
    """Cut a cluster whose product space exceeds 2**MAX_CLUSTER_SPINS at its weakest couplings.

    Couplings are removed in order of increasing |J| / |delta-nu| until the cluster
    falls apart; pieces still too large are cut again. What was cut is then treated
    in the X approximation (an approximation, unlike the rest). Couplings with the
    same ratio (symmetry-related pairs) are removed together, so the cut does not
    depend on the order the spins are numbered in.
    """
    # largest product space among the composite choices: prod(n_g + 1)
    if int(np.prod(size[members] + 1)) <= 2**MAX_CLUSTER_SPINS:
        return [members]
    mem = list(members)
    edges = []
    for x, a in enumerate(mem):
        for b in mem[x + 1:]:
            if J_g[a, b] != 0.0:
                d = abs(nu_g[a] - nu_g[b])
                edges.append((abs(J_g[a, b]) / d if d > 0 else np.inf, a, b))
    edges.sort(key=lambda e: e[0])
    sub = np.zeros_like(J_g)
    for _, a, b in edges:
        sub[a, b] = sub[b, a] = 1.0
    i = 0
    while i < len(edges):
        # the batch of equal ratios (relative 1e-9: symmetric pairs agree to rounding)
        r0 = edges[i][0]
        k = i
        while k < len(edges) and (edges[k][0] == r0 or abs(edges[k][0] - r0) <= 1e-9 * abs(r0)):
            _, a, b = edges[k]
            sub[a, b] = sub[b, a] = 0.0
            k += 1
        i = k
        comps = _components(sub[np.ix_(mem, mem)])
        if len(comps) > 1:
            out = []
            for c in comps:
                out.extend(_split([mem[q] for q in c], nu_g, J_g, size))
            return out
    return [[m] for m in mem]


def _arrangements(sizes: Sequence[int], js: Sequence[np.ndarray], n_groups: int) -> list[tuple[np.ndarray, float]]:
    """Distinct z-fields (Hz per group of the cluster) of the partners, with their probabilities.

    A partner of n spins has total m = k - n/2 with probability C(n, k) / 2**n; fields
    equal to 1e-6 Hz are merged (equal couplings make many arrangements coincide).
    """
    out: dict[tuple, list] = {(0,) * n_groups: [np.zeros(n_groups), 1.0]}
    for n, jv in zip(sizes, js):
        nxt: dict[tuple, list] = {}
        for k in range(n + 1):
            m = k - n / 2.0
            p = comb(n, k) / 2.0**n
            for field, q in out.values():
                fv = field + jv * m
                key = tuple(np.round(fv * 1e6).astype(np.int64))
                if key in nxt:
                    nxt[key][1] += q * p
                else:
                    nxt[key] = [fv, q * p]
        out = nxt
    return [(f, p) for f, p in out.values()]
