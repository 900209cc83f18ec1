"""specmatch in the browser: reaction -> spectra -> which isomer was made.

A thin face over the library: this file gathers input, calls ``specmatch`` and
lays out what it returns. It knows no chemical shift and no reaction rule; if a
line here starts to, it belongs in the library.

Run with ``streamlit run app.py``.
"""

from __future__ import annotations

import dataclasses
import hashlib
import html
from importlib import import_module
from typing import Any

import streamlit as st

from specmatch import __version__
from specmatch.errors import SpecmatchError

#: Largest file the app accepts (the server limit in .streamlit/config.toml is the same).
MAX_UPLOAD_MB = 25
ROLES = {"c13": "13C", "h1": "1H", "dept135": "DEPT-135"}
NUCLEUS_OF_ROLE = {"c13": "13C", "h1": "1H", "dept135": "13C"}
UPLOAD_TYPES = ["jdx", "dx", "jcamp", "jcm", "zip", "csv", "txt", "tsv"]
#: "compound" = not flagged (scored); the rest are left out of the scoring
FLAG_CHOICES = ["compound", "solvent", "water", "TMS", "grease", "impurity"]
# Our own palette (calm, distinguishable, prints well in grey).
PALETTE = ["#2F6F73", "#B5651D", "#6B5B95", "#3E7CB1", "#8C8C3A", "#A23B5F"]
MEASURED_COLOUR = "#1F2A2E"
FLAGGED_COLOUR = "#C08A2B"
ADVISORY = (
    "Advisory only. specmatch ranks candidate structures by how well predicted spectra fit the "
    "measured ones; it can be wrong (unexpected products, poor predictions, mislabelled files). "
    "A qualified person must confirm any identification with orthogonal data (e.g. authentic "
    "sample, GC-MS, 2D NMR) before it is used for decisions about material, safety or release."
)
# Example substrates for the gallery: SMILES and a plain name (what the user would type).
GALLERY = [
    ("vinylcyclohexane", "C=CC1CCCCC1"),
    ("3-methylpent-1-ene", "C=CC(C)CC"),
    ("3,3-dimethylbut-1-ene", "C=CC(C)(C)C"),
    ("3-methylbut-1-ene", "C=CC(C)C"),
    ("1-methylcyclohexene", "CC1=CCCCC1"),
    ("vinylcyclobutane", "C=CC1CCC1"),
    ("styrene", "C=Cc1ccccc1"),
    ("2-methylbut-2-ene", "CC=C(C)C"),
]
#: used only if the spectra stage's own solvent list cannot be read
FALLBACK_SOLVENTS = ("CDCl3", "DMSO-d6", "CD3OD", "C6D6", "acetone-d6", "CD3CN", "CD2Cl2", "D2O")


# ----------------------------------------------------------------------------- library access
def _lib(module: str, name: str) -> Any:
    """A library function, or None while that part of the library is not installed.

    The app must never fail at import because a stage is missing; the page says
    which part is unavailable instead.
    """
    try:
        return getattr(import_module(module), name)
    except (ImportError, AttributeError):
        return None


def _name_of(obj: Any) -> str:
    for attr in ("name", "key", "label"):
        value = getattr(obj, attr, None)
        if isinstance(value, str) and value:
            return value
    if isinstance(obj, dict):
        return str(obj.get("name") or obj.get("key") or obj)
    return str(obj)


def _get(obj: Any, *names: str, default: Any = None) -> Any:
    """First present attribute or key of ``obj`` among ``names``."""
    for n in names:
        if isinstance(obj, dict):
            if obj.get(n) not in (None, ""):
                return obj[n]
        else:
            value = getattr(obj, n, None)
            if value not in (None, ""):
                return value
    return default


def _as_list(value: Any) -> list:
    if value is None:
        return []
    if isinstance(value, str):
        return [value]
    return list(value)


# ----------------------------------------------------------------------------- cached library calls
@st.cache_data(show_spinner=False, max_entries=4)
def reagent_names() -> list[str]:
    known = _lib("specmatch.reactions", "known_reagents")
    if known is None:
        return []
    return [_name_of(r) for r in known()]


@st.cache_resource(show_spinner=False, max_entries=64)
def reagent_info(text: str) -> Any:
    parse = _lib("specmatch.reactions", "parse_reagent")
    if parse is None:
        raise SpecmatchError("the reaction stage is not installed in this copy of specmatch")
    return parse(text)


@st.cache_resource(show_spinner=False, max_entries=64)
def enumeration(substrate: str, reagent: str, alcohol: str | None) -> Any:
    enum = _lib("specmatch.reactions", "enumerate_products")
    if enum is None:
        raise SpecmatchError("the reaction stage is not installed in this copy of specmatch")
    return enum(substrate, reagent, alcohol=alcohol or None)


@st.cache_data(show_spinner=False, max_entries=256)
def structure_svg(smiles: str, notes: tuple[tuple[int, str], ...] = (), width: int = 280,
                  height: int = 200) -> str:
    """SVG drawing of a structure; ``notes`` puts text (e.g. a shift) at atoms by index.

    Raises SpecmatchError (with the parser's explanation) for text that is not a structure.
    """
    from specmatch.structures import parse_structure

    parse_structure(smiles)  # the chemist-readable error for bad SMILES comes from here
    draw = _lib("specmatch.reports.html", "structure_svg")
    if draw is not None:
        return draw(smiles, width=width, height=height, notes=dict(notes))
    from rdkit import Chem
    from rdkit.Chem.Draw import rdMolDraw2D

    mol = Chem.Mol(parse_structure(smiles).mol)
    for idx, text in notes:
        mol.GetAtomWithIdx(idx).SetProp("atomNote", text)
    drawer = rdMolDraw2D.MolDraw2DSVG(width, height)
    drawer.drawOptions().clearBackground = False
    drawer.DrawMolecule(mol)
    drawer.FinishDrawing()
    return drawer.GetDrawingText()


@st.cache_resource(show_spinner=False, max_entries=256)
def prediction(smiles: str) -> Any:
    predict = _lib("specmatch.prediction", "predict")
    return predict(smiles)


