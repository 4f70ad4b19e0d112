from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest

PG_URL = os.environ.get("REACHLIST_TEST_PG", "postgresql+psycopg://postgres@127.0.0.1:5432/test")


def _pg_reachable() -> str | None:
    try:
        import psycopg
    except ImportError:
        return "psycopg is not installed (pip install -e '.[test]')"
    try:
        dsn = PG_URL.replace("postgresql+psycopg://", "postgresql://")
        with psycopg.connect(dsn, connect_timeout=3) as conn:
            conn.execute("SELECT 1")
    except Exception as exc:  # any failure means: no server to test against here
        return f"PostgreSQL not reachable at {PG_URL}: {str(exc).splitlines()[0]}"
    return None


@pytest.fixture(scope="session")
def pg_url() -> str:
    reason = _pg_reachable()
    if reason:
        pytest.skip(reason)
    return PG_URL


@pytest.fixture
def pg_schema(pg_url: str) -> Iterator[str]:
    """A fresh schema in the test database, dropped afterwards."""
    import sqlalchemy as sa

    name = f"rl_test_{uuid.uuid4().hex[:10]}"
    engine = sa.create_engine(pg_url)
    yield name
    with engine.begin() as conn:
        conn.execute(sa.text(f'DROP SCHEMA IF EXISTS "{name}" CASCADE'))
    engine.dispose()


@pytest.fixture(scope="session")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The default sample warehouse (20,000 customers, seed 7), built once per test session.
    Open it read-only; a test that writes (a campaign log, changed orders) uses ``sample``."""
    from reachlist.sample import build_sample

    path = tmp_path_factory.mktemp("sample") / "garden.duckdb"
    build_sample(path)
    return path


@pytest.fixture
def sample(pristine: Path, tmp_path: Path) -> Path:
    """A private, writable copy of the default sample warehouse."""
    path = tmp_path / "garden.duckdb"
    shutil.copy(pristine, path)
    return path
