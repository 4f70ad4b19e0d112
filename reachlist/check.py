"""Validate a warehouse against the contract and the data against what the commands need.

``check_warehouse`` finds every problem in one run (it never stops at the first): missing tables
and columns, types no query can use (types that convert without loss are cast automatically and
listed), mapped expressions that do not run, then, when the tables can be read, the data:
duplicate or missing customer ids, orders in the future or far from the rest. Each problem says
what, where, what was found, and the mapping line or action that fixes it. Errors stop lists from
being built; warnings are handled (and reported) by the commands.

>>> with Warehouse.open("sample.duckdb") as wh:                   # doctest: +SKIP
...     report = check_warehouse(wh)
>>> report.ok, report.counts["return_lines"]                       # doctest: +SKIP
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from datetime import UTC, date, datetime, timedelta
from typing import Any, Literal

import polars as pl

from reachlist import statements
from reachlist.errors import ContractError, ReachlistError
from reachlist.query import Query
from reachlist.schema import CONTRACT, LOG_TABLES, SOURCE_TABLES, Kind
from reachlist.types import INCOMPATIBLE, cast_for
from reachlist.warehouse import Warehouse
from reachlist.wording import option

Severity = Literal["error", "warning"]

MINED_TABLES = ("orders", "order_lines", "products")
"""The tables mining and the holdings read (lists read every source table)."""

GAP_MONTHS = 12
"""Orders in months separated from the bulk of the history by at least this many empty months,
and fewer than a quarter of the bulk's orders, are reported as far from the rest."""


@dataclass(frozen=True)
class Problem:
    what: str  # short: "missing table", "wrong type", "duplicate customer ids", ...
    where: str  # logical name, with the physical one
    found: str
    fix: str  # the mapping line or the action that fixes it
    severity: Severity = "error"


@dataclass
class CheckReport:
    warehouse: str
    dialect: str
    mapping: str
    tables: dict[str, str] = field(default_factory=dict)  # logical -> physical
    log_tables_present: dict[str, bool] = field(default_factory=dict)
    counts: dict[str, Any] = field(default_factory=dict)
    problems: list[Problem] = field(default_factory=list)
    casts: list[str] = field(default_factory=list)  # what reachlist converts without asking

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]

    @property
    def ok(self) -> bool:
        return not self.errors


def _key(wh: Warehouse, table: str, column: str | None = None) -> str:
    return wh.mapping.key_for(table, column)


def contract_problems(
    wh: Warehouse, tables: tuple[str, ...] = SOURCE_TABLES
) -> tuple[list[Problem], list[str]]:
    """Every contract problem of ``tables``, and the casts reachlist applies on its own."""
    problems: list[Problem] = []
    casts: list[str] = []
    text_type = wh.dialect.text_type
    for name in tables:
        tmap = wh.mapping.table(name)
        found = wh.physical_columns(name)
        if found is None:
            problems.append(
                Problem(
                    "missing table",
                    name if tmap.physical_name == name else f"{name} ({tmap.physical_name})",
                    f"no table {tmap.physical_name!r}",
                    f'create it, or {_key(wh, name)} = "your_table"',
                )
            )
            continue
        by_name = {c.name.lower(): c for c in found}
        for col in CONTRACT[name].columns:
            src = tmap.source(col.name)
            if src is not None:
                problem = _source_problem(wh, name, col.name, col.kind, src.kind)
                if problem is not None:
                    problems.append(problem)
                continue
            physical = tmap.column(col.name)
            pc = by_name.get(physical.lower())
            if pc is None:
                problems.append(
                    Problem(
                        "missing column",
                        _where(name, col.name, tmap.physical_name, physical),
                        f"columns {', '.join(c.name for c in found)}",
                        f'{_key(wh, name, col.name)} = "your_column" (or an expression or constant: '
                        "README, 'Mapping values')",
                    )
                )
                continue
            to = cast_for(col.kind, pc.data_type, text_type)
            if to is INCOMPATIBLE:
                # a cast of codes to true/false makes every non-zero code true (2 = "withdrawn"
                # would read as consent): name the values instead
                how = (
                    f"{pc.name} IN (...the values that mean yes...)"
                    if col.kind == "boolean"
                    else f"CAST({pc.name} AS ...)"
                )
                problems.append(
                    Problem(
                        "wrong type",
                        _where(name, col.name, tmap.physical_name, pc.name),
                        f"type {pc.data_type}; expected {_kind_words(col.kind)}",
                        f'{_key(wh, name, col.name)} = {{ sql = "{how}" }} or another column of '
                        "that type",
                    )
                )
            elif to is not None:
                casts.append(f"{name}.{col.name}: {pc.data_type} read as {to}")
    typed = wh.typed_mapping
    for name in tables:
        for column, to in typed.table(name).casts.items():
            line = f"{name}.{column}: read as {to} (ids compared across tables)"
            if not any(c.startswith(f"{name}.{column}:") for c in casts):
                casts.append(line)
    return problems, casts


