"""Validate a warehouse against the contract and count the quirks of its data.

>>> with Warehouse.open("sample.duckdb") as wh:                   # doctest: +SKIP
...     report = check_warehouse(wh)
>>> report.counts["return_lines"]                                  # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from reachlist.errors import ContractError
from reachlist.query import Query
from reachlist.schema import CONTRACT, LOG_TABLES, SOURCE_TABLES, Kind
from reachlist.warehouse import Warehouse


def kind_of(data_type: str) -> set[Kind]:
    """The logical kinds a physical column type can serve."""
    t = data_type.lower()
    kinds: set[Kind] = set()
    if "int" in t and "interval" not in t:
        kinds |= {"integer", "number"}
    if any(k in t for k in ("decimal", "numeric", "double", "real", "float")):
        kinds.add("number")
    if any(k in t for k in ("char", "text", "string", "varchar")):
        kinds.add("text")
    if "bool" in t:
        kinds.add("boolean")
    if "timestamp" in t or "datetime" in t:
        kinds.add("timestamp")
    elif t == "date":
        kinds |= {"date", "timestamp"}
    return kinds


@dataclass
class Problem:
    table: str
    column: str | None
    message: str
    fix: str


@dataclass
class CheckReport:
    warehouse: str
    dialect: str
    mapping: str
    tables: dict[str, str] = field(default_factory=dict)  # logical -> physical
    log_tables_present: dict[str, bool] = field(default_factory=dict)
    counts: dict[str, Any] = field(default_factory=dict)


def contract_problems(wh: Warehouse, tables: tuple[str, ...] = SOURCE_TABLES) -> list[Problem]:
    problems: list[Problem] = []
    for name in tables:
        tmap = wh.mapping.table(name)
        found = wh.physical_columns(name)
        if found is None:
            problems.append(
                Problem(
                    name,
                    None,
                    f"table {tmap.physical_name!r} (logical table {name}) was not found",
                    f"create it, or map it in the mapping file: {wh.mapping.key_for(name)} = "
                    '"your_table"',
                )
            )
            continue
        by_name = {c.name.lower(): c for c in found}
        for col in CONTRACT[name].columns:
            physical = tmap.column(col.name)
            pc = by_name.get(physical.lower())
            if pc is None:
                problems.append(
                    Problem(
                        name,
                        col.name,
                        f"column {physical!r} (logical {name}.{col.name}, {col.kind}) is missing "
                        f"from {tmap.physical_name!r}; found {', '.join(c.name for c in found)}",
                        f"map it in the mapping file: {wh.mapping.key_for(name, col.name)} = "
                        '"your_column"',
                    )
                )
            elif col.kind not in kind_of(pc.data_type):
                problems.append(
                    Problem(
                        name,
                        col.name,
                        f"column {tmap.physical_name}.{pc.name} (logical {name}.{col.name}) "
                        f"should hold {col.kind} values, found type {pc.data_type}",
                        f"map {wh.mapping.key_for(name, col.name)} to a column of type "
                        f"{col.kind}, or add a view that casts it",
                    )
                )
    return problems


def require_contract(wh: Warehouse, tables: tuple[str, ...] = SOURCE_TABLES) -> None:
    """Raise one ContractError line for the first problem (and say how many more there are)."""
    problems = contract_problems(wh, tables)
    if problems:
        first = problems[0]
        more = f" ({len(problems) - 1} more problem(s) after this one)" if len(problems) > 1 else ""
        raise ContractError(
            f"Warehouse {wh.display_name}: {first.message}{more}.",
            hint=f"{first.fix} (mapping: {wh.mapping.source})",
        )


def check_warehouse(wh: Warehouse) -> CheckReport:
    """Validate the contract, then count rows, the date range and the data's quirks."""
    require_contract(wh)
    report = CheckReport(wh.display_name, wh.dialect.name, wh.mapping.source)
    for name in SOURCE_TABLES:
        report.tables[name] = wh.mapping.table(name).physical_name
    for name in LOG_TABLES:
        report.log_tables_present[name] = wh.physical_columns(name) is not None
    row = wh.fetch(Query.from_template("check_quirks")).row(0, named=True)
    report.counts = dict(row)
    return report