@st.cache_data(show_spinner=False, max_entries=32)
def read_upload(name: str, data: bytes, role: str, solvent: str | None) -> tuple[Any, Any]:
    """(PeakList, Spectrum or None) of one uploaded file; raises SpecmatchError on bad input."""
    if len(data) > MAX_UPLOAD_MB * 1024 * 1024:
        raise SpecmatchError(f"'{name}' is {len(data) / 1e6:.0f} MB; the limit is {MAX_UPLOAD_MB} MB "
                             "(export the processed 1D spectrum only, or zip the instrument folder)")
    read_spectrum = _lib("specmatch.spectra", "read_spectrum")
    process_spectrum = _lib("specmatch.spectra", "process_spectrum")
    peaks_from_file = _lib("specmatch.spectra", "peaks_from_file")
    if read_spectrum is None or process_spectrum is None or peaks_from_file is None:
        raise SpecmatchError("the spectra stage is not installed in this copy of specmatch")
    nucleus = NUCLEUS_OF_ROLE[role]
    dept = role == "dept135"
    try:
        read = read_spectrum(data, name=name, nucleus=nucleus)
    except SpecmatchError as exc:
        # say which box the file went into, so a 1H file in the 13C box is obvious
        raise SpecmatchError(f"{exc} (file given in the {ROLES[role]} box)") from None
    if hasattr(read, "ppm"):  # a spectrum: pick lines here, keep the trace for the plots
        return process_spectrum(read, solvent=solvent, dept135=dept), read
    return peaks_from_file(data, name=name, nucleus=nucleus, solvent=solvent, dept135=dept), None


@st.cache_resource(show_spinner=False, max_entries=32)
def run_identify(substrate: str, reagent: str, alcohol: str | None, candidates: tuple[str, ...],
                 solvent: str, c13: Any, h1: Any, dept135: Any, use_prior: bool) -> tuple[Any, str | None]:
    """(Result, note): the whole identification, with the product ratio when it can be had.

    If the ratio estimate fails, the verdict is still shown and the note says why.
    """
    identify = _lib("specmatch.identification", "identify")
    if identify is None:
        raise SpecmatchError("the identification stage is not installed in this copy of specmatch")
    kwargs = dict(substrate=substrate, reagent=reagent, alcohol=alcohol or None, c13=c13, h1=h1,
                  dept135=dept135, solvent=solvent, candidates=list(candidates), use_prior=use_prior)
    if h1 is None:
        return identify(mixture=False, **kwargs), None
    try:
        return identify(mixture=True, **kwargs), None
    except Exception as exc:  # noqa: BLE001 - the ratio is extra; the verdict must still come
        first = f"{exc}" if isinstance(exc, SpecmatchError) else f"{type(exc).__name__}: {exc}"
    result = identify(mixture=False, **kwargs)  # a real input error raises here again
    return result, f"the product ratio could not be estimated ({first})"


@st.cache_resource(show_spinner=False, max_entries=16)
def refine_mixture(candidates: tuple[str, ...], names: tuple[str, ...], spectrum: Any, peaklist: Any,
                   solvent: str | None) -> Any:
    """Full-spectrum fit of the 1H trace (slower than the peak-list estimate)."""
    estimate = _lib("specmatch.identification.mixture", "estimate_mixture")
    if estimate is None:
        raise SpecmatchError("the product-ratio estimate is not installed in this copy of specmatch")
    return estimate(list(candidates), spectrum=spectrum, peaklist=peaklist, solvent=solvent,
                    names=list(names))


# ----------------------------------------------------------------------------- session state
def _init_state() -> None:
    defaults = {
        "substrate": "", "reagent_choice": "", "reagent_text": "", "alcohol": "",
        "own_candidates": "", "solvent": "CDCl3", "field_mhz": 400.0, "use_prior": True,
        "files": {}, "seen_uploads": {}, "analyse": False, "demo_key": None, "saved_id": None,
        "demo_choice": "a", "refine": False,
    }
    for key, value in defaults.items():
        if key not in st.session_state:
            st.session_state[key] = value


def _set_substrate(smiles: str) -> None:
    st.session_state["substrate"] = smiles


def load_demo() -> None:
    """Fill every input from the invented demo scenario (one click)."""
    demo_case = _lib("specmatch.demo", "demo_case")
    try:
        case = demo_case(st.session_state.get("demo_choice") or "a")
    except SpecmatchError as exc:
        st.session_state["demo_error"] = str(exc)
        return
    files = {}
    for role, path in case.files.items():
        try:
            files[role] = {"name": path.name, "data": path.read_bytes(), "origin": "demo"}
        except OSError:
            st.session_state["demo_error"] = (
                f"demo file {path.name} is missing; run 'python sample_spectra/make_demo.py'")
            return
    names = reagent_names()
    choice = case.reagent
    try:
        choice = _name_of(reagent_info(case.reagent))
    except SpecmatchError:
        pass
    st.session_state.update({
        "substrate": case.substrate, "alcohol": case.alcohol or "", "solvent": case.solvent,
        "reagent_choice": choice if choice in names else (names[0] if names else ""),
        "reagent_text": "" if choice in names else case.reagent,
        "own_candidates": "", "files": files, "seen_uploads": _current_uploads(), "analyse": True,
        "demo_key": case.key, "saved_id": None, "demo_error": None, "refine": False,
        "save_sample": case.sample_id,
    })


def _upload_id(up: Any) -> str:
    return getattr(up, "file_id", None) or f"{up.name}:{up.size}"


def _current_uploads() -> dict[str, str]:
    """Files still sitting in the upload boxes, marked as seen so they do not replace the demo."""
    out = {}
    for role in ROLES:
        up = st.session_state.get(f"upload_{role}")
        if up is not None:
            out[role] = _upload_id(up)
    return out


def _clear_file(role: str) -> None:
    st.session_state["files"].pop(role, None)


def _request_analysis() -> None:
    st.session_state["analyse"] = True


def _request_refine() -> None:
    st.session_state["refine"] = True


