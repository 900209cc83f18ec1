"""Environment codes of growing radius around each atom and the learned correction table built on them.

An atom's environment is described sphere by sphere, as in HOSE codes (Bremser,
Anal. Chim. Acta 1978, 103, 355): radius 1 holds the atom and its neighbours,
radius 2 adds the next sphere, and so on. The code of one radius is RDKit's
Morgan identifier of the atom at that radius (Morgan, J. Chem. Doc. 1965, 5,
107; the circular-environment form of Rogers & Hahn, J. Chem. Inf. Model. 2010,
50, 742): element, heavy-atom degree, H count, charge and ring membership of each
atom, the bond types between them, hashed sphere by sphere in C++. The identifier
does not depend on the input's atom order, and one of radius r fixes those of
smaller radii, so a code unknown at radius r is unknown beyond. Each table row
also shows the environment as a SMILES fragment (``example``) for the reader.

The correction table (``tables/hose_c13.csv.gz``, ``tables/hose_h1.csv.gz``,
written by ``benchmarks/fit_hose.py``) holds, per nucleus, radius and code, the
count, mean and spread of the residuals (experimental minus increment prediction)
on the nmrshiftdb2 development data. A prediction walks from radius 1 outward and
shrinks each radius's mean toward the previous radius by its count
(``n / (n + k)``): a code seen on many atoms moves the prediction, a rare one
barely does, an unknown one stops the walk and the increments stand. The
variance is shrunk the same way from the increment sigma, so rare environments
keep the wide increment sigma.

Neighbour layer. Before the code table, a 13C prediction adds a linear layer
(``tables/layer_c13.csv.gz``, ridge regression fitted by the same script): one
weight per code of the atoms at distance 1 to 3 (:func:`neighbour_features`).
The code table knows a neighbourhood only as a whole; the layer learns the
pieces, so a carbon whose whole environment is new still gets the part of the
correction its neighbours explain. It applies only to carbons whose first-sphere
code is in the table (the weights were learned there); the code table is fitted
on the residual the layer leaves. Where the input gives a relative configuration (two
or more configured atoms on one ring, or a double bond of given geometry) the layer also
has one weight per cis or trans pair near the carbon (:func:`configuration_features`):
the codes themselves carry no geometry.

Cross-validated mode. Each row also keeps its statistics per development fold
(5 folds by InChIKey connectivity block, the folds of the fitting scripts). With
the environment variable ``SPECMATCH_CROSS_VALIDATED=1`` a molecule is corrected
with the table minus its own fold's contribution, so fitting the identification
error model or benchmarking on the development data sees out-of-fold errors
rather than the table's memory of those very molecules (the layer keeps its
weights fitted without each fold for the same purpose). Users never need it.
"""

from __future__ import annotations

import io
import json
import math
import os
import re
import sys
import zlib
from array import array
from bisect import bisect_left
from functools import lru_cache
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import NamedTuple

from rdkit import Chem
from rdkit import rdBase
from rdkit.Chem import rdMolDescriptors

TABLE_DIR = Path(__file__).resolve().parent / "tables"
MAX_RADIUS = 5
FOLDS = 5
#: correct development molecules with their own fold left out (see the module docstring)
CROSS_VALIDATED = os.environ.get("SPECMATCH_CROSS_VALIDATED", "") == "1"


def fold_of_block(block: str) -> int:
    """Development fold of an InChIKey connectivity block (as the fitting scripts split)."""
    import hashlib  # cross-validated mode and the fits only

    return int(hashlib.md5(block.encode()).hexdigest(), 16) % FOLDS


def fold_of_mol(mol: Chem.Mol) -> int | None:
    """The fold of a molecule in cross-validated mode, None otherwise."""
    if not CROSS_VALIDATED:
        return None
    return fold_of_block(Chem.MolToInchiKey(mol).split("-")[0])


_MASK = 0xFFFFFFFF


def atom_invariants(mol: Chem.Mol) -> list[int]:
    """Radius-0 identifiers: RDKit's connectivity invariants (element, heavy-atom degree,
    H count, charge, ring membership) refined by the size of the smallest ring holding
    the atom (3 to 8; 9 for larger) and its number of ring bonds (2 on a plain ring atom,
    3 at a fusion or bridgehead atom, 4 at a spiro atom).

    Ring membership alone lets a cyclopropane carbon share the code of a cyclohexane
    carbon, while their shifts differ by some 30 ppm and the increments do not carry
    every strain effect (cross-validated gain: see ``benchmarks/fit_hose.py`` output in
    the table header). Both refinements are properties of the graph, not of the atom
    order (the smallest ring through an atom has the same size in every ring set).
    """
    inv = rdMolDescriptors.GetConnectivityInvariants(mol)
    ring = mol.GetRingInfo()
    extra = [1] * len(inv)
    if ring.NumRings():
        size: dict[int, int] = {}
        # ring neighbours: each ring is listed in path order, so an atom's two neighbours
        # on it are its list neighbours; every ring bond lies on some ring of the set
        partners: dict[int, set[int]] = {}
        for members in ring.AtomRings():
            n = min(len(members), 9)
            last = len(members) - 1
            for k, a in enumerate(members):
                if n < size.get(a, 99):
                    size[a] = n
                p = partners.setdefault(a, set())
                p.add(members[k - 1])
                p.add(members[k + 1 if k < last else 0])
        for a, n in size.items():
            extra[a] += n * 8 + min(len(partners[a]), 4)
    return [(x * 1000003 + e) & _MASK for x, e in zip(inv, extra)]


