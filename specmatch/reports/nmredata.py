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
    mult_of = {}
    for m in (result.h1.multiplets if result.h1 is not None else ()):
        mult_of[round(m.shift, 3)] = m
    n_h = 0
    for r in cand.h1_table:
        if r.observed_ppm is None or r.status not in ("assigned", "overlap") or not r.atoms:
            continue
        hs = [h for a in r.atoms for h in h_on.get(a, [])]
        if not hs:
            continue
        if r.protons is not None and len(hs) != r.protons:
            ambiguous = True  # e.g. one of two diastereotopic H of a CH2
        n_h += 1
        label = f"H{n_h}"
        assignment.append(f"{label}, {r.observed_ppm:.3f}, " + ", ".join(str(h + 1) for h in hs))
        obs = mult_of.get(round(r.observed_ppm, 3))
        mult = (obs.multiplicity if obs is not None else r.multiplicity) or "m"
        parts = [f"{r.observed_ppm:.3f}", f"S={mult}", f"N={r.protons or len(hs)}", f"L={label}"]
        if obs is not None and obs.j_hz:
            parts.append("J=" + ",".join(f"{j:.1f}" for j in obs.j_hz))
        h1.append(", ".join(parts))
    if not assignment:
        raise SpecmatchError("no measured signal is assigned to this candidate; nothing to export "
                             "(load a 13C or 1H spectrum and score first)")

    mol.SetProp("_Name", cand.label or cand.smiles)
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
        freq = result.c13.frequency_mhz if result.c13 is not None and result.c13.frequency_mhz else None
        items.append(("NMREDATA_1D_13C", _lines(([f"Larmor={freq:.2f}"] if freq else []) + c13)))
    if h1:
        freq = result.h1.frequency_mhz if result.h1 is not None and result.h1.frequency_mhz else None
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