# ----------------------------------------------------------------------------- plotting
def _thin(x, y, max_points: int = 5000):
    """Keep the extreme point of each bin so peaks survive (browser-friendly traces)."""
    import numpy as np

    n = len(x)
    if n <= max_points:
        return x, y
    k = int(np.ceil(n / (max_points / 2)))
    m = (n // k) * k
    xb, yb = np.asarray(x)[:m].reshape(-1, k), np.asarray(y)[:m].reshape(-1, k)
    hi, lo = yb.argmax(axis=1), yb.argmin(axis=1)
    rows = np.arange(xb.shape[0])
    idx = np.sort(np.stack([hi, lo], axis=1), axis=1)
    xs = xb[rows[:, None], idx].ravel()
    ys = yb[rows[:, None], idx].ravel()
    return xs, ys


def _axis_layout(fig, nucleus: str, height: int = 320) -> None:
    fig.update_layout(
        height=height, margin=dict(l=10, r=10, t=36, b=40), plot_bgcolor="#FFFFFF",
        paper_bgcolor="rgba(0,0,0,0)", legend=dict(orientation="h", yanchor="bottom", y=1.02, x=0),
        xaxis=dict(title=f"{nucleus} shift / ppm", autorange="reversed", showgrid=False,
                   zeroline=False, ticks="outside"),
        yaxis=dict(showticklabels=False, showgrid=False, zeroline=False),
    )


def spectrum_figure(peaklist: Any, spectrum: Any, title: str):
    """The measured spectrum with its picked lines; flagged lines in amber."""
    import plotly.graph_objects as go

    nucleus = getattr(peaklist, "nucleus", "")
    fig = go.Figure()
    top = 1.0
    if spectrum is not None:
        x, y = _thin(spectrum.ppm, spectrum.intensity)
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name="measured",
                                   line=dict(color=MEASURED_COLOUR, width=1), hoverinfo="skip"))
        top = float(max(abs(spectrum.intensity.max()), abs(spectrum.intensity.min()), 1e-12))
    peaks = list(getattr(peaklist, "peaks", ()))
    mults = list(getattr(peaklist, "multiplets", ()) or ())
    if peaks and not mults:  # 1H with multiplets: the shaded ranges below say enough
        import numpy as np

        if spectrum is not None:  # markers sit on the trace, whatever the peak list's units
            order = np.argsort(spectrum.ppm)
            xs_sorted = np.asarray(spectrum.ppm)[order]
            ys_sorted = np.asarray(spectrum.intensity)[order]
            height = lambda ppm: float(np.interp(ppm, xs_sorted, ys_sorted))  # noqa: E731
        else:
            height = lambda ppm: top * 0.5  # noqa: E731
        for flagged in (False, True):
            sel = [p for p in peaks if bool(p.flag) == flagged]
            if not sel:
                continue
            ys = [height(p.shift) for p in sel]
            colour = FLAGGED_COLOUR if flagged else PALETTE[0]
            if spectrum is None:  # a peak list: draw sticks
                for p, yv in zip(sel, ys):
                    fig.add_trace(go.Scatter(x=[p.shift, p.shift], y=[0, yv], mode="lines",
                                             line=dict(color=colour, width=2), showlegend=False,
                                             hoverinfo="skip"))
            text = [f"{p.shift:.2f} ppm" + (f" - {p.flag}" if p.flag else "")
                    + (f" - {p.hydrogens} H" if p.hydrogens is not None else "") for p in sel]
            fig.add_trace(go.Scatter(
                x=[p.shift for p in sel], y=[v + 0.04 * top * (1 if v >= 0 else -1) for v in ys],
                mode="markers",
                name="flagged (solvent, water, reference, impurity)" if flagged else "compound lines",
                marker=dict(symbol="triangle-down" if not flagged else "x", size=7, color=colour),
                text=text, hovertemplate="%{text}<extra></extra>"))
    biggest = max([m.integral or 0.0 for m in mults] + [1e-12])
    for m in mults:
        lo, hi = sorted(m.range)
        colour = FLAGGED_COLOUR if m.flag else PALETTE[0]
        if spectrum is None:  # a peak list: one stick per multiplet, height = integral
            fig.add_trace(go.Scatter(x=[m.shift, m.shift], y=[0, (m.integral or 0.0) / biggest],
                                     mode="lines", line=dict(color=colour, width=2), showlegend=False,
                                     hovertemplate=f"{m.shift:.2f} ppm<extra></extra>"))
        fig.add_vrect(x0=lo, x1=hi, fillcolor=colour, opacity=0.10, line_width=0)
        label = m.multiplicity + (f" {m.integral:.2f}H" if m.integral is not None else "")
        fig.add_annotation(x=m.shift, y=1.0, yref="paper", text=label, showarrow=False,
                           font=dict(size=10, color=colour), textangle=-90, yanchor="top")
    _axis_layout(fig, nucleus)
    return fig


def overlay_figure(result: Any, nucleus: str, peaklist: Any, spectrum: Any, candidates: list[tuple[str, str]],
                   frequency_mhz: float):
    """Measured spectrum upward; each selected candidate's simulated spectrum mirrored below."""
    import numpy as np
    import plotly.graph_objects as go

    simulate = import_module("specmatch.prediction.simulate")
    fig = go.Figure()
    if spectrum is not None:
        axis = np.asarray(spectrum.ppm)
        meas = np.asarray(spectrum.intensity, dtype=float)
        scale = float(np.percentile(meas, 99.95)) or 1.0
        x, y = _thin(axis, meas / scale)
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name="measured",
                                   line=dict(color=MEASURED_COLOUR, width=1)))
    else:
        axis = simulate.default_axis(nucleus)
        for p in getattr(peaklist, "peaks", ()):
            fig.add_trace(go.Scatter(x=[p.shift, p.shift], y=[0, 1], mode="lines", showlegend=False,
                                     line=dict(color=FLAGGED_COLOUR if p.flag else MEASURED_COLOUR, width=1.5)))
    freq = spectrum.frequency_mhz if (spectrum is not None and spectrum.frequency_mhz) else (
        frequency_mhz if nucleus == "1H" else frequency_mhz / 4.0)
    for i, (smiles, label) in enumerate(candidates):
        pred = _prediction_for(result, smiles)
        if pred is None:
            continue
        if nucleus == "1H":
            sim = simulate.simulate_1h(pred, axis, frequency_mhz=freq)
        else:
            sim = simulate.simulate_13c(pred, axis, frequency_mhz=freq)
        peak = float(np.max(sim)) or 1.0
        x, y = _thin(axis, -sim / peak * (0.9 - 0.0 * i))
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"predicted: {label}",
                                   line=dict(color=PALETTE[i % len(PALETTE)], width=1.2)))
    _axis_layout(fig, nucleus, height=380)
    return fig


# ----------------------------------------------------------------------------- peak editing
def _peak_rows(peaklist: Any) -> tuple[str, list[dict]]:
    """Rows for the line editor: multiplets for 1H, lines for 13C."""
    mults = list(getattr(peaklist, "multiplets", ()) or ())
    if peaklist.nucleus == "1H" and mults:
        rows = [{"use": True, "shift_ppm": round(m.shift, 3),
                 "range_ppm": f"{max(m.range):.2f}-{min(m.range):.2f}",
                 "integral": None if m.integral is None else round(m.integral, 2),
                 "multiplicity": m.multiplicity,
                 "J_Hz": ", ".join(f"{j:.1f}" for j in m.j_hz), "flag": m.flag or "compound"} for m in mults]
        return "multiplets", rows
    rows = [{"use": True, "shift_ppm": round(p.shift, 2 if peaklist.nucleus == "13C" else 3),
             "intensity": None if p.intensity is None else round(float(p.intensity), 4),
             "H_attached": p.hydrogens, "flag": p.flag or "compound"} for p in peaklist.peaks]
    return "peaks", rows


