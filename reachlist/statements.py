"""Statements over the warehouse's own names: the tables reachlist creates, writes and inspects.

Reads over the logical contract are templates in ``sql/``. What is left are statements whose
table and column names come from the mapping, from a data frame or from the engine's catalogue:
creating and writing the campaign log, copying tables, the catalogue look-ups, attaching the
holdings file. They are built here and nowhere else; ``reachlist.warehouse`` runs them.
Identifiers go through :func:`~reachlist.query.quote_ident`, values are bound or, where an engine
takes no parameter there (ATTACH, SET), written with :func:`literal`.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import polars as pl

from reachlist.query import (
    Query,
    column_sql,
    literal,
    quote_ident,
    quote_qualified,
    template_parts,
    template_text,
)
from reachlist.schema import CONTRACT, Mapping, TableMap

# -- the campaign log ------------------------------------------------------------------------
LOG_TYPES = {
    "text": "VARCHAR",
    "timestamp": "TIMESTAMP",
    "number": "DOUBLE PRECISION",
    "integer": "BIGINT",
    "date": "DATE",
    "boolean": "BOOLEAN",
}
"""How each kind of log column is created (customer ids: see create_log_table)."""
LOG_KEYS: dict[str, tuple[str, ...]] = {
    "campaigns": ("campaign_id",),
    "campaign_contacts": ("campaign_id", "customer_id"),
}
"""The unique key of each log table: one record per campaign, one row per customer in it."""


def create_log_table(mapping: Mapping, table: str, *, text_ids: bool = False) -> str:
    """CREATE TABLE for one log table, under the names the mapping gives it. Customer ids are
    BIGINT, or VARCHAR when the warehouse keeps them as text."""
    tmap = mapping.table(table)
    types = {**LOG_TYPES, "id": "VARCHAR" if text_ids else "BIGINT"}
    cols = [
        f"{quote_ident(tmap.column(c.name))} {types[c.kind]}" + ("" if c.nullable else " NOT NULL")
        for c in CONTRACT[table].columns
    ]
    key = ", ".join(quote_ident(tmap.column(c)) for c in LOG_KEYS[table])
    body = ",\n    ".join([*cols, f"PRIMARY KEY ({key})"])
    return f"CREATE TABLE IF NOT EXISTS {quote_qualified(tmap.physical)} (\n    {body}\n)"


def delete_campaign(mapping: Mapping, table: str, campaign_id: str) -> Query:
    """Remove one campaign's rows from a log table (before it is logged again, replaced)."""
    tmap = mapping.table(table)
    return Query(
        f"DELETE FROM {quote_qualified(tmap.physical)} "
        f"WHERE {quote_ident(tmap.column('campaign_id'))} = :campaign_id",
        {"campaign_id": campaign_id},
        label=f"replace {table}",
    )


def set_campaign_value(
    mapping: Mapping, table: str, column: str, value: Any, campaign_id: str
) -> Query:
    """Set one column of one campaign's rows in a log table (the send date)."""
    tmap = mapping.table(table)
    return Query(
        f"UPDATE {quote_qualified(tmap.physical)} "
        f"SET {quote_ident(tmap.column(column))} = :value "
        f"WHERE {quote_ident(tmap.column('campaign_id'))} = :campaign_id",
        {"value": value, "campaign_id": campaign_id},
        label=f"{column} in {table}",
    )


# -- the engine's catalogue ------------------------------------------------------------------
def _where_table(parts: Sequence[str]) -> tuple[str, dict[str, Any]]:
    if len(parts) == 1:
        return "table_name = :t AND table_schema = current_schema()", {"t": parts[0]}
    return "table_name = :t AND table_schema = :s", {"t": parts[-1], "s": parts[-2]}


def table_columns(parts: Sequence[str]) -> Query:
    """The columns and types of one physical table, from information_schema."""
    where, params = _where_table(parts)
    return Query(
        "SELECT column_name, data_type FROM information_schema.columns "
        f"WHERE {where} ORDER BY ordinal_position",
        params,
        label="information_schema",
    )


def table_keys(parts: Sequence[str]) -> Query:
    """How many primary or unique keys one physical table has."""
    where, params = _where_table(parts)
    return Query(
        "SELECT count(*) AS n FROM information_schema.table_constraints\n"
        f"WHERE {where}\n  AND constraint_type IN ('PRIMARY KEY', 'UNIQUE')",
        params,
        label="log table keys",
    )


def describe_table(parts: Sequence[str]) -> str:
    """The columns and types of one table from Spark's catalogue (it has no information_schema)."""
    return f"DESCRIBE TABLE {quote_qualified(parts)}"


def column_probe(tmap: TableMap, column: str) -> str:
    """Select a mapped column's expression from its table without reading a row: does it run?"""
    return (
        f"SELECT {column_sql(tmap, column)} AS probe FROM {quote_qualified(tmap.physical)} LIMIT 0"
    )


