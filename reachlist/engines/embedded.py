"""DuckDB: a warehouse in one local file (the default engine, and the sample's)."""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path
from typing import Any

import duckdb
import polars as pl

from reachlist import statements
from reachlist.engines.base import Engine
from reachlist.errors import InputError, WarehouseError
from reachlist.query import DUCKDB
from reachlist.wording import option

DUCKDB_MEMORY = "1536MB"  # DuckDB's working memory; beyond it, its joins and sorts spill to disk


def duckdb_budget() -> dict[str, str]:
    """The memory DuckDB may use (``REACHLIST_DUCKDB_MEMORY``, default ``DUCKDB_MEMORY``) and
    where it spills beyond that (a private temporary folder, so a read-only warehouse works)."""
    return {
        "memory_limit": os.environ.get("REACHLIST_DUCKDB_MEMORY", DUCKDB_MEMORY),
        "temp_directory": str(Path(tempfile.gettempdir()) / f"reachlist-spill-{os.getuid()}"),
    }


def scratch_fetch(
    sql: str, params: dict[str, Any], tables: dict[str, pl.DataFrame]
) -> pl.DataFrame:
    """Run SQL over in-memory frames (each registered under its name) on a private in-memory
    DuckDB, never a warehouse: vectorised work on data already fetched (the holdout's hash)."""
    conn = duckdb.connect()
    try:
        for name, frame in tables.items():
            conn.register(name, frame)
        out: pl.DataFrame = conn.sql(sql, params=params or None).pl()
        return out
    finally:
        conn.close()


class EmbeddedEngine(Engine):
    dialect = DUCKDB

    def __init__(self, path: str, *, read_only: bool = False, create: bool = False) -> None:
        self.display_name = path
        if path != ":memory:" and not create and not Path(path).exists():
            raise InputError(
                f"Warehouse file {path!r} does not exist (expected a DuckDB file or a URL such as "
                "postgresql+psycopg://host/db).",
                hint=f"create the sample with `reachlist sample {option('out')} PATH`, or check "
                "the path",
            )
        try:
            self.conn = duckdb.connect(path, read_only=read_only)
        except duckdb.Error as exc:
            raise WarehouseError(
                f"Cannot open {path!r} as a DuckDB database: {first_line(exc)}.",
                hint="pass a DuckDB file, or close the program that holds it open",
            ) from None
        budget = duckdb_budget()
        # SET, not connect config: other connections to the same file may exist
        self.conn.execute(statements.set_option("temp_directory", budget["temp_directory"]))
        try:
            self.conn.execute(statements.set_option("memory_limit", budget["memory_limit"]))
        except duckdb.Error as exc:
            self.conn.close()
            raise InputError(
                f"Expected REACHLIST_DUCKDB_MEMORY as a size such as 1536MB or 2GB, found "
                f"{budget['memory_limit']!r} ({first_line(exc)}).",
                hint=f"set it to a size like 2GB, or unset it for the default of {DUCKDB_MEMORY}",
            ) from None

    def fetch(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        frame: pl.DataFrame = self.conn.sql(sql, params=params or None).pl()
        return frame

    def execute(self, sql: str, params: dict[str, Any]) -> None:
        self.conn.execute(sql, params)

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        self.conn.executemany(sql, rows)

    def run(self, statement: str) -> None:
        self.conn.execute(statement)

    def append_frame(
        self, physical: tuple[str, ...], columns: list[str], frame: pl.DataFrame
    ) -> None:
        self.conn.register("_reachlist_frame", frame.to_arrow())
        try:
            self.conn.execute(statements.append_from(physical, columns, frame.columns))
        finally:
            self.conn.unregister("_reachlist_frame")

    def register_frame(self, name: str, frame: pl.DataFrame) -> None:
        self.conn.register(name, frame.to_arrow())

    def unregister_frame(self, name: str) -> None:
        with contextlib.suppress(Exception):
            self.conn.unregister(name)

    def keep_rows(self, name: str, sql: str, params: dict[str, Any]) -> None:
        self.conn.execute(statements.create_temp_as(name, sql), params)

    def forget_rows(self, name: str) -> None:
        with contextlib.suppress(Exception):
            self.conn.execute(statements.drop_temp(name))

    def begin(self) -> None:
        self.conn.execute("BEGIN TRANSACTION")

    def commit(self) -> None:
        self.conn.execute("COMMIT")

    def rollback(self) -> None:
        with contextlib.suppress(Exception):
            self.conn.execute("ROLLBACK")

    def columns(self, parts: tuple[str, ...]) -> list[tuple[str, str]] | None:
        q = statements.table_columns(parts)
        from reachlist.query import raw_sql

        sql, params = raw_sql(q, self.dialect)
        rows = self.conn.execute(sql, params).fetchall()
        return [(str(n), str(t)) for n, t in rows] or None

    def from_arrow(self, statement: str, data: Any) -> None:
        self.conn.register("src", data)
        try:
            self.conn.execute(statement)
        finally:
            self.conn.unregister("src")

    def attach_read_only(self, path: str, alias: str) -> bool:
        self.detach(alias)
        try:
            self.conn.execute(statements.attach_read_only(path, alias))
        except Exception:
            return False
        return True

    def detach(self, alias: str) -> None:
        with contextlib.suppress(Exception):
            self.conn.execute(statements.detach(alias))

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self.conn.close()


def first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0].rstrip(".") if text else type(exc).__name__