def _flag_value(text: Any) -> str | None:
    text = (text or "").strip() if isinstance(text, str) else ""
    if not text or text == "compound":
        return None
    return "impurity:marked in the app" if text == "impurity" else text


def edited_peaklist(role: str, peaklist: Any, file_key: str) -> Any:
    """Show the line editor; return the PeakList with dropped lines removed and flags applied."""
    import pandas as pd

    kind, rows = _peak_rows(peaklist)
    if not rows:
        st.caption("No lines were picked in this file.")
        return peaklist
    flags = list(dict.fromkeys(FLAG_CHOICES + [r["flag"] for r in rows]))
    frame = pd.DataFrame(rows)
    edited = st.data_editor(
        frame, key=f"edit_{role}_{file_key}", hide_index=True, width="stretch",
        disabled=[c for c in frame.columns if c not in ("use", "flag")],
        column_config={
            "use": st.column_config.CheckboxColumn("use", help="untick to drop the line before scoring"),
            "flag": st.column_config.SelectboxColumn(
                "flag", options=flags, help="solvent, water, reference or impurity lines are not scored"),
        },
    )
    return apply_edits(peaklist, kind, edited)


def apply_edits(peaklist: Any, kind: str, edited: Any) -> Any:
    """The PeakList after the editor: unticked rows dropped, flags from the flag column.

    ``edited`` has one row per line (or multiplet) in the PeakList's order, with
    columns ``use`` (bool) and ``flag`` ("compound" or a flag word). Returns the
    same object when nothing changed, so cached results stay valid.
    """
    keep = list(edited["use"].astype(bool))
    new_flags = [_flag_value(f) for f in edited["flag"]]
    if kind == "multiplets":
        items = [dataclasses.replace(m, flag=f) for m, k, f in zip(peaklist.multiplets, keep, new_flags) if k]
        changed = len(items) != len(peaklist.multiplets) or any(
            m.flag != f for m, f in zip(peaklist.multiplets, new_flags))
        return dataclasses.replace(peaklist, multiplets=tuple(items)) if changed else peaklist
    items = [dataclasses.replace(p, flag=f) for p, k, f in zip(peaklist.peaks, keep, new_flags) if k]
    changed = len(items) != len(peaklist.peaks) or any(p.flag != f for p, f in zip(peaklist.peaks, new_flags))
    return dataclasses.replace(peaklist, peaks=tuple(items)) if changed else peaklist


# ----------------------------------------------------------------------------- page sections
def header() -> None:
    st.title("specmatch")
    st.markdown("**Which isomer did the reaction give?** Enter the reaction, add the spectra, "
                "and compare every plausible product with what was measured.")
    st.warning(_lib("specmatch.identification.result", "ADVISORY_CAUTION") or ADVISORY)


def sidebar() -> None:
    with st.sidebar:
        st.subheader("Demo scenario")
        st.caption("An invented pilot-plant scenario with simulated spectra (see sample_spectra/README.md).")
        cases = _lib("specmatch.demo", "demo_cases")
        try:
            titles = {c.key: c.title for c in cases()} if cases else {}
        except SpecmatchError as exc:
            titles = {}
            st.caption(str(exc))
        if titles:
            st.radio("case", list(titles), format_func=titles.get, key="demo_choice",
                     label_visibility="collapsed")
        st.button("Load the demo", type="primary", on_click=load_demo, key="load_demo",
                  width="stretch")
        if st.session_state.get("demo_error"):
            st.error(st.session_state["demo_error"])
        if st.session_state.get("demo_key"):
            demo_case = _lib("specmatch.demo", "demo_case")
            try:
                st.caption(demo_case(st.session_state["demo_key"]).description)
            except SpecmatchError:
                pass
        st.divider()
        st.caption(f"specmatch {__version__}")


def current_reagent() -> str:
    text = (st.session_state.get("reagent_text") or "").strip()
    return text or (st.session_state.get("reagent_choice") or "")


def reaction_section() -> None:
    left, right = st.columns([3, 2])
    with left:
        st.text_input("Substrate (SMILES)", key="substrate", placeholder="e.g. C=CC1CCCCC1",
                      help="the alkene (or other cation precursor) as SMILES")
        names = reagent_names()
        if names:
            if st.session_state.get("reagent_choice") not in names:
                st.session_state["reagent_choice"] = names[0]
            st.selectbox("Reagent", names, key="reagent_choice")
        else:
            st.info("The reagent catalogue is not available in this installation; type the reagent below.")
        st.text_input("...or type the reagent in your own words", key="reagent_text",
                      placeholder="e.g. aq. H2SO4, HBr gas, MeOH / H+",
                      help="free text is matched against the catalogue's names and aliases")
        info, _ = resolve_reagent()
        if (info is not None and getattr(info, "needs_alcohol", False)) or st.session_state.get("alcohol"):
            st.text_input("Alcohol (SMILES) added across the C=C", key="alcohol",
                          placeholder="e.g. CO for methanol")
        st.text_area("Your own candidate structures (one SMILES per line)", key="own_candidates",
                     height=90, help="added to the products the tool enumerates")
    with right:
        smiles = (st.session_state.get("substrate") or "").strip()
        if smiles:
            try:
                st.image(structure_svg(smiles, width=260, height=180), caption="substrate")
            except SpecmatchError as exc:
                st.error(str(exc))
        else:
            st.caption("The structure appears here as you type.")


def gallery() -> None:
    st.markdown("**Example substrates** (click to use)")
    cols = st.columns(4)
    for i, (name, smi) in enumerate(GALLERY):
        with cols[i % 4]:
            try:
                st.image(structure_svg(smi, width=140, height=90))
            except SpecmatchError:
                pass
            st.button(name, key=f"gallery_{i}", on_click=_set_substrate, args=(smi,), width="stretch")


def resolve_reagent() -> tuple[Any, str | None]:
    """(reagent object or None, error message or None) for the current reagent text."""
    text = current_reagent()
    if not text:
        return None, None
    try:
        return reagent_info(text), None
    except SpecmatchError as exc:
        return None, str(exc)


