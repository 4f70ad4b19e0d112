"""Copy the contract tables from one warehouse to another (for example the sample into PostgreSQL).

>>> copy_warehouse("sample.duckdb", "postgresql+psycopg://postgres@127.0.0.1/test",
...                schema="garden")                                        # doctest: +SKIP
"""

from __future__ import annotations

import polars as pl

from reachlist.errors import StateError
from reachlist.query import Query, quote_ident, quote_qualified
from reachlist.schema import CONTRACT, SOURCE_TABLES, Mapping
from reachlist.warehouse import Warehouse

_SQL_TYPES = {
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
    pl.Utf8: "VARCHAR",
    pl.Date: "DATE",
}


def sql_type(dtype: pl.DataType) -> str:
    if isinstance(dtype, pl.Decimal):
        return f"NUMERIC({dtype.precision or 18}, {dtype.scale or 0})"
    if isinstance(dtype, pl.Datetime):
        return "TIMESTAMP"
    for k, v in _SQL_TYPES.items():
        if dtype == k:
            return v
    return "VARCHAR"


def create_table_sql(physical: tuple[str, ...], frame: pl.DataFrame) -> str:
    cols = ",\n    ".join(f"{quote_ident(c)} {sql_type(t)}" for c, t in frame.schema.items())
    return f"CREATE TABLE {quote_qualified(physical)} (\n    {cols}\n)"


def copy_warehouse(
    source: str, dest: str, *, schema: str | None = None, replace: bool = False
) -> dict[str, int]:
    """Copy every source table of the contract; returns rows copied per table.

    The destination tables are named as in the contract, inside ``schema`` when given (map them
    with ``schema = "..."`` in a mapping file). Existing tables are only replaced with ``replace``.
    """
    copied: dict[str, int] = {}
    dest_mapping = Mapping.from_dict({"schema": schema} if schema else {})
    with Warehouse.open(source, read_only=True) as src, Warehouse.open(dest, dest_mapping) as dst:
        frames = {
            name: src.fetch(
                Query(f"SELECT {', '.join(CONTRACT[name].column_names)} FROM {name}", label=name)
            )
            for name in SOURCE_TABLES
        }
        existing = [n for n in SOURCE_TABLES if dst.physical_columns(n) is not None]
        if existing and not replace:
            raise StateError(
                f"Destination {dst.display_name} already has {', '.join(existing)}"
                + (f" in schema {schema!r}" if schema else "")
                + "; nothing was copied.",
                hint="pass --replace to drop and reload them, or choose another --schema",
            )
        ddl: list[str] = []
        if schema:
            ddl.append(f"CREATE SCHEMA IF NOT EXISTS {quote_ident(schema)}")
        for name in SOURCE_TABLES:
            physical = dst.mapping.table(name).physical
            ddl.append(f"DROP TABLE IF EXISTS {quote_qualified(physical)}")
            ddl.append(create_table_sql(physical, frames[name]))
        with dst.transaction():
            for stmt in ddl:
                dst.run_statement(stmt)
            for name in SOURCE_TABLES:
                dst.load_frame(name, frames[name])
                copied[name] = frames[name].height
    return copied
