"""Fixtures shared by the store and batch tests (no tests here).

``store_url`` gives a fresh, empty store URL for each backend: a SQLite file in
the test's temporary directory, and, when ``SPECMATCH_TEST_POSTGRES_URL`` points
at a PostgreSQL server (``.ci/run`` starts one on loopback), a schema of its own
on that server, dropped afterwards. Without the variable the PostgreSQL cases
skip, except under CI (``CI=true``), where a missing server is a failure.
"""

from __future__ import annotations

import os
import uuid

import pytest

PG_ENV = "SPECMATCH_TEST_POSTGRES_URL"


def in_ci() -> bool:
    return os.environ.get("CI", "").strip().lower() in ("1", "true", "yes")


def postgres_base_url() -> str:
    url = os.environ.get(PG_ENV)
    if not url:
        if in_ci():
            pytest.fail(f"CI is set but {PG_ENV} is not: .ci/run must start PostgreSQL "
                        "for the store tests")
        pytest.skip(f"PostgreSQL store tests need {PG_ENV} (e.g. "
                    "postgresql+psycopg://specmatch@127.0.0.1:54329/specmatch_test, as .ci/run sets)")
    return url


class PostgresSchema:
    """A schema of its own on the test server; the URL puts it first on search_path."""

    def __init__(self, base_url: str):
        from sqlalchemy import create_engine
        from sqlalchemy.engine import make_url

        self.name = "specmatch_t_" + uuid.uuid4().hex[:12]
        self.admin = create_engine(base_url)
        try:
            with self.admin.begin() as conn:
                conn.exec_driver_sql(f"CREATE SCHEMA {self.name}")
        except Exception as exc:  # a set URL with no server is a failure, not a skip
            self.admin.dispose()
            pytest.fail(f"cannot reach the PostgreSQL server at {PG_ENV}={base_url}: {exc}")
        self.url = make_url(base_url).update_query_dict(
            {"options": f"-csearch_path={self.name}"}).render_as_string(hide_password=False)

    def drop(self) -> None:
        with self.admin.begin() as conn:
            conn.exec_driver_sql(f"DROP SCHEMA IF EXISTS {self.name} CASCADE")
        self.admin.dispose()


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def store_url(request, tmp_path):
    """A URL of an empty store, on SQLite and on PostgreSQL."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'analyses.sqlite'}"
        return
    schema = PostgresSchema(postgres_base_url())
    try:
        yield schema.url
    finally:
        schema.drop()


@pytest.fixture
def sqlite_url(tmp_path):
    return f"sqlite:///{tmp_path / 'analyses.sqlite'}"


def result_dict(substrate: str = "C=CC(C)C", reagent: str = "HBr", *,
                top: str = "CC(C)(Br)CC", p_top: float = 0.8, word: str = "likely") -> dict:
    """A dict of the shape ``Result.to_dict()`` gives (inputs, versions, candidates, verdict).

    The chemistry in it is invented for the tests; only its shape matters here.
    """
    from specmatch import __version__

    other = "CC(Br)C(C)C" if top != "CC(Br)C(C)C" else "CC(C)(Br)CC"
    return {
        "inputs": {"substrate": substrate, "reagent": reagent, "solvent": "CDCl3",
                   "alcohol": None, "candidates": []},
        "versions": {"specmatch": __version__, "prediction_tables": "13C test-1; 1H test-1",
                     "error_model": "test"},
        "candidates": [
            {"smiles": top, "canonical_smiles": top, "probability": p_top, "label": "rearranged"},
            {"smiles": other, "canonical_smiles": other, "probability": round(1 - p_top, 6),
             "label": "Markovnikov"},
        ],
        "verdict": {"word": word, "text": f"{word}: {top}", "top": top, "p_top": p_top},
        "cautions": ["Identification is advisory."],
    }