class MolCodes:
    """The environment codes of every atom of one molecule, computed once.

    RDKit's Morgan algorithm (C++) gives each atom an identifier per radius: radius 0
    from the atom's own invariants (element, heavy-atom degree, H count, charge, ring
    membership), radius r from the radius r-1 identifiers of the atom and of its
    neighbours with the bond types. An identifier of radius r therefore fixes those
    of smaller radii, as a HOSE code's r spheres fix its first r-1. Codes are the
    identifiers in hexadecimal.
    """

    __slots__ = ("bits",)

    def __init__(self, mol: Chem.Mol):
        # the function form of the Morgan algorithm gives the same identifiers as RDKit's
        # fingerprint generator, which would import numpy (start-up of predict --batch);
        # its deprecation notice is blocked for the call. Redundant environments are kept
        # so every atom has a code at every radius.
        info: dict[int, tuple[tuple[int, int], ...]] = {}
        block = rdBase.BlockLogs()
        rdMolDescriptors.GetMorganFingerprint(mol, MAX_RADIUS, invariants=atom_invariants(mol), bitInfo=info,
                                              includeRedundantEnvironments=True)
        del block
        bits = [[0] * (MAX_RADIUS + 1) for _ in range(mol.GetNumAtoms())]
        for bit, where in info.items():
            for atom, radius in where:
                bits[atom][radius] = bit
        for i, row in enumerate(bits):
            # a lone atom (water, methane): itself at every radius (an atom with bonds has
            # a radius-1 identifier, so RDKit is asked only about atoms without one)
            if not row[1] and not mol.GetAtomWithIdx(i).GetDegree():
                row[1:] = [row[0]] * MAX_RADIUS
        #: per atom: identifiers of radius 0..MAX_RADIUS
        self.bits: list[list[int]] = bits

    def codes(self, centre: int, max_radius: int = MAX_RADIUS) -> list[str]:
        """Codes of radius 1..max_radius around one atom (index r-1 is radius r)."""
        return list(self.iter_codes(centre, max_radius))

    def iter_codes(self, centre: int, max_radius: int = MAX_RADIUS) -> Iterator[str]:
        """The codes of radius 1, 2, ..., max_radius (at most MAX_RADIUS) of one atom."""
        for x in self.bits[centre][1:max_radius + 1]:
            yield f"{x:08x}"


def environment_smiles(mol: Chem.Mol, centre: int, radius: int) -> str:
    """A readable picture of an atom's environment of one radius: the fragment of the
    bonds within ``radius`` of the atom, written as SMILES from the atom (for the
    table's ``example`` column; the code itself is the identifier)."""
    bonds = list(Chem.FindAtomEnvironmentOfRadiusN(mol, radius, centre))
    while not bonds and radius > 1:  # the sphere is beyond the molecule: the whole of it
        radius -= 1
        bonds = list(Chem.FindAtomEnvironmentOfRadiusN(mol, radius, centre))
    if not bonds:
        return Chem.MolFragmentToSmiles(mol, [centre], isomericSmiles=False)
    atoms = sorted({a for k in bonds for a in (mol.GetBondWithIdx(k).GetBeginAtomIdx(),
                                                 mol.GetBondWithIdx(k).GetEndAtomIdx())})
    return Chem.MolFragmentToSmiles(mol, atoms, bonds, rootedAtAtom=centre, isomericSmiles=False)


def rank_tags(keys: list[int], shifts: list[float]) -> list[str]:
    """Tags telling apart signals of one symmetry class (diastereotopic halves, the cis
    and trans members of twin groups on an alkene, the two =CH2 protons): ``|0``,
    ``|1`` by increment shift; ``""`` for a class with one signal.

    The codes of such signals are identical (the code has no geometry), while their
    residuals differ systematically, so each member gets its own row.
    """
    by_key: dict[int, list[int]] = {}
    for k, key in enumerate(keys):
        by_key.setdefault(key, []).append(k)
    tags = [""] * len(keys)
    for members in by_key.values():
        if len(members) > 1:
            for rank, k in enumerate(sorted(members, key=lambda i: shifts[i])):
                tags[k] = f"|{rank}"
    return tags


class HoseEntry(NamedTuple):
    """Residual statistics of one code: count, mean and standard deviation (ppm).

    Built on lookup (:meth:`HoseTable.entry`), many times per molecule, so a named
    tuple (fast to build) rather than a dataclass.
    """

    n: int
    mean: float
    sd: float