def _where(table: str, column: str, physical_table: str, physical_column: str) -> str:
    logical = f"{table}.{column}"
    physical = f"{physical_table}.{physical_column}"
    return logical if logical == physical else f"{logical} ({physical})"


def _kind_words(kind: Kind) -> str:
    return {
        "id": "an integer or text id",
        "integer": "integers",
        "text": "text",
        "boolean": "true/false",
        "date": "dates",
        "timestamp": "timestamps",
        "number": "numbers",
    }[kind]


def _source_problem(
    wh: Warehouse, table: str, column: str, kind: Kind, source_kind: str
) -> Problem | None:
    """A mapped expression or constant must run against its table (checked with LIMIT 0)."""
    tmap = wh.typed_mapping.table(table)
    try:
        probe = wh.fetch_raw(statements.column_probe(tmap, column))
    except ReachlistError as exc:
        return Problem(
            "expression fails",
            f"{table}.{column}",
            f"{tmap.source(column).describe()}: "  # type: ignore[union-attr]
            f"{exc.message}",
            f"fix {_key(wh, table, column)} so it is one {_kind_words(kind)} expression over "
            f"{tmap.physical_name}",
        )
    dtype = probe.schema["probe"]
    if dtype != pl.Null and not _SERVES[kind](dtype):  # (a server's empty probe has no type)
        return Problem(
            "wrong type",
            f"{table}.{column}",
            f"{tmap.source(column).describe()} gives {dtype}; "  # type: ignore[union-attr]
            f"expected {_kind_words(kind)}",
            f"fix {_key(wh, table, column)} so it gives {_kind_words(kind)}"
            + (" (true exactly for the values that mean yes)" if kind == "boolean" else ""),
        )
    return None


# What an expression's result type must be to serve a kind (the database would convert others
# by itself, some wrongly: DuckDB takes every non-zero integer as true).
_SERVES: dict[Kind, Callable[[pl.DataType], bool]] = {
    "id": lambda t: t.is_integer() or t == pl.String,
    "integer": lambda t: t.is_integer(),
    "number": lambda t: t.is_numeric(),
    "text": lambda t: t == pl.String,
    "boolean": lambda t: t == pl.Boolean,
    "date": lambda t: t.is_temporal(),
    "timestamp": lambda t: t.is_temporal(),
}


def _data_problems(wh: Warehouse, counts: dict[str, Any], today: date) -> list[Problem]:
    problems: list[Problem] = []
    dup = wh.fetch(Query.from_template("duplicate_customers")).row(0, named=True)
    if dup["duplicated_ids"]:
        problems.append(
            Problem(
                "duplicate customer ids",
                "customers.customer_id",
                f"{dup['duplicated_ids']:,} ids on {dup['duplicate_rows']:,} rows",
                "keep one row per customer (lists refuse this warehouse), or build with "
                f"{option('merge_duplicates=True')} to read each by its strictest row",
            )
        )
    nulls = wh.fetch(Query.from_template("null_ids")).row(0, named=True)
    for key, where, fix in (
        (
            "customers_without_id",
            "customers.customer_id",
            "they can never be listed; fill or drop them",
        ),
        ("orders_without_id", "orders.order_id", "their lines cannot be joined; fill them"),
        ("lines_without_sku", "order_lines.sku", "they are ignored; fill them"),
        (
            "orders_without_time",
            "orders.ordered_at",
            "they fall in no window, so every command leaves them out; fill them",
        ),
        ("lines_without_quantity", "order_lines.quantity", "they count for nothing; fill them"),
    ):
        if nulls[key]:
            problems.append(
                Problem(
                    "missing ids" if "_id" in key or "sku" in key else "missing values",
                    where,
                    f"{nulls[key]:,} rows without one",
                    fix,
                    "warning",
                )
            )
    tomorrow = datetime(today.year, today.month, today.day) + timedelta(days=1)
    history = wh.fetch(Query.from_template("order_history", {"tomorrow": tomorrow})).row(
        0, named=True
    )
    if history["without_customer"]:
        problems.append(
            Problem(
                "orders without a customer",
                "orders.customer_id",
                f"{history['without_customer']:,} orders",
                "ignored by every command (guest "
                "checkouts?); nothing to do unless they should have one",
                "warning",
            )
        )
    if history["later_orders"]:
        problems.append(
            Problem(
                "orders in the future",
                "orders.ordered_at",
                f"{history['later_orders']:,} after {today:%Y-%m-%d}, the latest "
                f"{history['latest_later']:%Y-%m-%d}",
                "fix the dates; until then default windows end at the last order up to today",
                "warning",
            )
        )
    months = wh.fetch(Query.from_template("order_months"))
    problems.extend(_far_months(months.rows()))
    return problems


