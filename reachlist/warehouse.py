"""The only module that talks to a database, through one engine (``reachlist.engines``).

``Warehouse.open`` takes a DuckDB file path, any SQLAlchemy URL (``postgresql+psycopg://...``)
or a Spark master (``spark://local[2]``, ``sc://host:15002``). It runs
:class:`reachlist.query.Query` objects and returns polars DataFrames.

>>> wh = Warehouse.open("sample.duckdb")                      # doctest: +SKIP
>>> wh.fetch(Query("SELECT count(*) AS n FROM orders"))       # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

import polars as pl

from reachlist import statements
from reachlist.errors import ContractError, InputError, ReachlistError, WarehouseError
from reachlist.query import DUCKDB, BuiltWindow, Dialect, Query, Rendered, raw_sql, render
from reachlist.schema import CONTRACT, SOURCE_TABLES, Mapping

if TYPE_CHECKING:
    from reachlist.engines.base import Engine

SPARK_SCHEMES = ("spark://", "sc://")
SESSION_PREFIX = "reachlist_"  # the holdings kept in a server connection's temporary tables


def _is_url(target: str) -> bool:
    return "://" in target


@dataclass(frozen=True)
class PhysicalColumn:
    name: str
    data_type: str


class Warehouse:
    """One engine plus the mapping that names its tables."""

    def __init__(self, target: str, engine: Engine, mapping: Mapping) -> None:
        self.target = target
        self.engine = engine
        self.dialect: Dialect = engine.dialect
        self.mapping = mapping
        self._in_transaction = False
        self._typed: Mapping | None = None  # the mapping with the casts physical types need
        # source tables whose contract (tables, columns, types) was checked clean on this
        # connection (reachlist.check.require_contract), so a command checks each once
        self.contract_checked: set[str] = set()
        self._text_ids = False
        # the qualified name of a fresh holdings table when one is attached (reachlist.holdings);
        # None: queries derive the same rows from the order lines
        self.holdings_table: str | None = None
        # the pairs held in the default mining window, kept in that file (None: not attached)
        self.built_window: BuiltWindow | None = None

    def keep_session_holdings(self) -> bool:
        """On a server warehouse whose dialect has a schema for a connection's own tables
        (PostgreSQL): derive the holdings and first orders from the order history once into
        temporary tables of this connection, and read them from then on (False: this warehouse
        keeps none; a DuckDB file keeps its holdings in a file instead). The rows are those of
        the moment: for one command, not a connection kept open while the history changes.
        Raises ``WarehouseError`` when the server refuses (no right to create temporary
        tables, a read-only standby); the queries then derive the rows as before."""
        schema = self.dialect.session_schema
        if schema is None or self.holdings_table is not None:
            return False
        from reachlist.query import FIRST_ORDERS, HOLDINGS

        days = (schema, f"{SESSION_PREFIX}{statements.HOLDING_DAYS}")
        exact = (schema, f"{SESSION_PREFIX}{statements.HOLDING_EXACT}")
        final = f"{SESSION_PREFIX}{HOLDINGS}"
        try:
            # the holdings in two steps (sql/holdings_rows.sql, then holdings_exact.sql)
            self.engine.execute(statements.drop_table((schema, final)), {})
            for (_, table), query in (
                (days, statements.holdings_rows_query()),
                (exact, statements.holdings_exact_query(days)),
                (
                    (schema, f"{SESSION_PREFIX}{FIRST_ORDERS}"),
                    Query.from_template("first_orders_rows"),
                ),
            ):
                r = self.render(query)
                for stmt in statements.create_session_table(schema, table, r.sql):
                    self.engine.execute(stmt, r.params if stmt.startswith("CREATE") else {})
            for stmt in statements.holdings_finish(days, exact, final):
                self.engine.execute(stmt, {})
            self.engine.execute(statements.analyze((schema, final)), {})
            self.engine.end_read()
        except Exception as exc:
            self.engine.rollback()
            raise WarehouseError(
                f"Could not keep the holdings in temporary tables on {self.display_name}: "
                f"{_first_line(exc)}.",
                hint="grant TEMPORARY on the database to this user, or run on a primary server",
            ) from None
        self.holdings_table = f"{schema}.{SESSION_PREFIX}{HOLDINGS}"
        return True

    def render_lasting(self, query: Query) -> Rendered:
        """As ``render``, but never naming this connection's temporary tables (they end with
        it): the SQL a campaign log keeps, to read or run again later."""
        schema = self.dialect.session_schema
        if schema is None or not (self.holdings_table or "").startswith(f"{schema}."):
            return self.render(query)
        return render(query, self.dialect, self.typed_mapping, None)

    def derive_holdings(self) -> None:
        """Stop reading an attached holdings file: queries derive the same rows from the order
        lines again (a rebuild, a comparison, an engine that keeps no file)."""
        self.holdings_table, self.built_window = None, None

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
        engine: Engine
        if target.startswith(SPARK_SCHEMES):
            from reachlist.engines.spark import SparkEngine

            engine = SparkEngine(target, mapping)
            mapping = engine.mapping  # Parquet paths read as views of the session
        elif _is_url(target):
            from reachlist.engines.server import ServerEngine

            url = encode_credentials(target)
            engine = ServerEngine(url, _redact(url), connect_timeout)
            target = url
        else:
            from reachlist.engines.embedded import EmbeddedEngine

            engine = EmbeddedEngine(target, read_only=read_only, create=create)
        if mapping.paths and engine.dialect.name != "spark":
            engine.close()
            first = next(iter(mapping.paths))
            raise InputError(
                f"Expected tables in the warehouse for {target!r}, found the mapping reading "
                f"{first} from a file ({mapping.paths[first]}): files are read on Spark.",
                hint="open spark://local[2] (or your cluster) with this mapping, or map the "
                "tables by name",
            )
        return cls(target, engine, mapping)

    def close(self) -> None:
        self.engine.close()

    def __enter__(self) -> Warehouse:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def is_duckdb(self) -> bool:
        return self.dialect is DUCKDB

    @property
    def transactional(self) -> bool:
        """Whether writes here can be grouped all-or-nothing (not on Spark)."""
        return self.engine.transactional

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
        return self._fetch_rendered(Rendered(*raw_sql(q, self.dialect)), q)

    def _fetch_rendered(self, r: Rendered, query: Query) -> pl.DataFrame:
        try:
            frame = self.engine.fetch(r.sql, r.params)
            if not self._in_transaction:
                self.engine.end_read()
            return frame
        except Exception as exc:
            if not self._in_transaction:
                self.engine.rollback()
            raise self._translate(exc, query) from None

    def scalar(self, query: Query) -> Any:
        df = self.fetch(query)
        return None if df.height == 0 else df.row(0)[0]

    def execute(self, query: Query) -> None:
        r = self.render(query)
        try:
            self.engine.execute(r.sql, r.params)
        except Exception as exc:
            raise self._translate(exc, query) from None

    def executemany(self, sql: str, rows: list[dict[str, Any]]) -> None:
        """Insert many rows with one statement shape (``:name`` placeholders, logical names)."""
        if not rows:
            return
        r = self.render(Query(sql, dict(rows[0])))
        try:
            self.engine.executemany(r.sql, rows)
        except Exception as exc:
            raise self._translate(exc, Query(sql)) from None

    @property
    def counts_in_engine(self) -> bool:
        """Whether mining counts in the engine (a cluster) rather than in reachlist's memory."""
        return self.engine.counts_in_engine

    @contextlib.contextmanager
    def temporary_table(self, name: str, frame: pl.DataFrame) -> Iterator[None]:
        """``frame`` readable as the table ``name`` by the queries run inside the block."""
        try:
            self.engine.register_frame(name, frame)
        except Exception as exc:
            if isinstance(exc, ReachlistError):
                raise
            raise WarehouseError(
                f"Could not hand {frame.height:,} rows to {self.display_name} as {name}: "
                f"{_first_line(exc)}.",
                hint="count in reachlist's memory instead (the default off Spark)",
            ) from None
        try:
            yield
        finally:
            self.engine.unregister_frame(name)

    @contextlib.contextmanager
    def kept(self, name: str, query: Query) -> Iterator[None]:
        """The rows of ``query`` computed once and readable as the table ``name`` inside the
        block (engines that can keep them: DuckDB, Spark)."""
        r = self.render(query)
        try:
            self.engine.keep_rows(name, r.sql, r.params)
        except Exception as exc:
            if isinstance(exc, ReachlistError):
                raise
            raise self._translate(exc, query) from None
        try:
            yield
        finally:
            self.engine.forget_rows(name)

    @contextlib.contextmanager
    def transaction(self) -> Iterator[Warehouse]:
        """All or nothing: everything written inside is committed together or not at all.

        Reads inside the block do not commit (on PostgreSQL a read would otherwise end it)."""
        if self._in_transaction:
            raise WarehouseError("Nested transactions are not supported.", hint="report this")
        _ = self.typed_mapping  # read the catalogue before the transaction, not inside it
        self.engine.begin()
        self._in_transaction = True
        try:
            yield self
        except BaseException:
            self._in_transaction = False
            self.engine.rollback()
            raise
        self._in_transaction = False
        self.engine.commit()

    def run_statement(self, stmt: str) -> None:
        """Run a statement reachlist built itself with no values to bind (DDL)."""
        try:
            self.engine.run(stmt)
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
        try:
            self.engine.from_arrow(statement, data)
        except Exception as exc:
            raise WarehouseError(
                f"Could not write {table} into {self.display_name}: {_first_line(exc)}.",
                hint="check the free space and that the file and its folder are writable",
            ) from None

    def create_from_query(self, table: str, query: Query) -> None:
        """``CREATE TABLE table AS <query>``: a query's rows kept in this warehouse (DuckDB:
        how the holdings file keeps the pairs of the default window)."""
        r = self.render(query)
        try:
            self.engine.execute(statements.create_as(table, r.sql), r.params)
        except Exception as exc:
            raise self._translate(exc, query) from None

    def write_beside(
        self,
        path: str | os.PathLike[str],
        alias: str,
        tables: list[tuple[str, Query, str]],
        after: Sequence[str] = (),
    ) -> None:
        """Create tables in another DuckDB file from this warehouse's queries, without the rows
        passing through Python: the file is attached read-write as ``alias`` (the warehouse
        itself may be read-only), each (table, query, order_by) written, then each statement of
        ``after`` run (reachlist's own, over those tables), and detached again. DuckDB only: how
        the holdings file is written."""
        if not self.is_duckdb:
            raise WarehouseError(
                f"Expected a DuckDB warehouse to write a file beside, found {self.display_name}.",
                hint="report this",
            )
        where = Path(path).name
        try:
            self.engine.run(statements.attach_writable(str(path), alias))
        except Exception as exc:
            raise WarehouseError(
                f"Could not open {where} for writing: {_first_line(exc)}.",
                hint="check the free space and that the warehouse's folder is writable",
            ) from None
        try:
            for table, query, order_by in tables:
                r = self.render(query)
                try:
                    self.engine.execute(
                        statements.create_in(alias, table, r.sql, order_by), r.params
                    )
                except Exception as exc:
                    raise self._translate(exc, query) from None
            for statement in after:
                try:
                    self.engine.execute(statement, {})
                except Exception as exc:
                    raise self._translate(exc, Query(statement, label="writing " + where)) from None
        finally:
            self.engine.detach(alias)

    def attach_read_only(self, path: str | os.PathLike[str], alias: str) -> bool:
        """Attach another DuckDB file read-only under ``alias`` (False: it cannot be opened,
        or this engine attaches no files). Attaching works on a warehouse opened read-only."""
        return self.engine.attach_read_only(str(path), alias)

    def detach(self, alias: str) -> None:
        self.engine.detach(alias)

    def load_frame(self, table: str, frame: pl.DataFrame) -> None:
        """Append a DataFrame to the table a logical table maps to (loaders, the campaign log).

        The frame's columns carry logical names; they are mapped and quoted here."""
        tmap = self.mapping.table(table)
        self.engine.append_frame(tmap.physical, [tmap.column(c) for c in frame.columns], frame)

    # -- the contract ----------------------------------------------------------------------------
    def physical_columns(self, logical_table: str) -> list[PhysicalColumn] | None:
        """Columns of the table a logical table maps to, or None when the table is missing."""
        parts = self.mapping.table(logical_table).physical
        try:
            rows = self.engine.columns(parts)
            if not self._in_transaction:
                self.engine.end_read()
        except Exception as exc:
            self.engine.rollback()
            raise self._translate(exc, statements.table_columns(parts)) from None
        if not rows:
            return None
        return [PhysicalColumn(name, dtype) for name, dtype in rows]

    def _translate(self, exc: Exception, query: Query) -> Exception:
        text = _first_line(exc)
        lowered = text.lower()
        what = f" (query {query.label})" if query.label else ""
        if any(
            k in lowered
            for k in ("does not exist", "not found", "no such", "undefined", "cannot be found")
        ):
            return ContractError(
                f"The warehouse {self.display_name} lacks something a query needs{what}: {text}.",
                hint="run `reachlist check` to see which table or column is missing and which "
                "mapping key fixes it",
            )
        return WarehouseError(
            f"Query{what} failed on {self.dialect.name}: {text}.",
            hint="run `reachlist check`; if it passes, report this with `reachlist sql` output",
        )


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