class HoseTable:
    """A fitted correction table for one nucleus.

    Attributes
    ----------
    rows : dict
        ``'radius,"code"'`` -> ``"n,mean,sd,by_fold,example"``, the file's own text
        (parsed on lookup). A table read from its packed copy (:func:`read_packed_table`)
        reads the CSV for this only when asked (the by-fold statistics, tests).
    shrink : float
        The k of the count shrinkage ``n / (n + k)``.
    max_radius : int
    sigma_scale : float
        Factor on the shrunk spread so that about 68 % of out-of-fold errors fall
        within one sigma (the spread of training residuals is optimistic).
    provenance : str
        What the table was fitted on and how (the file's header lines).
    """

    def __init__(self, rows: dict[str, str] | None, shrink: float, max_radius: int, provenance: str,
                 sigma_scale: float = 1.0, *, packed: tuple | None = None, source: Path | None = None):
        self._rows = rows
        self.shrink = shrink
        self.max_radius = max_radius
        self.provenance = provenance
        self.sigma_scale = sigma_scale
        #: the packed copy: (sorted integer keys of the rows (:func:`code_key`), n, mean,
        #: sd arrays)
        self._packed = packed
        self._source = source
        #: per radius: code -> parsed entry (or None), for the codes met so far (common
        #: codes recur in almost every molecule); CSV tables only
        self._seen: list[dict[str, HoseEntry | None]] = [{} for _ in range(MAX_RADIUS + 2)]
        #: integer key -> parsed entry (or None) for the keys met so far; packed tables
        self._seen_key: dict[int, HoseEntry | None] = {}

    def __repr__(self) -> str:
        return f"HoseTable(shrink={self.shrink:g}, max_radius={self.max_radius}, sigma_scale={self.sigma_scale:g})"

    @property
    def rows(self) -> dict[str, str]:
        if self._rows is None:  # packed copy: the CSV text on demand
            self._rows = _read_csv_table(self._source)[0]
        return self._rows

    def _lookup_key(self, key: int) -> HoseEntry | None:
        """The statistics of one integer key of a packed table, all folds (not cached)."""
        keys, ns, means, sds = self._packed
        i = bisect_left(keys, key)
        return HoseEntry(ns[i], means[i], sds[i]) if i < len(keys) and keys[i] == key else None

    def _lookup(self, radius: int, code: str) -> HoseEntry | None:
        """The statistics of one code, all folds (not cached)."""
        if self._packed is not None:
            key = code_key(radius, code)
            return None if key is None else self._lookup_key(key)
        v = self.rows.get(f'{radius},"{code}"')
        if v is None:
            return None
        n_t, mean_t, sd_t = v.split(",", 3)[:3]
        return HoseEntry(int(n_t), float(mean_t), float(sd_t))

    def entry(self, radius: int, code: str, exclude_fold: int | None = None) -> HoseEntry | None:
        """Statistics of one code at one radius, or None if the code was not seen.

        With ``exclude_fold`` the statistics leave out that development fold.
        """
        if exclude_fold is None and self._packed is not None:
            key = code_key(radius, code)
            if key is None:
                return None
            got = self._seen_key.get(key, False)
            if got is False:
                got = self._seen_key[key] = self._lookup_key(key)
            return got
        if exclude_fold is None:
            seen = self._seen[radius] if radius < len(self._seen) else {}
            got = seen.get(code, False)
            if got is False:
                got = seen[code] = self._lookup(radius, code)
            return got
        v = self.rows.get(f'{radius},"{code}"')
        if v is None:
            return None
        n_t, mean_t, sd_t, folds = v.split(",")[:4]
        n, mean, sd = int(n_t), float(mean_t), float(sd_t)
        for part in folds.split(";"):
            f, nf_t, mf_t, sf_t = part.split(":")
            if int(f) == exclude_fold:
                nf, mf, sf = int(nf_t), float(mf_t), float(sf_t)
                rest = n - nf
                if rest <= 0:
                    return None
                m = (n * mean - nf * mf) / rest
                ss = n * (sd * sd + mean * mean) - nf * (sf * sf + mf * mf)
                return HoseEntry(rest, m, math.sqrt(max(ss / rest - m * m, 0.0)))
        return HoseEntry(n, mean, sd)

    def correct(self, codes: Iterable[str], base_sigma: float, exclude_fold: int | None = None
                ) -> tuple[float, float, int]:
        """Correction (ppm), sigma (ppm) and the deepest radius found for one atom.

        Each radius's mean is shrunk toward the previous radius's corrected value,
        and its variance toward the previous variance (starting from the
        increment sigma), by the code's count; the code's spread is itself
        regularised by one pseudo-observation of the previous variance.
        """
        corr = 0.0
        var = base_sigma * base_sigma
        depth = 0
        k = self.shrink
        seen = self._seen
        for r, code in enumerate(codes, start=1):
            if r > self.max_radius:
                break
            if exclude_fold is None and r < len(seen) and self._packed is None:  # entry() inlined
                e = seen[r].get(code, False)
                if e is False:
                    e = seen[r][code] = self._lookup(r, code)
            else:
                e = self.entry(r, code, exclude_fold)
            if e is None:
                break
            w = e.n / (e.n + k)
            corr = w * e.mean + (1.0 - w) * corr
            # the code's own spread, itself shrunk toward the previous variance by one
            # pseudo-observation (a code seen once has no spread of its own)
            var = w * (e.n * e.sd * e.sd + var) / (e.n + 1) + (1.0 - w) * var
            depth = r
        return corr, math.sqrt(var) * (self.sigma_scale if depth else 1.0), depth

    def correct_atom(self, bits: list[int], tag: str, base_sigma: float, exclude_fold: int | None = None
                     ) -> tuple[float, float, int]:
        """:meth:`correct` of one atom given by its identifiers (a row of
        :attr:`MolCodes.bits`) and its rank tag (``""``, ``"|0"``, ...), the same numbers.

        On a packed table the identifiers are looked up as integer keys
        (:func:`code_key`), without writing the codes as text: the predictors call this
        per signal and radius. Otherwise (a CSV table, a fold left out, a tag beyond the
        keys' range) the codes are written and :meth:`correct` answers.
        """
        t = 0 if not tag else _TAG_NUMBER.get(tag, -1)
        if self._packed is None or exclude_fold is not None or t < 0:
            return self.correct([f"{x:08x}{tag}" for x in bits[1:self.max_radius + 1]], base_sigma,
                                exclude_fold)
        corr = 0.0
        var = base_sigma * base_sigma
        depth = 0
        k = self.shrink
        seen = self._seen_key
        lookup = self._lookup_key
        for r in range(1, min(self.max_radius, len(bits) - 1) + 1):
            key = (r << 40) | (bits[r] << 8) | t
            e = seen.get(key, False)
            if e is False:
                e = seen[key] = lookup(key)
            if e is None:
                break
            # the same arithmetic as correct(), in the same order (the same bits)
            w = e.n / (e.n + k)
            corr = w * e.mean + (1.0 - w) * corr
            var = w * (e.n * e.sd * e.sd + var) / (e.n + 1) + (1.0 - w) * var
            depth = r
        return corr, math.sqrt(var) * (self.sigma_scale if depth else 1.0), depth


#: a code a packed table can hold: an identifier of 32 bits as 8 lower-case hex digits,
#: optionally a rank tag ``|k`` (k < 100, written without leading zeros)
_KEYABLE = r"([0-9a-f]{8})(?:\|(0|[1-9][0-9]?))?"
_KEYABLE_RE = None
#: rank tag -> its number in a key (tags of signals of one class, see rank_tags)
_TAG_NUMBER = {f"|{k}": k + 1 for k in range(100)}


def code_key(radius: int, code: str) -> int | None:
    """The integer key of a code in a packed table: radius, identifier and rank tag
    (0 without one, k + 1 for ``|k``) in one number, ``radius << 40 | identifier << 8 | tag``;
    None for a code of another form (no packed table holds one).

    One key per code text and one text per key (the form is checked in full), so a
    lookup by key finds exactly the row the text would.
    """
    global _KEYABLE_RE
    if _KEYABLE_RE is None:
        _KEYABLE_RE = re.compile(_KEYABLE)
    m = _KEYABLE_RE.fullmatch(code) if 0 <= radius < 1 << 20 else None
    if m is None:
        return None
    tag = m.group(2)
    return (radius << 40) | (int(m.group(1), 16) << 8) | (0 if tag is None else int(tag) + 1)


#: a row of a code table's CSV (compiled on first use: the packed copies are read instead)
_ROW = r'^(\d+,"[^"]*"),(.*)$'


def _read_csv_table(path: Path) -> tuple[dict[str, str], float, int, float, str]:
    """Rows, shrink, max_radius, sigma_scale and provenance of a table's CSV file."""
    import gzip  # the CSV is read only without (or beside) its packed copy

    head: list[str] = []
    shrink, max_radius, scale = 4.0, MAX_RADIUS, 1.0
    with gzip.open(path, "rt", encoding="utf-8", newline="") as fh:
        text = fh.read()
    for line in text[: text.find("\nradius,")].splitlines():
        head.append(line[1:].strip())
        if line.startswith("# shrink "):
            shrink = float(line.split()[2])
        elif line.startswith("# max_radius "):
            max_radius = int(line.split()[2])
        elif line.startswith("# sigma_scale "):
            scale = float(line.split()[2])
    return dict(re.findall(_ROW, text, re.M)), shrink, max_radius, scale, "\n".join(head)


def read_table(path: Path) -> HoseTable:
    """Read a correction table (gzip CSV with ``#`` provenance lines, written by :func:`write_table`)."""
    rows, shrink, max_radius, scale, provenance = _read_csv_table(path)
    return HoseTable(rows, shrink, max_radius, provenance, scale)


