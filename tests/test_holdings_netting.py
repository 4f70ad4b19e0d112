"""The holdings rows against the rule they stand for, worked out here apart from the SQL: drop
exact duplicate order lines, drop zero quantities and orders without a customer, then sum each
customer's quantity of each SKU per day (``bought``: any line of the day a purchase).

Two ways give those rows: sql/holdings.sql, derived inside a question (two groupings that the
question's filters reach into), and every row at once for the holdings file and PostgreSQL's
session tables (sql/holdings_rows.sql, one grouping, then holdings_exact.sql: the days of more
than one line summed again). Histories are drawn to make those days common: the same SKU twice in an order, in two
orders of a day, exact duplicates, returns, and null SKUs and order times (values of their own
in a grouping). Invented rows; run on DuckDB and on PostgreSQL."""

from __future__ import annotations

from datetime import datetime, timedelta
from pathlib import Path

import duckdb
import polars as pl
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reachlist.holdings import build
from reachlist.query import Query
from reachlist.schema import Mapping
from reachlist.transfer import copy_warehouse
from reachlist.warehouse import Warehouse
from tests.handmade import DDL

ROWS = Query("SELECT customer_id, sku, order_day, quantity, bought FROM holdings")
WAYS = ("derived", "kept")  # in each query; kept in the file (DuckDB) or session (PostgreSQL)
KEY = ["customer_id", "sku", "order_day"]
START = datetime(2025, 3, 1, 9, 30)

ORDERS = {"order_id": pl.Int64, "customer_id": pl.Int64, "ordered_at": pl.Datetime("us")}
LINES = {"order_id": pl.Int64, "sku": pl.String, "quantity": pl.Int64, "net_amount": pl.Float64}


def expected(orders: pl.DataFrame, lines: pl.DataFrame) -> pl.DataFrame:
    """The rule, in polars: each exact line once, then sums per customer, SKU and day."""
    joined = (
        lines.unique()
        .filter(pl.col("quantity") != 0)
        .join(orders, on="order_id", how="inner")
        .filter(pl.col("customer_id").is_not_null())
        .with_columns(pl.col("ordered_at").dt.date().alias("order_day"))
    )
    return _sorted(
        joined.group_by(KEY).agg(
            pl.col("quantity").sum(),
            (pl.col("quantity") > 0).any().cast(pl.Int64).alias("bought"),
        )
    )


def _sorted(frame: pl.DataFrame) -> pl.DataFrame:
    return frame.select(
        pl.col("customer_id").cast(pl.Int64),
        pl.col("sku").cast(pl.String),
        pl.col("order_day").cast(pl.Date),
        pl.col("quantity").cast(pl.Int64),
        pl.col("bought").cast(pl.Int64),
    ).sort(KEY, nulls_last=True)


def write_history(path: Path, orders: pl.DataFrame, lines: pl.DataFrame) -> Path:
    con = duckdb.connect(str(path))
    for table, ddl in DDL.items():
        con.execute(f"CREATE TABLE {table} ({ddl})")
    con.register("o", orders.to_arrow())
    con.register("l", lines.to_arrow())
    con.execute("INSERT INTO orders SELECT order_id, customer_id, ordered_at, 'web' FROM o")
    con.execute("INSERT INTO order_lines SELECT order_id, sku, quantity, net_amount FROM l")
    con.close()
    return path


def holdings(target: str, way: str, mapping: Mapping | None = None) -> pl.DataFrame:
    with Warehouse.open(target, mapping) as wh:
        assert wh.holdings_table is None  # no file yet: the query's own rows
        if way == "kept":
            if wh.is_duckdb:
                build(wh)
            else:
                assert wh.keep_session_holdings()
            assert wh.holdings_table is not None
        return _sorted(wh.fetch(ROWS))


# one history with every case at least once
HANDMADE_ORDERS = pl.DataFrame(
    [
        (1, 10, START),  # customer 10, day 0
        (2, 10, START + timedelta(hours=5)),  # customer 10, day 0 again: a second order
        (3, 10, START + timedelta(days=1)),
        (4, 20, START),
        (5, None, START),  # no customer: ignored
        (6, 20, None),  # no time: a day of its own (null)
        (7, 20, None),
        (8, 30, START + timedelta(days=2)),
    ],
    schema=ORDERS,
    orient="row",
)
HANDMADE_LINES = pl.DataFrame(
    [
        (1, "A", 1, 2.5),
        (1, "A", 1, 2.5),  # exact duplicate: once
        (1, "A", 2, 5.0),  # the same SKU again in the order, another line: counts
        (2, "A", 1, 2.5),  # the same line in a second order of the day: counts
        (1, "B", 1, 1.0),
        (3, "A", -1, -2.5),  # a return on the next day
        (3, "B", 0, 0.0),  # zero quantity: nothing
        (4, "A", 3, 7.5),
        (4, "A", -3, -7.5),  # bought and returned in the order: net 0, bought 1
        (4, None, 2, 1.0),  # no SKU: a SKU of its own (null)
        (4, None, 2, 1.0),  # ... duplicated
        (4, None, 1, 1.0),
        (5, "A", 4, 10.0),  # order without a customer
        (6, "C", 1, 1.0),  # no order time, two orders: one null day
        (7, "C", 1, 1.0),
        (7, "C", 1, 1.0),
        (8, "D", -2, -4.0),  # only a return
        (99, "A", 1, 1.0),  # a line of no order
    ],
    schema=LINES,
    orient="row",
)


