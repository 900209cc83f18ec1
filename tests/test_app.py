"""The Streamlit app through Streamlit's own test harness (streamlit.testing.v1.AppTest).

Main flows: the demo loads in one click and shows, in the Results view, a verdict
naming the rearranged product with the product ratio; a JCAMP-DX upload is read and
its lines listed; bad input (unreadable file, wrong nucleus, bad SMILES) gives an
error message in the page, never replaces the last good file, and the rest of the
session keeps its state; each box has an undo.
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

pytest.importorskip("streamlit.testing.v1")
from streamlit.testing.v1 import AppTest  # noqa: E402

from specmatch.demo import demo_case  # noqa: E402
from specmatch.structures import canonical_smiles  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
APP = ROOT / "app.py"
TIMEOUT = 120  # per script run; generous for a loaded 2-core machine


@pytest.fixture
def app(tmp_path, monkeypatch) -> AppTest:
    # saved analyses go to a throw-away store, never the user's own
    monkeypatch.setenv("SPECMATCH_STORE", f"sqlite:///{tmp_path / 'analyses.sqlite'}")
    at = AppTest.from_file(str(APP), default_timeout=TIMEOUT)
    at.run()
    assert not at.exception, at.exception
    return at


def _values(elements) -> list[str]:
    return [str(e.value) for e in elements]


def _go(at: AppTest, view: str) -> AppTest:
    at.radio(key="view").set_value(view).run()
    assert not at.exception, at.exception
    return at


def _answer(at: AppTest) -> str:
    """SMILES of the structure the verdict card names ("" if there is no card)."""
    hits = [c for c in _values(at.caption) if c.startswith("SMILES: ")]
    return hits[0][len("SMILES: "):] if hits else ""


def _headline(at: AppTest) -> str:
    hits = [m for m in _values(at.markdown) if m.startswith("#### ") and ":" in m]
    return hits[0] if hits else ""


def _ratio(at: AppTest) -> tuple[int, int] | None:
    for text in _values(at.markdown):
        m = re.search(r"\*\*(\d{1,3}):(\d{1,3})\*\*", text)
        if m:
            return int(m.group(1)), int(m.group(2))
    return None


def _load_demo(at: AppTest, key: str = "a") -> AppTest:
    at.radio(key="demo_choice").set_value(key).run()
    at.button(key="load_demo").click().run()
    assert not at.exception, at.exception
    return at


def test_first_page_shows_the_cautions_compactly_and_no_reagent_default(app):
    labels = [e.label for e in app.expander]
    assert any(lbl.startswith("Advisory") for lbl in labels), labels
    assert any(lbl.startswith("Safety") and "SDS" in lbl for lbl in labels), labels
    assert not app.error
    assert app.button(key="load_demo")
    _go(app, "Reaction")
    assert app.selectbox(key="reagent_choice").value is None  # no reagent chosen for the user
    assert not [b for b in app.button if b.key == "score"]


@pytest.mark.parametrize("key", ["a", "b"])
def test_demo_lands_on_the_verdict_naming_the_rearranged_product(app, key):
    case = demo_case(key)
    _load_demo(app, key)
    assert not app.error, _values(app.error)
    assert app.radio(key="view").value == "Results"  # the verdict without another click
    assert app.session_state["substrate"] == case.substrate
    # the verdict names the rearranged (tertiary) product
    assert canonical_smiles(_answer(app)) == canonical_smiles(case.rearranged), _headline(app)
    assert _headline(app)
    # scoring already ran: no button asks for it
    assert not [b for b in app.button if b.key == "score"]
    # the product ratio is shown, major first, near the ratio the demo was made with
    ratio = _ratio(app)
    assert ratio is not None, "no product ratio shown"
    truth = round(100 * case.truth[case.rearranged])
    assert abs(ratio[0] - truth) <= 10, ratio
    # statistics stay out of the main view (they sit in expanders)
    tucked = {m for e in app.expander for m in _values(e.markdown) + _values(e.caption)}
    main_text = " ".join(m for m in _values(app.markdown) + _values(app.caption) if m not in tucked)
    for word in ("nats", "chi-square", "inflated", "None", "sigma"):
        assert word not in main_text, word


def test_demo_shows_the_reagent_safety_notes(app):
    _load_demo(app)
    safety = [e.label for e in app.expander if e.label.startswith("Safety")]
    assert safety and "H2SO4" in safety[0], safety
    assert any("corrosive" in m for m in _values(app.markdown))


def test_jcampdx_upload_is_read_and_its_lines_listed(app):
    case = demo_case("a")
    _go(app, "Reaction")
    app.text_input(key="substrate").set_value(case.substrate).run()
    _go(app, "Spectra")
    app.file_uploader(key="upload_c13").set_value(
        (case.c13.name, case.c13.read_bytes(), "chemical/x-jcamp-dx")).run()
    assert not app.exception, app.exception
    assert not [e for e in _values(app.error) if "13C" in e], _values(app.error)
    assert app.session_state["files"]["c13"]["origin"] == "upload"
    assert any(f"in use: {case.c13.name} (upload)" in c for c in _values(app.caption))
    # the line editor lists the picked lines at 0.1 ppm: the major product's C-OH line at
    # 71.4 ppm (sample_spectra/shift_values.csv) and the flagged CDCl3 line at 77.2 ppm
    frames = [e.value for e in app.data_editor]
    editor = next(f for f in frames if "shift (ppm)" in f.columns and "flag" in f.columns)
    assert all(re.fullmatch(r"-?\d+\.\d", s) for s in editor["shift (ppm)"]), list(editor["shift (ppm)"])
    shifts = [float(s) for s in editor["shift (ppm)"]]
    assert any(abs(s - 71.4) < 0.2 for s in shifts), shifts
    solvent = editor[[abs(s - 77.16) < 0.2 for s in shifts]]
    assert len(solvent) and all(solvent["flag"] == "solvent")
    assert app.session_state["substrate"] == case.substrate
    # loading the demo afterwards replaces the upload, and undo brings the upload back
    _load_demo(app, "b")
    assert app.session_state["files"]["c13"]["name"] == demo_case("b").c13.name
    assert app.session_state["files"]["c13"]["origin"] == "demo"
    _go(app, "Spectra")
    app.button(key="undo_c13").click().run()
    assert app.session_state["files"]["c13"]["name"] == case.c13.name


def test_bad_upload_after_the_demo_keeps_the_data_and_the_verdict(app):
    case = demo_case("a")
    _load_demo(app)
    before = _answer(app)
    assert before
    _go(app, "Spectra")
    app.file_uploader(key="upload_c13").set_value(
        ("notes.txt", b"this is not a spectrum\n\x00\x01", "text/plain")).run()
    assert not app.exception, app.exception
    assert app.session_state["files"]["c13"]["name"] == case.c13.name  # the good file stays
    errors = _values(app.error)
    assert any("notes.txt" in e and "Still using" in e for e in errors), errors
    _go(app, "Results")
    errors = _values(app.error)
    assert any("13C upload refused" in e and case.c13.name in e for e in errors), errors  # said where results show
    assert _answer(app) == before  # the verdict did not change
    _go(app, "Export")
    assert any("13C upload refused" in e for e in _values(app.error))


def test_wrong_nucleus_is_reported_in_browser_words(app):
    case = demo_case("a")
    _go(app, "Spectra")
    app.file_uploader(key="upload_c13").set_value(
        (case.h1.name, case.h1.read_bytes(), "chemical/x-jcamp-dx")).run()
    assert not app.exception
    errors = [e for e in _values(app.error) if "1H" in e]
    assert errors, _values(app.error)
    assert "box" in errors[0] and "--" not in errors[0], errors[0]
    assert "c13" not in app.session_state["files"]


def test_removing_a_file_says_the_results_lack_it_and_undo_restores_it(app):
    case = demo_case("a")
    _load_demo(app)
    _go(app, "Spectra")
    app.button(key="remove_dept135").click().run()
    _go(app, "Results")
    assert any("DEPT-135" in w and "without DEPT-135" in w for w in _values(app.warning)), _values(app.warning)
    _go(app, "Spectra")
    app.button(key="undo_dept135").click().run()
    assert app.session_state["files"]["dept135"]["name"] == case.files["dept135"].name
    _go(app, "Results")
    assert not [w for w in _values(app.warning) if "without DEPT-135" in w]


def test_bad_smiles_gives_an_error(app):
    _go(app, "Reaction")
    app.text_input(key="substrate").set_value("C1CC").run()
    assert not app.exception
    assert any("C1CC" in e for e in _values(app.error)), _values(app.error)


def test_saved_analysis_can_be_found_again(app):
    _load_demo(app)
    _go(app, "Export")
    assert app.text_input(key="save_sample").value == demo_case("a").sample_id
    app.text_input(key="save_user").set_value("demo tester").run()
    app.button(key="save_btn").click().run()
    assert not app.exception, app.exception
    assert any(s.startswith("Saved as") for s in _values(app.success)), _values(app.success)
    app.button(key="save_btn").click().run()  # a second save of the same analysis
    _go(app, "Saved analyses")
    app.text_input(key="q_sample").set_value(demo_case("a").sample_id).run()
    listed = [e.value for e in app.dataframe if "sample" in e.value.columns]
    assert listed and set(listed[0]["sample"]) == {demo_case("a").sample_id}
    assert set(listed[0]["by"]) == {"demo tester"}
    assert all(v and v != "None" for v in listed[0]["verdict"])
    ids = app.multiselect(key="compare_pick").options
    assert len(ids) == 2
    app.multiselect(key="compare_pick").set_value(_all_ids(app)).run()
    assert not app.exception, app.exception
    assert any("Same input files." in c for c in _values(app.caption))


def _all_ids(app: AppTest) -> list[str]:
    from specmatch.store import open_store

    return [r.id for r in open_store().search()]


def _app_module():
    import importlib.util
    import sys

    spec = importlib.util.spec_from_file_location("specmatch_app_under_test", APP)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)  # not __main__: the page is not drawn
    return module


def test_line_editor_drops_lines_and_marks_impurities():
    import pandas as pd

    from specmatch.spectra import peaks_from_file

    app_module = _app_module()
    case = demo_case("a")
    pl = peaks_from_file(case.c13, nucleus="13C", solvent="CDCl3")
    kind, rows = app_module._peak_rows(pl)
    frame = pd.DataFrame(rows)
    assert app_module.apply_edits(pl, kind, frame) is pl  # untouched editor: the same object
    shifts = frame["shift (ppm)"].astype(float)
    i_drop = int((shifts - 72.3).abs().idxmin())
    i_imp = int((shifts - 45.1).abs().idxmin())
    frame.loc[i_drop, "use"] = False
    frame.loc[i_imp, "flag"] = "impurity"
    edited = app_module.apply_edits(pl, kind, frame)
    assert len(edited.peaks) == len(pl.peaks) - 1
    assert not any(abs(p.shift - 72.3) < 0.05 for p in edited.peaks)
    marked = [p for p in edited.peaks if abs(p.shift - 45.1) < 0.05]
    assert marked and marked[0].flag.startswith("impurity")
    # flagged lines are not scored: the compound lines lose both
    assert len(edited.compound_peaks()) == len(pl.compound_peaks()) - 2


def test_dept_fills_the_attached_hydrogens_column():
    from specmatch.spectra import peaks_from_file

    app_module = _app_module()
    case = demo_case("a")
    c13 = peaks_from_file(case.c13, nucleus="13C", solvent="CDCl3")
    dept = peaks_from_file(case.files["dept135"], nucleus="13C", solvent="CDCl3", dept135=True)
    _, rows = app_module._peak_rows(c13, app_module._dept_words(c13, dept))
    words = {r["H attached"] for r in rows}
    # 1-ethylcyclohexan-1-ol: C-OH quaternary, ring CH2 (sample_spectra/shift_values.csv)
    assert "0 (C)" in words and "2 (CH2)" in words, words
    assert not any(r["H attached"] == "None" for r in rows)


def test_plots_zoom_to_the_signals_and_keep_every_trace_in_the_legend():
    from specmatch.spectra import peaks_from_file

    app_module = _app_module()
    case = demo_case("a")
    pl = peaks_from_file(case.h1_csv if getattr(case, "h1_csv", None) else case.h1, nucleus="1H", solvent="CDCl3")
    fig = app_module.spectrum_figure(pl, None, full=False)
    lo, hi = sorted(fig.layout.xaxis.range)
    assert hi - lo < 8.0  # zoomed to where the signals are, not 12 to -0.5 ppm
    full = app_module.spectrum_figure(pl, None, full=True)
    assert sorted(full.layout.xaxis.range) == [-0.5, 12.0]
    named = [t.name for t in fig.data if t.showlegend is not False]
    assert any("measured lines" in (n or "") for n in named), named
    # candidate hues are never the set-aside grey
    assert app_module.FLAGGED_COLOUR not in app_module.PALETTE


def test_label_rows_never_overlap():
    app_module = _app_module()
    items = [(1.50, "1.50 m 4H"), (1.49, "1.49 m 2H"), (1.48, "1.48 t 3H"), (0.90, "0.90 t 3H")]
    rows = app_module._label_rows(items, 0.5, 2.0, width_px=600)
    assert rows[0] != rows[1] != rows[2] and rows[0] != rows[2]
    assert rows[3] == 0


def test_csv_peak_lists_and_a_reagent_alias_reach_a_verdict(app):
    case = demo_case("b")
    _go(app, "Reaction")
    app.text_input(key="substrate").set_value(case.substrate).run()
    app.text_input(key="reagent_text").set_value("hydrogen bromide").run()
    assert any("understood as **HBr**" in c for c in _values(app.caption)), _values(app.caption)
    _go(app, "Spectra")
    app.file_uploader(key="upload_c13").set_value((case.c13_csv.name, case.c13_csv.read_bytes(), "text/csv")).run()
    app.file_uploader(key="upload_h1").set_value((case.h1_csv.name, case.h1_csv.read_bytes(), "text/csv")).run()
    _go(app, "Results")
    assert not app.exception, app.exception
    assert not app.error, _values(app.error)
    assert canonical_smiles(_answer(app)) == canonical_smiles(case.rearranged), _headline(app)
    ratio = _ratio(app)
    assert ratio is not None and abs(ratio[0] - 80) <= 10, ratio


def test_alcohol_box_appears_for_a_reagent_that_needs_one(app):
    _go(app, "Reaction")
    assert not [t for t in app.text_input if t.key == "alcohol"]
    app.text_input(key="substrate").set_value("C=CC(C)(C)C").run()
    app.selectbox(key="reagent_choice").set_value("ROH/H+").run()
    assert app.text_input(key="alcohol")
    app.text_input(key="alcohol").set_value("CCO").run()
    assert not app.exception, app.exception
    products = [e.value for e in app.dataframe if "SMILES" in e.value.columns and "prior" in e.value.columns]
    assert products and any("OCC" in s or "CCO" in s for s in products[0]["SMILES"]), products


def test_undo_the_demo_restores_the_users_own_inputs(app):
    _go(app, "Reaction")
    app.text_input(key="substrate").set_value("C=CC(C)(C)C").run()
    _load_demo(app)
    assert app.session_state["substrate"] == demo_case("a").substrate
    app.button(key="undo_demo").click().run()
    assert not app.exception, app.exception
    assert app.session_state["substrate"] == "C=CC(C)(C)C"
    assert app.session_state["files"] == {}
