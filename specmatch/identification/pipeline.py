"""``identify``: the whole job from a reaction and spectrum files to a verdict.

Stages: enumerate the products (reactions), read the spectra (spectra), predict
each candidate (prediction, cached), rank (:func:`.ranking.rank`), and, on
request, estimate the product ratio (the mixture module's hook).
"""

from __future__ import annotations

import os
from dataclasses import replace
from typing import Any, Mapping, Sequence

from .. import __version__
from ..errors import SpecmatchError
from ..spectra.types import Peak, PeakList
from .errormodel import ErrorModel, load_error_model
from .mixture import MixtureEstimate, estimate_mixture
from .ranking import Ranking, rank
from .result import Result

__all__ = ["identify", "merge_dept", "sha256_file"]

#: a 13C line and a DEPT-135 line closer than this are the same carbon
DEPT_MATCH_PPM = 0.25


def sha256_file(path: str | os.PathLike) -> str:
    """SHA-256 of an input file or instrument folder (guarded, streamed:
    :func:`specmatch.spectra.reader.input_sha256`)."""
    from ..spectra.reader import input_sha256

    return input_sha256(path)


def input_name(path: str | os.PathLike) -> str:
    """Name an input is recorded under (a folder's name with ``.zip``: the store keeps a zip)."""
    from ..spectra.reader import input_name as name

    return name(path)


def _is_path(x: Any) -> bool:
    return isinstance(x, (str, os.PathLike))


def _read(x: Any, nucleus: str, solvent: str | None, dept: bool = False) -> tuple[Any, Any]:
    """(Spectrum or None, PeakList or data) for a path; data passes through."""
    if x is None or not _is_path(x):
        return None, x
    if not os.path.exists(x):
        raise SpecmatchError(f"cannot read '{x}': no such file")
    from ..spectra import PeakList, process_spectrum, read_spectrum

    got = read_spectrum(os.fspath(x), nucleus=nucleus)
    if isinstance(got, PeakList):
        from ..spectra import peaks_from_file

        return None, peaks_from_file(os.fspath(x), nucleus=nucleus, solvent=solvent, dept135=dept)
    return got, process_spectrum(got, solvent=solvent, dept135=dept)


#: at most this many candidates enter the mixture fit
MIXTURE_MAX_COMPONENTS = 6


def _mixture_candidates(ranking) -> list[str]:
    """Candidates worth a place in the mixture fit: those the hypotheses do not
    rule out (posterior probability of being present >= 0.001), at least two.

    The mechanism's expectation is already in that posterior (through the prior);
    adding every expected minor product on top of it let an absent E1 alkene take
    a share of an overlapped envelope and spoil the ratio of the resolved signals."""
    keep = [c.smiles for c in ranking.candidates if c.p_present >= 1e-3]
    for c in ranking.candidates:
        if len(keep) >= 2:
            break
        if c.smiles not in keep:
            keep.append(c.smiles)
    return keep[:MIXTURE_MAX_COMPONENTS]


def _lines(x: Any) -> list[Any]:
    if x is None:
        return []
    if isinstance(x, PeakList):
        return list(x.compound_peaks())
    return list(x)


def merge_dept(c13: Any, dept: Any, tol_ppm: float = DEPT_MATCH_PPM) -> list[dict[str, Any]]:
    """13C lines with what DEPT-135 says about them.

    A DEPT-135 line within `tol_ppm` gives the phase (+1: CH or CH3, -1: CH2); a
    13C line without a DEPT counterpart is a quaternary carbon (hydrogens = 0).
    Without a 13C list, the DEPT lines themselves are used (quaternary carbons are
    then simply absent, which the scoring treats leniently).
    """
    d_lines = []
    for p in _lines(dept):
        sign = p.get("sign") if isinstance(p, dict) else p.sign
        if sign is None:
            inten = p.get("intensity") if isinstance(p, dict) else p.intensity
            sign = 0 if inten is None else (1 if inten > 0 else -1)
        shift = p["shift"] if isinstance(p, dict) else p.shift
        d_lines.append((float(shift), int(sign)))
    c_lines = _lines(c13)
    if not c_lines:
        return [{"shift": s, "sign": g, "hydrogens": 2 if g < 0 else None} for s, g in d_lines]
    out = []
    for p in c_lines:
        if isinstance(p, dict):
            shift, known_h, inten = float(p["shift"]), p.get("hydrogens"), p.get("intensity")
        elif isinstance(p, Peak):
            shift, known_h, inten = float(p.shift), p.hydrogens, p.intensity
        else:  # a bare ppm value
            shift, known_h, inten = float(p), None, None
        near = sorted((abs(s - shift), g) for s, g in d_lines if abs(s - shift) <= tol_ppm)
        if known_h is not None:
            row = {"shift": shift, "hydrogens": known_h}
        elif not near:
            row = {"shift": shift, "hydrogens": 0}
        else:
            g = near[0][1]
            row = {"shift": shift, "sign": g, "hydrogens": 2 if g < 0 else None}
        if inten is not None:
            row["intensity"] = inten
        out.append(row)
    return out