def safety_banner(info: Any) -> None:
    """The chosen reagent's safety notes, above the tabs so they stay in view."""
    if info is None:
        return
    notes = _as_list(_get(info, "safety", "safety_notes", "hazards", default=[]))
    if notes:
        st.warning("**Safety - " + html.escape(_name_of(info)) + ":** " + " ".join(str(n) for n in notes))


def reagent_panel(info: Any, error: str | None) -> None:
    if error:
        st.error(error)
    elif info is not None and current_reagent().strip() != _name_of(info):
        st.caption(f"Reagent understood as **{_name_of(info)}**.")


def substrate_problem() -> str | None:
    """Why the substrate text cannot be used (shown once, under the preview), or None."""
    smiles = (st.session_state.get("substrate") or "").strip()
    if not smiles:
        return None
    try:
        structure_svg(smiles, width=260, height=180)
    except SpecmatchError as exc:
        return str(exc)
    return None


def enumeration_panel(info: Any) -> None:
    smiles = (st.session_state.get("substrate") or "").strip()
    reagent = current_reagent()
    if not smiles or not reagent or info is None or substrate_problem():
        return
    try:
        result = enumeration(smiles, reagent, (st.session_state.get("alcohol") or "").strip() or None)
    except SpecmatchError as exc:
        st.error(str(exc))
        return
    data = result.to_dict() if hasattr(result, "to_dict") else {}
    products = data.get("candidates") or data.get("products") or []
    if products:
        import pandas as pd

        rows = [{"product": p.get("label", ""), "SMILES": p.get("smiles", ""),
                 "expected as": p.get("role", ""), "prior": p.get("prior"),
                 "pathway": " -> ".join(_as_list(p.get("pathway")))} for p in products]
        st.markdown(f"**Plausible products** ({len(rows)}; the spectra decide between them)")
        st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch",
                     column_config={"prior": st.column_config.NumberColumn(format="%.3f")})
    for w in _as_list(data.get("warnings")):
        st.caption(f"Note: {w}")


def spectra_section() -> dict[str, Any]:
    """Uploads, the line editor and the plots; returns the (edited) PeakLists by role."""
    c1, c2 = st.columns(2)
    with c1:
        solvents = list(_lib("specmatch.spectra.solvents", "SOLVENTS") or FALLBACK_SOLVENTS)
        st.selectbox("NMR solvent", solvents, key="solvent",
                     help="used to flag residual solvent and water lines")
    with c2:
        st.number_input("1H frequency / MHz (for peak lists without one)", min_value=40.0,
                        max_value=1200.0, step=100.0, key="field_mhz")
    st.caption(f"JCAMP-DX (.jdx, .dx), a zipped instrument folder (.zip) or a CSV peak list; "
               f"up to {MAX_UPLOAD_MB} MB per file.")
    cols = st.columns(3)
    for col, (role, label) in zip(cols, ROLES.items()):
        with col:
            up = st.file_uploader(f"{label} spectrum", type=UPLOAD_TYPES, key=f"upload_{role}")
            if up is not None:
                fid = _upload_id(up)
                if st.session_state["seen_uploads"].get(role) != fid:
                    st.session_state["seen_uploads"][role] = fid
                    st.session_state["files"][role] = {"name": up.name, "data": up.getvalue(),
                                                       "origin": "upload"}
                    st.session_state["analyse"] = True
            current = st.session_state["files"].get(role)
            if current:
                st.caption(f"in use: {current['name']} ({current['origin']})")
                st.button("remove", key=f"remove_{role}", on_click=_clear_file, args=(role,))
    solvent = st.session_state.get("solvent")
    out: dict[str, Any] = {}
    for role, label in ROLES.items():
        current = st.session_state["files"].get(role)
        if not current:
            continue
        try:
            peaklist, spectrum = read_upload(current["name"], current["data"], role, solvent)
        except SpecmatchError as exc:
            st.error(f"{label}: {exc}")
            continue
        except Exception as exc:  # noqa: BLE001 - a reader bug must not end the session
            st.error(f"{label}: '{current['name']}' could not be read ({type(exc).__name__}: {exc}); "
                     "check the file, or export it again as JCAMP-DX or a CSV peak list")
            continue
        key = hashlib.sha256(current["data"]).hexdigest()[:12]
        st.markdown(f"**{label}** - {current['name']}")
        for w in _as_list(getattr(peaklist, "warnings", ())):
            st.caption(f"Note: {w}")
        plot_slot = st.empty()
        edited = edited_peaklist(role, peaklist, key)
        plot_slot.plotly_chart(spectrum_figure(edited, spectrum, f"{label}: {current['name']}"),
                               key=f"plot_{role}_{key}", width="stretch")
        out[role] = {"peaklist": edited, "spectrum": spectrum, "name": current["name"]}
    if not out:
        st.info("No spectra yet: upload at least a 13C or a 1H spectrum, or load the demo.")
    return out


def _candidate_dicts(result: Any) -> list[dict]:
    data = result.to_dict() if hasattr(result, "to_dict") else {}
    return [c for c in (data.get("candidates") or data.get("ranking") or []) if isinstance(c, dict)]


def _prob(c: dict, which: str = "probability") -> float | None:
    p = c.get(which)
    try:
        return None if p is None else float(p)
    except (TypeError, ValueError):
        return None


def _set_key(labels: dict) -> str:
    """A short key for a candidate set, so pickers reset when the set changes."""
    return hashlib.sha256("|".join(labels).encode()).hexdigest()[:8]


def _label(c: dict) -> str:
    return str(c.get("label") or c.get("smiles") or "")


