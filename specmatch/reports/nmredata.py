"""NMReDATA export: the chosen structure with its assigned measured signals.

NMReDATA (Pupier et al., Magn. Reson. Chem. 2018, 56, 703) is an SD file: a molfile
followed by ``> <NMREDATA_...>`` data items. Written here from the published format
description as remembered; details marked "from memory" below were not checked
against the text at hand:

* the molfile carries explicit hydrogens, so 1H signals point at H atoms by their
  1-based molfile number (from memory: the format wants atom numbers of the
  molfile; explicit H is the unambiguous way);
* every line of a multi-line item ends with a backslash (version 1.1 rule, from
  memory), items are separated by a blank line and the record ends with ``$$$$``;
* ``NMREDATA_ASSIGNMENT`` lines are ``label, shift, atom, atom, ...``;
* ``NMREDATA_1D_1H`` lines are ``shift, S=multiplicity, N=number of H, L=label``
  with ``J=`` coupling constants in Hz (partners not given); ``NMREDATA_1D_13C``
  lines are ``shift, L=label``; each starts with ``Larmor=`` (MHz);
* ``NMREDATA_LEVEL`` 0 when every signal points at atoms without choice, 1 when some
  signal may be one of several atoms (diastereotopic H, overlapping lines; from
  memory).

Only signals assigned to the structure are written (flagged solvent lines and lines
the structure leaves unexplained are not: they are not this compound's).
"""

from __future__ import annotations

from typing import Any

from .. import __version__
from ..errors import SpecmatchError
from ..spectra.types import PeakList

__all__ = ["nmredata_sdf", "write_nmredata", "NMREDATA_VERSION"]

NMREDATA_VERSION = "1.1"


def _lines(items: list[str]) -> str:
    return "\n".join(f"{x}\\" for x in items)


def nmredata_sdf(result: Any, smiles: str | None = None) -> str:
    """The NMReDATA SD record of one candidate of ``result`` (default: the best).

    Parameters
    ----------
    result : Result
        An identification result.
    smiles : str, optional
        Which candidate (SMILES as in the ranking); the top-ranked one if omitted.

    Returns
    -------
    str
        The SD file text (one record).
    """
    from rdkit import Chem

    from ..structures import parse_structure

    ranking = result.ranking
    cand = ranking.candidates[0] if smiles is None else next(
        (c for c in ranking.candidates if c.smiles == smiles or c.canonical_smiles == smiles), None)
    if cand is None:
        raise SpecmatchError(f"'{smiles}' is not one of the ranked candidates; choose one of them")
    heavy = Chem.Mol(parse_structure(cand.smiles).mol)  # the atom order the prediction used
    mol = Chem.AddHs(heavy)  # hydrogens are appended: heavy-atom numbers stay the same
    h_on = {a.GetIdx(): [n.GetIdx() for n in a.GetNeighbors() if n.GetAtomicNum() == 1]
            for a in mol.GetAtoms() if a.GetAtomicNum() != 1}

    assignment: list[str] = []
    c13: list[str] = []
    h1: list[str] = []
    ambiguous = False
    seen_c: dict[int, str] = {}
    for r in cand.c13_table:
        if r.observed_ppm is None or r.status not in ("assigned", "overlap") or not r.atoms:
            continue
        key = r.observed_index if r.observed_index is not None else len(seen_c)
        if key in seen_c:  # a second carbon on the same observed line: add its atoms
            label = seen_c[key]
            i = next(k for k, a in enumerate(assignment) if a.startswith(label + ","))
            assignment[i] += "".join(f", {a + 1}" for a in r.atoms)
            ambiguous = True
            continue
        label = f"C{len(seen_c) + 1}"
        seen_c[key] = label
        assignment.append(f"{label}, {r.observed_ppm:.2f}, " + ", ".join(str(a + 1) for a in r.atoms))
        c13.append(f"{r.observed_ppm:.2f}, L={label}")
    h1_pl = result.h1 if isinstance(result.h1, PeakList) else None  # plain lists carry no multiplets
    c13_pl = result.c13 if isinstance(result.c13, PeakList) else None
    mult_of = {}
    for m in (h1_pl.multiplets if h1_pl is not None else ()):
        mult_of[round(m.shift, 3)] = m
    signals: dict[Any, dict[str, Any]] = {}  # one 1H signal per observed multiplet
    for r in cand.h1_table:
        if r.observed_ppm is None or r.status not in ("assigned", "overlap") or not r.atoms:
            continue
        hs = [h for a in r.atoms for h in h_on.get(a, [])]
        if not hs:
            continue
        key = r.observed_index if r.observed_index is not None else ("row", len(signals))
        sig = signals.setdefault(key, {"ppm": r.observed_ppm, "hs": [], "n": 0, "mult": r.multiplicity})
        sig["hs"] += [h for h in hs if h not in sig["hs"]]
        sig["n"] += r.protons if r.protons is not None else len(hs)
    for i, sig in enumerate(signals.values(), 1):
        if len(sig["hs"]) != sig["n"]:
            ambiguous = True  # e.g. one of two diastereotopic H of a CH2 on its own line
        label = f"H{i}"
        assignment.append(f"{label}, {sig['ppm']:.3f}, " + ", ".join(str(h + 1) for h in sig["hs"]))
        obs = mult_of.get(round(sig["ppm"], 3))
        mult = (obs.multiplicity if obs is not None else sig["mult"]) or "m"
        parts = [f"{sig['ppm']:.3f}", f"S={mult}", f"N={sig['n']}", f"L={label}"]
        if obs is not None and obs.j_hz:
            parts.append("J=" + ",".join(f"{j:.1f}" for j in obs.j_hz))
        h1.append(", ".join(parts))
    if not assignment:
        raise SpecmatchError("no measured signal is assigned to this candidate; nothing to export "
                             "(load a 13C or 1H spectrum and score first)")

    mol.SetProp("_Name", cand.canonical_smiles)
    block = Chem.MolToMolBlock(mol)
    solvent = (result.inputs or {}).get("solvent") or ""
    items = [("NMREDATA_VERSION", NMREDATA_VERSION), ("NMREDATA_LEVEL", "1" if ambiguous else "0")]
    if solvent:
        items.append(("NMREDATA_SOLVENT", solvent))
    items.append(("NMREDATA_ID", _lines([f"Title=specmatch {__version__}: {cand.smiles}",
                                          "Comment=shifts measured; assignment proposed by specmatch "
                                          "(advisory; confirm with orthogonal data)"])))
    items.append(("NMREDATA_SMILES", cand.canonical_smiles))
    items.append(("NMREDATA_ASSIGNMENT", _lines(assignment)))
    if c13:
        freq = c13_pl.frequency_mhz if c13_pl is not None and c13_pl.frequency_mhz else None
        items.append(("NMREDATA_1D_13C", _lines(([f"Larmor={freq:.2f}"] if freq else []) + c13)))
    if h1:
        freq = h1_pl.frequency_mhz if h1_pl is not None and h1_pl.frequency_mhz else None
        items.append(("NMREDATA_1D_1H", _lines(([f"Larmor={freq:.2f}"] if freq else []) + h1)))
    out = [block.rstrip("\n")]
    for name, value in items:
        out.append(f"> <{name}>\n{value}\n")
    return "\n".join(out) + "\n$$$$\n"


def write_nmredata(result: Any, path: str, smiles: str | None = None) -> None:
    """Write :func:`nmredata_sdf` to ``path``."""
    text = nmredata_sdf(result, smiles)
    try:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise SpecmatchError(f"cannot write the NMReDATA file '{path}': {exc.strerror}") from None
