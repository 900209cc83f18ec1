"""specmatch in the browser: reaction -> spectra -> which isomer was made.

A thin face over the library: this file gathers input, calls ``specmatch`` and lays
out what it returns. It knows no chemical shift and no reaction rule; names, numbers
and the summary wording come from ``specmatch.reports``.

Inputs are never lost: every spectrum box keeps its last good file; a refused upload
is reported on every view that shows results, and each box has an undo for its last
change. Run with ``streamlit run app.py`` (or ``specmatch app``).
"""

from __future__ import annotations

import dataclasses
import hashlib
import html
import re
from typing import Any

import streamlit as st

from specmatch import __version__
from specmatch.demo import demo_case, demo_cases
from specmatch.errors import SpecmatchError
from specmatch.identification import identify
from specmatch.identification.mixture import estimate_mixture
from specmatch.identification.pipeline import merge_dept
from specmatch.identification.result import ADVISORY_CAUTION
from specmatch.prediction import simulate
from specmatch.reactions import enumerate_products, known_reagents, parse_reagent
from specmatch.reports import numbers as fmt
from specmatch.reports.exports import assignments_csv, result_json
from specmatch.reports.html import report_html, structure_svg as draw_structure
from specmatch.reports.naming import structure_class
from specmatch.reports.nmredata import nmredata_sdf
from specmatch.reports.journal_text import measured_peak_text
from specmatch.reports.verdict_card import fit_words, names_for_result, threshold_words, verdict_card
from specmatch.spectra import Spectrum, peaks_from_file, process_spectrum, read_spectrum
from specmatch.spectra.solvents import SOLVENTS
from specmatch.store import Viewer, open_store, resolve_store_url, save_result
from specmatch.structures import parse_structure

#: Largest file the app accepts (the server limit in .streamlit/config.toml is the same).
MAX_UPLOAD_MB = 25
ROLES = {"c13": "13C", "h1": "1H", "dept135": "DEPT-135"}
NUCLEUS_OF_ROLE = {"c13": "13C", "h1": "1H", "dept135": "13C"}
UPLOAD_TYPES = ["jdx", "dx", "jcamp", "jcm", "zip", "csv", "txt", "tsv"]
VIEWS = ["Results", "Reaction", "Spectra", "Export", "Saved analyses"]
#: "compound" = not flagged (scored); the rest are left out of the scoring
FLAG_CHOICES = ["compound", "solvent", "water", "TMS", "grease", "impurity"]
# Our own palette for candidate traces: hues chosen to stay apart under the common
# colour-vision deficiencies, each with its own dash so print in grey still works.
PALETTE = ["#1D5FA8", "#D9742B", "#6C4A9E", "#2A8C6E", "#B03A5B", "#6F6A1C"]
DASHES = ["solid", "dash", "dot", "dashdot", "longdash", "longdashdot"]
MEASURED_COLOUR = "#22272B"
#: how far either side of a set-aside line (solvent, water, reference) the trace is drawn
#: pale and left out of the scaling, per nucleus (about a multiplet's half-width; common practice)
SET_ASIDE_HALF_WIDTH_PPM = {"1H": 0.05, "13C": 0.8}
#: a product below this mole fraction is not listed in the ratio line
SHOWN_FRACTION_MIN = 0.005
FLAGGED_COLOUR = "#B4B9BE"  # set-aside lines: pale grey, never a candidate hue
SAFETY_LINE = ("Safety: corrosive acids and HX gases, toxic mercury salts, alkylating alkyl halides, "
               "peroxide-forming ethers; read the SDS.")
SAFETY_TEXT = (
    "Hydrogen halides are corrosive gases and solutions; concentrated sulfuric and phosphoric acids "
    "cause severe burns; mercury(II) salts are highly toxic and their waste is regulated; alkyl halide "
    "products are alkylating agents; ethers form explosive peroxides on storage. Read the safety data "
    "sheet (SDS) of every substance, follow your institution's rules and local regulations, and work "
    "in a fume hood with suitable protection.")
ADVISORY_LINE = "Advisory: a ranking of predicted spectra; a qualified person must confirm it with orthogonal data."
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
#: widget values kept while their view is hidden (Streamlit drops the state of unrendered widgets)
PERSIST = ("substrate", "reagent_choice", "reagent_text", "alcohol", "own_candidates", "solvent",
           "field_mhz", "use_prior", "save_sample", "save_user", "full_range", "overlay_nucleus",
           "refine_components")


# ----------------------------------------------------------------------------- cached library calls
@st.cache_data(show_spinner=False, max_entries=4)
def reagent_names() -> list[str]:
    return [r.name for r in known_reagents()]


@st.cache_resource(show_spinner=False, max_entries=64)
def reagent_info(text: str) -> Any:
    return parse_reagent(text)


@st.cache_resource(show_spinner=False, max_entries=64)
def enumeration(substrate: str, reagent: str, alcohol: str | None) -> Any:
    return enumerate_products(substrate, reagent, alcohol=alcohol or None)


@st.cache_data(show_spinner=False, max_entries=256)
def structure_svg(smiles: str, width: int = 280, height: int = 200) -> str:
    """SVG drawing of a structure; raises SpecmatchError (the parser's words) for bad SMILES."""
    parse_structure(smiles)
    return draw_structure(smiles, width=width, height=height)


def _browser_words(message: str, role: str) -> str:
    """Turn the command line's advice ("give --nucleus 13C") into the page's (which box)."""
    def box(m: re.Match) -> str:
        return f"drop the file in the {m.group(1)} box"
    message = re.sub(r"[Gg]ive (?:it with )?--nucleus (1H|13C)(?: or (?:--nucleus )?13C)?", box, message)
    message = re.sub(r";? ?check the file or drop --nucleus", "", message)
    message = message.replace("give --nucleus", "say which nucleus it is by the box you drop it in")
    return message


@st.cache_data(show_spinner=False, max_entries=32)
def read_upload(name: str, data: bytes, role: str, solvent: str | None) -> tuple[Any, Any]:
    """(PeakList, Spectrum or None) of one file in one box; raises SpecmatchError on bad input."""
    if len(data) > MAX_UPLOAD_MB * 1024 * 1024:
        raise SpecmatchError(f"'{name}' is {len(data) / 1e6:.0f} MB; the limit is {MAX_UPLOAD_MB} MB "
                             "(export the processed 1D spectrum only, or zip the instrument folder)")
    nucleus = NUCLEUS_OF_ROLE[role]
    dept = role == "dept135"
    try:
        read = read_spectrum(data, name=name)  # first as the file says, to catch the wrong box
    except SpecmatchError:
        read = None
    if read is not None and read.nucleus != nucleus:
        right = "1H" if read.nucleus == "1H" else "13C or DEPT-135"
        raise SpecmatchError(f"'{name}' holds a {read.nucleus} spectrum, but it was dropped in the "
                             f"{ROLES[role]} box; drop it in the {right} box")
    try:
        read = read_spectrum(data, name=name, nucleus=nucleus)
        if isinstance(read, Spectrum):  # a trace: pick lines here, keep it for the plots
            return process_spectrum(read, solvent=solvent, dept135=dept), read
        return peaks_from_file(data, name=name, nucleus=nucleus, solvent=solvent, dept135=dept), None
    except SpecmatchError as exc:
        raise SpecmatchError(_browser_words(str(exc), role)) from None