def results_section(spectra: dict[str, Any]) -> Any:
    substrate = (st.session_state.get("substrate") or "").strip()
    reagent = current_reagent()
    if not substrate or not reagent:
        st.info("Enter a substrate and a reagent first (tab 1).")
        return None
    if substrate_problem():
        st.info("Correct the substrate SMILES first (tab 1).")
        return None
    if resolve_reagent()[1]:
        st.info("Choose a reagent the catalogue knows first (tab 1).")
        return None
    if not spectra:
        st.info("Add a 13C or 1H spectrum first (tab 2).")
        return None
    c1, c2 = st.columns([1, 3])
    with c1:
        st.button("Score the candidates", type="primary", on_click=_request_analysis, key="score")
    with c2:
        st.checkbox("use the mechanism prior (how likely each product is from the reaction)",
                    key="use_prior")
    if not st.session_state.get("analyse"):
        return None
    own = tuple(ln.split()[0] for ln in (st.session_state.get("own_candidates") or "").splitlines()
                if ln.strip() and not ln.lstrip().startswith("#"))
    signature = repr((substrate, reagent, st.session_state.get("alcohol"), own, st.session_state.get("solvent"),
                      sorted((r, hashlib.sha256(f["data"]).hexdigest()) for r, f in st.session_state["files"].items())))
    if st.session_state.get("last_inputs") != signature:  # new inputs: the slow ratio fit waits to be asked
        st.session_state["last_inputs"] = signature
        st.session_state["refine"] = False
    try:
        with st.spinner("Enumerating products, predicting spectra, scoring..."):
            result, mixture_note = run_identify(
                substrate, reagent, (st.session_state.get("alcohol") or "").strip() or None, own,
                st.session_state.get("solvent") or "CDCl3",
                spectra.get("c13", {}).get("peaklist"), spectra.get("h1", {}).get("peaklist"),
                spectra.get("dept135", {}).get("peaklist"), bool(st.session_state.get("use_prior")))
    except SpecmatchError as exc:
        st.error(str(exc))
        return None
    except Exception as exc:  # noqa: BLE001 - never end the session on a library bug
        st.error(f"The analysis failed ({type(exc).__name__}: {exc}). Your inputs are kept; "
                 "try again, or report the problem with the files attached.")
        return None
    verdict_panel(result)
    data = result.to_dict() if hasattr(result, "to_dict") else {}
    cautions = _as_list(data.get("cautions"))
    if cautions:
        st.warning("**Check:** " + " ".join(f"({i + 1}) {c}" for i, c in enumerate(cautions)))
    if mixture_note:
        st.warning(mixture_note)
    result = ratio_refinement(result, spectra)
    render_result(result, spectra)
    return result


def ratio_refinement(result: Any, spectra: dict[str, Any]) -> Any:
    """Offer the full-spectrum ratio fit; return the result carrying the refined ratio if run."""
    h1 = spectra.get("h1")
    panel = st.container()  # the estimate goes above the controls that refine it
    refined = _refined(result, h1)
    shown = refined if refined is not None else result
    mix = getattr(shown, "mixture", None)
    if mix is not None:
        with panel:
            mixture_panel(mix.to_dict() if hasattr(mix, "to_dict") else mix)
            major_note(shown, mix)
    return shown


def major_note(result: Any, mix: Any) -> None:
    """Say so when the ratio's major component is not the candidate the verdict names."""
    try:
        major = mix.candidates[mix.major]
        share = mix.fractions[mix.major]
        names = dict(zip(mix.candidates, getattr(mix, "names", ()) or mix.candidates))
    except (AttributeError, IndexError, TypeError):
        return
    top = getattr(getattr(result, "verdict", None), "top", None)
    if top and major != top:
        st.warning(f"The 1H ratio puts **{names.get(major, major)}** ({major}) as the major component "
                   f"({share:.0%}), but the verdict names {top}. The verdict scores each candidate as if "
                   "it were the only compound; with a mixture, read both and check the assignment tables.")


def _refined(result: Any, h1: dict | None) -> Any:
    """The result with the full-spectrum ratio, once the user asked for it (else None)."""
    if not h1 or h1.get("spectrum") is None or _lib("specmatch.identification.mixture", "estimate_mixture") is None:
        return None
    cands = _candidate_dicts(result)
    if len(cands) < 2:
        return None
    labels = {c["smiles"]: f"{i + 1}. {_label(c)}" for i, c in enumerate(cands)}
    mix = getattr(result, "mixture", None)
    default = []
    if mix is not None:
        default = [s for s, f in zip(getattr(mix, "candidates", ()), getattr(mix, "fractions", ()))
                   if f >= 0.02 and s in labels]
    if len(default) < 2:
        default = list(labels)[:2]
    with st.container(border=True):
        st.markdown("**Refine the ratio from the whole 1H trace** (a fit of every line; slower)")
        picked = st.multiselect("components to fit", list(labels), default=default[:4],
                                format_func=labels.get, key=f"refine_pick_{_set_key(labels)}")
        st.button("Fit the 1H spectrum", key="refine_btn", on_click=_request_refine)
    if not st.session_state.get("refine") or len(picked) < 2:
        return None
    try:
        with st.spinner("Fitting the 1H spectrum..."):
            est = refine_mixture(tuple(picked), tuple(_label(next(c for c in cands if c["smiles"] == s))
                                                      for s in picked),
                                 h1["spectrum"], h1["peaklist"], st.session_state.get("solvent"))
    except SpecmatchError as exc:
        st.error(str(exc))
        return None
    return dataclasses.replace(result, mixture=est) if dataclasses.is_dataclass(result) else None


def verdict_panel(result: Any) -> None:
    v = getattr(result, "verdict", None)
    st.subheader("Verdict")
    if v is None:
        st.info("no verdict")
        return
    word = str(getattr(v, "word", "") or "")
    body = f"**{word.capitalize()}.** {v.text}" if word and not v.text.lower().startswith(word.lower()) \
        else v.text
    if getattr(v, "advice", ""):
        body += f"  \n{v.advice}"
    box = {"decisive": st.success, "likely": st.success, "tentative": st.info}.get(word, st.warning)
    box(body)
    basis = getattr(v, "basis", "")
    if basis:
        st.caption(f"The verdict uses the probability from the {basis}.")


def render_result(result: Any, spectra: dict[str, Any]) -> None:
    import pandas as pd

    data = result.to_dict() if hasattr(result, "to_dict") else {}

    cands = _candidate_dicts(result)
    if not cands:
        return
    st.subheader("Candidates")
    show = cands[:4]
    cols = st.columns(len(show))
    for i, (col, c) in enumerate(zip(cols, show)):
        with col:
            candidate_card(result, c, i)
    if len(cands) > 4:
        rows = [{"rank": i + 1, "candidate": _label(c), "SMILES": c.get("smiles"),
                 "prior": c.get("prior"), "probability": _prob(c),
                 "spectra alone": _prob(c, "probability_spectra")} for i, c in enumerate(cands)]
        st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch",
                     column_config={k: st.column_config.NumberColumn(format="%.4f")
                                    for k in ("prior", "probability", "spectra alone")})

    st.subheader("Measured against predicted")
    labels = {c["smiles"]: f"{i + 1}. {_label(c)}" for i, c in enumerate(cands) if c.get("smiles")}
    picked = st.multiselect("candidates to overlay", list(labels), default=list(labels)[:2],
                            format_func=labels.get, key=f"overlay_pick_{_set_key(labels)}")
    nuclei = [r for r in ("c13", "h1") if r in spectra]
    if nuclei:
        role = st.radio("spectrum", nuclei, format_func=ROLES.get, horizontal=True, key="overlay_nucleus")
        sp = spectra[role]
        try:
            fig = overlay_figure(result, NUCLEUS_OF_ROLE[role], sp["peaklist"], sp["spectrum"],
                                 [(s, labels[s]) for s in picked], float(st.session_state["field_mhz"]))
            st.plotly_chart(fig, key="overlay_plot", width="stretch")
        except SpecmatchError as exc:
            st.error(str(exc))

    assignments_panel(cands, labels)
    disc = data.get("discriminating_signals") or []
    if disc:
        st.subheader("Signals that tell the top two apart")
        frame = pd.DataFrame(disc)
        first = [c for c in ("text", "nucleus", "observed_ppm") if c in frame.columns]
        st.dataframe(frame[first + [c for c in frame.columns if c not in first]], hide_index=True,
                     width="stretch")
    if getattr(result, "caution", ""):
        st.info(result.caution)


