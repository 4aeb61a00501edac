"""Shared fixtures.

``store``: a freshly migrated database, once on SQLite (a file in the test's tmp dir) and once on
PostgreSQL when ``AUDITOR_TEST_PG_URL`` names a server (each test gets a schema of its own,
dropped afterwards). Without the variable the PostgreSQL case skips with a reason; with
``AUDITOR_REQUIRE_PG=1`` (set by CI) it fails instead, so a CI run can never pass by skipping.
"""
from __future__ import annotations

import os
import uuid
from contextlib import contextmanager

import pytest

from auditor.store import open_store

PG_ENV = "AUDITOR_TEST_PG_URL"


@pytest.fixture(autouse=True, scope="session")
def _own_cache_folder(tmp_path_factory):
    """The program's cache (the holidays kept between runs) in a folder of the test session's,
    never the user's; child processes the tests start inherit it."""
    folder = tmp_path_factory.mktemp("cache")
    before = os.environ.get("AUDITOR_CACHE_DIR")
    os.environ["AUDITOR_CACHE_DIR"] = str(folder)
    yield folder
    if before is None:
        os.environ.pop("AUDITOR_CACHE_DIR", None)
    else:
        os.environ["AUDITOR_CACHE_DIR"] = before


def pg_base_url() -> str:
    """The PostgreSQL test URL, or skip (fail under AUDITOR_REQUIRE_PG=1) when there is none."""
    url = os.environ.get(PG_ENV)
    if not url:
        reason = f"{PG_ENV} is not set (eval \"$(bash .ci/postgres.sh)\" starts a server)"
        if os.environ.get("AUDITOR_REQUIRE_PG") == "1":
            pytest.fail(reason + " but AUDITOR_REQUIRE_PG=1 demands the PostgreSQL tests")
        pytest.skip(reason)
    return url


def _pg_schema_url(base: str, schema: str) -> str:
    # search_path through libpq options: every connection (and the child processes the
    # crash tests start from the URL) lands in the test's own schema
    sep = "&" if "?" in base else "?"
    return f"{base}{sep}options=-csearch_path%3D{schema}"


def _pg_admin(base: str, sql: str) -> None:
    from sqlalchemy import create_engine

    engine = create_engine(base, isolation_level="AUTOCOMMIT")
    try:
        with engine.connect() as conn:
            conn.exec_driver_sql(sql)
    finally:
        engine.dispose()


@contextmanager
def database_url(kind: str, tmp_path):
    """An empty database of ``kind`` ("sqlite" or "postgresql"), removed afterwards."""
    if kind == "sqlite":
        yield f"sqlite:///{tmp_path / 'test.sqlite3'}"
        return
    base = pg_base_url()
    schema = f"t_{uuid.uuid4().hex[:12]}"
    _pg_admin(base, f'CREATE SCHEMA "{schema}"')
    try:
        yield _pg_schema_url(base, schema)
    finally:
        _pg_admin(base, f'DROP SCHEMA "{schema}" CASCADE')


DB_KINDS = ["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)]


@pytest.fixture(params=DB_KINDS)
def db_url(request, tmp_path):
    """The URL of an empty (unmigrated) database, on SQLite and on PostgreSQL."""
    with database_url(request.param, tmp_path) as url:
        yield url


@pytest.fixture(params=DB_KINDS)
def store(request, tmp_path):
    """A migrated Store, on SQLite and (marked ``postgres``) on PostgreSQL."""
    with database_url(request.param, tmp_path) as url:
        s = open_store(url)
        try:
            yield s
        finally:
            s.dispose()


# --------------------------------------------------------------------------------------------
# dashboard and report fixtures
# --------------------------------------------------------------------------------------------
DEMO_SCENARIO = "demo fixed 150"


@pytest.fixture(scope="session")
def demo_db(tmp_path_factory):
    """The demo database (invented sites, a year of 15-minute data) built once per session in a
    tmp dir, with one saved scenario ``DEMO_SCENARIO`` (a fixed 150 kvar bank on KQ-MAIN).
    Tests may add scenarios under names of their own but must not delete this one."""
    from auditor.services.correction import SizeRequest, save_scenario, size_meter
    from auditor.services.demo import DEMO_TARIFF, load_demo

    folder = tmp_path_factory.mktemp("demo-db")
    s = open_store(f"sqlite:///{folder / 'demo.sqlite3'}")
    load_demo(s)
    case = size_meter(s, SizeRequest(meter="KQ-MAIN", tariff=DEMO_TARIFF, fixed_kvar=150.0))
    save_scenario(s, DEMO_SCENARIO, case)
    try:
        yield s
    finally:
        s.dispose()


@pytest.fixture
def web_app(demo_db, tmp_path):
    """The dashboard on the demo database, instance folder in the test's tmp dir."""
    from auditor.web import create_app

    return create_app({"INSTANCE_PATH": str(tmp_path / "instance"), "TESTING": True}, store=demo_db)


@pytest.fixture
def client(web_app):
    return web_app.test_client()