def write_table(path: Path, rows: list[tuple[int, str, int, float, float, str, str]], provenance: list[str],
                shrink: float, max_radius: int, sigma_scale: float) -> None:
    """Write a correction table: provenance lines, then radius, code, n, mean, sd, the
    per-fold statistics (``fold:n:mean:sd`` joined by ``;``) and an example environment
    (SMILES fragment, no commas) per row; then its packed copy (:func:`pack_table`)."""
    settings = [f"shrink {shrink:g}", f"max_radius {max_radius}", f"sigma_scale {sigma_scale:.3f}"]
    # codes are always quoted (they hold commas) and never contain quotes
    _write_gz_csv(path, [*provenance, *settings], "radius,code,n,mean_ppm,sd_ppm,by_fold,example",
                  (f'{r},"{code}",{n},{mean:.4f},{sd:.4f},{folds},{example}'
                   for r, code, n, mean, sd, folds, example in rows))
    pack_table(path)


def _write_gz_csv(path: Path, comments: list[str], header: str, lines: Iterable[str]) -> None:
    """Write ``# comment`` lines, a header and data lines as gzip CSV; mtime 0 so the
    same table always gives the same bytes."""
    import gzip

    with gzip.GzipFile(path, "wb", mtime=0) as raw:
        with io.TextIOWrapper(raw, encoding="utf-8", newline="") as fh:
            for line in comments:
                fh.write(f"# {line}\n")
            fh.write(header + "\n")
            for line in lines:
                fh.write(line + "\n")


# ------------------------------------------------------------------ packed copies
# The CSV files are the tables (readable, with provenance, by-fold statistics and
# examples). Reading 10^5 rows of text costs about 0.2 s per start, more than a small
# batch's predictions, so each CSV has a packed copy beside it (``.packed``: a JSON header
# line with the provenance and the settings, then the values a prediction uses as
# binary arrays), derived from the CSV by :func:`pack_table` / :func:`pack_layer` whenever
# a table is written. The copy records the size of its CSV's gzip file, that file's CRC-32
# and its gzip trailer (the CRC-32 and length of the text); size and trailer are checked at
# load: a copy that does not match its CSV is ignored and the CSV read instead (``tests/test_prediction_hose.py``
# checks that the shipped copies hold exactly the CSV's values).
PACK_MAGIC = b"specmatch-packed-table 2\n"
def _packed_path(path: Path) -> Path:
    return path.with_name(path.name.replace(".csv.gz", ".packed"))


def _source_stamp(path: Path) -> tuple[int, int]:
    data = path.read_bytes()
    return len(data), zlib.crc32(data)


def _source_tail(path: Path) -> tuple[int, str]:
    """Size and last 8 bytes (hex) of a CSV's gzip file: the gzip trailer, CRC-32 and
    length of the text itself, so a rewritten table shows in it (read without reading
    the file, where the whole-file CRC-32 read some 4 MB at each start)."""
    with open(path, "rb") as fh:
        size = fh.seek(0, 2)
        fh.seek(max(0, size - 8))
        return size, fh.read(8).hex()


def _write_packed(path: Path, header: dict, arrays: list) -> None:
    size, crc = _source_stamp(path)
    header = {**header, "source": path.name, "source_bytes": size, "source_crc32": crc,
              "source_tail": _source_tail(path)[1],
              "written_by": "specmatch.prediction.hose.pack_table/pack_layer from the CSV beside it",
              "arrays": [[a.typecode, len(a)] for a in arrays], "byteorder": sys.byteorder}
    with open(_packed_path(path), "wb") as fh:
        fh.write(PACK_MAGIC)
        fh.write(json.dumps(header, ensure_ascii=False, sort_keys=True).encode("utf-8") + b"\n")
        for a in arrays:
            fh.write(a.tobytes())


def _read_packed(path: Path) -> tuple[dict, list] | None:
    """Header and arrays of the packed copy of ``path``; None if absent or stale."""
    packed = _packed_path(path)
    try:
        with open(packed, "rb") as fh:
            if fh.readline() != PACK_MAGIC:
                return None
            header = json.loads(fh.readline())
            blob = fh.read()
        if "source_tail" in header:  # the gzip trailer (CRC-32 and size of the text) and the file size
            stale = (header["source_bytes"], header["source_tail"]) != _source_tail(path)
        else:  # a copy written before the trailer was recorded: the whole file's CRC-32
            stale = (header["source_bytes"], header["source_crc32"]) != _source_stamp(path)
        if stale:
            return None  # the CSV was rewritten without its copy: the CSV is the table
        arrays, at = [], 0
        for typecode, n in header["arrays"]:
            a = array(typecode)
            size = a.itemsize * n
            a.frombytes(blob[at:at + size])
            at += size
            if header["byteorder"] != sys.byteorder:
                a.byteswap()
            arrays.append(a)
        return (header, arrays) if at == len(blob) else None
    except (OSError, ValueError, KeyError, TypeError):
        return None


def pack_table(path: Path) -> None:
    """Write the packed copy of a correction table's CSV: the rows' integer keys
    (:func:`code_key`, sorted) and their n, mean and sd, as arrays.

    Integer keys rather than the code texts: reading 10^5 texts meant splitting them at
    every start (some 11 ms of the command), and a lookup then wrote each code as text.
    """
    rows, shrink, max_radius, scale, provenance = _read_csv_table(path)
    items = []
    for key, v in rows.items():
        r, code = key.split(",", 1)
        k = code_key(int(r), code[1:-1])
        if k is None:
            raise ValueError(f"{path.name}: code {code} is not an 8-digit identifier with an optional "
                             "rank tag; cannot pack")
        n_t, mean_t, sd_t = v.split(",", 3)[:3]
        items.append((k, int(n_t), float(mean_t), float(sd_t)))
    items.sort()
    _write_packed(path, {"kind": "code-keys", "shrink": shrink, "max_radius": max_radius, "sigma_scale": scale,
                         "provenance": provenance, "key": "radius << 40 | identifier << 8 | (0 or rank tag + 1)"},
                  [array("Q", [x[0] for x in items]), array("I", [x[1] for x in items]),
                   array("d", [x[2] for x in items]), array("d", [x[3] for x in items])])