def _prediction_for(result: Any, smiles: str) -> Any:
    try:
        return result.prediction(smiles) if hasattr(result, "prediction") else prediction(smiles)
    except Exception:  # noqa: BLE001 - drawings are a courtesy; the numbers are in the tables
        return None


def candidate_card(result: Any, c: dict, i: int) -> None:
    smiles = c.get("smiles") or ""
    pred = _prediction_for(result, smiles)
    notes = tuple((a, f"{cs.shift:.1f}") for cs in pred.carbons for a in cs.atoms) if pred else ()
    with st.container(border=True):
        st.markdown(f"**{i + 1}. {html.escape(_label(c))}**")
        try:
            st.image(structure_svg(smiles, notes, width=260, height=190),
                     caption="predicted 13C shifts (ppm) at the carbons")
        except SpecmatchError:
            st.code(smiles)
        p = _prob(c)
        st.metric("probability", "-" if p is None else f"{p:.1%}")
        if p is not None:
            st.progress(min(max(p, 0.0), 1.0))
        facts = []
        if c.get("role"):
            facts.append(f"expected as: {c['role']}")
        if c.get("prior") is not None:
            facts.append(f"prior {float(c['prior']):.2f}")
        ps = _prob(c, "probability_spectra")
        if ps is not None:
            facts.append(f"spectra alone {ps:.1%}")
        pw = _prob(c, "probability_with_prior")
        if pw is not None:
            facts.append(f"with prior {pw:.1%}")
        st.caption(" · ".join(facts))
        if c.get("pathway"):
            st.caption(f"pathway: {c['pathway']}")
        st.caption(f"`{smiles}`")


def mixture_panel(mixture: dict) -> None:
    import pandas as pd

    st.subheader("Product ratio (from 1H)")
    ratio = mixture.get("ratio_text")
    words = mixture.get("selectivity") or ""
    comps = [c for c in (mixture.get("candidates") or []) if isinstance(c, dict)]
    shown = sorted((c for c in comps if float(c.get("fraction") or 0) >= 0.005),
                   key=lambda c: -float(c.get("fraction") or 0))
    if len(shown) >= 2:  # major first, as chemists write a ratio
        ratio = ":".join(f"{100 * float(c['fraction']):.0f}" for c in shown)
        who = " : ".join(str(c.get("name") or c.get("smiles")) for c in shown)
        st.markdown(f"**{ratio}** ({who}) - {words}")
    elif ratio:
        st.markdown(f"**{ratio}** - {words}")
    if mixture.get("selectivity_note"):
        st.caption(mixture["selectivity_note"])
    if comps:
        rows = []
        for c in comps:
            lo_hi = c.get("interval_95") or [None, None]
            rows.append({"candidate": c.get("name") or c.get("smiles"), "SMILES": c.get("smiles"),
                         "mole fraction": c.get("fraction"), "sd": c.get("uncertainty"),
                         "95% from": lo_hi[0], "95% to": lo_hi[1]})
        st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch",
                     column_config={k: st.column_config.NumberColumn(format="%.3f")
                                    for k in ("mole fraction", "sd", "95% from", "95% to")})
    integral = mixture.get("integral_ratio")
    if isinstance(integral, dict) and integral.get("fractions") and len(integral["fractions"]) == len(comps):
        pairs = sorted(((float(f), c.get("name") or c.get("smiles")) for f, c in
                        zip(integral["fractions"], comps) if float(f) >= 0.005), key=lambda t: -t[0])
        agree = "disagrees with" if mixture.get("disagreement") else "agrees with"
        st.caption("Classical ratio from separated multiplets (integral per proton): "
                   + ":".join(f"{100 * f:.0f}" for f, _ in pairs)
                   + " (" + " : ".join(str(n) for _, n in pairs) + f"); {agree} the fit.")
    if mixture.get("method"):
        st.caption(f"Method: {mixture['method']}")
    if not comps:
        st.caption("No components were fitted.")
    for w in _as_list(mixture.get("warnings")):
        st.caption(f"Note: {w}")


def assignments_panel(cands: list[dict], labels: dict[str, str]) -> None:
    import pandas as pd

    if not cands:
        return
    st.subheader("Signal by signal")
    which = st.selectbox("candidate", list(labels), format_func=labels.get, key=f"assign_pick_{_set_key(labels)}")
    cand = next((c for c in cands if c.get("smiles") == which), cands[0])
    for key, title in (("c13_table", "13C"), ("h1_table", "1H")):
        rows = cand.get(key) or []
        if rows:
            frame = pd.DataFrame(rows)
            keep = [c for c in ("status", "observed_ppm", "predicted_ppm", "deviation_sigma", "sigma_ppm",
                                "hydrogens", "protons", "observed_integral", "multiplicity", "environment",
                                "atoms") if c in frame.columns]
            st.markdown(f"*{title}* (deviation in units of the expected error, sigma)")
            digits = "%.2f" if title == "13C" else "%.3f"
            fmt = {c: st.column_config.NumberColumn(format=digits) for c in ("observed_ppm", "predicted_ppm", "sigma_ppm")}
            fmt.update({c: st.column_config.NumberColumn(format="%.1f") for c in ("deviation_sigma", "observed_integral")})
            st.dataframe(frame[keep], hide_index=True, width="stretch", column_config=fmt)