def _c13_peaklist(c13: Any, source: str) -> PeakList | None:
    """A 13C PeakList from a PeakList or a list of ppm values / line dicts (API input)."""
    if c13 is None or isinstance(c13, PeakList):
        return c13
    peaks = []
    for p in c13:
        if isinstance(p, Peak):
            peaks.append(p)
        elif isinstance(p, dict):
            if "shift" not in p:
                raise SpecmatchError("a 13C line given as a dict needs a 'shift' (ppm)")
            peaks.append(Peak(float(p["shift"]), p.get("intensity"), None, p.get("hydrogens"), p.get("sign")))
        else:
            try:
                peaks.append(Peak(float(p)))
            except (TypeError, ValueError):
                raise SpecmatchError(f"13C line {p!r} is not a number (ppm)") from None
    return PeakList(nucleus="13C", peaks=tuple(peaks), source=source)


def _h1_peaklist(h1: Any):
    """A 1H PeakList for the mixture module, from a PeakList or a list of multiplet dicts."""
    from ..spectra import Multiplet

    if h1 is None or isinstance(h1, PeakList):
        return h1
    mults = []
    for m in h1:
        if isinstance(m, Multiplet):
            mults.append(m)
            continue
        d = m if isinstance(m, dict) else {"shift": m}
        if "shift" not in d:
            raise SpecmatchError("a 1H multiplet given as a dict needs a 'shift' (ppm)")
        sh = float(d["shift"])
        mults.append(Multiplet(shift=sh, range=(sh + 0.02, sh - 0.02), integral=d.get("integral"),
                               multiplicity=d.get("multiplicity") or "m", j_hz=tuple(d.get("j_hz") or ())))
    return PeakList(nucleus="1H", peaks=(), multiplets=tuple(mults), source="peak list given to identify")


#: a component at or above this mole fraction in the 1H ratio counts as present
PRESENT_FRACTION = 0.02


def reconcile(ranking: Ranking, mix: MixtureEstimate) -> Ranking:
    """Make the verdict agree with the 1H ratio.

    The ratio is the quantitative measurement; the hypotheses only say which
    account of the sample is most probable. When the best hypothesis is a
    mixture, its fractions are replaced by the ratio's (renormalised over its
    components). When the ratio finds a second candidate at PRESENT_FRACTION or
    more while the verdict says "pure", the verdict names the mixture the ratio
    measured (with the probability of the best mixture hypothesis made of those
    components), so a candidate at >0 in the ratio is never called absent.
    """
    from .ranking import reconciled_verdict

    v = reconciled_verdict(ranking, mix, PRESENT_FRACTION)
    # the hypothesis the verdict names carries the measured fractions too
    hyps = tuple(replace(h, components=v.components, fractions=v.fractions, quantified=True)
                 if v.kind == "mixture" and set(h.components) == set(v.components) else h
                 for h in ranking.hypotheses)
    return replace(ranking, verdict=v, hypotheses=hyps)


def _candidate_smiles(text: str) -> str:
    from ..structures import parse_structure

    return parse_structure(text).canonical_smiles