def _packed_codes(path: Path, kind: str, typecodes: list[str]):
    """Header, code texts and the other arrays of the packed copy of ``path``: None if
    the copy is absent, stale, of another kind or layout, or its codes do not line up
    with the first value array (a damaged copy falls back to the CSV)."""
    got = _read_packed(path)
    if got is None or got[0].get("kind") != kind:
        return None
    h, arrays = got
    if [a.typecode for a in arrays] != typecodes:
        return None
    text, *values = arrays
    try:
        codes = text.tobytes().decode("ascii").split("\n") if len(text) else []
    except UnicodeDecodeError:
        return None
    if len(codes) != len(values[0]):
        return None
    return h, codes, values


def read_packed_table(path: Path) -> HoseTable | None:
    """The correction table of ``path`` from its packed copy (None if absent or stale).

    A copy of the previous layout (the code texts, kind ``codes``, as a table fitted
    before the integer keys has) is read too, its texts turned into keys.
    """
    got = _read_packed(path)
    if got is None:
        return None
    h, arrays = got
    if h.get("kind") == "code-keys" and [a.typecode for a in arrays] == ["Q", "I", "d", "d"]:
        keys, ns, means, sds = arrays
        if not all(len(a) == len(keys) for a in arrays):
            return None  # damaged: the CSV is read instead
    else:
        old = _packed_codes(path, "codes", ["B", "I", "d", "d"])
        if old is None:
            return None
        h, codes, (ns, means, sds) = old
        radius = [r for r, n in h["radii"] for _ in range(n)]
        keyed = [(code_key(r, c), n, m, sd) for r, c, n, m, sd in zip(radius, codes, ns, means, sds)]
        if len(radius) != len(codes) or any(x[0] is None for x in keyed):
            return None
        keyed.sort()
        keys = array("Q", [x[0] for x in keyed])
        ns, means, sds = (array(t, [x[j] for x in keyed]) for j, t in ((1, "I"), (2, "d"), (3, "d")))
    return HoseTable(None, h["shrink"], h["max_radius"], h["provenance"], h["sigma_scale"],
                     packed=(keys, ns, means, sds), source=path)


@lru_cache(maxsize=4)
def load_table(nucleus: str) -> HoseTable | None:
    """The shipped table for "13C" or "1H" (None if the file is absent), read once."""
    path = TABLE_DIR / ("hose_c13.csv.gz" if nucleus == "13C" else "hose_h1.csv.gz")
    if not path.exists():
        return None
    # the by-fold statistics are in the CSV only
    return (None if CROSS_VALIDATED else read_packed_table(path)) or read_table(path)


# ------------------------------------------------------------------ neighbour layer
#: topological distances whose atoms describe a carbon in the neighbour layer
LAYER_DISTANCE = 3


def neighbour_features(bits: list[list[int]], dist_row: list[int], centre: int) -> list[str]:
    """Features of one atom for the neighbour layer.

    For every atom at distance d = 1 to ``LAYER_DISTANCE``: ``"d:r:code"`` with that
    atom's code of radius r = 0 and 1 (and 2 for the direct neighbours), and
    ``"d:c<centre>:code"``, its radius-0 code paired with the centre's radius-0 code
    (``"d:d<centre>:code"`` with the radius-1 code for the atoms at distance 1 and 2;
    ``"d:e<centre>:code"``, the radius-0 code of an atom at distance 2 or 3 paired with
    the centre's radius-1 code).

    The environment code of the centre says "this exact neighbourhood"; an unseen
    combination of known substituents gets no correction from it. These features
    describe the same neighbourhood piece by piece (which atom types sit at which
    distance), so a linear model on them generalises across combinations, as the
    increments do, while learning what the increments miss. The paired features let
    a substituent act differently on a CH3 and on a ring CH, as the increments'
    own terms do (cross-validated: 13C core 1.81 -> 1.78, wide 1.61 -> 1.55 ppm).

    Parameters
    ----------
    bits : list of list of int
        :attr:`MolCodes.bits` of the molecule.
    dist_row : list of int
        Topological distances from the centre atom to every atom.
    centre : int
        The centre atom.
    """
    return features_from_hex(hex_codes(bits), dist_row, centre)


def hex_codes(bits: list[list[int]]) -> list[tuple[str, str, str]]:
    """Each atom's codes of radius 0, 1 and 2 as text (for :func:`neighbour_features`)."""
    return [(f"{row[0]:x}", f"{row[1]:x}", f"{row[2]:x}") for row in bits]


def features_from_hex(hexes: list[tuple[str, str, str]], dist_row: list[int], centre: int) -> list[str]:
    """:func:`neighbour_features` from the codes as text (computed once per molecule)."""
    out = []
    c0, c1 = hexes[centre][0], hexes[centre][1]
    for a, d in enumerate(dist_row):
        if 1 <= d <= LAYER_DISTANCE:
            r0, r1, r2 = hexes[a]
            out += (f"{d}:0:{r0}", f"{d}:1:{r1}", f"{d}:c{c0}:{r0}")
            if d == 1:  # cross-validated: 0.01 ppm wide each, nothing from radius 0 at distance 4
                out += (f"1:2:{r2}", f"1:d{c0}:{r1}")
            elif d == 2:
                # the beta atom's first sphere paired with the centre's type, and its type paired
                # with the centre's first sphere (cross-validated: 13C core 1.778 -> 1.773, wide
                # 1.555 -> 1.529 ppm)
                out += (f"2:d{c0}:{r1}", f"2:e{c1}:{r0}")
            else:  # distance 3: its type paired with the centre's first sphere (CV: core -0.006, wide -0.003)
                out.append(f"3:e{c1}:{r0}")
    return out


#: ring stereo features reach atoms this far from the nearer substituted ring atom (and the
#: farther one at most RELATION_FAR)
RELATION_NEAR, RELATION_FAR = 2, 4
_TETRAHEDRAL = (Chem.ChiralType.CHI_TETRAHEDRAL_CW, Chem.ChiralType.CHI_TETRAHEDRAL_CCW)


def _odd(seq: list[int], ref: list[int]) -> bool:
    """True if ``seq`` is an odd permutation of ``ref`` (four items at most)."""
    p = [ref.index(x) for x in seq]
    return sum(1 for i in range(len(p)) for j in range(i + 1, len(p)) if p[i] > p[j]) % 2 == 1