def export_section(result: Any, spectra: dict[str, Any]) -> None:
    if result is None:
        st.info("Score the candidates first (tab 3); the exports appear here.")
        return
    key = st.session_state.get("demo_key")
    stem = f"specmatch_demo_{key}" if key else "specmatch_analysis"
    cols = st.columns(4)
    report_html = _lib("specmatch.reports.html", "report_html")
    result_json = _lib("specmatch.reports.exports", "result_json")
    assignments_csv = _lib("specmatch.reports.exports", "assignments_csv")
    with cols[0]:
        if report_html is not None:
            try:
                st.download_button("HTML report", report_html(result), file_name=f"{stem}.html",
                                   mime="text/html", key="dl_html")
            except SpecmatchError as exc:
                st.error(str(exc))
        else:
            st.caption("HTML report: not available in this installation")
    with cols[1]:
        if result_json is not None:
            st.download_button("JSON", result_json(result), file_name=f"{stem}.json",
                               mime="application/json", key="dl_json")
    with cols[2]:
        if assignments_csv is not None:
            st.download_button("Assignments (CSV)", assignments_csv(result),
                               file_name=f"{stem}_assignments.csv", mime="text/csv", key="dl_csv")
    text = peak_text(spectra)
    with cols[3]:
        if text:
            st.download_button("Peak text", text, file_name=f"{stem}_peaks.txt", mime="text/plain",
                               key="dl_peaks")
    if text:
        st.markdown("**Journal-style peak text** (measured lines; flagged lines left out)")
        st.code(text, language=None, wrap_lines=True)
    save_panel(result)


def peak_text(spectra: dict[str, Any]) -> str:
    measured = _lib("specmatch.reports.peaktext", "measured_peak_text")
    if measured is None:
        return ""
    parts = []
    for role in ("h1", "c13"):
        if role not in spectra:
            continue
        pl = spectra[role]["peaklist"]
        freq = pl.frequency_mhz or (float(st.session_state["field_mhz"]) * (1.0 if role == "h1" else 0.25))
        try:
            parts.append(measured(pl, NUCLEUS_OF_ROLE[role], freq, pl.solvent or st.session_state.get("solvent")))
        except SpecmatchError as exc:
            parts.append(f"({ROLES[role]}: {exc})")
    return "\n".join(p for p in parts if p)


@st.cache_resource(show_spinner=False, max_entries=4)
def _store_at(url: str) -> Any:
    return _lib("specmatch.store", "open_store")(url)


def _store():
    """The analysis store ($SPECMATCH_STORE or the user's data folder), opened once per URL."""
    resolve = _lib("specmatch.store", "resolve_store_url")
    if resolve is None or _lib("specmatch.store", "open_store") is None:
        return None
    return _store_at(resolve())


def save_panel(result: Any) -> None:
    save_result = _lib("specmatch.store", "save_result")
    if save_result is None or _lib("specmatch.store", "open_store") is None:
        return
    st.markdown("**Keep this analysis**")
    c1, c2, c3 = st.columns([2, 2, 1])
    with c1:
        sample = st.text_input("sample id", key="save_sample")
    with c2:
        who = st.text_input("your name", key="save_user")
    with c3:
        st.write("")
        clicked = st.button("Save", key="save_btn")
    if clicked:
        try:
            store = _store()
            files = {f["name"]: f["data"] for f in st.session_state["files"].values()}
            st.session_state["saved_id"] = save_result(store, result, files, sample_id=sample or None,
                                                       user=who or None)
        except SpecmatchError as exc:
            st.error(str(exc))
    if st.session_state.get("saved_id"):
        st.success(f"Saved as {st.session_state['saved_id'][:12]}.")


def saved_section() -> None:
    if _lib("specmatch.store", "open_store") is None:
        st.info("Saved analyses are not available in this installation.")
        return
    import pandas as pd

    c1, c2, c3, c4 = st.columns(4)
    with c1:
        q_sub = st.text_input("substrate (SMILES)", key="q_substrate")
    with c2:
        q_rea = st.text_input("reagent", key="q_reagent")
    with c3:
        q_ver = st.text_input("verdict words or SMILES", key="q_verdict")
    with c4:
        q_sam = st.text_input("sample id", key="q_sample")
    try:
        store = _store()
        found = store.search(substrate=q_sub or None, reagent=q_rea or None, verdict=q_ver or None,
                             sample_id=q_sam or None, limit=200)
    except SpecmatchError as exc:
        st.error(str(exc))
        return
    if not found:
        st.caption("No saved analyses match.")
        return
    rows = [{"id": r.short_id, "when (UTC)": r.created_at.strftime("%Y-%m-%d %H:%M") if r.created_at else "",
             "sample": r.sample_id, "substrate": r.substrate, "reagent": r.reagent,
             "verdict": r.verdict, "p(top)": r.top_probability, "by": r.user} for r in found]
    st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
    ids = [r.id for r in found]
    label = {r.id: f"{r.short_id} · {r.sample_id or '-'} · {r.substrate}" for r in found}
    pick = st.multiselect("pick two to compare side by side", ids, format_func=label.get,
                          max_selections=2, key="compare_pick")
    if len(pick) == 2:
        try:
            cmp = store.compare(pick[0], pick[1])
        except SpecmatchError as exc:
            st.error(str(exc))
            return
        left, right = st.columns(2)
        for col, which, rid in ((left, "a", pick[0]), (right, "b", pick[1])):
            with col:
                st.markdown(f"**{label[rid]}**")
                st.dataframe(pd.DataFrame([{"field": f["field"], "value": f[which]} for f in cmp["fields"]]),
                             hide_index=True, width="stretch")
        st.markdown("**Candidates in both**")
        st.dataframe(pd.DataFrame(cmp["candidates"]), hide_index=True, width="stretch")
        st.caption("Same input files." if cmp.get("same_files") else "Different input files.")


# ----------------------------------------------------------------------------- page
def main() -> None:
    st.set_page_config(page_title="specmatch - which isomer?", layout="wide")
    _init_state()
    header()
    sidebar()
    info, reagent_error = resolve_reagent()
    safety_banner(info)
    tabs = st.tabs(["1 · Reaction", "2 · Spectra", "3 · Results", "4 · Export", "Saved analyses"])
    with tabs[0]:
        reaction_section()
        reagent_panel(info, reagent_error)
        enumeration_panel(info)
        gallery()
    with tabs[1]:
        spectra = spectra_section()
    with tabs[2]:
        result = results_section(spectra)
    with tabs[3]:
        export_section(result, spectra)
    with tabs[4]:
        saved_section()


if __name__ == "__main__":  # streamlit runs the file as __main__; tests may import it
    main()