@pytest.mark.parametrize("way", WAYS)
def test_the_handmade_history_nets_as_the_rule_says(tmp_path: Path, way: str) -> None:
    path = write_history(tmp_path / "w.duckdb", HANDMADE_ORDERS, HANDMADE_LINES)
    got = holdings(str(path), way)
    assert got.equals(expected(HANDMADE_ORDERS, HANDMADE_LINES))
    # the cases are there: customer 10's SKU A on day 0 is 1 + 2 + 1 (the duplicate once)
    a = got.filter((pl.col("customer_id") == 10) & (pl.col("sku") == "A"))
    assert a["quantity"].to_list() == [4, -1]
    assert got.filter(pl.col("sku").is_null())["quantity"].to_list() == [3]
    assert got.filter(pl.col("order_day").is_null())["quantity"].to_list() == [2]


def test_the_handmade_history_nets_the_same_on_postgresql(
    tmp_path: Path, pg_url: str, pg_schema: str
) -> None:
    path = write_history(tmp_path / "w.duckdb", HANDMADE_ORDERS, HANDMADE_LINES)
    copy_warehouse(str(path), pg_url, schema=pg_schema)
    mapping = Mapping.from_dict({"schema": pg_schema})
    for way in WAYS:
        got = holdings(pg_url, way, mapping)
        assert got.equals(expected(HANDMADE_ORDERS, HANDMADE_LINES))


@st.composite
def histories(draw: st.DrawFn) -> tuple[pl.DataFrame, pl.DataFrame]:
    """A few customers ordering on a few days, a few SKUs per order, with repeats and nulls."""
    n_orders = draw(st.integers(1, 12))
    orders = []
    for order_id in range(1, n_orders + 1):
        customer = draw(st.one_of(st.none(), st.integers(1, 4))) if order_id % 5 == 0 else None
        customer = customer if customer is not None else draw(st.integers(1, 4))
        day = draw(st.one_of(st.integers(0, 3), st.none()))
        at = None if day is None else START + timedelta(days=day, hours=draw(st.integers(0, 9)))
        orders.append((order_id, customer if order_id % 7 else None, at))
    lines = []
    for _ in range(draw(st.integers(0, 30))):
        line = (
            draw(st.integers(1, n_orders + 1)),  # n_orders + 1: a line of no order
            draw(st.sampled_from(["A", "B", "C", None])),
            draw(st.sampled_from([-2, -1, 0, 1, 1, 2, 3])),
            float(draw(st.sampled_from([1, 2]))),
        )
        lines.extend([line] * draw(st.sampled_from([1, 1, 2, 3])))  # exact duplicates
    return (
        pl.DataFrame(orders, schema=ORDERS, orient="row"),
        pl.DataFrame(lines, schema=LINES, orient="row"),
    )


@settings(
    max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(histories())
def test_drawn_histories_net_as_the_rule_says(
    tmp_path: Path, history: tuple[pl.DataFrame, pl.DataFrame]
) -> None:
    orders, lines = history
    path = tmp_path / "drawn.duckdb"
    path.unlink(missing_ok=True)
    path.with_name("drawn.holdings.duckdb").unlink(missing_ok=True)
    write_history(path, orders, lines)
    want = expected(orders, lines)
    for way in WAYS:
        assert holdings(str(path), way).equals(want)


@pytest.mark.parametrize("days", [1, 3])
def test_a_customer_buying_a_sku_in_many_orders_of_a_day_is_summed_once_per_line(
    tmp_path: Path, days: int
) -> None:
    orders = pl.DataFrame(
        [(i, 1, START + timedelta(days=i % days, minutes=i)) for i in range(1, 41)],
        schema=ORDERS,
        orient="row",
    )
    lines = pl.DataFrame(
        [(i, "A", 1, 1.0) for i in range(1, 41)] * 2, schema=LINES, orient="row"
    )  # every line twice
    path = write_history(tmp_path / "w.duckdb", orders, lines)
    for way in WAYS:
        got = holdings(str(path), way)
        assert got["quantity"].sum() == 40 and got.height == days
        assert got.equals(expected(orders, lines))