@st.cache_resource(show_spinner=False, max_entries=32)
def run_identify(substrate: str, reagent: str, alcohol: str | None, candidates: tuple[str, ...],
                 solvent: str, c13: Any, h1: Any, dept135: Any, use_prior: bool) -> tuple[Any, str | None]:
    """(Result, note): the whole identification, with the product ratio when it can be had."""
    kwargs = dict(substrate=substrate, reagent=reagent, alcohol=alcohol or None, c13=c13, h1=h1,
                  dept135=dept135, solvent=solvent, candidates=list(candidates), use_prior=use_prior)
    if h1 is None:
        return identify(mixture=False, **kwargs), None
    try:
        return identify(mixture=True, **kwargs), None
    except SpecmatchError as exc:  # the ratio is extra; the verdict must still come
        first = str(exc)
    return identify(mixture=False, **kwargs), f"the product ratio could not be estimated ({first})"


@st.cache_resource(show_spinner=False, max_entries=16)
def refine_mixture(candidates: tuple[str, ...], names: tuple[str, ...], spectrum: Any, peaklist: Any,
                   solvent: str | None) -> Any:
    """Full-spectrum fit of the 1H trace (slower than the peak-list estimate)."""
    return estimate_mixture(list(candidates), spectrum=spectrum, peaklist=peaklist, solvent=solvent,
                            names=list(names))


# ----------------------------------------------------------------------------- session state
def _init_state() -> None:
    defaults = {
        "substrate": "", "reagent_text": "", "alcohol": "", "own_candidates": "", "solvent": "CDCl3",
        "field_mhz": 400.0, "use_prior": True, "full_range": False,
        "files": {}, "previous": {}, "refused": {}, "removed": {}, "edits": {}, "seen_uploads": {},
        "analyse": False, "demo_key": None, "saved_id": None, "demo_choice": "a", "refine": False,
        "view": VIEWS[0],
    }
    for key, value in defaults.items():
        if key not in st.session_state:
            st.session_state[key] = value
    for key in PERSIST:  # keep the values of widgets whose view is not drawn this run
        if key in st.session_state:
            st.session_state[key] = st.session_state[key]


def _set_substrate(smiles: str) -> None:
    st.session_state["substrate"] = smiles


def load_demo() -> None:
    """Fill every input from the invented demo scenario (one click) and show the results."""
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
    try:
        choice = reagent_info(case.reagent).name
    except SpecmatchError:
        choice = case.reagent
    previous = {role: f for role, f in st.session_state["files"].items()}
    st.session_state["before_demo"] = {  # one click brings the user's own inputs back
        **{k: st.session_state.get(k) for k in REACTION_KEYS}, "files": dict(st.session_state["files"]),
        "edits": dict(st.session_state["edits"])}
    st.session_state.update({
        "substrate": case.substrate, "alcohol": case.alcohol or "", "solvent": case.solvent,
        "reagent_choice": choice if choice in names else None,
        "reagent_text": "" if choice in names else case.reagent,
        "own_candidates": "", "files": files, "previous": previous, "refused": {}, "removed": {},
        "seen_uploads": {}, "analyse": True, "demo_key": case.key, "saved_id": None,
        "demo_error": None, "refine": False, "save_sample": case.sample_id, "view": "Results",
    })


REACTION_KEYS = ("substrate", "reagent_choice", "reagent_text", "alcohol", "own_candidates", "solvent")


def undo_demo() -> None:
    """Put back every input as it was before "Load the demo"."""
    before = st.session_state.pop("before_demo", None)
    if before is None:
        return
    st.session_state["previous"] = dict(st.session_state["files"])
    st.session_state.update({**{k: before[k] for k in REACTION_KEYS}, "files": before["files"],
                             "edits": before["edits"], "demo_key": None, "refused": {}, "removed": {}})


def _upload_id(up: Any) -> str:
    return getattr(up, "file_id", None) or f"{up.name}:{up.size}"


def _remove_file(role: str) -> None:
    current = st.session_state["files"].pop(role, None)
    if current is not None:
        st.session_state["previous"][role] = current
        st.session_state["removed"][role] = current["name"]
    st.session_state["refused"].pop(role, None)


def _undo(role: str) -> None:
    """Swap the box back to its previous file (pressing again redoes)."""
    before = st.session_state["previous"].pop(role, None)
    now = st.session_state["files"].pop(role, None)
    if before is not None:
        st.session_state["files"][role] = before
    if now is not None:
        st.session_state["previous"][role] = now
    st.session_state["removed"].pop(role, None)
    if before is None and now is not None:
        st.session_state["removed"][role] = now["name"]
    st.session_state["refused"].pop(role, None)


def _request_analysis() -> None:
    st.session_state["analyse"] = True


def _request_refine() -> None:
    st.session_state["refine"] = True


def accept_upload(role: str, name: str, data: bytes) -> None:
    """Take a new file into a box if it reads; otherwise keep the last good one and say why."""
    try:
        read_upload(name, data, role, st.session_state.get("solvent"))
    except SpecmatchError as exc:
        st.session_state["refused"][role] = {"name": name, "error": str(exc)}
        return
    except Exception as exc:  # noqa: BLE001 - a reader bug must not end the session or lose data
        st.session_state["refused"][role] = {
            "name": name, "error": f"'{name}' could not be read ({type(exc).__name__}); check the file, "
                                  "or export it again as JCAMP-DX or a CSV peak list"}
        return
    current = st.session_state["files"].get(role)
    if current is not None:
        st.session_state["previous"][role] = current
    st.session_state["files"][role] = {"name": name, "data": data, "origin": "upload"}
    st.session_state["refused"].pop(role, None)
    st.session_state["removed"].pop(role, None)
    st.session_state["analyse"] = True


# ----------------------------------------------------------------------------- input status
def input_status() -> None:
    """What was refused or removed, and which data the results use; shown on every results view."""
    files, refused, removed = (st.session_state[k] for k in ("files", "refused", "removed"))
    for role, bad in refused.items():
        keep = files.get(role)
        kept = (f"Still using **{html.escape(keep['name'])}** ({keep['origin']})." if keep else
                f"No {ROLES[role]} data is in use: the results are computed without {ROLES[role]}.")
        st.error(f"**{ROLES[role]} upload refused:** {bad['error']}. {kept}", icon=None)
    for role, name in removed.items():
        if role not in refused and role not in files:
            st.warning(f"{ROLES[role]} file **{html.escape(name)}** was removed: the results are computed "
                       f"without {ROLES[role]} (undo in the Spectra view).")


def inputs_line() -> str:
    files = st.session_state["files"]
    parts = [f"{ROLES[r]}: {files[r]['name']}" if r in files else f"{ROLES[r]}: none" for r in ROLES]
    return "Based on " + " · ".join(parts)