def _far_months(rows: list[tuple[Any, ...]]) -> list[Problem]:
    """Months cut off from the bulk of the history by a gap of GAP_MONTHS or more empty months,
    holding far fewer orders than the bulk."""
    if len(rows) < 2:
        return []
    index = [(m.year * 12 + m.month - 1, int(n), m) for m, n in rows]
    runs: list[list[tuple[int, int, Any]]] = [[index[0]]]
    for item in index[1:]:
        if item[0] - runs[-1][-1][0] > GAP_MONTHS:
            runs.append([item])
        else:
            runs[-1].append(item)
    if len(runs) == 1:
        return []
    bulk = max(runs, key=lambda r: sum(n for _, n, _ in r))
    bulk_n = sum(n for _, n, _ in bulk)
    out = []
    for run in runs:
        n = sum(x[1] for x in run)
        if run is bulk or n >= 0.25 * bulk_n:
            continue
        first, last = run[0][2], run[-1][2]
        span = f"{first:%Y-%m}" if first == last else f"{first:%Y-%m}..{last:%Y-%m}"
        out.append(
            Problem(
                "orders far from the rest",
                "orders.ordered_at",
                f"{n:,} orders in {span}; the history runs {bulk[0][2]:%Y-%m}..{bulk[-1][2]:%Y-%m}",
                f"fix the dates (a typed year?); windows you pass with {option('since')}/{option('until')} leave them out",
                "warning",
            )
        )
    return out


def check_warehouse(wh: Warehouse, *, today: date | None = None) -> CheckReport:
    """Every contract problem, then (when the tables can be read) rows, dates and quirks."""
    today = today or datetime.now(UTC).date()
    report = CheckReport(wh.display_name, wh.dialect.name, wh.mapping.source)
    for name in SOURCE_TABLES:
        tmap = wh.mapping.table(name)
        report.tables[name] = tmap.path or tmap.physical_name  # a Parquet file: its path
    for name in LOG_TABLES:
        report.log_tables_present[name] = wh.physical_columns(name) is not None
    report.problems, report.casts = contract_problems(wh)
    if report.errors:
        return report
    report.counts = dict(wh.fetch(Query.from_template("check_quirks")).row(0, named=True))
    report.problems.extend(_data_problems(wh, report.counts, today))
    return report


def require_contract(wh: Warehouse, tables: tuple[str, ...] = SOURCE_TABLES) -> None:
    """Raise one ContractError line for the first contract problem of ``tables``, pointing to
    ``check``: what check marks as stopping lists stops them (and mining) before any query. A
    type the database would convert by itself is still refused: DuckDB reads an integer consent
    column as true for every non-zero code, and 'yes'/'no' text as true/false. Tables checked
    clean are not checked again on the same connection."""
    todo = tuple(t for t in tables if t not in wh.contract_checked)
    if not todo:
        return
    problems, _ = contract_problems(wh, todo)
    if not problems:
        wh.contract_checked.update(todo)
    else:
        first = problems[0]
        more = f" and {len(problems) - 1} more" if len(problems) > 1 else ""
        raise ContractError(
            f"Warehouse {wh.display_name}: {first.what} {first.where}: {first.found}{more}.",
            hint=f"{first.fix}; `reachlist check` lists every problem (mapping: "
            f"{wh.mapping.source})",
        )
