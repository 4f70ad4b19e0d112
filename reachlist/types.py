"""Which physical column types serve which logical kinds, and the casts reachlist adds itself.

A real warehouse stores what the contract calls a timestamp as TIMESTAMP_NS (a pandas frame
loaded into DuckDB) or TIMESTAMP WITH TIME ZONE, a SKU as an integer article number, a customer id
as text or a UUID. Types that convert without loss are cast in the mapping's views, without
asking; types that do not (text where a number is expected, say) are problems ``check`` reports.

>>> cast_for("timestamp", "TIMESTAMP_NS", "VARCHAR")
'TIMESTAMP'
>>> cast_for("text", "BIGINT", "VARCHAR")
'VARCHAR'
>>> cast_for("integer", "VARCHAR", "VARCHAR") is INCOMPATIBLE
True
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Final

from reachlist.schema import CONTRACT, SOURCE_TABLES, Kind


class _Incompatible:
    def __repr__(self) -> str:
        return "INCOMPATIBLE"


INCOMPATIBLE: Final = _Incompatible()
"""A physical type that cannot serve a logical kind without the owner's own expression."""

ID_GROUPS: dict[str, tuple[str, ...]] = {
    "customer_id": ("customers", "orders", "suppressions"),
    "order_id": ("orders", "order_lines"),
}
"""Columns compared with each other across tables: if one holds text, all are read as text."""


def family(data_type: str) -> str:
    """A physical type's family: int, decimal, text, uuid, bool, date, timestamp (plain, as the
    contract means it), timestamp_other (nanoseconds, milliseconds, seconds, with time zone), or
    other."""
    t = data_type.strip().lower()
    if t == "uuid":
        return "uuid"
    if "interval" in t:
        return "other"
    if "int" in t and "point" not in t:
        return "int"
    if any(k in t for k in ("decimal", "numeric", "double", "real", "float")):
        return "decimal"
    if any(k in t for k in ("char", "text", "string")):
        return "text"
    if "bool" in t:
        return "bool"
    if t == "date":
        return "date"
    if t in ("timestamp", "timestamp without time zone", "datetime", "timestamp_us") or (
        t.startswith("timestamp(") and "zone" not in t
    ):
        return "timestamp"
    if "timestamp" in t:
        return "timestamp_other"
    return "other"


_PLAIN: dict[Kind, set[str]] = {
    "id": {"int", "text"},
    "integer": {"int"},
    "text": {"text"},
    "boolean": {"bool"},
    "date": {"date"},
    "timestamp": {"timestamp"},
    "number": {"int", "decimal"},
}


def cast_for(kind: Kind, data_type: str, text_type: str) -> str | None | _Incompatible:
    """The SQL type to cast a column of ``data_type`` to so it serves ``kind``: None when it serves
    as it is, ``INCOMPATIBLE`` when no lossless cast exists. ``text_type`` is the dialect's."""
    fam = family(data_type)
    if fam in _PLAIN[kind]:
        return None
    if kind == "timestamp" and fam in ("timestamp_other", "date"):
        return "TIMESTAMP"
    if kind == "date" and fam in ("timestamp", "timestamp_other"):
        return "DATE"
    if kind in ("text", "id") and fam in ("int", "uuid"):
        return text_type
    return INCOMPATIBLE


def plan_casts(
    mapping_tables: Mapping[str, object],
    physical: dict[str, dict[str, str] | None],
    text_type: str,
) -> tuple[dict[str, dict[str, str]], bool]:
    """Casts per logical table (logical column -> SQL type) for the physical types found, and
    whether customer ids are text. ``physical`` maps each source table to its columns' types by
    logical column name (None: the table is missing; a column absent: a mapped expression or a
    missing column, neither of which is cast here). Incompatible types are left for ``check``."""
    casts: dict[str, dict[str, str]] = {}
    for name in SOURCE_TABLES:
        cols = physical.get(name)
        if not cols:
            continue
        for col in CONTRACT[name].columns:
            if col.name not in cols:
                continue
            to = cast_for(col.kind, cols[col.name], text_type)
            if isinstance(to, str):
                casts.setdefault(name, {})[col.name] = to
    text_ids = False
    for column, tables in ID_GROUPS.items():
        fams = {
            family(physical[t][column])  # type: ignore[index]
            for t in tables
            if physical.get(t) and column in (physical[t] or {})
        }
        if fams & {"text", "uuid"}:
            for t in tables:
                cols = physical.get(t)
                if cols and column in cols and family(cols[column]) == "int":
                    casts.setdefault(t, {})[column] = text_type
            if column == "customer_id":
                text_ids = True
    return casts, text_ids