# ----------------------------------------------------------------------------- plotting
def _thin(x, y, max_points: int = 6000):
    """Keep the extreme points of each bin so peaks survive (browser-friendly traces)."""
    import numpy as np

    n = len(x)
    if n <= max_points:
        return np.asarray(x), np.asarray(y)
    k = int(np.ceil(n / (max_points / 2)))
    m = (n // k) * k
    xb, yb = np.asarray(x)[:m].reshape(-1, k), np.asarray(y)[:m].reshape(-1, k)
    hi, lo = yb.argmax(axis=1), yb.argmin(axis=1)
    rows = np.arange(xb.shape[0])
    idx = np.sort(np.stack([hi, lo], axis=1), axis=1)
    return xb[rows[:, None], idx].ravel(), yb[rows[:, None], idx].ravel()


def _window(nucleus: str, shifts: list[float], full: bool) -> tuple[float, float]:
    """The ppm window to show: where the signals are, unless the full range is asked for."""
    if full or not shifts:
        return (-0.5, 12.0) if nucleus == "1H" else (-5.0, 220.0)
    pad = 0.35 if nucleus == "1H" else 6.0
    lo, hi = min(shifts) - pad, max(shifts) + pad
    least = 2.0 if nucleus == "1H" else 30.0
    if hi - lo < least:
        mid = (hi + lo) / 2
        lo, hi = mid - least / 2, mid + least / 2
    return lo, hi


def _label_rows(items: list[tuple[float, str]], lo: float, hi: float, width_px: int = 1250,
                char_px: float = 6.5) -> list[int]:
    """Row per label so horizontal labels never overlap (greedy, highest shift first)."""
    ppm_per_px = (hi - lo) / width_px
    ends: list[float] = []  # per row: the lowest ppm taken so far
    rows = []
    for x, text in items:
        half = (len(text) * char_px / 2 + 4) * ppm_per_px
        for r, end in enumerate(ends):
            if x + half < end:
                ends[r] = x - half
                rows.append(r)
                break
        else:
            ends.append(x - half)
            rows.append(len(ends) - 1)
    return rows


def _layout(fig, nucleus: str, window: tuple[float, float], y_range: tuple[float, float],
            height: int = 300) -> None:
    fig.update_layout(
        height=height, margin=dict(l=10, r=10, t=30, b=40), plot_bgcolor="#FFFFFF",
        paper_bgcolor="rgba(0,0,0,0)",
        legend=dict(orientation="h", yanchor="bottom", y=1.0, x=0, font=dict(size=11)),
        xaxis=dict(title=f"{nucleus} shift / ppm", range=[window[1], window[0]], showgrid=False,
                   zeroline=False, ticks="outside", showline=True, linecolor="#8A9096"),
        yaxis=dict(showticklabels=False, showgrid=False, zeroline=False, range=list(y_range)),
    )


def _sticks(xs: list[float], ys: list[float]) -> tuple[list, list]:
    """One trace for many sticks (None breaks the line): one legend entry for all."""
    px, py = [], []
    for x, y in zip(xs, ys):
        px += [x, x, None]
        py += [0.0, y, None]
    return px, py


def _measured_sticks(fig: Any, shifts: list[float], heights: list[float], flagged: bool) -> None:
    """The measured lines of a peak list as one stick trace: compound lines, or the
    set-aside ones (solvent, water, reference) in their pale colour."""
    import plotly.graph_objects as go

    px, py = _sticks(shifts, heights)
    fig.add_trace(go.Scatter(x=px, y=py, mode="lines", hoverinfo="skip",
                             name="set-aside lines (solvent, water, reference)" if flagged
                             else "measured lines (peak list)",
                             line=dict(color=FLAGGED_COLOUR if flagged else MEASURED_COLOUR,
                                       width=1.5 if flagged else 2)))


def _stick_heights(values: list[float | None]) -> list[float]:
    """Heights from intensities, capped so one strong line does not flatten the rest."""
    import numpy as np

    v = np.array([abs(x) if x is not None else np.nan for x in values], float)
    if not len(v) or np.all(np.isnan(v)):
        return [0.8] * len(values)
    ref = float(np.nanpercentile(v, 75)) or float(np.nanmax(v)) or 1.0
    return [0.8 if np.isnan(x) else float(np.clip(x / ref * 0.8, 0.25, 1.0)) for x in v]


def spectrum_figure(peaklist: Any, spectrum: Any, full: bool, dept_h: dict[int, str] | None = None):
    """The measured spectrum with its picked lines; set-aside lines in pale grey."""
    import numpy as np
    import plotly.graph_objects as go

    nucleus = peaklist.nucleus
    mults = list(peaklist.multiplets or ())
    peaks = list(peaklist.peaks)
    compound = [m.shift for m in mults if not m.flag] if mults else [p.shift for p in peaks if not p.flag]
    spread = [x for m in mults if not m.flag for x in m.range] if mults else compound
    window = _window(nucleus, spread, full)
    fig = go.Figure()
    top = 1.0
    if spectrum is not None:
        x, y = _thin(spectrum.ppm, spectrum.intensity)
        inside = (x >= window[0]) & (x <= window[1])
        # scale to the tallest compound line, so a solvent line cannot flatten the rest
        comp_heights = [float(np.interp(s, spectrum.ppm[::-1], spectrum.intensity[::-1]))
                        if spectrum.ppm[0] > spectrum.ppm[-1] else float(np.interp(s, spectrum.ppm, spectrum.intensity))
                        for s in compound]
        top = max(comp_heights + [1e-12]) if comp_heights else float(np.max(y[inside])) if inside.any() else 1.0
        near = np.zeros_like(x, bool)
        for p in peaks:  # set-aside lines (solvent, water, reference) drawn pale
            if p.flag:
                near |= np.abs(x - p.shift) < SET_ASIDE_HALF_WIDTH_PPM[nucleus]
        for part, colour, label in ((~near, MEASURED_COLOUR, "measured spectrum"),
                                    (near, FLAGGED_COLOUR, "set-aside lines (solvent, water, reference)")):
            if part.any():
                fig.add_trace(go.Scatter(x=x, y=np.where(part, y / top, np.nan), mode="lines", name=label,
                                         line=dict(color=colour, width=1), hoverinfo="skip"))
    else:
        for flagged in (False, True):
            sel = [p for p in peaks if bool(p.flag) == flagged]
            if not sel:
                continue
            hs = _stick_heights([p.intensity for p in sel]) if not flagged else [0.5] * len(sel)
            _measured_sticks(fig, [p.shift for p in sel], hs, flagged)
    if not mults:
        sel = [p for p in peaks if window[0] <= p.shift <= window[1]]
        for flagged in (False, True):
            these = [p for p in sel if bool(p.flag) == flagged]
            if not these:
                continue
            text = [f"{fmt.ppm(p.shift, nucleus)} ppm" + (f" · {p.flag}" if p.flag else "")
                    + (f" · {dept_h.get(i, '')}" if dept_h else "") for i, p in enumerate(these)]
            fig.add_trace(go.Scatter(x=[p.shift for p in these], y=[1.08] * len(these), mode="markers",
                                     name="set aside (not scored)" if flagged else "picked lines",
                                     marker=dict(symbol="line-ns-open" if flagged else "triangle-down",
                                                 size=8, color=FLAGGED_COLOUR if flagged else PALETTE[0]),
                                     text=text, hovertemplate="%{text}<extra></extra>"))
    shown = [m for m in mults if window[0] <= m.shift <= window[1]]
    labels = [(m.shift, f"{fmt.ppm(m.shift, nucleus)} {m.multiplicity}"
               + (f" {fmt.integral(m.integral)}H" if m.integral is not None and not m.flag else ""))
              for m in sorted(shown, key=lambda m: -m.shift)]
    rows = _label_rows(labels, *window)
    for (x, text), row, m in zip(labels, rows, sorted(shown, key=lambda m: -m.shift)):
        colour = FLAGGED_COLOUR if m.flag else PALETTE[0]
        lo, hi = sorted(m.range)
        fig.add_vrect(x0=lo, x1=hi, fillcolor=colour, opacity=0.08 if m.flag else 0.12, line_width=0)
        fig.add_annotation(x=x, y=1.12 + 0.1 * row, text=html.escape(text), showarrow=False,
                           font=dict(size=10, color="#8A9096" if m.flag else PALETTE[0]))
    low = -0.05
    if spectrum is not None and float(np.min(spectrum.intensity)) < -0.1 * top:  # DEPT-135: CH2 point down
        low = -1.1
    _layout(fig, nucleus, window, (low, 1.2 + 0.1 * (max(rows) + 1 if rows else 0)))
    return fig


def overlay_figure(result: Any, nucleus: str, peaklist: Any, spectrum: Any,
                   candidates: list[tuple[str, str]], frequency_mhz: float, full: bool):
    """Measured spectrum (or its lines) upward; each chosen candidate's simulated spectrum below."""
    import numpy as np
    import plotly.graph_objects as go

    mults = list(peaklist.multiplets or ())
    compound = ([x for m in mults if not m.flag for x in m.range] if mults else
                [p.shift for p in peaklist.peaks if not p.flag])
    preds = [(s, label, result.prediction(s)) for s, label in candidates]
    predicted = [c.shift for _, _, p in preds for c in (p.carbons if nucleus == "13C" else p.protons)]
    window = _window(nucleus, compound + predicted, full)
    fig = go.Figure()
    if spectrum is not None:
        axis = np.asarray(spectrum.ppm, float)
        meas = np.asarray(spectrum.intensity, float)
        inside = (axis >= window[0]) & (axis <= window[1])
        flagged_mask = np.zeros_like(axis, bool)
        for p in peaklist.peaks:  # scale on compound lines only: a solvent line must not set the height
            if p.flag:
                flagged_mask |= np.abs(axis - p.shift) < SET_ASIDE_HALF_WIDTH_PPM[nucleus]
        ref = meas[inside & ~flagged_mask]
        scale = float(np.max(ref)) if ref.size and np.max(ref) > 0 else float(np.max(meas)) or 1.0
        x, y = _thin(axis[inside], meas[inside] / scale)
        near = np.zeros_like(x, bool)
        for p in peaklist.peaks:
            if p.flag:
                near |= np.abs(x - p.shift) < SET_ASIDE_HALF_WIDTH_PPM[nucleus]
        for part, colour, label in ((~near, MEASURED_COLOUR, "measured spectrum"),
                                    (near, FLAGGED_COLOUR, "set-aside lines (solvent, water, reference)")):
            if part.any():  # NaN breaks the line between the parts
                fig.add_trace(go.Scatter(x=x, y=np.clip(np.where(part, y, np.nan), -0.1, 1.1), mode="lines",
                                         name=label, line=dict(color=colour, width=1), hoverinfo="skip"))
    else:
        axis = np.linspace(window[0], window[1], 8000)
        for flagged in (False, True):
            sel = [p for p in peaklist.peaks if bool(p.flag) == flagged]
            if mults and not flagged:
                sel = [m for m in mults if not m.flag]
                hs = _stick_heights([m.integral for m in sel])
            else:
                hs = _stick_heights([p.intensity for p in sel]) if not flagged else [0.5] * len(sel)
            if not sel:
                continue
            _measured_sticks(fig, [p.shift for p in sel], hs, flagged)
    freq = spectrum.frequency_mhz if (spectrum is not None and spectrum.frequency_mhz) else (
        frequency_mhz if nucleus == "1H" else frequency_mhz / 4.0)
    for i, (smiles, label, pred) in enumerate(preds):
        if nucleus == "1H":
            sim = simulate.simulate_1h(pred, axis, frequency_mhz=freq)
        else:
            sim = simulate.simulate_13c(pred, axis, frequency_mhz=freq)
        peak = float(np.max(sim)) or 1.0
        x, y = _thin(axis, -np.asarray(sim) / peak * 0.9)
        fig.add_trace(go.Scatter(x=x, y=y, mode="lines", name=f"predicted: {label}",
                                 line=dict(color=PALETTE[i % len(PALETTE)], width=1.3,
                                           dash=DASHES[i % len(DASHES)])))
    _layout(fig, nucleus, window, (-1.0, 1.15), height=310)
    fig.add_annotation(x=window[1], y=1.1, xanchor="left", text="measured ↑   predicted ↓", showarrow=False,
                       font=dict(size=10, color="#5B616B"))
    return fig


# ----------------------------------------------------------------------------- peak editing
def _peak_rows(peaklist: Any, dept_h: dict[int, str] | None = None) -> tuple[str, list[dict]]:
    """Rows for the line editor: multiplets for 1H, lines for 13C; numbers as chemists report them."""
    mults = list(peaklist.multiplets or ())
    if peaklist.nucleus == "1H" and mults:
        rows = [{"use": True, "shift (ppm)": fmt.ppm(m.shift, "1H"),
                 "range (ppm)": f"{fmt.ppm(max(m.range), '1H')}–{fmt.ppm(min(m.range), '1H')}",
                 "integral (H)": fmt.integral(m.integral), "multiplicity": m.multiplicity,
                 "J (Hz)": ", ".join(fmt.hz(j) for j in m.j_hz), "flag": m.flag or "compound"} for m in mults]
        return "multiplets", rows
    rows = []
    for i, p in enumerate(peaklist.peaks):
        row = {"use": True, "shift (ppm)": fmt.ppm(p.shift, peaklist.nucleus),
               "height": "" if p.intensity is None else f"{float(p.intensity):.3g}"}
        if peaklist.nucleus == "13C":
            row["H attached"] = (dept_h or {}).get(i, "" if p.hydrogens is None else str(p.hydrogens))
        row["flag"] = p.flag or "compound"
        rows.append(row)
    return "peaks", rows


def _flag_value(text: Any) -> str | None:
    text = (text or "").strip() if isinstance(text, str) else ""
    if not text or text == "compound":
        return None
    return "impurity:marked in the app" if text == "impurity" else text


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


def _dept_words(c13: Any, dept: Any) -> dict[int, str]:
    """13C line index -> attached H read from DEPT-135 ("C", "CH2", "CH or CH3")."""
    if c13 is None or dept is None:
        return {}
    merged = merge_dept(c13, dept)
    out = {}
    for i, m in enumerate(merged):
        h, sign = m.get("hydrogens"), m.get("sign")
        out[i] = {0: "0 (C)", 2: "2 (CH2)"}.get(h, "1 or 3 (CH/CH3)" if sign == 1 else
                                                ("" if h is None else str(h)))
    return out


def edited_peaklist(role: str, peaklist: Any, file_key: str, show: bool,
                    dept_h: dict[int, str] | None = None) -> Any:
    """The PeakList with the chemist's edits; draws the editor when ``show``.

    Edits are kept in the session under the file's checksum, so they survive
    switching views and come back with an undo.
    """
    import pandas as pd

    kind, rows = _peak_rows(peaklist, dept_h)
    if not rows:
        if show:
            st.caption("No lines were picked in this file.")
        return peaklist
    saved = st.session_state["edits"].get(file_key)
    frame = pd.DataFrame(rows)
    if saved and len(saved["use"]) == len(frame):
        frame["use"], frame["flag"] = saved["use"], saved["flag"]
    if show:
        flags = list(dict.fromkeys(FLAG_CHOICES + list(frame["flag"])))
        with st.expander(f"Lines picked ({len(frame)}): tick off or re-flag before scoring", expanded=False):
            frame = st.data_editor(
                frame, key=f"edit_{role}_{file_key}", hide_index=True, width="stretch",
                disabled=[c for c in frame.columns if c not in ("use", "flag")],
                column_config={
                    "use": st.column_config.CheckboxColumn("use", help="untick to drop the line before scoring"),
                    "flag": st.column_config.SelectboxColumn(
                        "flag", options=flags, help="solvent, water, reference or impurity lines are not scored"),
                })
        st.session_state["edits"][file_key] = {"use": list(frame["use"]), "flag": list(frame["flag"])}
    return apply_edits(peaklist, kind, frame)


# ----------------------------------------------------------------------------- page parts
def header() -> None:
    st.markdown("## specmatch · which isomer did the reaction give?")
    reagent, _ = resolve_reagent()
    left, right = st.columns(2)
    with left:
        with st.expander(ADVISORY_LINE):
            st.markdown(ADVISORY_CAUTION)
    with right:
        line = SAFETY_LINE
        if reagent is not None and reagent.safety_notes:
            line = f"Safety ({reagent.name}): " + reagent.safety_notes[0].rstrip(".") + "; read the SDS."
        with st.expander(line):
            if reagent is not None:
                for note in reagent.safety_notes:
                    st.markdown(f"- {note}")
            st.markdown(SAFETY_TEXT)


def sidebar() -> None:
    with st.sidebar:
        st.subheader("Demo scenario")
        st.caption("An invented pilot-plant scenario with simulated spectra (see sample_spectra/README.md).")
        try:
            titles = {c.key: c.title for c in demo_cases()}
        except SpecmatchError as exc:
            titles = {}
            st.caption(str(exc))
        if titles:
            st.radio("case", list(titles), format_func=titles.get, key="demo_choice",
                     label_visibility="collapsed")
        st.button("Load the demo", type="primary", on_click=load_demo, key="load_demo", width="stretch")
        if st.session_state.get("demo_error"):
            st.error(st.session_state["demo_error"])
        if st.session_state.get("before_demo") is not None:
            st.button("Undo: my inputs as before the demo", on_click=undo_demo, key="undo_demo", width="stretch")
        if st.session_state.get("demo_key"):
            try:
                st.caption(demo_case(st.session_state["demo_key"]).description)
            except SpecmatchError:
                pass
        st.divider()
        st.caption(f"specmatch {__version__}")


def current_reagent() -> str:
    text = (st.session_state.get("reagent_text") or "").strip()
    return text or (st.session_state.get("reagent_choice") or "")


def resolve_reagent() -> tuple[Any, str | None]:
    """(reagent or None, error message or None) for the current reagent text."""
    text = current_reagent()
    if not text:
        return None, None
    try:
        return reagent_info(text), None
    except SpecmatchError as exc:
        return None, str(exc)


def substrate_problem() -> str | None:
    smiles = (st.session_state.get("substrate") or "").strip()
    if not smiles:
        return None
    try:
        structure_svg(smiles, width=260, height=180)
    except SpecmatchError as exc:
        return str(exc)
    return None


def reaction_view() -> None:
    left, right = st.columns([3, 2])
    with left:
        st.text_input("Substrate (SMILES)", key="substrate", placeholder="e.g. C=CC1CCCCC1",
                      help="the alkene (or other cation precursor) as SMILES")
        st.selectbox("Reagent", reagent_names(), index=None, key="reagent_choice",
                     placeholder="choose a reagent from the catalogue")
        st.text_input("...or type the reagent in your own words", key="reagent_text",
                      placeholder="e.g. aq. H2SO4, HBr gas, MeOH / H+",
                      help="free text is matched against the catalogue's names and aliases")
        info, error = resolve_reagent()
        if (info is not None and info.needs_alcohol) or st.session_state.get("alcohol"):
            st.text_input("Alcohol (SMILES) added across the C=C", key="alcohol", placeholder="e.g. CO for methanol")
        st.text_area("Your own candidate structures (one SMILES per line)", key="own_candidates",
                     height=80, help="added to the products the tool enumerates")
        if error:
            st.error(error)
        elif info is not None and current_reagent().strip() != info.name:
            st.caption(f"Reagent understood as **{info.name}**.")
    with right:
        smiles = (st.session_state.get("substrate") or "").strip()
        if smiles:
            try:
                st.image(structure_svg(smiles, width=260, height=180), caption="substrate")
            except SpecmatchError as exc:
                st.error(str(exc))
        else:
            st.caption("The structure appears here as you type.")
    enumeration_panel()
    gallery()


def gallery() -> None:
    with st.expander("Example substrates (click to use)", expanded=not st.session_state.get("substrate")):
        cols = st.columns(4)
        for i, (name, smi) in enumerate(GALLERY):
            with cols[i % 4]:
                st.image(structure_svg(smi, width=140, height=90))
                st.button(name, key=f"gallery_{i}", on_click=_set_substrate, args=(smi,), width="stretch")


def enumeration_panel() -> None:
    import pandas as pd

    smiles = (st.session_state.get("substrate") or "").strip()
    info, _ = resolve_reagent()
    if not smiles or info is None or substrate_problem():
        return
    try:
        result = enumeration(smiles, current_reagent(), (st.session_state.get("alcohol") or "").strip() or None)
    except SpecmatchError as exc:
        st.error(str(exc))
        return
    rows = [{"code": f"P{i}", "product": structure_class(c.smiles), "pathway": c.label, "SMILES": c.smiles,
             "expected as": c.role, "prior": fmt.percent(c.prior)}
            for i, c in enumerate(result.candidates, 1)]
    if rows:
        st.markdown(f"**Plausible products** ({len(rows)}; the spectra decide between them)")
        st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
    for w in result.warnings:
        st.caption(f"Note: {w}")


def load_spectra(show: bool) -> dict[str, Any]:
    """The PeakLists (with edits) by role; draws the boxes, editors and plots when ``show``."""
    if show:
        c1, c2, c3 = st.columns([2, 2, 3])
        with c1:
            st.selectbox("NMR solvent", list(SOLVENTS), key="solvent", help="used to flag residual solvent and water lines")
        with c2:
            st.number_input("1H frequency / MHz (for peak lists without one)", min_value=40.0,
                            max_value=1200.0, step=100.0, key="field_mhz")
        with c3:
            st.caption(f"JCAMP-DX (.jdx, .dx), a zipped instrument folder (.zip) or a CSV peak list; up to "
                       f"{MAX_UPLOAD_MB} MB per file. A file that cannot be read never replaces the one in use.")
        cols = st.columns(3)
        for col, (role, label) in zip(cols, ROLES.items()):
            with col:
                up = st.file_uploader(f"{label} spectrum", type=UPLOAD_TYPES, key=f"upload_{role}")
                if up is not None:
                    fid = _upload_id(up)
                    if st.session_state["seen_uploads"].get(role) != fid:
                        st.session_state["seen_uploads"][role] = fid
                        accept_upload(role, up.name, up.getvalue())
                current = st.session_state["files"].get(role)
                st.caption(f"in use: {current['name']} ({current['origin']})" if current else "in use: none")
                b1, b2 = st.columns(2)
                with b1:
                    if current:
                        st.button("remove", key=f"remove_{role}", on_click=_remove_file, args=(role,))
                with b2:
                    before = st.session_state["previous"].get(role)
                    if before is not None or (current is not None and role in st.session_state["previous"]):
                        st.button(f"undo (back to {before['name'] if before else 'none'})", key=f"undo_{role}",
                                  on_click=_undo, args=(role,))
        input_status()
    solvent = st.session_state.get("solvent")
    raw: dict[str, Any] = {}
    for role, label in ROLES.items():
        current = st.session_state["files"].get(role)
        if not current:
            continue
        try:
            raw[role] = (*read_upload(current["name"], current["data"], role, solvent), current)
        except SpecmatchError as exc:
            st.error(f"{label}: {exc}")
    dept_h = _dept_words(raw["c13"][0], raw["dept135"][0]) if "c13" in raw and "dept135" in raw else None
    out: dict[str, Any] = {}
    for role, (peaklist, spectrum, current) in raw.items():
        key = hashlib.sha256(current["data"]).hexdigest()[:12]
        if show:
            st.markdown(f"**{ROLES[role]}** · {html.escape(current['name'])}")
            for w in peaklist.warnings:
                st.caption(f"Note: {w}")
            slot = st.empty()
        edited = edited_peaklist(role, peaklist, key, show, dept_h if role == "c13" else None)
        if show:
            slot.plotly_chart(spectrum_figure(edited, spectrum, bool(st.session_state.get("full_range")),
                                              dept_h if role == "c13" else None),
                              key=f"plot_{role}_{key}", width="stretch")
        out[role] = {"peaklist": edited, "spectrum": spectrum, "name": current["name"]}
    if show:
        st.checkbox("show the full ppm range", key="full_range")
        if not out:
            st.info("No spectra yet: upload at least a 13C or a 1H spectrum, or load the demo.")
    return out


# ----------------------------------------------------------------------------- results
def compute(spectra: dict[str, Any]) -> tuple[Any, str | None, str | None]:
    """(Result or None, note, why there is none)."""
    substrate = (st.session_state.get("substrate") or "").strip()
    own = tuple(ln.split()[0] for ln in (st.session_state.get("own_candidates") or "").splitlines()
                if ln.strip() and not ln.lstrip().startswith("#"))
    if not (substrate and current_reagent()) and not own:
        return None, None, "Start with the reaction (substrate and reagent) in the Reaction view, or load the demo."
    if substrate and substrate_problem():
        return None, None, "Correct the substrate SMILES first (Reaction view)."
    if current_reagent() and resolve_reagent()[1]:
        return None, None, "Choose a reagent the catalogue knows first (Reaction view)."
    if not spectra:
        return None, None, "Add a 13C or 1H spectrum (Spectra view)."
    if not st.session_state.get("analyse"):
        return None, None, "ready"
    signature = repr((substrate, current_reagent(), st.session_state.get("alcohol"), own,
                      st.session_state.get("solvent"), sorted(st.session_state["files"])))
    if st.session_state.get("last_inputs") != signature:  # new inputs: the slow ratio fit waits to be asked
        st.session_state["last_inputs"] = signature
        st.session_state["refine"] = False
    try:
        with st.spinner("Enumerating products, predicting spectra, scoring..."):
            result, note = run_identify(
                substrate if substrate and current_reagent() else None,
                current_reagent() if substrate else None,
                (st.session_state.get("alcohol") or "").strip() or None, own,
                st.session_state.get("solvent") or "CDCl3",
                spectra.get("c13", {}).get("peaklist"), spectra.get("h1", {}).get("peaklist"),
                spectra.get("dept135", {}).get("peaklist"), bool(st.session_state.get("use_prior")))
    except SpecmatchError as exc:
        return None, None, f"error: {exc}"
    except Exception as exc:  # noqa: BLE001 - never end the session on a library bug
        return None, None, (f"error: the analysis failed ({type(exc).__name__}: {exc}). Your inputs are kept; "
                            "try again, or report the problem with the files attached.")
    return result, note, None


def results_view(spectra: dict[str, Any], result: Any, note: str | None, why: str | None) -> Any:
    input_status()
    if result is None:
        if why == "ready":
            st.button("Score the candidates", type="primary", on_click=_request_analysis, key="score")
        elif why and why.startswith("error: "):
            st.error(why[len("error: "):])
        elif why:
            st.info(why)
        return None
    result = refined_result(result, spectra)
    names = names_for_result(result)
    show_verdict_card(result, names)
    if note:
        st.warning(note)
    cautions = list(result.ranking.cautions) + list(result.cautions)
    if cautions:
        with st.expander(f"Things to check ({len(cautions)})"):
            for c in cautions:
                st.markdown(f"- {c}")
    candidate_cards(result, names)
    mixture_panel(result, names, spectra)
    overlays(result, names, spectra)
    signal_table(result, names)
    c1, c2 = st.columns([3, 2])
    with c1:
        st.caption(inputs_line() + ". Scores update when an input changes.")
    with c2:
        st.checkbox("weigh in the mechanism prior (how likely each product is from the reaction)",
                    key="use_prior")
    return result


def show_verdict_card(result: Any, names: dict) -> None:
    s = verdict_card(result, names)
    with st.container(border=True):
        left, right = st.columns([2, 3])
        with left:
            if s.answer:
                st.image(structure_svg(s.answer, width=340, height=210))
                st.caption(f"SMILES: {s.answer}")
        with right:
            st.markdown(f"#### {html.escape(s.headline)}")
            if s.probability:
                st.markdown(f"**{s.probability}** — {s.meaning}.")
            if s.mixture:
                st.markdown(f"**Mixture:** {html.escape(s.mixture)}")
            if s.deciding:
                st.markdown(f"**{s.deciding_title}**\n" + "\n".join(f"- {html.escape(d)}" for d in s.deciding))
            if s.advice:
                st.markdown(f"**Next:** {html.escape(s.advice)}")
            if not s.strong:
                st.caption("Not settled: read the candidates and the signal table below.")


def candidate_cards(result: Any, names: dict) -> None:
    import pandas as pd

    # what is in the sample first (a mixture's minor component before the unlikely pure ones)
    cands = sorted(result.ranking.candidates, key=lambda c: (-round(c.p_present, 3), -c.probability))
    show = cands[:4]
    st.markdown("#### Candidates")
    cols = st.columns(4)
    for col, c in zip(cols, show):
        with col, st.container(border=True):
            st.image(structure_svg(c.smiles, width=200, height=105))
            n = names[c.smiles]
            st.markdown(f"**{n.code}** {html.escape(structure_class(c.smiles))} · in the sample "
                        f"**{fmt.percent(c.p_present)}**")
            bits = [c.label] if c.label else []
            bits.append(f"if pure {fmt.percent(c.probability)}")
            if c.prior is not None:
                bits.append(f"mechanism {fmt.percent(c.prior)}")
            st.caption(" · ".join(bits))
    if len(cands) > 4:
        with st.expander(f"{len(cands) - 4} less likely candidate(s)"):
            st.dataframe(pd.DataFrame([{"code": names[c.smiles].code, "product": structure_class(c.smiles),
                                        "pathway": c.label, "SMILES": c.smiles,
                                        "in the sample": fmt.percent(c.p_present),
                                        "if pure": fmt.percent(c.probability),
                                        "expected from the mechanism": fmt.percent(c.prior)} for c in cands[4:]]),
                         hide_index=True, width="stretch")


def refined_result(result: Any, spectra: dict[str, Any]) -> Any:
    """The result with the whole-trace ratio fit once asked for (else as it is)."""
    h1 = spectra.get("h1")
    if not st.session_state.get("refine") or not h1 or h1.get("spectrum") is None:
        return result
    picked = st.session_state.get("refine_components") or []
    if len(picked) < 2:
        return result
    names = names_for_result(result)
    try:
        with st.spinner("Fitting the 1H spectrum..."):
            est = refine_mixture(tuple(picked), tuple(names[s].full for s in picked), h1["spectrum"],
                                 h1["peaklist"], st.session_state.get("solvent"))
    except SpecmatchError as exc:
        st.error(str(exc))
        return result
    return dataclasses.replace(result, mixture=est)


def mixture_panel(result: Any, names: dict, spectra: dict[str, Any]) -> None:
    mix = result.mixture
    h1 = spectra.get("h1")
    can_refine = bool(h1 and h1.get("spectrum") is not None and len(result.ranking.candidates) >= 2)
    if mix is None and not can_refine:
        return
    st.markdown("#### Product ratio (from 1H)")
    if mix is not None:
        code = lambda s: names[s].code if s in names else s  # noqa: E731
        pairs = sorted(((f, s, u) for s, f, u in zip(mix.candidates, mix.fractions, mix.uncertainties)
                        if f >= SHOWN_FRACTION_MIN), reverse=True)
        spread = " · ".join(f"{code(s)} {fmt.percent(f)} ± {fmt.percent(u)}" for f, s, u in pairs)
        if len(pairs) >= 2:
            st.markdown(f"**{':'.join(f'{100 * f:.0f}' for f, _, _ in pairs)}** "
                        f"({' : '.join(code(s) for _, s, _ in pairs)}) — {mix.selectivity} · {spread}")
        elif pairs:
            st.markdown(f"**{code(pairs[0][1])}** only (no second product above {fmt.percent(SHOWN_FRACTION_MIN)}) — {mix.selectivity}")
        if mix.disagreement:  # both values in view: the fit's and the integrals'
            both = [w for w in mix.warnings if w.startswith("the full fit")]
            order = " : ".join(code(s) for s in mix.candidates)
            st.warning((both[0] if both else "the fit and the integrals disagree") + f" (ratios in the order {order}).")
    left, right = st.columns(2)
    if mix is not None:
        with left, st.expander("How the ratio was obtained"):
            st.markdown(f"Method: {mix.method}. Uncertainty: {mix.uncertainty_method}.")
            if mix.selectivity_note:
                st.markdown(mix.selectivity_note)
            for w in mix.warnings:
                st.markdown(f"- {w}")
    if can_refine:
        with right:
            refine_controls(result, names, mix)


def refine_controls(result: Any, names: dict, mix: Any) -> None:
    cands = [c.smiles for c in result.ranking.candidates]
    default = [s for s, f in zip(mix.candidates, mix.fractions) if f >= 0.02 and s in cands] if mix else []
    if len(default) < 2:
        default = cands[:2]
    with st.expander("Refine the ratio from the whole 1H trace (a fit of every line; slower)"):
        kept = [s for s in st.session_state.get("refine_components") or [] if s in cands]
        if kept:
            st.session_state["refine_components"] = kept
        st.multiselect("components to fit", cands, default=None if kept else default[:4],
                       format_func=lambda s: names[s].full, key="refine_components")
        st.button("Fit the 1H spectrum", key="refine_btn", on_click=_request_refine)


def overlays(result: Any, names: dict, spectra: dict[str, Any]) -> None:
    nuclei = [r for r in ("c13", "h1") if r in spectra]
    if not nuclei:
        return
    st.markdown("#### Measured against predicted")
    cands = [c.smiles for c in result.ranking.candidates]
    c1, c2, c3 = st.columns([4, 2, 2])
    with c1:
        mix = result.mixture  # a mixture: overlay its components first
        first = [s for f, s in sorted(zip(mix.fractions, mix.candidates), reverse=True) if f >= 0.02 and s in cands] \
            if mix is not None else []
        default = (first + [s for s in cands if s not in first])[:2]
        picked = st.multiselect("candidates to overlay", cands, default=default,
                                format_func=lambda s: names[s].full, key=f"overlay_pick_{_set_key(cands)}")
    with c2:
        if st.session_state.get("overlay_nucleus") not in nuclei:
            st.session_state["overlay_nucleus"] = nuclei[0]
        role = st.radio("spectrum", nuclei, format_func=ROLES.get, horizontal=True, key="overlay_nucleus")
    with c3:
        st.checkbox("show the full ppm range", key="full_range")
    sp = spectra[role]
    try:
        fig = overlay_figure(result, NUCLEUS_OF_ROLE[role], sp["peaklist"], sp["spectrum"],
                             [(s, names[s].full) for s in picked], float(st.session_state["field_mhz"]),
                             bool(st.session_state.get("full_range")))
        st.plotly_chart(fig, key="overlay_plot", width="stretch")
    except SpecmatchError as exc:
        st.error(str(exc))


def _set_key(items: list[str]) -> str:
    return hashlib.sha256("|".join(items).encode()).hexdigest()[:8]


STATUS_WORDS = {"assigned": "assigned", "overlap": "shares a line", "not observed": "not observed",
                "unexplained": "not explained by this structure"}


def signal_rows(cand: Any, nucleus: str) -> list[dict[str, str]]:
    """The per-signal table of one candidate with human headers and reporting precision."""
    rows = []
    for r in (cand.c13_table if nucleus == "13C" else cand.h1_table):
        diff = "" if r.observed_ppm is None or r.predicted_ppm is None else fmt.ppm(
            r.observed_ppm - r.predicted_ppm, nucleus)
        row = {"measured": fmt.ppm(r.observed_ppm, nucleus),
               "predicted": fmt.ppm(r.predicted_ppm, nucleus),
               "difference": diff,
               "agreement": "" if r.deviation_sigma is None else (
                   "good" if abs(r.deviation_sigma) <= 1 else "fair" if abs(r.deviation_sigma) <= 2 else "poor"),
               }
        if nucleus == "13C":
            row["H attached"] = "" if r.hydrogens is None else str(r.hydrogens)
        else:
            row["H"] = "" if r.protons is None else str(r.protons)
            row["integral"] = fmt.integral(r.observed_integral)
            row["multiplicity"] = r.multiplicity or ""
        row["atoms"] = ", ".join(str(a + 1) for a in r.atoms)
        row["status"] = STATUS_WORDS.get(r.status, r.status)
        rows.append(row)
    return rows


def signal_table(result: Any, names: dict) -> None:
    import pandas as pd

    cands = list(result.ranking.candidates)
    st.markdown("#### Signal by signal")
    which = st.selectbox("candidate", [c.smiles for c in cands], format_func=lambda s: names[s].full,
                         key=f"assign_pick_{_set_key([c.smiles for c in cands])}")
    cand = next(c for c in cands if c.smiles == which)
    cols = st.columns(2)
    for col, nucleus in zip(cols, ("13C", "1H")):
        rows = signal_rows(cand, nucleus)
        if rows:
            with col:
                st.markdown(f"*{nucleus}* (shifts in ppm)")
                st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch", height=250)
    st.caption("agreement: good = within the prediction's expected error, fair = within twice that, "
               "poor = beyond; atoms numbered from 1 in SMILES order")
    with st.expander("Statistics behind the probabilities"):
        stats = [{"candidate": names[c.smiles].code, "in the sample": fmt.percent(c.p_present),
                  "if pure": fmt.percent(c.probability),
                  "from the spectra alone": fmt.percent(c.probability_spectra),
                  "with the mechanism prior": fmt.percent(c.probability_with_prior),
                  "13C log-likelihood": f"{c.log_likelihood_c13:.1f}",
                  "1H log-likelihood": f"{c.log_likelihood_h1:.1f}",
                  "largest deviation (expected errors)": f"{c.worst_deviation_sigma:.1f}"} for c in cands]
        st.dataframe(pd.DataFrame(stats), hide_index=True, width="stretch")
        v = result.ranking.verdict
        st.caption(f"The verdict word follows fixed thresholds on the probability ({v.basis}; "
                   f"{threshold_words()}); see the report for the per-signal deviations in units of the expected error.")


# ----------------------------------------------------------------------------- export and store
def export_view(result: Any, spectra: dict[str, Any]) -> None:
    input_status()
    if result is None:
        st.info("Score the candidates first (Results view); the exports appear here.")
        return
    key = st.session_state.get("demo_key")
    stem = f"specmatch_demo_{key}" if key else "specmatch_analysis"
    cols = st.columns(5)
    with cols[0]:
        try:
            st.download_button("HTML report", report_html(result), file_name=f"{stem}.html", mime="text/html",
                               key="dl_html")
        except SpecmatchError as exc:
            st.error(str(exc))
    with cols[1]:
        st.download_button("JSON", result_json(result), file_name=f"{stem}.json", mime="application/json",
                           key="dl_json")
    with cols[2]:
        st.download_button("Assignments (CSV)", assignments_csv(result), file_name=f"{stem}_assignments.csv",
                           mime="text/csv", key="dl_csv")
    with cols[3]:
        try:
            st.download_button("NMReDATA (SDF)", nmredata_sdf(result), file_name=f"{stem}.nmredata.sdf",
                               mime="chemical/x-mdl-sdfile", key="dl_nmredata",
                               help="the top structure with its assigned measured signals (NMReDATA 1.1)")
        except SpecmatchError as exc:
            st.caption(str(exc))
    text = peak_text(spectra)
    with cols[4]:
        if text:
            st.download_button("Peak text", text, file_name=f"{stem}_peaks.txt", mime="text/plain", key="dl_peaks")
    if text:
        st.markdown("**Journal-style peak text** (measured lines; set-aside lines left out)")
        st.code(text, language=None, wrap_lines=True)
    save_panel(result)


def peak_text(spectra: dict[str, Any]) -> str:
    parts = []
    for role in ("h1", "c13"):
        if role not in spectra:
            continue
        pl = spectra[role]["peaklist"]
        freq = pl.frequency_mhz or (float(st.session_state["field_mhz"]) * (1.0 if role == "h1" else 0.25))
        try:
            parts.append(measured_peak_text(pl, NUCLEUS_OF_ROLE[role], freq, pl.solvent or st.session_state.get("solvent")))
        except SpecmatchError as exc:
            parts.append(f"({ROLES[role]}: {exc})")
    return "\n".join(p for p in parts if p)


@st.cache_resource(show_spinner=False, max_entries=4)
def _store_at(url: str) -> Any:
    return open_store(url)


def _store():
    """The analysis store ($SPECMATCH_STORE or the user's data folder), opened once per URL."""
    return _store_at(resolve_store_url())


def _signed_in() -> Viewer | None:
    """The analyst signed in through Streamlit's OpenID Connect login, or None.

    The store names them by their sign-in (e-mail, else name or subject) and shows them
    their own analyses and those of the groups their identity provider lists.
    """
    if not st.user.get("is_logged_in"):
        return None
    name = st.user.get("email") or st.user.get("name") or st.user.get("sub")
    groups = st.user.get("groups") or ()
    if isinstance(groups, str):
        groups = [groups]
    return Viewer(str(name), tuple(str(g) for g in groups))


def _sign_in_required() -> bool:
    """Sign-in is configured (an [auth] section in the secrets) and nobody is signed in."""
    try:
        configured = "auth" in st.secrets
    except FileNotFoundError:  # no secrets file: a local, single-user app
        configured = False
    if configured and not st.user.get("is_logged_in"):
        st.info("Sign in to save analyses and to see your own and your group's.")
        st.button("Sign in", on_click=st.login, key="sign_in_btn")
        return True
    return False


def save_panel(result: Any) -> None:
    st.markdown("**Keep this analysis**")
    if _sign_in_required():
        return
    viewer = _signed_in()
    c1, c2, c3 = st.columns([2, 2, 1])
    with c1:
        sample = st.text_input("sample id", key="save_sample")
    with c2:
        if viewer:
            st.caption(f"saved as {viewer.name}")
            who = viewer.name
        else:
            who = st.text_input("your name", key="save_user")
    with c3:
        st.write("")
        clicked = st.button("Save", key="save_btn")
    if clicked:
        try:
            files = {f["name"]: f["data"] for f in st.session_state["files"].values()}
            st.session_state["saved_id"] = save_result(_store(), result, files, sample_id=sample or None,
                                                       user=who or None,
                                                       groups=viewer.groups if viewer else None)
        except SpecmatchError as exc:
            st.error(str(exc))
    if st.session_state.get("saved_id"):
        st.success(f"Saved as {st.session_state['saved_id'][:12]}.")


def saved_view() -> None:
    import pandas as pd

    if _sign_in_required():
        return
    viewer = _signed_in()

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
                             sample_id=q_sam or None, limit=200, viewer=viewer)
    except SpecmatchError as exc:
        st.error(str(exc))
        return
    if not found:
        st.caption("No saved analyses match.")
        return
    rows = [{"id": r.short_id, "when (UTC)": r.created_at.strftime("%Y-%m-%d %H:%M") if r.created_at else "",
             "sample": r.sample_id or "", "substrate": r.substrate or "", "reagent": r.reagent or "",
             "verdict": " ".join(x for x in (r.verdict, r.top_smiles) if x),
             "probability": fmt.percent(r.top_probability), "by": r.user or ""} for r in found]
    st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
    ids = [r.id for r in found]
    label = {r.id: f"{r.short_id} · {r.sample_id or '-'} · {r.substrate}" for r in found}
    pick = st.multiselect("pick two to compare side by side", ids, format_func=label.get,
                          max_selections=2, key="compare_pick")
    if len(pick) == 2:
        try:
            cmp = store.compare(pick[0], pick[1], viewer=viewer)
        except SpecmatchError as exc:
            st.error(str(exc))
            return
        left, right = st.columns(2)
        for col, which, rid in ((left, "a", pick[0]), (right, "b", pick[1])):
            with col:
                st.markdown(f"**{label[rid]}**")
                st.dataframe(pd.DataFrame([{"field": f["field"], "value": "" if f[which] is None else str(f[which])}
                                           for f in cmp["fields"]]), hide_index=True, width="stretch")
        st.markdown("**Candidates in both**")
        st.dataframe(pd.DataFrame(cmp["candidates"]).fillna(""), hide_index=True, width="stretch")
        st.caption("Same input files." if cmp.get("same_files") else "Different input files.")


# ----------------------------------------------------------------------------- page
def main() -> None:
    st.set_page_config(page_title="specmatch - which isomer?", layout="wide")
    _init_state()
    sidebar()
    header()
    view = st.radio("view", VIEWS, key="view", horizontal=True, label_visibility="collapsed")
    spectra = load_spectra(show=view == "Spectra")
    needs_result = view in ("Results", "Export")
    result, note, why = compute(spectra) if needs_result else (None, None, None)
    if view == "Results":
        results_view(spectra, result, note, why)
    elif view == "Reaction":
        reaction_view()
    elif view == "Export":
        export_view(refined_result(result, spectra) if result is not None else None, spectra)
    elif view == "Saved analyses":
        saved_view()


if __name__ == "__main__":  # streamlit runs the file as __main__; tests may import it
    main()
