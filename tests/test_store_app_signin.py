"""The app's signed-in path: with sign-in configured (Streamlit's OpenID Connect login,
an ``[auth]`` section in the secrets), the analyst is named by the sign-in and sees
their own analyses and their groups', nobody else's; signed out, nothing is listed
or saved.

Streamlit's own harness (``streamlit.testing.v1.AppTest``) stands in for the browser
and the identity provider: ``AppTest.user`` is what the app reads as ``st.user``
(the claims a provider would send: ``email``, ``name``, ``sub``, ``groups``).
The people, groups and analyses here are invented.
"""

from __future__ import annotations

from pathlib import Path

import pytest

pytest.importorskip("streamlit.testing.v1")
from streamlit.testing.v1 import AppTest  # noqa: E402
from test_store_support import result_dict  # noqa: E402

from specmatch.store import open_store  # noqa: E402

APP = Path(__file__).resolve().parents[1] / "app.py"
TIMEOUT = 120  # per script run; generous for a loaded 2-core machine

#: what an identity provider is configured with (never contacted: nobody clicks "Sign in")
AUTH = {"redirect_uri": "http://localhost:8501/oauth2callback", "cookie_secret": "invented-secret",
        "client_id": "specmatch-test", "client_secret": "invented",
        "server_metadata_url": "https://id.invalid/.well-known/openid-configuration"}

ANA = {"is_logged_in": True, "email": "ana@lab.example", "name": "Ana", "sub": "u-ana",
       "groups": ["synthesis"]}


@pytest.fixture
def store_url(tmp_path, monkeypatch) -> str:
    url = f"sqlite:///{tmp_path / 'analyses.sqlite'}"
    monkeypatch.setenv("SPECMATCH_STORE", url)  # the app's store: a throw-away one
    return url


@pytest.fixture
def three_analysts(store_url) -> dict[str, str]:
    """Analyses of three analysts: Ana's own, Ben's shared with synthesis, Cem's private."""
    with open_store(store_url) as st:
        return {
            "ana": st.save(result_dict(), {}, sample_id="ANA-1", user="ana@lab.example",
                           groups=["synthesis"]),
            "ben": st.save(result_dict(top="CC(Br)C(C)C"), {}, sample_id="BEN-1",
                           user="ben@lab.example", groups=["synthesis", "qa"]),
            "cem": st.save(result_dict(), {}, sample_id="CEM-1", user="cem@lab.example"),
        }


def _app(user: dict | None, *, auth: bool = True) -> AppTest:
    at = AppTest.from_file(str(APP), default_timeout=TIMEOUT)
    if auth:
        at.secrets["auth"] = AUTH
    if user is not None:
        at.user = user
    at.run()
    assert not at.exception, at.exception
    return at


def _go(at: AppTest, view: str) -> AppTest:
    at.radio(key="view").set_value(view).run()
    assert not at.exception, at.exception
    return at


def _listed(at: AppTest) -> list[dict]:
    tables = [e.value for e in at.dataframe if "sample" in e.value.columns]
    return tables[0].to_dict("records") if tables else []


def test_signed_in_analyst_sees_own_and_group_analyses_only(three_analysts):
    at = _go(_app(ANA), "Saved analyses")
    rows = _listed(at)
    assert {r["sample"] for r in rows} == {"ANA-1", "BEN-1"}  # not Cem's private one
    assert {r["by"] for r in rows} == {"ana@lab.example", "ben@lab.example"}
    # what can be compared is only what may be seen
    offered = {o.split(" · ")[0] for o in at.multiselect(key="compare_pick").options}
    assert offered == {three_analysts["ana"][:12], three_analysts["ben"][:12]}
    # searching for the hidden sample finds nothing, not even that it exists
    at.text_input(key="q_sample").set_value("CEM-1").run()
    assert not _listed(at)
    assert any("No saved analyses match." in c.value for c in at.caption)


def test_group_claim_as_one_string_and_a_name_without_email(three_analysts):
    # providers differ: a single group as a string; no e-mail claim, so the name is used
    dee = {"is_logged_in": True, "name": "dee", "sub": "u-dee", "groups": "qa"}
    rows = _listed(_go(_app(dee), "Saved analyses"))
    assert {r["sample"] for r in rows} == {"BEN-1"}  # shared with qa


def test_signed_out_with_sign_in_configured_lists_and_saves_nothing(three_analysts):
    at = _go(_app({"is_logged_in": False}), "Saved analyses")
    assert not _listed(at)
    assert any("Sign in to save analyses" in i.value for i in at.info)
    assert at.button(key="sign_in_btn").label == "Sign in"


def test_without_sign_in_configured_the_local_user_sees_everything(three_analysts):
    # a local, single-user app (no [auth] secrets): the store's own reader, every analysis
    rows = _listed(_go(_app(None, auth=False), "Saved analyses"))
    assert {r["sample"] for r in rows} == {"ANA-1", "BEN-1", "CEM-1"}


def test_save_names_the_analyst_by_the_sign_in_and_shares_with_their_groups(store_url):
    at = _app(ANA)
    at.radio(key="demo_choice").set_value("b").run()
    at.button(key="load_demo").click().run()
    assert not at.exception, at.exception
    _go(at, "Export")
    # no free-text name to type: the sign-in names the analyst
    assert not [t for t in at.text_input if t.key == "save_user"]
    assert any(c.value == "saved as ana@lab.example" for c in at.caption)
    at.button(key="save_btn").click().run()
    assert not at.exception, at.exception
    assert any(s.value.startswith("Saved as") for s in at.success)
    with open_store(store_url) as st:
        (rec,) = st.search()
        assert rec.user == "ana@lab.example" and rec.groups == ("synthesis",)
    # and a colleague outside the group does not see it
    cem = {"is_logged_in": True, "email": "cem@lab.example", "groups": ["qa"]}
    assert not _listed(_go(_app(cem), "Saved analyses"))