def ring_faces(mol: Chem.Mol) -> dict[tuple[int, int, int], bool]:
    """The face of every substituent on a ring stereocentre, from the chiral tags alone.

    For a ring of RDKit's ring set walked in its atom order, a configured ring atom ``a``
    with ring neighbours ``p`` (before) and ``n`` (after) and a heavy substituent ``s``
    off that ring (the fourth neighbour ``t``: H or another substituent) lies on one face
    or the other: the parity of (p, n, s, t) within the atom's bond order, flipped by
    the tag (clockwise / anticlockwise). Two substituents of one ring are cis when their
    faces agree; walking the ring the other way flips every face, so the relation does
    not depend on the atom order (checked against 3D embeddings: 215 pairs of 215 on
    dev molecules). No 3D is built.

    Returns
    -------
    dict
        ``(ring index, ring atom, substituent atom) -> face`` for rings holding two or
        more configured atoms; empty when the molecule has fewer than two.
    """
    centres = [a.GetIdx() for a in mol.GetAtoms() if a.GetChiralTag() in _TETRAHEDRAL]
    if len(centres) < 2:
        return {}
    rings = mol.GetRingInfo().AtomRings()
    todo = []
    for k, ring in enumerate(rings):
        on = [a for a in centres if a in ring]
        if len(on) >= 2:
            todo.append((k, ring, on))
    if not todo:
        return {}
    out: dict[tuple[int, int, int], bool] = {}
    for k, ring, on in todo:
        last = len(ring) - 1
        for a in on:
            at = mol.GetAtomWithIdx(a)
            order = [b.GetOtherAtomIdx(a) for b in at.GetBonds()]
            if len(order) == 3:
                # an implicit H counts as the last neighbour of the tag's order (the faces
                # equal those read with explicit hydrogens, Chem.AddHs, on all 860 dev
                # molecules with configured ring atoms)
                order.append(-1)
            at_ring = ring.index(a)
            p, n = ring[at_ring - 1], ring[at_ring + 1 if at_ring < last else 0]
            exo = [x for x in order if x != p and x != n]
            if len(order) != 4 or len(exo) != 2:
                continue
            ccw = at.GetChiralTag() == Chem.ChiralType.CHI_TETRAHEDRAL_CCW
            for s, t in ((exo[0], exo[1]), (exo[1], exo[0])):
                if s >= 0 and mol.GetAtomWithIdx(s).GetAtomicNum() != 1:
                    out[(k, a, s)] = _odd([p, n, s, t], order) != ccw
    return out


_BS = Chem.BondStereo
#: double-bond stereo values that fix which substituents are cis (True) or trans (False) to
#: the reference atoms
_BOND_CIS = {_BS.STEREOZ: True, _BS.STEREOCIS: True, _BS.STEREOE: False, _BS.STEREOTRANS: False}


def alkene_pairs(mol: Chem.Mol) -> list[tuple[int, int, bool]]:
    """``(substituent on one end, substituent on the other, cis?)`` for every pair across a
    double bond whose geometry the input gives (E/Z or the SMILES slashes)."""
    out = []
    for bond in mol.GetBonds():
        cis = _BOND_CIS.get(bond.GetStereo())
        ref = list(bond.GetStereoAtoms())
        if cis is None or len(ref) != 2:
            continue
        b0, b1 = bond.GetBeginAtom(), bond.GetEndAtom()
        i0, i1 = b0.GetIdx(), b1.GetIdx()
        r0, r1 = (ref[0], ref[1]) if mol.GetBondBetweenAtoms(ref[0], i0) is not None else (ref[1], ref[0])
        for x in (n.GetIdx() for n in b0.GetNeighbors()):
            if x == i1:
                continue
            for y in (n.GetIdx() for n in b1.GetNeighbors()):
                if y != i0:
                    # a non-reference substituent sits on the other side of its end
                    out.append((x, y, cis if (x == r0) == (y == r1) else not cis))
    return out


def configuration_features(mol: Chem.Mol, hexes: list[tuple[str, str, str]], dist: list[list[int]],
                           centres: Iterable[int]) -> dict[int, list[str]]:
    """Features of the relative configuration the input gives, per centre atom (neighbour layer).

    Rings: for every pair of substituents on two configured atoms of one ring
    (:func:`ring_faces`), ``z:<ring size>.<ring distance>.<d1>.<d1s>.<d2>.<d2s><c|t>:<centre code>``
    (the centre's distances to the nearer ring atom and its substituent, then to the
    other pair; ``c`` cis, ``t`` trans) and the coarser
    ``z:<size>.<ring distance>.<d1>.<d2><c|t>:<centre code>``. Double bonds of given
    geometry: ``y:<d1>.<d2><c|t>:<centre code>`` for every pair of substituents across
    (:func:`alkene_pairs`), by the centre's distances to the two. Only centres within
    ``RELATION_NEAR`` of the nearer atom of the pair and ``RELATION_FAR`` of the other
    get them.

    The environment codes and the other layer features have no geometry: a pair of
    diastereomers gets one prediction without these. With them the layer learns, per
    kind of carbon near the pair, the mean shift of cis against trans (the gamma-gauche
    interactions of axial or cis groups, averaged over the conformers the data holds).
    Cross-validated gain: see the header of ``tables/layer_c13.csv.gz``.
    """
    centres = list(centres)
    out: dict[int, list[str]] = {c: [] for c in centres}
    faces = ring_faces(mol)
    alkene = alkene_pairs(mol) if mol.GetNumBonds() else []
    if not faces and not alkene:
        return out
    pairs = []  # (atom, its substituent, other atom, its substituent, ring text, relation)
    if faces:
        rings = mol.GetRingInfo().AtomRings()
        items = sorted(faces.items())
        for x, ((k, a, s), fa) in enumerate(items):
            for (k2, b, u), fb in items[x + 1:]:
                if k2 != k or b == a:
                    continue
                ring = rings[k]
                gap = abs(ring.index(a) - ring.index(b))
                pairs.append((a, s, b, u, f"{min(len(ring), 9)}.{min(gap, len(ring) - gap)}",
                              "c" if fa == fb else "t"))
    for c in centres:
        d = dist[c]
        c0 = hexes[c][0]
        feats = out[c]
        for a, s, b, u, ring_text, rel in pairs:
            one, two = sorted(((d[a], d[s]), (d[b], d[u])))
            if one[0] > RELATION_NEAR or two[0] > RELATION_FAR:
                continue
            feats.append(f"z:{ring_text}.{one[0]}.{one[1]}.{two[0]}.{two[1]}{rel}:{c0}")
            feats.append(f"z:{ring_text}.{one[0]}.{two[0]}{rel}:{c0}")
        for x, y, cis in alkene:
            one, two = sorted((d[x], d[y]))
            if one <= RELATION_NEAR and two <= RELATION_FAR:
                feats.append(f"y:{one}.{two}{'c' if cis else 't'}:{c0}")
    return out


