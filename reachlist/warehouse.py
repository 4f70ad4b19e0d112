"""The only module that talks to a database.

``Warehouse.open`` takes a DuckDB file path or any SQLAlchemy URL (``postgresql+psycopg://...``).
It runs :class:`reachlist.query.Query` objects and returns polars DataFrames.

>>> wh = Warehouse.open("sample.duckdb")                      # doctest: +SKIP
>>> wh.fetch(Query("SELECT count(*) AS n FROM orders"))       # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import polars as pl

from reachlist import statements
from reachlist.errors import ContractError, InputError, WarehouseError
from reachlist.query import (
    DUCKDB,
    Dialect,
    Query,
    Rendered,
    dialect_named,
    render,
)
from reachlist.schema import CONTRACT, SOURCE_TABLES, Mapping
from reachlist.wording import option


def _is_url(target: str) -> bool:
    return "://" in target


@dataclass(frozen=True)
class PhysicalColumn:
    name: str
    data_type: str


class Warehouse:
    """A connection to one warehouse plus the mapping that names its tables."""

    def __init__(
        self, target: str, dialect: Dialect, mapping: Mapping, conn: Any, engine: Any = None
    ) -> None:
        self.target = target
        self.dialect = dialect
        self.mapping = mapping
        self._conn = conn
        self._engine = engine
        self._in_transaction = False
        self._typed: Mapping | None = None  # the mapping with the casts physical types need
        self._text_ids = False
        # the qualified name of a fresh holdings table when one is attached (reachlist.holdings);
        # None: queries derive the same rows from the order lines
        self.holdings_table: str | None = None

    # -- opening ---------------------------------------------------------------------------------
    @classmethod
    def open(
        cls,
        target: str | os.PathLike[str],
        mapping: Mapping | None = None,
        *,
        read_only: bool = False,
        create: bool = False,
        connect_timeout: int = 15,
    ) -> Warehouse:
        """``create`` makes a missing DuckDB file (a local state database) instead of refusing.
        ``read_only`` opens a DuckDB file read-only (several readers at once; a read-only file
        works). ``connect_timeout`` (seconds) bounds the wait for a server that does not answer."""
        target = str(target)
        mapping = mapping or Mapping.identity()
        if _is_url(target):
            return cls._open_url(target, mapping, connect_timeout)
        return cls._open_duckdb(target, mapping, read_only, create)

    @classmethod
    def _open_duckdb(
        cls, path: str, mapping: Mapping, read_only: bool, create: bool = False
    ) -> Warehouse:
        import duckdb

        if path != ":memory:" and not create and not Path(path).exists():
            raise InputError(
                f"Warehouse file {path!r} does not exist (expected a DuckDB file or a URL such as "
                "postgresql+psycopg://host/db).",
                hint=f"create the sample with `reachlist sample {option('out')} PATH`, or check the path",
            )
        try:
            conn = duckdb.connect(path, read_only=read_only)
        except duckdb.Error as exc:
            raise WarehouseError(
                f"Cannot open {path!r} as a DuckDB database: {_first_line(exc)}.",
                hint="pass a DuckDB file, or close the program that holds it open",
            ) from None
        budget = _duckdb_budget()
        # SET, not connect config: other connections to the same file may exist
        conn.execute(statements.set_option("temp_directory", budget["temp_directory"]))
        try:
            conn.execute(statements.set_option("memory_limit", budget["memory_limit"]))
        except duckdb.Error as exc:
            conn.close()
            raise InputError(
                f"Expected REACHLIST_DUCKDB_MEMORY as a size such as 1536MB or 2GB, found "
                f"{budget['memory_limit']!r} ({_first_line(exc)}).",
                hint=f"set it to a size like 2GB, or unset it for the default of {DUCKDB_MEMORY}",
            ) from None
        return cls(path, DUCKDB, mapping, conn)

    @classmethod
    def _open_url(cls, url: str, mapping: Mapping, connect_timeout: int = 15) -> Warehouse:
        import sqlalchemy as sa

        url = encode_credentials(url)
        connect_args: dict[str, Any] = {}
        if url.split(":", 1)[0].startswith("postgresql") and "connect_timeout" not in url:
            connect_args["connect_timeout"] = connect_timeout
        try:
            engine = sa.create_engine(url, connect_args=connect_args)
        except Exception as exc:  # bad URL or missing driver
            raise WarehouseError(
                f"Cannot use warehouse URL {_redact(url)!r}: {redact_text(_first_line(exc), url)}.",
                hint="use a SQLAlchemy URL such as postgresql+psycopg://user@host:5432/db and "
                "install its driver (pip install 'reachlist[postgres]')",
            ) from None
        try:
            conn = engine.connect()
        except Exception as exc:
            raise WarehouseError(
                f"Cannot reach warehouse {_redact(url)!r}: {redact_text(_first_line(exc), url)}.",
                hint="check host, port, database name and credentials, and that the server runs",
            ) from None
        return cls(url, dialect_named(engine.dialect.name), mapping, conn, engine)

    def close(self) -> None:
        with contextlib.suppress(Exception):
            self._conn.close()
        if self._engine is not None:
            self._engine.dispose()

    def __enter__(self) -> Warehouse:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def is_duckdb(self) -> bool:
        return self.dialect is DUCKDB

    @property
    def display_name(self) -> str:
        return _redact(self.target)

    # -- running ---------------------------------------------------------------------------------
    def render(self, query: Query) -> Rendered:
        return render(query, self.dialect, self.typed_mapping, self.holdings_table)

    @property
    def typed_mapping(self) -> Mapping:
        """The mapping plus the casts this warehouse's column types need (TIMESTAMP_NS ->
        TIMESTAMP, integer SKUs or ids -> text, ...), worked out once from its catalogue."""
        if self._typed is None:
            from reachlist.types import plan_casts

            physical: dict[str, dict[str, str] | None] = {}
            for name in SOURCE_TABLES:
                tmap = self.mapping.table(name)
                found = self.physical_columns(name)
                if found is None:
                    physical[name] = None
                    continue
                by_name = {c.name.lower(): c.data_type for c in found}
                physical[name] = {
                    col: by_name[tmap.column(col).lower()]
                    for col in CONTRACT[name].column_names
                    if tmap.source(col) is None and tmap.column(col).lower() in by_name
                }
            casts, self._text_ids = plan_casts(
                self.mapping.tables, physical, self.dialect.text_type
            )
            self._typed = self.mapping.with_casts(casts)
        return self._typed

    @property
    def text_ids(self) -> bool:
        """Whether customer ids are text here (some table holds them as text or UUIDs)."""
        _ = self.typed_mapping
        return self._text_ids

    def fetch(self, query: Query) -> pl.DataFrame:
        """Run a query and return its rows as a polars DataFrame."""
        return self._fetch_rendered(self.render(query), query)

    def fetch_raw(self, sql: str, params: dict[str, Any] | None = None) -> pl.DataFrame:
        """Run SQL written against the physical names (no mapping views): catalogue probes such
        as ``check`` trying a mapped expression. Values are still bound."""
        q = Query(sql, dict(params or {}), label="probe")
        return self._fetch_rendered(Rendered(*_raw(q, self.dialect)), q)

    def _fetch_rendered(self, r: Rendered, query: Query) -> pl.DataFrame:
        try:
            if self.is_duckdb:
                frame: pl.DataFrame = self._conn.sql(r.sql, params=r.params or None).pl()
                return frame
            import sqlalchemy as sa

            result = self._conn.execute(sa.text(r.sql), r.params)
            cols = list(result.keys())
            rows = result.fetchall()
            self._end_read()
            if not rows:
                return pl.DataFrame({c: [] for c in cols})
            return pl.DataFrame([tuple(row) for row in rows], schema=cols, orient="row")
        except Exception as exc:
            if not self._in_transaction:
                self._rollback()
            raise self._translate(exc, query) from None

    def _end_read(self) -> None:
        """Close the implicit transaction a read opened, unless inside ``transaction()``."""
        if not self._in_transaction:
            self._conn.commit()

    def scalar(self, query: Query) -> Any:
        df = self.fetch(query)
        return None if df.height == 0 else df.row(0)[0]

    def execute(self, query: Query) -> None:
        r = self.render(query)
        try:
            if self.is_duckdb:
                self._conn.execute(r.sql, r.params)
            else:
                import sqlalchemy as sa

                self._conn.execute(sa.text(r.sql), r.params)
        except Exception as exc:
            raise self._translate(exc, query) from None

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        """Insert many rows with one statement shape (``:name`` placeholders, logical names)."""
        if not rows:
            return
        r = self.render(Query(sql, dict(rows[0])))
        try:
            if self.is_duckdb:
                self._conn.executemany(r.sql, rows)
            else:
                import sqlalchemy as sa

                self._conn.execute(sa.text(r.sql), rows)
        except Exception as exc:
            raise self._translate(exc, Query(sql)) from None

    @contextlib.contextmanager
    def transaction(self) -> Iterator[Warehouse]:
        """All or nothing: everything written inside is committed together or not at all.

        Reads inside the block do not commit (on PostgreSQL a read would otherwise end it)."""
        if self._in_transaction:
            raise WarehouseError("Nested transactions are not supported.", hint="report this")
        _ = self.typed_mapping  # read the catalogue before the transaction, not inside it
        if self.is_duckdb:
            self._conn.execute("BEGIN TRANSACTION")
        else:
            self._rollback()
        self._in_transaction = True
        try:
            yield self
        except BaseException:
            self._in_transaction = False
            if self.is_duckdb:
                self._conn.execute("ROLLBACK")
            else:
                self._rollback()
            raise
        self._in_transaction = False
        if self.is_duckdb:
            self._conn.execute("COMMIT")
        else:
            self._conn.commit()

    def run_statement(self, stmt: str) -> None:
        """Run a statement reachlist built itself with no values to bind (DDL)."""
        try:
            if self.is_duckdb:
                self._conn.execute(stmt)
            else:
                import sqlalchemy as sa

                self._conn.execute(sa.text(stmt))
        except Exception as exc:
            raise WarehouseError(
                f"Could not change the warehouse {self.display_name}: {_first_line(exc)}.",
                hint="check that this user may create and write tables there",
            ) from None

    def insert_arrow(self, table: str, data: Any, select_sql: str) -> None:
        """``INSERT INTO table <select_sql>`` where ``select_sql`` reads the Arrow table ``data``
        as ``src`` (DuckDB only: how the sample warehouse is written)."""
        self._from_arrow(statements.insert_select(table, select_sql), table, data)

    def create_from_arrow(self, table: str, data: Any, select_sql: str) -> None:
        """``CREATE TABLE table AS <select_sql>`` where ``select_sql`` reads the Arrow table or
        record-batch reader ``data`` as ``src`` (DuckDB only: how reachlist writes the holdings
        file beside a warehouse). The table takes the types the data has."""
        self._from_arrow(statements.create_as(table, select_sql), table, data)

    def _from_arrow(self, statement: str, table: str, data: Any) -> None:
        if not self.is_duckdb:
            raise WarehouseError(
                f"Expected a DuckDB file to write {table} into from Arrow data, found "
                f"{self.display_name}.",
                hint="write to a DuckDB file, then `reachlist copy` it elsewhere",
            )
        self._conn.register("src", data)
        try:
            self._conn.execute(statement)
        except Exception as exc:
            raise WarehouseError(
                f"Could not write {table} into {self.display_name}: {_first_line(exc)}.",
                hint="check the free space and that the file and its folder are writable",
            ) from None
        finally:
            self._conn.unregister("src")

    def stream_arrow(self, query: Query, batch_rows: int = 500_000) -> Any:
        """The rows of a query as a pyarrow RecordBatchReader: read in batches of ``batch_rows``,
        never all at once (DuckDB only)."""
        if not self.is_duckdb:
            raise WarehouseError(
                f"Expected a DuckDB warehouse to stream {query.label or 'a query'} from, found "
                f"{self.display_name}.",
                hint="report this",
            )
        r = self.render(query)
        try:
            return self._conn.sql(r.sql, params=r.params or None).to_arrow_reader(batch_rows)
        except Exception as exc:
            raise self._translate(exc, query) from None

    def attach_read_only(self, path: str | os.PathLike[str], alias: str) -> bool:
        """Attach another DuckDB file read-only under ``alias`` (False: it cannot be opened;
        DuckDB only). Attaching works on a warehouse opened read-only too."""
        if not self.is_duckdb:
            return False
        self.detach(alias)
        try:
            self._conn.execute(statements.attach_read_only(str(path), alias))
        except Exception:
            return False
        return True

    def detach(self, alias: str) -> None:
        if self.is_duckdb:
            with contextlib.suppress(Exception):
                self._conn.execute(statements.detach(alias))

    def _rollback(self) -> None:
        if not self.is_duckdb:
            with contextlib.suppress(Exception):
                self._conn.rollback()

    def load_frame(self, table: str, frame: pl.DataFrame) -> None:
        """Append a DataFrame to the table a logical table maps to (loaders, the campaign log).

        The frame's columns carry logical names; they are mapped and quoted here."""
        tmap = self.mapping.table(table)
        columns = [tmap.column(c) for c in frame.columns]
        if self.is_duckdb:
            self._conn.register("_reachlist_frame", frame.to_arrow())
            try:
                self._conn.execute(statements.append_from(tmap.physical, columns, frame.columns))
            finally:
                self._conn.unregister("_reachlist_frame")
        elif self.dialect.name == "postgresql" and frame.height > 1000:
            # COPY is an order of magnitude faster than INSERT for bulk loads.
            cursor = self._conn.connection.driver_connection.cursor()
            with cursor.copy(statements.copy_in(tmap.physical, columns)) as copy:
                for row in frame.iter_rows():
                    copy.write_row(row)
        else:
            import sqlalchemy as sa

            stmt = sa.text(statements.append_values(tmap.physical, columns, frame.columns))
            self._conn.execute(stmt, frame.to_dicts())

    # -- the contract ----------------------------------------------------------------------------
    def physical_columns(self, logical_table: str) -> list[PhysicalColumn] | None:
        """Columns of the table a logical table maps to, or None when the table is missing."""
        q = statements.table_columns(self.mapping.table(logical_table).physical)
        # information_schema is read directly: no logical table names are involved.
        r = Rendered(*_raw(q, self.dialect))
        try:
            if self.is_duckdb:
                rows = self._conn.execute(r.sql, r.params).fetchall()
            else:
                import sqlalchemy as sa

                rows = self._conn.execute(sa.text(r.sql), r.params).fetchall()
                self._end_read()
        except Exception as exc:
            self._rollback()
            raise self._translate(exc, q) from None
        if not rows:
            return None
        return [PhysicalColumn(str(name), str(dtype)) for name, dtype in rows]

    def _translate(self, exc: Exception, query: Query) -> Exception:
        text = _first_line(exc)
        lowered = text.lower()
        what = f" (query {query.label})" if query.label else ""
        if any(k in lowered for k in ("does not exist", "not found", "no such", "undefined")):
            return ContractError(
                f"The warehouse {self.display_name} lacks something a query needs{what}: {text}.",
                hint="run `reachlist check` to see which table or column is missing and which "
                "mapping key fixes it",
            )
        return WarehouseError(
            f"Query{what} failed on {self.dialect.name}: {text}.",
            hint="run `reachlist check`; if it passes, report this with `reachlist sql` output",
        )


