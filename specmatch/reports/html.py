"""Self-contained HTML report of an identification.

One file, no network: structures are inline SVG drawn with RDKit (predicted 13C
shifts written at the carbons), overlays are inline SVG stick plots (observed
lines up, a candidate's predicted lines down, assignments joined), tables are
plain HTML. It lists the cautions, the reagent's safety notes, tool and table
versions and the SHA-256 of every input file.
"""

from __future__ import annotations

import datetime as _dt
import html
from typing import Any

__all__ = ["report_html", "write_report", "structure_svg", "overlay_svg"]

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",sans-serif;margin:0;background:#f7f7f4;color:#1f2328}
main{max-width:1100px;margin:0 auto;padding:1.2rem 1.5rem 3rem}
h1{font-size:1.45rem;margin:.4rem 0 .2rem}h2{font-size:1.15rem;margin:1.6rem 0 .5rem;border-bottom:1px solid #d8d8d0}
.sub{color:#5b616b;font-size:.9rem}
.box{border-radius:6px;padding:.7rem 1rem;margin:.7rem 0}
.verdict{background:#e7f0ea;border-left:5px solid #2f6f4f;font-size:1.05rem}
.verdict.weak{background:#f6efe0;border-left-color:#a86b12}
.advisory{background:#eef0f6;border-left:5px solid #4a5a8a}
.safety{background:#f8e9e6;border-left:5px solid #9b2c1f}
.caution{background:#fbf6e4;border-left:5px solid #b38a12}
table{border-collapse:collapse;margin:.4rem 0;font-size:.88rem}
th,td{padding:.25rem .55rem;border-bottom:1px solid #e2e2da;text-align:left;vertical-align:middle}
th{background:#ecece6}td.num{text-align:right;font-variant-numeric:tabular-nums}
tr.unexplained td,tr.notobs td{color:#8a4b08}
.cards{display:flex;flex-wrap:wrap;gap:.8rem}
.card{background:#fff;border:1px solid #deded6;border-radius:6px;padding:.5rem;width:250px}
.card .p{font-size:1.1rem;font-weight:600}
code{font-size:.85rem;word-break:break-all}
details{margin:.3rem 0}summary{cursor:pointer;color:#2f4f7f}
svg text{font-family:system-ui,sans-serif}
svg.plot{max-width:100%;height:auto;background:#fff;border:1px solid #e2e2da;border-radius:4px;margin:.3rem 0}
td.sub{max-width:340px}
pre{white-space:pre-wrap;font-size:.82rem;background:#fff;border:1px solid #e2e2da;padding:.5rem}
"""

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
    spec = getattr(result, "h1_spectrum" if nucleus == "1H" else "c13_spectrum", None)
    if spec is None:
        return ""
    try:
        import numpy as np

        from ..identification.scoring import prepare
        from ..prediction.simulate import simulate_13c, simulate_1h
    except ImportError:  # the simulation module is optional for the report
        return ""
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


def _signal_table(rows, nucleus: str) -> str:
    if not rows:
        return ""
    ppm = "{:.1f}" if nucleus == "13C" else "{:.2f}"
    f = lambda x, fmt: "-" if x is None else fmt.format(x)
    hcol = "H" if nucleus == "13C" else "nH"
    out = [f"<table><tr><th>observed / ppm</th><th>predicted / ppm</th><th>sigma / ppm</th>"
           f"<th>deviation / sigma</th><th>{hcol}</th><th>atoms</th><th>status</th><th>environment</th></tr>"]
    for r in rows:
        cls = {"unexplained": "unexplained", "not observed": "notobs"}.get(r.status, "")
        h = r.hydrogens if nucleus == "13C" else r.protons
        out.append(f'<tr class="{cls}"><td class="num">{f(r.observed_ppm, ppm)}</td>'
                   f'<td class="num">{f(r.predicted_ppm, ppm)}</td><td class="num">{f(r.sigma_ppm, "{:.2f}")}</td>'
                   f'<td class="num">{f(r.deviation_sigma, "{:+.1f}")}</td><td class="num">{_e("-" if h is None else h)}</td>'
                   f'<td>{_e(" ".join(str(a + 1) for a in r.atoms))}</td><td>{_e(r.status)}</td>'
                   f'<td>{_e(r.environment)}</td></tr>')
    out.append("</table>")
    return "".join(out)


def _pathway_cell(pathway: str) -> str:
    if not pathway:
        return ""
    steps = pathway.split(" -> ")
    if len(steps) <= 2 and len(pathway) < 60:
        return _e(pathway)
    return (f"<details><summary>{len(steps)} steps</summary>"
            + "<br>".join(_e(x) for x in steps) + "</details>")


def _mixture_html(mix: Any) -> str:
    if mix is None:
        return ""
    d = mix.to_dict() if hasattr(mix, "to_dict") else mix
    body = ""
    try:
        from .mixture_text import mixture_text

        body = f"<pre>{_e(mixture_text(mix))}</pre>"
    except Exception:  # the mixture module is optional; fall back to its dict
        import json

        body = f"<pre>{_e(json.dumps(d, indent=2, default=str))}</pre>"
    return f"<h2>Product ratio (1H mixture estimate)</h2>{body}"


def report_html(result: Any, fragment: bool = False) -> str:
    """The report as an HTML string; `fragment=True` gives a compact block for notebooks."""
    ranking = getattr(result, "ranking", result)
    v = ranking.verdict
    inputs = getattr(result, "inputs", {}) or {}
    weak = v.word not in ("decisive", "likely")
    parts: list[str] = []
    if not fragment:
        now = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
        title = "specmatch identification report"
        parts.append(f"<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
                     f"<meta name='viewport' content='width=device-width, initial-scale=1'>"
                     f"<title>{title}</title><style>{_CSS}</style></head><body><main>"
                     f"<h1>{title}</h1><div class='sub'>written {now}</div>")
    else:
        parts.append(f"<div><style>{_CSS}</style>")
    adv = getattr(result, "caution", None)
    if adv:
        parts.append(f"<div class='box advisory'><b>Advisory.</b> {_e(adv)}</div>")
    safety = getattr(result, "safety_notes", ()) or ()
    if safety:
        parts.append("<div class='box safety'><b>Reagent safety</b><ul>"
                     + "".join(f"<li>{_e(s)}</li>" for s in safety) + "</ul></div>")
    parts.append(f"<div class='box verdict{' weak' if weak else ''}'><b>Verdict: {_e(v.word)}</b><br>"
                 f"{_e(v.text)}<div class='sub'>based on the {_e(v.basis)} probability; thresholds: "
                 f"decisive &ge; 0.95, likely &ge; 0.80, tentative at odds &ge; 3:1, otherwise "
                 f"cannot tell apart</div></div>")
    if inputs.get("substrate"):
        parts.append(f"<p>Reaction: <code>{_e(inputs['substrate'])}</code> + "
                     f"{_e(inputs.get('reagent_name') or inputs.get('reagent'))}"
                     + (f", alcohol <code>{_e(inputs['alcohol'])}</code>" if inputs.get("alcohol") else "")
                     + (f"; solvent {_e(inputs['solvent'])}" if inputs.get("solvent") else "") + "</p>")
    parts.append(f"<p class='sub'>Data: {_e(', '.join(ranking.nuclei) or 'none')}"
                 f"{' + DEPT' if ranking.has_dept else ''}</p>")

    # candidate cards and table
    from ..identification.scoring import prepare

    show = ranking.candidates[:CARDS] if not fragment else ranking.candidates[:4]
    parts.append("<h2>Candidates</h2><div class='cards'>")
    for i, c in enumerate(show, 1):
        svg = structure_svg(c.smiles, notes=_shift_notes(prepare(c.smiles).prediction))
        parts.append(f"<div class='card'><div>#{i} <span class='p'>p = {c.probability:.3f}</span></div>{svg}"
                     f"<div><code>{_e(c.smiles)}</code></div><div class='sub'>{_e(c.label)}"
                     f"{' (' + _e(c.role) + ')' if c.role else ''}</div></div>")
    more = len(ranking.candidates) - len(show)
    parts.append("</div><p class='sub'>numbers at the atoms: predicted 13C shifts / ppm"
                 + (f"; {more} less probable candidate(s) in the table below" if more > 0 else "") + "</p>")
    parts.append("<table><tr><th>#</th><th>candidate</th><th>label</th><th>pathway</th><th>prior</th>"
                 "<th>p (spectra only)</th><th>p (with prior)</th><th>p (verdict)</th>"
                 "<th>unexplained signals</th><th>worst deviation / sigma</th></tr>")
    for i, c in enumerate(ranking.candidates, 1):
        f = lambda x: "-" if x is None else f"{x:.3f}"
        parts.append(f"<tr><td>{i}</td><td><code>{_e(c.smiles)}</code></td><td>{_e(c.label)}</td>"
                     f"<td class='sub'>{_pathway_cell(c.pathway)}</td><td class='num'>{f(c.prior)}</td>"
                     f"<td class='num'>{f(c.probability_spectra)}</td><td class='num'>{f(c.probability_with_prior)}</td>"
                     f"<td class='num'><b>{f(c.probability)}</b></td><td class='num'>{c.unexplained}</td>"
                     f"<td class='num'>{c.worst_deviation_sigma:.1f}</td></tr>")
    parts.append("</table>")

    if ranking.discriminating:
        parts.append("<h2>Signals that tell the top two apart</h2><ul>"
                     + "".join(f"<li>{_e(d.text)}</li>" for d in ranking.discriminating) + "</ul>")

    cautions = list(ranking.cautions) + (list(getattr(result, "cautions", ()) or ()) if result is not ranking else [])
    if cautions:
        parts.append("<div class='box caution'><b>Cautions</b><ul>"
                     + "".join(f"<li>{_e(c)}</li>" for c in cautions) + "</ul></div>")

    parts.append(_mixture_html(getattr(result, "mixture", None)))

    parts.append("<h2>Overlays and assignments</h2>")
    for i, c in enumerate(show[:6] if not fragment else show[:1]):
        colour = _PALETTE[i % len(_PALETTE)]
        parts.append(f"<h3>#{i + 1} <code>{_e(c.smiles)}</code> (p = {c.probability:.3f})</h3>")
        for nucleus, rows in (("13C", c.c13_table), ("1H", c.h1_table)):
            if rows:
                parts.append(_overlay_for(c, nucleus, colour))
                if not fragment and i < 3:
                    parts.append(_measured_overlay(result, c, colour, nucleus))
                parts.append(f"<details{' open' if i == 0 else ''}><summary>{nucleus} per-signal table</summary>"
                             f"{_signal_table(rows, nucleus)}</details>")

    if not fragment:
        files = inputs.get("files") or {}
        parts.append("<h2>Inputs</h2><table><tr><th>role</th><th>file</th><th>SHA-256</th></tr>"
                     + "".join(f"<tr><td>{_e(k)}</td><td>{_e(f.get('name'))}</td><td><code>{_e(f.get('sha256'))}</code></td></tr>"
                               for k, f in files.items())
                     + "</table>")
        opts = inputs.get("options") or {}
        if opts or inputs.get("user_candidates"):
            parts.append(f"<p class='sub'>options: {_e(opts)}; user candidates: "
                         f"{_e(', '.join(inputs.get('user_candidates') or []) or 'none')}</p>")
        vers = getattr(result, "versions", {}) or {}
        parts.append("<h2>Versions</h2><table>" + "".join(
            f"<tr><th>{_e(k)}</th><td>{_e(val)}</td></tr>" for k, val in vers.items()) + "</table>")
        parts.append("<p class='sub'>Method: predicted spectra from additive increment tables; signals "
                     "assigned by the Hungarian algorithm; probabilities in the manner of DP4 (Smith &amp; "
                     "Goodman, J. Am. Chem. Soc. 2010, 132, 12946) with a Student-t error model and a "
                     "calibration temperature fitted on nmrshiftdb2 development data (Kuhn &amp; Schlörer, "
                     "Magn. Reson. Chem. 2015, 53, 582).</p></main></body></html>")
    else:
        parts.append("</div>")
    return "".join(p for p in parts if p)


def write_report(result: Any, path: str) -> None:
    """Write the self-contained HTML report."""
    from ..errors import SpecmatchError

    text = report_html(result)
    try:
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(text)
    except OSError as exc:
        raise SpecmatchError(f"cannot write the report '{path}': {exc.strerror}") from None
