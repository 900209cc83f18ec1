"""Self-contained HTML report of an identification.

One file, no network, rendered from the Jinja2 template ``templates/report.html``
(the store's export of a saved analysis is the same report with its audit block).
Structures are inline SVG drawn with RDKit (predicted 13C
shifts written at the carbons), overlays are inline SVG stick plots (observed
lines up, a candidate's predicted lines down, assignments joined), tables are
plain HTML. It lists the cautions, the reagent's safety notes, tool and table
versions and the SHA-256 of every input file.
"""

from __future__ import annotations

import datetime as _dt
import html
from collections.abc import Mapping
from functools import lru_cache
from pathlib import Path
from typing import Any

from . import numbers as fmt
from .mixture_text import mixture_text
from .naming import structure_class
from .verdict_card import names_for_result, signal_words, threshold_words, verdict_card

__all__ = ["report_html", "write_report", "structure_svg", "overlay_svg"]



#: the Jinja2 templates (package data)
TEMPLATES = Path(__file__).with_name("templates")

#: structure cards drawn in the full report (the table lists every candidate)
CARDS = 8

_PALETTE = ("#2f6f4f", "#4a5a8a", "#a86b12", "#7a3b69", "#3b7a8a", "#8a3b3b")


def _e(x: Any) -> str:
    return html.escape("" if x is None else str(x))


def structure_svg(smiles: str, width: int = 240, height: int = 180, notes: dict[int, str] | None = None) -> str:
    """Inline SVG of a structure; `notes` writes text at atoms (e.g. predicted shifts)."""
    from rdkit import Chem
    from rdkit.Chem.Draw import rdMolDraw2D

    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return f"<code>{_e(smiles)}</code>"
    mol = Chem.Mol(mol)
    for idx, text in (notes or {}).items():
        if idx < mol.GetNumAtoms():
            mol.GetAtomWithIdx(idx).SetProp("atomNote", text)
    d = rdMolDraw2D.MolDraw2DSVG(width, height)
    opts = d.drawOptions()
    opts.annotationFontScale = 0.55
    opts.clearBackground = False
    rdMolDraw2D.PrepareAndDrawMolecule(d, mol)
    d.FinishDrawing()
    svg = d.GetDrawingText()
    return svg[svg.find("<svg"):]  # drop the XML declaration for inline use


def _shift_notes(pred) -> dict[int, str]:
    notes = {}
    for c in pred.carbons:
        for a in c.atoms:
            notes[a] = f"{c.shift:.0f}"
    return notes


def overlay_svg(observed: list[tuple[float, float]], predicted: list[tuple[float, float]],
                links: list[tuple[float, float]], nucleus: str, colour: str = "#2f6f4f",
                width: int = 980, height: int = 150, title: str = "") -> str:
    """Stick overlay: observed (ppm, height) up in grey-black, predicted down in `colour`,
    assignments (observed ppm, predicted ppm) as thin joins. ppm axis runs right to left."""
    xs = [p for p, _ in observed] + [p for p, _ in predicted]
    if not xs:
        return ""
    lo, hi = min(xs), max(xs)
    pad = max(2.0 if nucleus == "13C" else 0.3, 0.06 * (hi - lo))
    lo, hi = lo - pad, hi + pad
    ml, mr, top, axis_y, bottom = 30, 20, 18, height / 2 + 4, height - 22
    X = lambda ppm: ml + (hi - ppm) / (hi - lo) * (width - ml - mr)
    up = (axis_y - top - 4)
    down = (bottom - axis_y - 12)
    hmax_o = max([h for _, h in observed] or [1.0]) or 1.0
    hmax_p = max([h for _, h in predicted] or [1.0]) or 1.0
    parts = [f'<svg class="plot" xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" role="img" aria-label="{_e(title)}">',
             f'<text x="{ml}" y="12" font-size="11" fill="#5b616b">{_e(title)}</text>',
             f'<text x="{width - mr}" y="12" font-size="10" fill="#5b616b" text-anchor="end">'
             f'up: observed, down: predicted</text>',
             f'<line x1="{ml}" y1="{axis_y}" x2="{width - mr}" y2="{axis_y}" stroke="#999" stroke-width="1"/>']
    for o, p in links:
        parts.append(f'<line x1="{X(o):.1f}" y1="{axis_y:.1f}" x2="{X(p):.1f}" y2="{axis_y + 6:.1f}" '
                     f'stroke="{colour}" stroke-width="0.8" opacity="0.6"/>')
    for ppm, h in observed:
        y = axis_y - max(0.15, h / hmax_o) * up
        parts.append(f'<line x1="{X(ppm):.1f}" y1="{axis_y:.1f}" x2="{X(ppm):.1f}" y2="{y:.1f}" '
                     f'stroke="#1f2328" stroke-width="1.6"><title>{ppm:.2f} ppm</title></line>')
    for ppm, h in predicted:
        y = axis_y + 6 + max(0.15, h / hmax_p) * down
        parts.append(f'<line x1="{X(ppm):.1f}" y1="{axis_y + 6:.1f}" x2="{X(ppm):.1f}" y2="{y:.1f}" '
                     f'stroke="{colour}" stroke-width="1.6"><title>{ppm:.2f} ppm (predicted)</title></line>')
    step = _tick_step(hi - lo)
    t = (int(lo / step) + 1) * step
    while t < hi:
        parts.append(f'<line x1="{X(t):.1f}" y1="{bottom:.1f}" x2="{X(t):.1f}" y2="{bottom + 4:.1f}" stroke="#999"/>'
                     f'<text x="{X(t):.1f}" y="{bottom + 15:.1f}" font-size="10" text-anchor="middle" '
                     f'fill="#5b616b">{t:g}</text>')
        t += step
    parts.append(f'<text x="{width - mr}" y="{height - 2}" font-size="10" text-anchor="end" fill="#5b616b">'
                 f'{nucleus} shift / ppm</text></svg>')
    return "".join(parts)