DUCKDB_MEMORY = "1536MB"  # DuckDB's working memory; beyond it, its joins and sorts spill to disk


def _duckdb_budget() -> dict[str, str]:
    """The memory DuckDB may use (``REACHLIST_DUCKDB_MEMORY``, default ``DUCKDB_MEMORY``) and
    where it spills beyond that (a private temporary folder, so a read-only warehouse works)."""
    import tempfile

    return {
        "memory_limit": os.environ.get("REACHLIST_DUCKDB_MEMORY", DUCKDB_MEMORY),
        "temp_directory": str(Path(tempfile.gettempdir()) / f"reachlist-spill-{os.getuid()}"),
    }


def _raw(query: Query, dialect: Dialect) -> tuple[str, dict[str, Any]]:
    sql = query.sql
    if dialect.placeholder == "dollar":
        import re

        sql = re.sub(r"(?<![:\w]):([A-Za-z_]\w*)", r"$\1", sql)
    return sql, dict(query.params)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0].rstrip(".") if text else type(exc).__name__


def _secrets(target: str) -> list[str]:
    """The password(s) a warehouse URL carries: in the credentials (up to the last @ before the
    host, so an unencoded @ in the password is covered) and in a ?password= query value."""
    from urllib.parse import unquote

    found: list[str] = []
    if "://" not in target:
        return found
    rest = target.split("://", 1)[1]
    netloc, _, query = rest.partition("?")
    netloc = netloc.split("/", 1)[0] if "@" not in netloc else netloc
    if "@" in netloc:
        creds = netloc.rsplit("@", 1)[0]
        if ":" in creds:
            secret = creds.split(":", 1)[1]
            found += [secret, unquote(secret)]
    for part in query.split("&"):
        key, _, value = part.partition("=")
        if unquote(key).lower() in ("password", "pwd", "pass") and value:
            found += [value, unquote(value)]
    return [f for f in dict.fromkeys(found) if f]


def encode_credentials(url: str) -> str:
    """Percent-encode a password written with a bare @ (``u:p@ss@host`` or ``?password=p@ss``),
    so the driver reads the host after the right @ and the whole password, instead of a host
    made of the password's end."""
    from urllib.parse import parse_qsl, quote, urlencode

    if "://" not in url:
        return url
    scheme, rest = url.split("://", 1)
    rest, qmark, query = rest.partition("?")
    if "@" in query:
        query = urlencode(parse_qsl(query, keep_blank_values=True))
    netloc, sep, path = rest.partition("/")
    if netloc.count("@") >= 2:
        creds, host = netloc.rsplit("@", 1)
        user, colon, secret = creds.partition(":")
        netloc = f"{quote(user, safe='')}{colon}{quote(secret, safe='')}@{host}"
    return f"{scheme}://{netloc}{sep}{path}{qmark}{query}"


def _redact(target: str) -> str:
    """Hide a password in a URL before it is printed."""
    return redact_text(target, target)


def redact_text(text: str, target: str) -> str:
    """``text`` (a URL, or a driver's message about it) with every password of ``target``
    replaced by ***."""
    for secret in sorted(_secrets(target), key=len, reverse=True):
        text = text.replace(secret, "***")
    return text
