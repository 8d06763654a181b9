"""Shared fixtures: real database files, never mocks.

* ``db_path`` / ``engine``: a fresh SQLite store file in ``tmp_path`` with the current schema
  (like sqlite-utils' ``db_path`` fixture).
* ``pg_engine``: PostgreSQL at ``$HELIAUDIT_TEST_PG_URL`` (default
  ``postgresql+psycopg://postgres@127.0.0.1:5432/test``), isolated in a fresh schema that is
  dropped afterwards. Skips with the reason when no server answers; fails instead when
  ``CI=true``.

Other topics add their fixtures below with small edits.
"""

from __future__ import annotations

import os
import uuid

import pytest
import sqlalchemy as sa

from db.engine import make_engine, resolve_url
from db.migrate import upgrade

PG_URL_ENV = "HELIAUDIT_TEST_PG_URL"
PG_URL_DEFAULT = "postgresql+psycopg://postgres@127.0.0.1:5432/test"


@pytest.fixture
def db_path(tmp_path):
    return tmp_path / "store.sqlite"


@pytest.fixture
def engine(db_path):
    eng = make_engine(db_path)
    yield eng
    eng.dispose()


@pytest.fixture
def pg_engine():
    url = resolve_url(os.environ.get(PG_URL_ENV, PG_URL_DEFAULT))
    schema_name = f"t_{uuid.uuid4().hex[:12]}"
    admin = sa.create_engine(url, connect_args={"connect_timeout": 3})
    try:
        with admin.begin() as conn:
            conn.execute(sa.text(f'CREATE SCHEMA "{schema_name}"'))
    except Exception as exc:  # noqa: BLE001 - any connection failure means "no server"
        admin.dispose()
        reason = f"no PostgreSQL server at {url} ({type(exc).__name__}: {str(exc).splitlines()[0]})"
        if os.environ.get("CI") == "true":
            pytest.fail(reason + f"; CI=true requires it (set {PG_URL_ENV})")
        pytest.skip(reason + f"; set {PG_URL_ENV} to run the postgres tests")
    eng = sa.create_engine(url, connect_args={"options": f"-csearch_path={schema_name}"},
                           pool_pre_ping=True)
    upgrade(eng)
    try:
        yield eng
    finally:
        eng.dispose()
        with admin.begin() as conn:
            conn.execute(sa.text(f'DROP SCHEMA "{schema_name}" CASCADE'))
        admin.dispose()


@pytest.fixture(scope="session")
def dashboard_store(tmp_path_factory):
    """An invented demo site through the real pipeline, for the dashboard tests (#6).

    ``heliaudit demo-data`` scenario with 6 inverters, 36 months of hourly data (enough for
    year-on-year rates after the stabilisation period), then ingest and compute (daily
    table, flags, degradation). Returns ``{"url", "site_id", "path"}``.
    """
    import datetime as dt

    from heliaudit import demo_generator as gen
    from heliaudit.cmd_compute import run_compute
    from ingest.config import load_site_config
    from ingest.load import ingest_paths

    out = tmp_path_factory.mktemp("dashboard_demo")
    sc = gen.quillpond_scenario(n_inverters=6, start=dt.date(2022, 1, 1), months=36,
                                interval_min=60, seed=7, site_id="demo")
    gen.write_site(sc, out / "site")
    cfg = load_site_config(out / "site" / "demo.toml")
    path = out / "store.sqlite"
    eng = make_engine(path)
    ingest_paths(eng, cfg)
    run_compute(eng, cfg.id, full=True, echo=lambda *a, **k: None)
    eng.dispose()
    return {"url": f"sqlite:///{path}", "site_id": cfg.id, "path": path}


@pytest.fixture(scope="session")
def demo_store(tmp_path_factory):
    """The bundled demo site ``sample_scada/quillpond`` (14 inverters, 3.5 years) through
    ingest and compute, for tests that need its injected effects (INV-05's string failure,
    the drifting pyranometer of INV-08..14). Slow: uses ``$HELIAUDIT_DEMO_DB`` when it names
    a store built from the demo, builds one when ``HELIAUDIT_SLOW=1``, else skips."""
    from pathlib import Path

    from db.engine import make_engine

    demo = Path(__file__).resolve().parents[1] / "sample_scada" / "quillpond"
    url = os.environ.get("HELIAUDIT_DEMO_DB")
    if url:
        url = resolve_url(url)
    elif os.environ.get("HELIAUDIT_SLOW") == "1":
        from heliaudit.cmd_compute import run_compute
        from ingest.config import load_site_config
        from ingest.load import ingest_paths

        path = tmp_path_factory.mktemp("demo_store") / "demo.sqlite"
        url = f"sqlite:///{path}"
        cfg = load_site_config(demo / "quillpond.toml")
        eng = make_engine(url)
        ingest_paths(eng, cfg)
        run_compute(eng, cfg.id, full=True, echo=lambda *a, **k: None)
        eng.dispose()
    else:
        pytest.skip("slow (a minute or more): set HELIAUDIT_DEMO_DB to a store built from "
                    "the demo, or HELIAUDIT_SLOW=1 to build one")
    return {"url": url, "site_id": "quillpond"}