def curve_overlay_svg(ppm: "np.ndarray", measured: "np.ndarray", predicted: "np.ndarray", nucleus: str,
                      colour: str = "#2f6f4f", width: int = 980, height: int = 190, title: str = "",
                      n_bins: int = 1400) -> str:
    """Measured spectrum (up, dark) against a simulated candidate spectrum (down, colour),
    on the same descending ppm axis, as inline SVG polylines (max-abs binning keeps peaks)."""
    import numpy as np

    x = np.asarray(ppm, float)
    if x.size < 2:
        return ""
    order = np.argsort(-x)
    x = x[order]
    ys = [np.asarray(measured, float)[order], np.asarray(predicted, float)[order]]
    hi, lo = float(x[0]), float(x[-1])
    edges = np.linspace(0, x.size, min(n_bins, x.size) + 1).astype(int)
    ml, mr, top, axis_y, bottom = 30, 20, 18, height / 2 + 4, height - 22
    X = lambda v: ml + (hi - v) / (hi - lo) * (width - ml - mr)
    parts = [f'<svg class="plot" xmlns="http://www.w3.org/2000/svg" width="{width}" height="{height}" '
             f'viewBox="0 0 {width} {height}" role="img" aria-label="{_e(title)}">',
             f'<text x="{ml}" y="12" font-size="11" fill="#5b616b">{_e(title)}</text>',
             f'<text x="{width - mr}" y="12" font-size="10" fill="#5b616b" text-anchor="end">'
             f'up: measured, down: simulated from the prediction</text>',
             f'<line x1="{ml}" y1="{axis_y}" x2="{width - mr}" y2="{axis_y}" stroke="#999"/>']
    for k, (y, col, sign) in enumerate(((ys[0], "#1f2328", -1), (ys[1], colour, 1))):
        scale = float(np.max(np.abs(y))) or 1.0
        pts = []
        for a, b in zip(edges[:-1], edges[1:]):
            if b <= a:
                continue
            seg = y[a:b]
            v = float(seg[np.argmax(np.abs(seg))]) / scale
            xv = float(x[(a + b) // 2])
            span = (axis_y - top - 4) if sign < 0 else (bottom - axis_y - 6)
            pts.append(f"{X(xv):.1f},{axis_y + sign * max(v, 0.0) * span:.1f}")
        parts.append(f'<polyline fill="none" stroke="{col}" stroke-width="1" points="{" ".join(pts)}"/>')
    step = _tick_step(hi - lo)
    t = (int(lo / step) + 1) * step
    while t < hi:
        parts.append(f'<text x="{X(t):.1f}" y="{bottom + 15:.1f}" font-size="10" text-anchor="middle" '
                     f'fill="#5b616b">{t:g}</text>')
        t += step
    parts.append(f'<text x="{width - mr}" y="{height - 2}" font-size="10" text-anchor="end" fill="#5b616b">'
                 f'{nucleus} shift / ppm</text></svg>')
    return "".join(parts)


def _measured_overlay(result: Any, c, colour: str, nucleus: str = "1H") -> str:
    """The measured spectrum against the candidate's simulated spectrum, if both exist."""
    spec = result.h1_spectrum if nucleus == "1H" else result.c13_spectrum
    if spec is None:
        return ""
    import numpy as np

    from ..identification.scoring import prepare
    from ..prediction.simulate import simulate_13c, simulate_1h

    ppm = np.asarray(spec.ppm, float)
    rows = c.h1_table if nucleus == "1H" else c.c13_table
    seen = [r.observed_ppm for r in rows if r.observed_ppm is not None]
    seen += [r.predicted_ppm for r in rows if r.predicted_ppm is not None]
    pad = 0.4 if nucleus == "1H" else 5.0
    lo, hi = (min(seen) - pad, max(seen) + pad) if seen else (float(ppm.min()), float(ppm.max()))
    keep = (ppm > lo) & (ppm < hi)
    if keep.sum() < 2:
        return ""
    pred = prepare(c.smiles).prediction
    if nucleus == "1H":
        sim = simulate_1h(pred, ppm[keep], spec.frequency_mhz or 400.0, 1.0)
    else:
        sim = simulate_13c(pred, ppm[keep], 1.5, spec.frequency_mhz or 100.0)
    return curve_overlay_svg(ppm[keep], np.asarray(spec.intensity, float)[keep], sim, nucleus, colour,
                             title=f"{nucleus} measured vs simulated: {c.smiles}")


def _tick_step(span: float) -> float:
    for s in (0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 25, 50):
        if span / s <= 12:
            return s
    return 100


def _overlay_for(c, nucleus: str, colour: str) -> str:
    rows = c.c13_table if nucleus == "13C" else c.h1_table
    if not rows:
        return ""
    obs = {}
    for r in rows:
        if r.observed_ppm is not None and r.observed_index is not None:
            obs[r.observed_index] = (r.observed_ppm, (r.observed_integral or 1.0) if nucleus == "1H" else 1.0)
    pred = []
    links = []
    for r in rows:
        if r.predicted_ppm is not None and r.status in ("assigned", "overlap", "not observed"):
            h = float(r.protons or 1) if nucleus == "1H" else float(max(1, len(r.atoms)))
            pred.append((r.predicted_ppm, h))
            if r.observed_ppm is not None:
                links.append((r.observed_ppm, r.predicted_ppm))
    if nucleus == "13C":
        from ..identification.scoring import prepare

        pred = [(cs.shift, float(len(cs.atoms))) for cs in prepare(c.smiles).prediction.carbons]
    return overlay_svg(list(obs.values()), pred, links, nucleus, colour,
                       title=f"{nucleus}: {c.smiles}")


def _signal_rows(rows, nucleus: str) -> list[dict[str, str]]:
    out = []
    for r in rows:
        h = r.hydrogens if nucleus == "13C" else r.protons
        out.append({"css": {"unexplained": "unexplained", "not observed": "notobs"}.get(r.status, ""),
                    "observed": fmt.ppm(r.observed_ppm, nucleus), "predicted": fmt.ppm(r.predicted_ppm, nucleus),
                    "sigma": fmt.ppm(r.sigma_ppm, nucleus), "deviation": fmt.sigma(r.deviation_sigma),
                    "h": "" if h is None else str(h), "atoms": " ".join(str(a + 1) for a in r.atoms),
                    "status": r.status, "environment": r.environment})
    return out


@lru_cache(maxsize=1)
def _environment():
    from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape

    return Environment(loader=FileSystemLoader(str(TEMPLATES)), autoescape=select_autoescape(["html"]),
                       undefined=StrictUndefined, trim_blocks=False, lstrip_blocks=False)


def report_html(result: Any, fragment: bool = False, audit: Mapping[str, Any] | None = None) -> str:
    """The report as an HTML string.

    Parameters
    ----------
    result : Result
        The identification.
    fragment : bool
        A compact block for notebooks (no page head, first candidate's overlay only).
    audit : mapping, optional
        A saved analysis's record (``Store.export_dict``): its id, versions and
        files are shown first. The store's HTML export is this report with that block.
    """
    from markupsafe import Markup

    ranking = result.ranking
    v = ranking.verdict
    inputs = result.inputs or {}
    names = names_for_result(result)
    summary = verdict_card(result, names)
    show = ranking.candidates[:CARDS] if not fragment else ranking.candidates[:4]
    cards = [{"code": names[c.smiles].code, "name": names[c.smiles].full, "probability": fmt.percent(c.probability),
              "smiles": c.smiles, "role": c.role,
              "svg": Markup(structure_svg(c.smiles, notes=_shift_notes(result.prediction(c.smiles))))}
             for c in show]
    rows = [{"code": names[c.smiles].code, "name": structure_class(c.smiles), "smiles": c.smiles,
             "label": c.label, "steps": c.pathway.split(" -> ") if c.pathway else [], "prior": fmt.percent(c.prior), "spectra": fmt.percent(c.probability_spectra),
             "with_prior": fmt.percent(c.probability_with_prior), "probability": fmt.percent(c.probability),
             "unexplained": str(c.unexplained), "worst": f"{c.worst_deviation_sigma:.1f}"}
            for c in ranking.candidates]
    discriminating = []
    if v.top and v.runner_up:
        top, sec = names[v.top].code, names[v.runner_up].code
        discriminating = [signal_words(d, top, sec) for d in ranking.discriminating]
    overlays = []
    for i, c in enumerate(show[:6] if not fragment else show[:1]):
        colour = _PALETTE[i % len(_PALETTE)]
        blocks = []
        for nucleus, table in (("13C", c.c13_table), ("1H", c.h1_table)):
            if table:
                blocks.append({"nucleus": nucleus, "h_header": "H attached" if nucleus == "13C" else "H",
                               "sticks": Markup(_overlay_for(c, nucleus, colour)),
                               "trace": Markup(_measured_overlay(result, c, colour, nucleus)
                                               if not fragment and i < 3 else ""),
                               "rows": _signal_rows(table, nucleus)})
        overlays.append({"heading": f"{names[c.smiles].full} · {fmt.percent(c.probability)}", "open": i == 0,
                         "blocks": blocks})
    reaction = ""
    if inputs.get("substrate"):
        reaction = (f"{inputs['substrate']} + {inputs.get('reagent_name') or inputs.get('reagent')}"
                    + (f", alcohol {inputs['alcohol']}" if inputs.get("alcohol") else "")
                    + (f"; solvent {inputs['solvent']}" if inputs.get("solvent") else ""))
    opts = inputs.get("options") or {}
    options = ""
    if opts or inputs.get("user_candidates"):
        options = (f"options: {', '.join(f'{k} = {val}' for k, val in opts.items())}; your candidates: "
                   f"{', '.join(inputs.get('user_candidates') or []) or 'none'}")
    context = {
        "fragment": fragment, "title": "specmatch identification report",
        "written": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "css": Markup((TEMPLATES / "report.css").read_text("utf-8")),
        "audit": audit, "advisory": result.caution, "safety": list(result.safety_notes),
        "summary": summary, "verdict_text": v.text, "thresholds": threshold_words(),
        "answer_svg": Markup(structure_svg(summary.answer, width=320, height=220) if summary.answer else ""),
        "reaction": reaction,
        "data_line": (", ".join(ranking.nuclei) or "none") + (" + DEPT-135" if ranking.has_dept else ""),
        "cards": cards, "more": len(ranking.candidates) - len(show), "rows": rows,
        "discriminating": discriminating, "cautions": list(ranking.cautions) + list(result.cautions),
        "mixture": mixture_text(result.mixture) if result.mixture is not None else "",
        "overlays": overlays,
        "files": [{"role": k, "name": f.get("name"), "sha256": f.get("sha256")}
                  for k, f in (inputs.get("files") or {}).items()],
        "options": options, "versions": list((result.versions or {}).items()),
    }
    return _environment().get_template("report.html").render(**context)


def write_report(result: Any, path: str) -> None:
    """Write the self-contained HTML report."""
    from ..errors import SpecmatchError

    text = report_html(result)
    try:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise SpecmatchError(f"cannot write the report '{path}': {exc.strerror}") from None