def identify(substrate: str | None = None, reagent: str | None = None, *, alcohol: str | None = None,
             c13: Any = None, h1: Any = None, dept135: Any = None, solvent: str | None = None,
             candidates: Sequence[str] = (), mixture: bool = False, use_prior: bool = True,
             max_shifts: int = 2, max_components: int = 2, model: ErrorModel | None = None,
             candidate_names: Mapping[str, str] | None = None) -> Result:
    """Which isomer was made? Enumerate, read, predict, rank.

    Parameters
    ----------
    substrate, reagent : str
        The alkene (SMILES) and the reagent as a chemist writes it ("HBr",
        "H2O/H2SO4", "MeOH/H+"). Both may be omitted if `candidates` are given.
    alcohol : str, optional
        SMILES of the alcohol for acid-catalysed ether formation.
    c13, h1, dept135 : path or data, optional
        Spectrum files (JCAMP-DX, instrument folder, CSV peak list), or already
        read PeakLists, or plain lists (13C ppm values; 1H dicts with shift and
        integral).
    solvent : str, optional
        Solvent name, used to flag its lines.
    candidates : sequence of str
        The chemist's own candidate SMILES, added to the enumerated ones.
    candidate_names : mapping of str to str, optional
        Names for some of `candidates` (SMILES as given -> name, e.g. from a candidate
        file); the others are labelled "your candidate".
    mixture : bool
        Also estimate the product ratio from the 1H spectrum.
    use_prior : bool
        Base the verdict on the with-prior probability (default) or the spectra alone.
    max_shifts : int
        Longest chain of 1,2-shifts the enumeration follows.
    max_components : int
        Largest mixture scored as a hypothesis (1: pure samples only, 2, or 3).

    Returns
    -------
    Result
    """
    model = model or load_error_model()
    files: dict[str, dict[str, str]] = {}
    for role, x in (("c13", c13), ("h1", h1), ("dept135", dept135)):
        if _is_path(x):
            if not os.path.exists(x):
                raise SpecmatchError(f"cannot read '{x}' ({role}): no such file")
            files[role] = {"path": os.fspath(x), "name": input_name(x),
                           "sha256": sha256_file(x)}
    enumeration = None
    safety: tuple[str, ...] = ()
    cautions: list[str] = []
    items: list[Any] = []
    if substrate is not None or reagent is not None:
        if not substrate or not reagent:
            raise SpecmatchError("give both --substrate and --reagent (or only --candidates)")
        from ..reactions import enumerate_products

        enumeration = enumerate_products(substrate, reagent, alcohol=alcohol, max_shifts=max_shifts)
        safety = tuple(enumeration.safety or enumeration.reagent.safety)
        cautions += list(enumeration.warnings)
        items = list(enumeration.candidates)
    seen = {_candidate_smiles(c.smiles) for c in items}
    for smi in candidates:
        key = _candidate_smiles(smi)
        if key in seen:
            continue
        seen.add(key)
        label = (candidate_names or {}).get(smi) or "your candidate"
        items.append({"smiles": smi, "label": label, "pathway": "given by the user",
                      "role": "user", "prior": None})
    if not items:
        raise SpecmatchError("no candidates: give a substrate and reagent, or candidate SMILES")

    c13_spec, c13_pl = _read(c13, "13C", solvent)
    h1_spec, h1_pl = _read(h1, "1H", solvent)
    _, dept_pl = _read(dept135, "13C", solvent, dept=True)
    for pl in (c13_pl, h1_pl, dept_pl):
        if isinstance(pl, PeakList):
            cautions += list(pl.warnings)
    if isinstance(h1_pl, PeakList) and h1_pl.nucleus != "1H":
        raise SpecmatchError(f"the --h1 file holds a {h1_pl.nucleus} spectrum; give it as --c13")
    if isinstance(c13_pl, PeakList) and c13_pl.nucleus != "13C":
        raise SpecmatchError(f"the --c13 file holds a {c13_pl.nucleus} spectrum; give it as --h1")
    c13_lines: Any = c13_pl
    if dept_pl is not None:
        c13_lines = merge_dept(c13_pl, dept_pl)
        cautions.append("DEPT-135: 13C lines without a DEPT counterpart are taken as quaternary carbons")
    if max_components not in (1, 2, 3):
        raise SpecmatchError(f"max_components must be 1, 2 or 3, got {max_components!r}")
    ranking = rank(items, c13=c13_lines, h1=h1_pl, use_prior=use_prior, model=model,
                   max_components=max_components)
    from .errormodel import tables_digest

    if model.tables_sha256 and model.tables_sha256 != tables_digest():
        cautions.append("the error model was fitted with other prediction tables than the ones "
                        "installed: the probabilities may be less well calibrated (rerun "
                        "benchmarks/fit_error_model.py)")

    mix: MixtureEstimate | None = None
    if mixture:
        if h1_pl is None:
            cautions.append("the mixture estimate needs a 1H spectrum (--h1)")
        elif len(ranking.candidates) < 2:
            cautions.append("the mixture estimate needs at least two candidates")
        else:
            names = _mixture_candidates(ranking)
            mix = estimate_mixture(
                names, spectrum=h1_spec, peaklist=_h1_peaklist(h1_pl), solvent=solvent,
                names=[next((c.label or c.smiles) for c in ranking.candidates if c.smiles == n)
                       for n in names])
            ranking = reconcile(ranking, mix)

    pred_versions = sorted({c.tables_version for c in ranking.candidates if c.tables_version})
    import numpy, rdkit, scipy

    versions = {
        "specmatch": __version__,
        "prediction_tables": "; ".join(pred_versions),
        "error_model": model.version,
        "error_model_fitted_on": model.fitted_on,
        "prediction_tables_sha256": tables_digest(),
        "reaction_ranked_by": enumeration.ranked_by if enumeration is not None else "",
        "rdkit": rdkit.__version__, "numpy": numpy.__version__, "scipy": scipy.__version__,
    }
    inputs = {
        "substrate": substrate, "reagent": reagent,
        "reagent_name": enumeration.reagent.name if enumeration is not None else None,
        "alcohol": alcohol, "solvent": solvent,
        "user_candidates": list(candidates),
        "options": {"mixture": mixture, "use_prior": use_prior, "max_shifts": max_shifts,
                    "max_components": max_components},
        "files": files,
    }
    return Result(ranking=ranking, inputs=inputs, versions=versions, safety_notes=safety,
                  cautions=tuple(dict.fromkeys(cautions)), mixture=mix,
                  c13=_c13_peaklist(c13_pl, "13C lines given to identify"), h1=_h1_peaklist(h1_pl),
                  dept135=_c13_peaklist(dept_pl, "DEPT-135 lines given to identify"),
                  enumeration=enumeration, c13_spectrum=c13_spec, h1_spectrum=h1_spec)