# -- copying tables --------------------------------------------------------------------------
_FRAME_TYPES: dict[Any, str] = {
    pl.Int8: "SMALLINT",
    pl.Int16: "SMALLINT",
    pl.Int32: "INTEGER",
    pl.Int64: "BIGINT",
    pl.UInt8: "SMALLINT",
    pl.UInt16: "INTEGER",
    pl.UInt32: "BIGINT",
    pl.UInt64: "BIGINT",
    pl.Float32: "REAL",
    pl.Float64: "DOUBLE PRECISION",
    pl.Boolean: "BOOLEAN",
    pl.Date: "DATE",
    pl.String: "VARCHAR",
}


def frame_sql_type(dtype: pl.DataType) -> str:
    """The SQL type a column of a data frame is created with in another warehouse."""
    if isinstance(dtype, pl.Decimal):
        return f"NUMERIC({dtype.precision or 18}, {dtype.scale or 0})"
    if isinstance(dtype, pl.Datetime):
        return "TIMESTAMP"
    for k, v in _FRAME_TYPES.items():
        if dtype == k:
            return v
    return "VARCHAR"


def create_table(physical: Sequence[str], frame: pl.DataFrame) -> str:
    cols = ",\n    ".join(f"{quote_ident(c)} {frame_sql_type(t)}" for c, t in frame.schema.items())
    return f"CREATE TABLE {quote_qualified(physical)} (\n    {cols}\n)"


def drop_table(physical: Sequence[str]) -> str:
    return f"DROP TABLE IF EXISTS {quote_qualified(physical)}"


def create_schema(schema: str) -> str:
    return f"CREATE SCHEMA IF NOT EXISTS {quote_ident(schema)}"


def contract_rows(table: str) -> Query:
    """Every row of a logical table, its contract columns in order (for copying)."""
    return Query(f"SELECT {', '.join(CONTRACT[table].column_names)} FROM {table}", label=table)


def append_from(physical: Sequence[str], columns: Sequence[str], names: Sequence[str]) -> str:
    """Append the registered relation ``_reachlist_frame`` (columns ``names``) into ``columns``."""
    cols = ", ".join(quote_ident(c) for c in columns)
    src = ", ".join(quote_ident(c) for c in names)
    return f"INSERT INTO {quote_qualified(physical)} ({cols}) SELECT {src} FROM _reachlist_frame"


def append_values(physical: Sequence[str], columns: Sequence[str], names: Sequence[str]) -> str:
    """Append one row of bound values ``:name`` per ``names`` into ``columns``."""
    cols = ", ".join(quote_ident(c) for c in columns)
    marks = ", ".join(f":{c}" for c in names)
    return f"INSERT INTO {quote_qualified(physical)} ({cols}) VALUES ({marks})"


def copy_in(physical: Sequence[str], columns: Sequence[str]) -> str:
    """PostgreSQL's bulk load of rows into ``columns``."""
    cols = ", ".join(quote_ident(c) for c in columns)
    return f"COPY {quote_qualified(physical)} ({cols}) FROM STDIN"


def insert_select(table: str, select_sql: str) -> str:
    """Append the rows of ``select_sql`` (reachlist's own, over the Arrow relation ``src``)."""
    return f"INSERT INTO {quote_ident(table)} {select_sql}"


def create_as(table: str, select_sql: str) -> str:
    return f"CREATE TABLE {quote_ident(table)} AS {select_sql}"


def create_temp_as(table: str, select_sql: str) -> str:
    """A connection's own table holding a query's rows (gone when the connection closes)."""
    return f"CREATE OR REPLACE TEMP TABLE {quote_ident(table)} AS {select_sql}"


def drop_temp(table: str) -> str:
    return f"DROP TABLE IF EXISTS {quote_ident(table)}"


def analyze(physical: Sequence[str]) -> str:
    """Fresh statistics for the planner (PostgreSQL) of a table reachlist made."""
    return f"ANALYZE {quote_qualified(physical)}"


def create_session_table(schema: str, table: str, select_sql: str) -> list[str]:
    """A server connection's own table (``schema`` is where the engine keeps temporary tables,
    e.g. PostgreSQL's ``pg_temp``) holding a query's rows, with statistics for the planner; gone
    when the connection closes."""
    name = f"{quote_ident(schema)}.{quote_ident(table)}"
    return [
        f"DROP TABLE IF EXISTS {name}",
        f"CREATE TEMPORARY TABLE {quote_ident(table)} AS {select_sql}",
        f"ANALYZE {name}",
    ]


# -- DuckDB session and attached files -------------------------------------------------------
def set_option(name: str, value: str) -> str:
    """SET one of reachlist's DuckDB settings (``name`` is reachlist's own, never user text)."""
    return f"SET {name} = {literal(value)}"


def attach_read_only(path: str, alias: str) -> str:
    return f"ATTACH {literal(path)} AS {quote_ident(alias)} (READ_ONLY)"


