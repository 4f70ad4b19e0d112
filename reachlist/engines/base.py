"""The interface every engine offers the warehouse: run SQL, read the catalogue, close."""

from __future__ import annotations

from typing import Any

import polars as pl

from reachlist.errors import WarehouseError
from reachlist.query import Dialect


class Engine:
    """One connection to one engine. SQL arrives rendered for ``dialect`` (placeholders, quoting);
    values arrive as a dict of bound parameters. Capabilities an engine lacks raise one clear
    error line (``unsupported``)."""

    dialect: Dialect
    display_name: str = ""
    transactional = True  # whether writes can be grouped all-or-nothing

    # -- reading and writing -------------------------------------------------------------------
    def fetch(self, sql: str, params: dict[str, Any]) -> pl.DataFrame:
        raise NotImplementedError

    def execute(self, sql: str, params: dict[str, Any]) -> None:
        raise NotImplementedError

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        raise NotImplementedError

    def run(self, statement: str) -> None:
        """A statement with nothing to bind (DDL)."""
        raise NotImplementedError

    def append_frame(
        self, physical: tuple[str, ...], columns: list[str], frame: pl.DataFrame
    ) -> None:
        """Append a frame's rows to a physical table (``columns``: its names there)."""
        raise NotImplementedError

    # -- transactions --------------------------------------------------------------------------
    def begin(self) -> None:
        self.unsupported("transactions")

    def commit(self) -> None:
        self.unsupported("transactions")

    def rollback(self) -> None:
        """Undo what is open; never raises."""

    def end_read(self) -> None:
        """Close the implicit transaction a read opened (engines that open one)."""

    # -- the catalogue -------------------------------------------------------------------------
    def columns(self, parts: tuple[str, ...]) -> list[tuple[str, str]] | None:
        """(name, type) of each column of a physical table, or None when it is missing."""
        raise NotImplementedError

    # -- small driver-side tables a query joins (mining's itemsets to count) -------------------
    counts_in_engine = False  # whether mining should count where the data is (a cluster)
    # whether a large counting join is cut into batches (an engine whose hash tables must fit
    # its memory); Spark spills its shuffles to disk and pays a fixed cost per query instead
    batches_joins = True

    def register_frame(self, name: str, frame: pl.DataFrame) -> None:
        """Make ``frame`` readable as the table ``name`` for this connection's queries."""
        self.unsupported("temporary tables from reachlist's own data")

    def unregister_frame(self, name: str) -> None:
        """Forget a frame registered under ``name``; never raises."""

    def keep_rows(self, name: str, sql: str, params: dict[str, Any]) -> None:
        """Compute a query once and keep its rows in the engine as the table ``name``."""
        self.unsupported("keeping a query's rows for the next queries")

    def forget_rows(self, name: str) -> None:
        """Drop what ``keep_rows`` kept under ``name``; never raises."""

    # -- DuckDB-only capabilities (the holdings file, the sample) -------------------------------
    def from_arrow(self, statement: str, data: Any) -> None:
        self.unsupported("writing Arrow data")

    def attach_read_only(self, path: str, alias: str) -> bool:
        return False

    def detach(self, alias: str) -> None:
        """Nothing attached: nothing to detach."""

    def close(self) -> None:
        raise NotImplementedError

    def unsupported(self, what: str) -> Any:
        raise WarehouseError(
            f"Expected an engine that supports {what}, found {self.dialect.name} "
            f"({self.display_name}).",
            hint="use a DuckDB warehouse for this step, or report it",
        )
