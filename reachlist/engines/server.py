"""A warehouse behind a SQLAlchemy URL (PostgreSQL is tested for real)."""

from __future__ import annotations

import contextlib
import re
from collections.abc import Sequence
from typing import Any

import polars as pl
import sqlalchemy as sa

from reachlist import statements
from reachlist.engines.base import Engine
from reachlist.errors import WarehouseError
from reachlist.query import dialect_named, raw_sql

BULK_ROWS = 1000  # above this many rows PostgreSQL loads with COPY, an order of magnitude faster


class ServerEngine(Engine):
    def __init__(self, url: str, display_name: str, connect_timeout: int) -> None:
        from reachlist.warehouse import redact_text

        self.display_name = display_name
        connect_args: dict[str, Any] = {}
        if url.split(":", 1)[0].startswith("postgresql") and "connect_timeout" not in url:
            connect_args["connect_timeout"] = connect_timeout
        try:
            self.engine = sa.create_engine(url, connect_args=connect_args)
        except Exception as exc:  # bad URL or missing driver
            raise WarehouseError(
                f"Cannot use warehouse URL {display_name!r}: {redact_text(first_line(exc), url)}.",
                hint="use a SQLAlchemy URL such as postgresql+psycopg://user@host:5432/db and "
                "install its driver (pip install 'reachlist[postgres]')",
            ) from None
        try:
            self.conn = self.engine.connect()
        except Exception as exc:
            raise WarehouseError(
                f"Cannot reach warehouse {display_name!r}: {redact_text(first_line(exc), url)}.",
                hint="check host, port, database name and credentials, and that the server runs",
            ) from None
        self.dialect = dialect_named(self.engine.dialect.name)
        if self.dialect.name == "postgresql" and not re.search(r"jit(=|%3d)", url.lower()):
            self._settle(statements.PG_NO_JIT)

    def _settle(self, setting: str) -> None:
        """A session setting for speed only: kept when the server takes it (committed, so a
        later rollback keeps it), skipped when it does not (an older server, a pooler)."""
        try:
            self.conn.execute(sa.text(setting))
            self.conn.commit()
        except Exception:
            with contextlib.suppress(Exception):
                self.conn.rollback()

    def fetch(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        result = self.conn.execute(sa.text(sql), params)
        cols = list(result.keys())
        if self.dialect.name == "postgresql" and result.cursor is not None:
            # A text() query's columns carry no types, so SQLAlchemy only wraps each of the
            # driver's tuples in a Row: read them from the cursor itself (PostgreSQL 15, 1.47M
            # rows of 5 columns: 2.2-2.4 s plus 0.7 s for the frame -> 1.8 s in all).
            rows: Sequence[Any] = result.cursor.fetchall()
            result.close()
        else:
            rows = [tuple(row) for row in result.fetchall()]
        if not rows:
            return pl.DataFrame({c: [] for c in cols})
        return pl.DataFrame(rows, schema=cols, orient="row")

    def execute(self, sql: str, params: dict[str, Any]) -> None:
        self.conn.execute(sa.text(sql), params)

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        self.conn.execute(sa.text(sql), rows)

    def run(self, statement: str) -> None:
        self.conn.execute(sa.text(statement))

    def append_frame(
        self, physical: tuple[str, ...], columns: list[str], frame: pl.DataFrame
    ) -> None:
        if frame.height == 0:  # nothing to add (an empty parameter list is an error to SQLAlchemy)
            return
        if self.dialect.name == "postgresql" and frame.height > BULK_ROWS:
            cursor = self.conn.connection.driver_connection.cursor()  # type: ignore[union-attr]
            with cursor.copy(statements.copy_in(physical, columns)) as copy:
                for row in frame.iter_rows():
                    copy.write_row(row)
        else:
            stmt = sa.text(statements.append_values(physical, columns, frame.columns))
            self.conn.execute(stmt, frame.to_dicts())

    def begin(self) -> None:
        self.rollback()  # a read may have opened a transaction: start clean

    def commit(self) -> None:
        self.conn.commit()

    def rollback(self) -> None:
        with contextlib.suppress(Exception):
            self.conn.rollback()

    def end_read(self) -> None:
        self.conn.commit()

    def columns(self, parts: tuple[str, ...]) -> list[tuple[str, str]] | None:
        sql, params = raw_sql(statements.table_columns(parts), self.dialect)
        rows = self.conn.execute(sa.text(sql), params).fetchall()
        return [(str(n), str(t)) for n, t in rows] or None

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self.conn.close()
        self.engine.dispose()


def first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0].rstrip(".") if text else type(exc).__name__
