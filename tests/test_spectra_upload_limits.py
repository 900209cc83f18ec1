"""Size cliffs through the app: an upload above the documented input limits is refused
at once with the limit named (it froze the page for minutes before the limits), and
the session goes on. Streamlit's own harness (AppTest); the files are invented.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

pytest.importorskip("streamlit.testing.v1")
from streamlit.testing.v1 import AppTest  # noqa: E402

from specmatch.spectra.peaklist_io import MAX_PEAKS  # noqa: E402

APP = Path(__file__).resolve().parents[1] / "app.py"
TIMEOUT = 120  # per script run: a hang guard on a loaded machine, not a timing


def _csv(rows: int) -> bytes:
    rng = np.random.default_rng(1)
    body = "\n".join(f"{s:.4f},1,s," for s in rng.uniform(0.5, 9.5, rows))
    return ("shift,integral,multiplicity,j\n" + body + "\n").encode()


@pytest.fixture
def app(tmp_path, monkeypatch) -> AppTest:
    monkeypatch.setenv("SPECMATCH_STORE", f"sqlite:///{tmp_path / 'analyses.sqlite'}")
    at = AppTest.from_file(str(APP), default_timeout=TIMEOUT)
    at.run()
    at.radio(key="view").set_value("Spectra").run()
    assert not at.exception, at.exception
    return at


def test_ten_thousand_row_upload_is_refused_naming_the_limit(app):
    app.file_uploader(key="upload_h1").set_value(("many_1H.csv", _csv(10_000), "text/csv")).run()
    assert not app.exception, app.exception
    errors = [e.value for e in app.error]
    assert any("many_1H.csv" in e and f"at most {MAX_PEAKS:,}" in e for e in errors), errors
    assert "h1" not in app.session_state["files"]  # nothing half-read was kept
    # the page still works: a peak list within the limit is taken
    app.file_uploader(key="upload_h1").set_value(("ok_1H.csv", _csv(50), "text/csv")).run()
    assert not app.exception, app.exception
    assert app.session_state["files"]["h1"]["name"] == "ok_1H.csv"