class _Prefixes(dict):
    """prefix -> code -> weight of a packed layer, each prefix's dictionary built on first use.

    The packed copy holds some 4,500 prefixes (most of them one centre code's paired
    features, a handful of codes each) and 62,000 weights; building every dictionary took
    about 10 ms of each start of the command, while a batch of a few hundred molecules
    meets a fraction of the centre codes. ``get`` answers as a plain dictionary would;
    iterating, ``len`` and ``values`` build every prefix first.
    """

    __slots__ = ("_spans", "_codes", "_weights")

    def __init__(self, spans: dict[str, tuple[int, int]], codes: list[str], weights: array):
        super().__init__()
        self._spans = spans
        self._codes = codes
        self._weights = weights

    def get(self, prefix: str, default=None):  # type: ignore[override]
        got = dict.get(self, prefix)
        if got is None:
            span = self._spans.pop(prefix, None)
            if span is None:
                return default
            lo, hi = span
            got = self[prefix] = dict(zip(self._codes[lo:hi], self._weights[lo:hi]))
        return got

    def __missing__(self, prefix: str) -> dict[str, float]:
        got = self.get(prefix)
        if got is None:
            raise KeyError(prefix)
        return got

    def _all(self) -> None:
        for prefix in list(self._spans):
            self.get(prefix)

    def __len__(self) -> int:
        return dict.__len__(self) + len(self._spans)

    def __iter__(self):
        self._all()
        return dict.__iter__(self)

    def __contains__(self, prefix: object) -> bool:
        return dict.__contains__(self, prefix) or prefix in self._spans

    def keys(self):  # type: ignore[override]
        self._all()
        return dict.keys(self)

    def values(self):  # type: ignore[override]
        self._all()
        return dict.values(self)

    def items(self):  # type: ignore[override]
        self._all()
        return dict.items(self)

    def __eq__(self, other: object) -> bool:
        self._all()
        return dict.__eq__(self, other)

    __hash__ = None  # type: ignore[assignment]


class NeighbourLayer:
    """Fitted weights of the neighbour layer (ridge regression of the increment residual
    on :func:`neighbour_features`), added to the increment sum before the code table.

    Attributes
    ----------
    rows : dict
        feature -> ``"n,weight,by_fold,example"``, the file's own text, parsed on lookup
        (read from the CSV on demand when the layer came from its packed copy).
    provenance : str
    """

    def __init__(self, rows: dict[str, str] | None, provenance: str, *,
                 by_prefix: dict[str, dict[str, float]] | None = None, source: Path | None = None):
        self._rows = rows
        self.provenance = provenance
        self._source = source
        self._parsed: dict[str, tuple[float, ...]] = {}
        #: fold left out (None: none) -> prefix -> code -> weight, built on first use by :meth:`shifts`
        self._flat: dict[int | None, dict[str, dict[str, float]]] = {}
        #: fold left out -> (centre radius-0, radius-1 identifier) -> the ``get`` of the
        #: centre's seven paired prefixes (:meth:`shifts_bits`)
        self._paired: dict[int | None, dict[tuple[int, int], tuple]] = {}
        #: fold left out -> the ``get`` of the seven unpaired prefixes
        self._unpaired: dict[int | None, tuple] = {}
        if by_prefix is not None:
            self._flat[None] = by_prefix

    def __repr__(self) -> str:
        return "NeighbourLayer()"

    @property
    def rows(self) -> dict[str, str]:
        if self._rows is None:  # packed copy: the CSV text on demand
            self._rows = _read_csv_layer(self._source)[0]
        return self._rows

    def weight(self, feature: str, exclude_fold: int | None = None) -> float:
        """The weight (ppm) of one feature, 0 if unknown; with ``exclude_fold`` the weight
        of the layer fitted without that development fold."""
        if exclude_fold is None and self._rows is None:
            prefix, _, code = feature.rpartition(":")
            return self._flat[None].get(prefix, {}).get(_layer_code(code), 0.0)
        at = 0 if exclude_fold is None else 1 + exclude_fold
        got = self._parsed.get(feature)
        if got is None:
            v = self.rows.get(feature)
            if v is None:
                return 0.0
            _, w, folds = v.split(",")[:3]
            got = self._parsed[feature] = (float(w), *(float(x) for x in folds.split(";")))
        return got[at]

    def shift(self, features: Iterable[str], exclude_fold: int | None = None) -> float:
        """Sum of the weights of an atom's features (ppm), exactly rounded."""
        return math.fsum(self.weight(f, exclude_fold) for f in features)

    def shifts(self, hexes: list[tuple[str, str, str]], dist: list[list[int]], centres: Iterable[int],
               exclude_fold: int | None = None) -> list[float]:
        """The layer's shift of each centre atom of one molecule: :meth:`shift` of its
        :func:`neighbour_features`, equal up to the last bit (the codes as text, as
        :func:`hex_codes` writes them; :meth:`shifts_bits` takes the identifiers)."""
        return self.shifts_bits([(int(r0, 16), int(r1, 16), int(r2, 16)) for r0, r1, r2 in hexes], dist,
                                centres, exclude_fold)

    def shifts_bits(self, bits: list, dist: list[list[int]], centres: Iterable[int],
                    exclude_fold: int | None = None) -> list[float]:
        """:meth:`shifts` from the identifiers (:attr:`MolCodes.bits`, radius 0, 1 and 2 of
        each row read).

        The unpaired features of an atom at distance d are the same for every centre, so
        their weights are summed once per atom and distance; only the features paired with
        the centre are looked up per centre and atom (a third of the lookups). The weights
        are keyed by the identifiers as integers (:func:`_layer_code`): no code is
        written as text but the centre's own, in the names of its paired prefixes.
        """
        parts = self._flat.get(exclude_fold)
        if parts is None:
            parts = self._flat[exclude_fold] = self._by_prefix(exclude_fold)
        empty: dict[str, float] = {}
        unpaired = self._unpaired.get(exclude_fold)
        if unpaired is None:  # the same seven prefixes for every molecule
            unpaired = self._unpaired[exclude_fold] = tuple(
                parts.get(k, empty).get for k in ("1:0", "1:1", "1:2", "2:0", "2:1", "3:0", "3:1"))
        t10, t11, t12, t20, t21, t30, t31 = unpaired
        # per atom: the weights of its unpaired features at distance 1, 2, 3 (index 0 unused)
        own = [(0.0, math.fsum((t10(row[0], 0.0), t11(row[1], 0.0), t12(row[2], 0.0))),
                t20(row[0], 0.0) + t21(row[1], 0.0), t30(row[0], 0.0) + t31(row[1], 0.0)) for row in bits]
        out = []
        # per centre code pair: the look-ups of the seven prefixes paired with the centre,
        # found once per pair (kept with the layer: common centres recur in most molecules)
        paired = self._paired.get(exclude_fold)
        if paired is None or len(paired) > 100_000:  # bounded in a long-lived process
            paired = self._paired[exclude_fold] = {}
        for centre in centres:
            row = bits[centre]
            pair = (row[0], row[1])
            got = paired.get(pair)
            if got is None:
                c0, c1 = f"{row[0]:x}", f"{row[1]:x}"
                got = paired[pair] = tuple(parts.get(k, empty).get for k in (
                    f"1:c{c0}", f"2:c{c0}", f"3:c{c0}", f"1:d{c0}", f"2:d{c0}", f"2:e{c1}", f"3:e{c1}"))
            p1, p2, p3, q1, q2, e2, e3 = got
            values = []
            add = values.extend
            for a, d in enumerate(dist[centre]):
                if d == 1:
                    row = bits[a]
                    r0, r1 = row[0], row[1]
                    add((own[a][1], p1(r0, 0.0), q1(r1, 0.0)))
                elif d == 2:
                    row = bits[a]
                    r0, r1 = row[0], row[1]
                    add((own[a][2], p2(r0, 0.0), q2(r1, 0.0), e2(r0, 0.0)))
                elif d == 3:
                    r0 = bits[a][0]
                    add((own[a][3], p3(r0, 0.0), e3(r0, 0.0)))
            out.append(math.fsum(values))
        return out

    def _by_prefix(self, exclude_fold: int | None) -> dict[str, dict[int | str, float]]:
        """Weights grouped by feature prefix (``"d:r"``, ``"d:c<centre>"``): prefix -> code -> weight,
        so :meth:`shifts` looks codes up without building feature names. Codes are keyed
        as integers (:func:`_layer_code`; a code of another form keeps its text and is
        found by :meth:`weight` only)."""
        out: dict[str, dict[int | str, float]] = {}
        for f, v in self.rows.items():
            prefix, code = f.rsplit(":", 1)
            # only the weight column parsed when no fold is left out
            w = float(v.split(",", 2)[1]) if exclude_fold is None else self.weight(f, exclude_fold)
            key = _layer_code(code)
            out.setdefault(prefix, {})[code if key is None else key] = w
        return out