# PostgreSQL compiles a query to machine code when its estimated cost passes jit_above_cost;
# reachlist's analytic queries carry many CASE expressions (one per cutoff) and misestimated
# joins, so compiling took 1.9 s of the take-up history's 3.3 s on the 20k sample (PostgreSQL 15,
# EXPLAIN ANALYZE) and gained nothing back. Off for reachlist's own connection unless the URL
# sets jit itself (options=-c jit=on keeps it).
PG_NO_JIT = "SET jit = off"


def attach_writable(path: str, alias: str) -> str:
    return f"ATTACH {literal(path)} AS {quote_ident(alias)} (READ_WRITE)"


def create_in(alias: str, table: str, select_sql: str, order_by: str = "") -> str:
    """A table of the database attached as ``alias`` holding a query's rows (``order_by``: the
    columns to store them sorted by, reachlist's own)."""
    tail = f" ORDER BY {order_by}" if order_by else ""
    return (
        f"CREATE TABLE {quote_ident(alias)}.main.{quote_ident(table)} AS "
        f"SELECT * FROM ({select_sql}) AS src{tail}"
    )


HOLDING_DAYS = "holding_days"  # the holdings as first written (sql/holdings_rows.sql)
HOLDING_EXACT = "holding_exact"  # its days of several lines, summed again (holdings_exact.sql)


def _day_sums(lines: str) -> str:
    return template_parts("holdings_rows")["day_sums"].format(lines=lines)


def holdings_rows_query() -> Query:
    """The first step of writing the holdings whole: sql/holdings_rows.sql over the order lines."""
    return Query(_day_sums("order_lines"), label="holdings_rows")


def holdings_exact_query(days: Sequence[str]) -> Query:
    """The second step of writing the holdings: sql/holdings_exact.sql over the rows the first
    step wrote into ``days`` (a table of reachlist's own: its schema and name)."""
    text = template_text("holdings_exact").format(
        days=quote_qualified(days), day_sums=_day_sums("distinct_lines")
    )
    return Query(text, label="holdings: the days of several lines")


def holdings_finish(days: Sequence[str], exact: Sequence[str], final: str) -> list[str]:
    """Replace the rows of ``days`` that hold more than one line with those of ``exact``, drop
    ``exact`` and give ``days`` its name ``final``: the holdings table is then whole."""
    d, e = quote_qualified(days), quote_qualified(exact)
    return [
        f"DELETE FROM {d} WHERE lines > 1",
        f"INSERT INTO {d} SELECT customer_id, sku, order_day, quantity, bought, lines FROM {e}",
        f"DROP TABLE {e}",
        f"ALTER TABLE {d} RENAME TO {quote_ident(final)}",
    ]


def detach(alias: str) -> str:
    return f"DETACH DATABASE IF EXISTS {quote_ident(alias)}"


# -- the holdings file -----------------------------------------------------------------------
MARK_TABLE = "history_mark"
CREATE_MARK = (
    f"CREATE TABLE {MARK_TABLE} (order_lines BIGINT, quantity_sum DOUBLE, orders BIGINT, "
    "last_order VARCHAR, source VARCHAR, catalogue VARCHAR, format INTEGER)"
)
INSERT_MARK = (
    f"INSERT INTO {MARK_TABLE} VALUES (:order_lines, :quantity_sum, :orders, :last_order, "
    ":source, :catalogue, :format)"
)
HOLDINGS_ORDER = "order_day"  # the holdings are stored by day: window queries skip row groups
ALL_FROM_SRC = "SELECT * FROM src"
WINDOW_TABLE = "default_window"  # the default arguments the kept pairs and breadth answer for
WINDOW_PAIRS = "default_window_pairs"  # customer x SKU pairs held in the default mining window
WINDOW_ITEMS = "default_window_items"  # each SKU of products and its code in WINDOW_PAIRS
WINDOW_TIDS = "default_window_tids"  # WINDOW_PAIRS by code, customers as their place in it
WINDOW_BREADTH = "default_breadth"  # each customer's breadth at the default estimate's cutoffs
CATEGORIES = "products"  # each SKU's category, copied in while the defaults are worked out
CREATE_WINDOW = (
    f"CREATE TABLE {WINDOW_TABLE} (since DATE, until DATE, horizon INTEGER, breadth_days INTEGER, "
    "last_cutoff INTEGER)"
)
INSERT_WINDOW = (
    f"INSERT INTO {WINDOW_TABLE} VALUES (:since, :until, :horizon, :breadth_days, :last_cutoff)"
)


def row_count(table: str) -> str:
    return f"SELECT count(*) AS n FROM {quote_ident(table)}"


def attached_mark(alias: str) -> Query:
    """The watermark stored in an attached holdings file."""
    return Query(f"SELECT * FROM {quote_ident(alias)}.main.{MARK_TABLE}", label="holdings mark")


def attached_window(alias: str) -> Query:
    """The default mining window whose held pairs an attached holdings file keeps."""
    return Query(f"SELECT * FROM {quote_ident(alias)}.main.{WINDOW_TABLE}", label="kept window")
