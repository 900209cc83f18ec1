"""The Streamlit app through Streamlit's own test harness (streamlit.testing.v1.AppTest).

Main flows: the demo loads in one click and reaches a verdict naming the rearranged
product with the product ratio; a JCAMP-DX upload is read and its lines listed; bad
input (unreadable file, wrong nucleus, bad SMILES) gives an error message in the page
and the rest of the session keeps its state.
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
TIMEOUT = 90  # per script run; generous for a loaded 2-core machine


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


def _verdict(at: AppTest) -> str:
    # the verdict box is the first alert after the "Verdict" heading; collect every
    # alert and pick the one that carries a probability
    alerts = _values(at.success) + _values(at.info) + _values(at.warning)
    hits = [a for a in alerts if "p = " in a]
    return hits[0] if hits else ""


def _ratio(at: AppTest) -> tuple[int, int] | None:
    for text in _values(at.markdown):
        m = re.search(r"\*\*(\d{1,3}):(\d{1,3})\*\*", text)
        if m:
            return int(m.group(1)), int(m.group(2))
    return None


def test_first_page_shows_the_caution_and_no_error(app):
    warnings = " ".join(_values(app.warning))
    assert "advisory" in warnings.lower()
    assert not app.error
    assert app.button(key="load_demo")


@pytest.mark.parametrize("key", ["a", "b"])
def test_demo_loads_to_a_verdict_naming_the_rearranged_product(app, key):
    case = demo_case(key)
    app.radio(key="demo_choice").set_value(key).run()
    app.button(key="load_demo").click().run()
    assert not app.exception, app.exception
    assert not app.error, _values(app.error)
    assert app.text_input(key="substrate").value == case.substrate
    verdict = _verdict(app)
    assert verdict, "no verdict shown"
    top = verdict.split("p = ")[0]
    # the verdict names the rearranged (tertiary) product first
    assert canonical_smiles(case.rearranged) in top, verdict
    # the product ratio is shown, major first, near the ratio the demo was made with
    ratio = _ratio(app)
    assert ratio is not None, "no product ratio shown"
    truth = round(100 * case.truth[case.rearranged])
    assert abs(ratio[0] - truth) <= 10, ratio


def test_demo_shows_the_reagent_safety_notes(app):
    app.button(key="load_demo").click().run()
    safety = [e for e in _values(app.warning) if e.startswith("**Safety")]
    assert safety and "H2SO4" in safety[0], _values(app.warning)


def test_jcampdx_upload_is_read_and_its_lines_listed(app):
    case = demo_case("a")
    app.text_input(key="substrate").set_value(case.substrate).run()
    app.file_uploader(key="upload_c13").set_value(
        (case.c13.name, case.c13.read_bytes(), "chemical/x-jcamp-dx")).run()
    assert not app.exception, app.exception
    assert not [e for e in _values(app.error) if "13C" in e], _values(app.error)
    assert app.session_state["files"]["c13"]["origin"] == "upload"
    assert any(f"in use: {case.c13.name} (upload)" in c for c in _values(app.caption))
    # the line editor lists the picked lines: the major product's C-OH line at 71.4 ppm
    # (sample_spectra/shift_values.csv) and the flagged CDCl3 line at 77.16 ppm
    frames = [e.value for e in app.data_editor]
    editor = next(f for f in frames if "shift_ppm" in f.columns and "flag" in f.columns)
    shifts = list(editor["shift_ppm"])
    assert any(abs(s - 71.4) < 0.2 for s in shifts), shifts
    solvent = editor[(editor["shift_ppm"] - 77.16).abs() < 0.2]
    assert len(solvent) and all(solvent["flag"] == "solvent")
    assert app.text_input(key="substrate").value == case.substrate
    # loading the demo afterwards replaces the upload (the file left in the box does not win)
    app.radio(key="demo_choice").set_value("b").run()
    app.button(key="load_demo").click().run()
    app.run()
    assert app.session_state["files"]["c13"]["name"] == demo_case("b").c13.name
    assert app.session_state["files"]["c13"]["origin"] == "demo"


def test_unreadable_file_gives_an_error_and_the_session_survives(app):
    case = demo_case("b")
    app.text_input(key="substrate").set_value(case.substrate).run()
    app.file_uploader(key="upload_c13").set_value(
        ("crude_13C.jdx", b"this is not a spectrum\n\x00\x01", "chemical/x-jcamp-dx")).run()
    assert not app.exception, app.exception
    errors = _values(app.error)
    assert any("crude_13C.jdx" in e or "13C" in e for e in errors), errors
    # the rest of the session is intact and a good file still works afterwards
    assert app.text_input(key="substrate").value == case.substrate
    app.file_uploader(key="upload_c13").set_value(
        (case.c13.name, case.c13.read_bytes(), "chemical/x-jcamp-dx")).run()
    assert not app.exception
    assert not [e for e in _values(app.error) if "crude_13C" in e]
    assert app.session_state["files"]["c13"]["name"] == case.c13.name


def test_wrong_nucleus_is_reported(app):
    case = demo_case("a")
    app.file_uploader(key="upload_c13").set_value(
        (case.h1.name, case.h1.read_bytes(), "chemical/x-jcamp-dx")).run()
    assert not app.exception
    errors = _values(app.error)
    assert any("1H" in e for e in errors), errors


def test_bad_smiles_gives_an_error(app):
    app.text_input(key="substrate").set_value("C1CC").run()
    assert not app.exception
    assert any("C1CC" in e for e in _values(app.error)), _values(app.error)


def test_saved_analysis_can_be_found_again(app):
    app.button(key="load_demo").click().run()
    assert app.text_input(key="save_sample").value == demo_case("a").sample_id
    app.text_input(key="save_user").set_value("demo tester").run()
    app.button(key="save_btn").click().run()
    assert not app.exception, app.exception
    assert any(s.startswith("Saved as") for s in _values(app.success)), _values(app.success)
    app.text_input(key="q_sample").set_value(demo_case("a").sample_id).run()
    listed = [e.value for e in app.dataframe if "sample" in e.value.columns]
    assert listed and list(listed[0]["sample"]) == [demo_case("a").sample_id]
    assert list(listed[0]["by"]) == ["demo tester"]
    # a second save of the same analysis, then both side by side
    app.button(key="save_btn").click().run()
    app.text_input(key="q_sample").set_value("").run()
    ids = app.multiselect(key="compare_pick").options
    assert len(ids) == 2
    app.multiselect(key="compare_pick").set_value(
        [app.session_state["saved_id"], next(i for i in _all_ids(app) if i != app.session_state["saved_id"])]).run()
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
    i_drop = int((frame["shift_ppm"] - 72.3).abs().idxmin())
    i_imp = int((frame["shift_ppm"] - 45.1).abs().idxmin())
    frame.loc[i_drop, "use"] = False
    frame.loc[i_imp, "flag"] = "impurity"
    edited = app_module.apply_edits(pl, kind, frame)
    assert len(edited.peaks) == len(pl.peaks) - 1
    assert not any(abs(p.shift - 72.3) < 0.05 for p in edited.peaks)
    marked = [p for p in edited.peaks if abs(p.shift - 45.1) < 0.05]
    assert marked and marked[0].flag.startswith("impurity")
    # flagged lines are not scored: the compound lines lose both
    assert len(edited.compound_peaks()) == len(pl.compound_peaks()) - 2


def test_csv_peak_lists_and_a_reagent_alias_reach_a_verdict(app):
    case = demo_case("b")
    app.text_input(key="substrate").set_value(case.substrate).run()
    app.text_input(key="reagent_text").set_value("hydrogen bromide").run()
    assert any("understood as **HBr**" in c for c in _values(app.caption)), _values(app.caption)
    app.file_uploader(key="upload_c13").set_value((case.c13_csv.name, case.c13_csv.read_bytes(), "text/csv")).run()
    app.file_uploader(key="upload_h1").set_value((case.h1_csv.name, case.h1_csv.read_bytes(), "text/csv")).run()
    app.button(key="score").click().run()
    assert not app.exception, app.exception
    assert not app.error, _values(app.error)
    verdict = _verdict(app)
    assert canonical_smiles(case.rearranged) in verdict.split("p = ")[0], verdict
    ratio = _ratio(app)
    assert ratio is not None and abs(ratio[0] - 80) <= 10, ratio


def test_alcohol_box_appears_for_a_reagent_that_needs_one(app):
    assert not [t for t in app.text_input if t.key == "alcohol"]
    app.text_input(key="substrate").set_value("C=CC(C)(C)C").run()
    app.selectbox(key="reagent_choice").set_value("ROH/H+").run()
    assert app.text_input(key="alcohol")
    app.text_input(key="alcohol").set_value("CCO").run()
    assert not app.exception, app.exception
    products = [e.value for e in app.dataframe if "SMILES" in e.value.columns and "prior" in e.value.columns]
    assert products and any("OCC" in s or "CCO" in s for s in products[0]["SMILES"]), products