#: a code of a layer feature as :func:`hex_codes` writes it: hexadecimal, no leading zeros
_LAYER_CODE = r"0|[1-9a-f][0-9a-f]{0,15}"
_LAYER_CODE_RE = None


def _layer_code(code: str) -> int | None:
    """The identifier a layer feature's code writes (``f"{x:x}"``), None for another text.

    The form is checked in full, so each integer stands for exactly one text.
    """
    global _LAYER_CODE_RE
    if _LAYER_CODE_RE is None:
        _LAYER_CODE_RE = re.compile(_LAYER_CODE)
    return int(code, 16) if _LAYER_CODE_RE.fullmatch(code) else None


# features: d:... (d a distance) or the configuration features z:... and y:...
# (compiled on first use: the packed copy is read instead)
_LAYER_ROW = r'^([0-9yz]:[0-9a-z.:]+),(.*)$'


def _read_csv_layer(path: Path) -> tuple[dict[str, str], str]:
    import gzip

    with gzip.open(path, "rt", encoding="utf-8", newline="") as fh:
        text = fh.read()
    head = [line[1:].strip() for line in text[: text.find("\nfeature,")].splitlines()]
    return dict(re.findall(_LAYER_ROW, text, re.M)), "\n".join(head)


def read_layer(path: Path) -> NeighbourLayer:
    """Read a neighbour-layer file (gzip CSV with ``#`` provenance lines, see :func:`write_layer`)."""
    return NeighbourLayer(*_read_csv_layer(path))


def pack_layer(path: Path) -> None:
    """Write the packed copy of a neighbour layer's CSV: the features grouped by prefix
    (codes as one text, weights as an array)."""
    rows, provenance = _read_csv_layer(path)
    groups = NeighbourLayer(rows, provenance)._by_prefix(None)
    prefixes = sorted(groups)
    codes = [c for p in prefixes for c in groups[p]]
    if any(type(c) is not int for c in codes):
        raise ValueError(f"{path.name}: a feature code is not a hexadecimal identifier; cannot pack")
    # the codes as integers (no text to split at every start)
    _write_packed(path, {"kind": "layer-keys", "provenance": provenance,
                         "prefixes": [[p, len(groups[p])] for p in prefixes]},
                  [array("Q", codes), array("d", [groups[p][c] for p in prefixes for c in groups[p]])])


def read_packed_layer(path: Path) -> NeighbourLayer | None:
    """The neighbour layer of ``path`` from its packed copy (None if absent or stale); a
    copy of the earlier layout (codes as text) is read too, its codes turned into keys."""
    got = _read_packed(path)
    if got is None:
        return None
    h, arrays = got
    if h.get("kind") == "layer-keys" and [a.typecode for a in arrays] == ["Q", "d"]:
        codes, weights = arrays
        if len(codes) != len(weights):
            return None
    else:
        old = _packed_codes(path, "layer", ["B", "d"])
        if old is None:
            return None
        h, texts, (weights,) = old
        codes = [_layer_code(c) for c in texts]
        if any(c is None for c in codes):
            return None
    spans, at = {}, 0
    for prefix, n in h["prefixes"]:
        spans[prefix] = (at, at + n)
        at += n
    return NeighbourLayer(None, h["provenance"], by_prefix=_Prefixes(spans, codes, weights), source=path)


def write_layer(path: Path, rows: list[tuple[str, int, float, list[float], str]], provenance: list[str]) -> None:
    """Write a neighbour layer: provenance lines, then feature, count, weight, the weights of
    the layers fitted without each development fold (joined by ``;``) and an example
    environment of the feature's atom (SMILES fragment, no commas)."""
    _write_gz_csv(path, provenance, "feature,n,weight_ppm,by_fold,example",
                  (f"{feat},{n},{w:.4f},{';'.join(f'{x:.4f}' for x in folds)},{example}"
                   for feat, n, w, folds, example in rows))
    pack_layer(path)


@lru_cache(maxsize=2)
def load_layer(nucleus: str) -> NeighbourLayer | None:
    """The shipped neighbour layer for a nucleus (only "13C" has one), None if absent."""
    path = TABLE_DIR / ("layer_c13.csv.gz" if nucleus == "13C" else "layer_h1.csv.gz")
    if not path.exists():
        return None
    # the weights fitted without each fold are in the CSV only
    return (None if CROSS_VALIDATED else read_packed_layer(path)) or read_layer(path)
