"""Building SQL, apart from running it.

A :class:`Query` is SQL written against the logical contract (see ``reachlist.schema``) with
``:name`` placeholders, plus the values to bind. Nothing here touches a database: ``render`` turns a
query into the exact text and parameters one warehouse will run, and ``reachlist.warehouse`` runs
it. Values are always bound, never spliced; identifiers are quoted only by :func:`quote_ident`.

>>> q = Query("SELECT count(*) FROM orders WHERE customer_id = :cid", {"cid": 7})
>>> render(q, DUCKDB, Mapping.identity()).sql
'SELECT count(*) FROM orders WHERE customer_id = $cid'
"""

from __future__ import annotations

import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from datetime import date, datetime
from importlib import resources
from typing import Any

from reachlist.errors import InputError
from reachlist.schema import CONTRACT, Mapping, TableMap

_PARAM = re.compile(r"(?<![:\w]):([A-Za-z_]\w*)")


def quote_ident(name: str) -> str:
    """Quote one identifier (the only place identifiers are quoted)."""
    if "\x00" in name:
        raise InputError(f"Identifier {name!r} contains a NUL byte.", hint="fix the mapping file")
    return '"' + name.replace('"', '""') + '"'


def quote_qualified(parts: Sequence[str]) -> str:
    return ".".join(quote_ident(p) for p in parts)


@dataclass(frozen=True)
class Dialect:
    """What differs between warehouses, as data rather than branches."""

    name: str
    placeholder: str  # "dollar" ($name, DuckDB native) or "colon" (:name, SQLAlchemy)
    cte_hint: str = ""  # e.g. "NOT MATERIALIZED" where a CTE would otherwise be materialised
    # the same for a CTE that only reads a table (a mapping view, the built holdings): DuckDB
    # materialises a CTE read more than once, which for a table costs a copy of it (at 1M
    # customers the holdings, 23M rows: the take-up history took 22.4 s with, 15.4 s without)
    table_cte_hint: str = ""
    text_type: str = "VARCHAR"  # what integer ids and SKUs are cast to when text is needed
    # standard type names the engine spells its own way (templates write the standard name)
    type_names: tuple[tuple[str, str], ...] = ()
    # whole days from one date to a later one (templates write DAYS_BETWEEN(start, end))
    day_difference: str = "({end} - {start})"
    # one value standing for a (customer, SKU) pair, for joins that set pairs apart (templates
    # write PAIR_KEY(customer, sku)); a 64-bit hash where the engine has one: a single-column
    # key probes faster than two columns (the take-up history at 1M: 6.0-6.7 s -> 4.8-5.2 s). Two
    # pairs may share a value: the templates that use it stay exact when they do (see
    # sql/cutoff_runs.sql)
    pair_key: str = "(CAST({a} AS VARCHAR) || ':' || CAST({b} AS VARCHAR))"
    # where a connection keeps its own temporary tables, named in queries (None: reachlist keeps
    # none there). A server warehouse has no holdings file: a command that reads the holdings
    # several times keeps them there once (reachlist.holdings.prepare, session=True)
    session_schema: str | None = None


DUCKDB = Dialect(
    "duckdb", placeholder="dollar", table_cte_hint="NOT MATERIALIZED", pair_key="hash({a}, {b})"
)
POSTGRES = Dialect(
    "postgresql",
    placeholder="colon",
    cte_hint="NOT MATERIALIZED",
    table_cte_hint="NOT MATERIALIZED",
    text_type="TEXT",
    pair_key="hashtextextended(CAST({a} AS TEXT) || ':' || CAST({b} AS TEXT), 0)",
    session_schema="pg_temp",
)
GENERIC = Dialect("generic", placeholder="colon")


def dialect_named(name: str) -> Dialect:
    return {"duckdb": DUCKDB, "postgresql": POSTGRES}.get(name, GENERIC)


@dataclass(frozen=True)
class Query:
    """SQL over the logical contract plus bound values. Lists expand to one placeholder each."""

    sql: str
    params: dict[str, Any] = field(default_factory=dict)
    label: str = ""

    @classmethod
    def from_template(cls, name: str, params: dict[str, Any] | None = None, **fmt: str) -> Query:
        """Load ``sql/<name>.sql``. ``fmt`` fills ``{slot}`` fragments that reachlist itself builds
        (never user values): for example the list of antecedent conditions of a rule."""
        text = template_text(name)
        if fmt:
            text = text.format(**fmt)
        return cls(text, dict(params or {}), label=name)


@dataclass(frozen=True)
class Rendered:
    sql: str
    params: dict[str, Any]


def template_text(name: str) -> str:
    try:
        return resources.files("reachlist.sql").joinpath(f"{name}.sql").read_text(encoding="utf-8")
    except FileNotFoundError:  # pragma: no cover - packaging error
        raise InputError(f"SQL template {name!r} is missing from the installation.") from None


def raw_sql(query: Query, dialect: Dialect) -> tuple[str, dict[str, Any]]:
    """A query's text and values for SQL over physical names (no mapping views), with the
    dialect's placeholders."""
    sql = query.sql
    if dialect.placeholder == "dollar":
        sql = _PARAM.sub(r"$\1", sql)
    return sql, dict(query.params)


def template_parts(name: str) -> dict[str, str]:
    """The parts of ``sql/<name>.sql``, each the text after a ``-- part: NAME`` line up to the
    next one (trailing blank lines dropped): repeated or optional fragments of one query."""
    parts: dict[str, list[str]] = {}
    current: list[str] | None = None
    for line in template_text(name).split("\n"):
        if line.startswith("-- part: "):
            current = parts.setdefault(line.removeprefix("-- part: ").strip(), [])
        elif current is not None:
            current.append(line)
    return {k: "\n".join(v).rstrip("\n") for k, v in parts.items()}


def with_parts(ctes: Sequence[str], final: str) -> str:
    """One statement from common table expressions (``name AS (...)`` each) and a final one."""
    return ("WITH " + ",\n".join(ctes) + "\n" if ctes else "") + final


def _expand_lists(sql: str, params: dict[str, Any]) -> tuple[str, dict[str, Any]]:
    out: dict[str, Any] = {}
    for key, value in params.items():
        if isinstance(value, (list, tuple, set, frozenset)):
            values = list(value)
            if not values:
                # An empty IN list is not valid SQL; NULL matches nothing and keeps the shape.
                values = [None]
            names = [f"{key}_{i}" for i in range(len(values))]
            sql = re.sub(rf"(?<![:\w]):{key}(?!\w)", ", ".join(f":{n}" for n in names), sql)
            out.update(zip(names, values, strict=False))
        else:
            out[key] = value
    return sql, out


def referenced_tables(sql: str) -> list[str]:
    words = set(re.findall(r"\b([a-z_]+)\b", _strip_comments(sql)))
    return [t for t in CONTRACT if t in words]


def _strip_comments(sql: str) -> str:
    return re.sub(r"--[^\n]*", "", sql)


def views_sql(mapping: Mapping, tables: Iterable[str], dialect: Dialect) -> list[str]:
    """CTEs that present mapped physical tables under their logical names."""
    views = []
    for name in tables:
        tmap = mapping.table(name)
        if tmap.is_identity:
            continue
        cols = ", ".join(f"{column_sql(tmap, c)} AS {c}" for c in CONTRACT[name].column_names)
        hint = f" {dialect.table_cte_hint}" if dialect.table_cte_hint else ""
        views.append(f"{name} AS{hint} (SELECT {cols} FROM {quote_qualified(tmap.physical)})")
    return views


def column_sql(tmap: TableMap, logical: str) -> str:
    """How a view reads one logical column: the physical column, the mapping's expression or
    constant, cast when the physical type needs it."""
    src = tmap.source(logical)
    if src is None:
        expr = quote_ident(tmap.column(logical))
    elif src.kind == "sql":
        expr = f"({src.sql})"
    else:
        expr = literal(src.value)
    to = tmap.casts.get(logical)
    return f"CAST({expr} AS {to})" if to else expr


_LEADING_WITH = re.compile(r"^(\s*(?:--[^\n]*\n\s*)*)WITH\s", re.IGNORECASE)


HOLDINGS = "holdings"  # the logical table of sql/holdings.sql: customer x SKU x day
FIRST_ORDERS = "first_orders"  # of sql/first_orders.sql: each customer's first order time
KEPT_TABLES = {
    # logical table -> the columns the holdings file keeps of it (the same as the derivation's)
    HOLDINGS: "customer_id, sku, order_day, quantity, bought",
    FIRST_ORDERS: "customer_id, first_at",
}


@dataclass(frozen=True)
class BuiltWindow:
    """What the holdings file keeps for the default arguments (``reachlist holdings`` writes it):
    the customer x SKU pairs held in the default mining window [since, until) (``table``, SKUs
    coded by ``items``; ``tids`` the same pairs item by item), and
    every customer's shopping breadth at the default estimate's cutoffs ``until - k * horizon``,
    k = 0 .. ``last``, over ``breadth_days`` (``breadth_table``); both qualified names of attached
    tables. A query with exactly those arguments reads them instead of working them out from the
    holdings' days again (``sql/held_items.sql``, ``sql/takeup_history.sql``)."""

    since: date
    until: date
    table: str  # customer_id, code: the pairs, each SKU as its code in ``items``
    items: str  # code, sku: every SKU in products (sorted by sku, codes from 0)
    tids: str  # code, basket_no: the pairs by code, each customer as its place in ``table``
    breadth_table: str
    horizon: int
    breadth_days: int
    last: int

    def has_pairs(self, since: date, until: date) -> bool:
        """Whether the kept pairs are those of the window [since, until) of days."""
        return (since, until) == (self.since, self.until)

    def has_breadth(self, as_of: date, horizon: int, breadth_days: int, last: int) -> bool:
        """Whether the kept breadth answers for these cutoffs (the first ``last + 1`` of them)."""
        return (as_of, horizon, breadth_days) == (self.until, self.horizon, self.breadth_days) and (
            0 <= last <= self.last
        )


def kept_cte(dialect: Dialect, table: str | None, name: str = HOLDINGS) -> str:
    """How a query reads ``holdings`` or another of ``KEPT_TABLES``: the table built by
    ``reachlist holdings`` when there is a fresh one (``table``, already qualified), else the
    same rows derived from the order history inside the query (``sql/<name>.sql``)."""
    spelled = dialect.cte_hint if table is None else dialect.table_cte_hint
    hint = f" {spelled}" if spelled else ""
    if table is not None:
        body = f"SELECT {KEPT_TABLES[name]} FROM {table}"
    else:
        body = _strip_comments(template_text(name)).strip()
    return f"{name} AS{hint} ({body})"


def kept_beside(holdings: str, name: str) -> str:
    """The qualified name of kept table ``name`` beside the holdings table ``holdings``, with
    the same prefix (``f.main.holdings`` -> ``f.main.first_orders``;
    ``pg_temp.reachlist_holdings`` -> ``pg_temp.reachlist_first_orders``)."""
    schema, dot, last = holdings.rpartition(".")
    prefix = last[: -len(HOLDINGS)] if last.endswith(HOLDINGS) else ""
    return f"{schema}{dot}{prefix}{name}"


def _reads(sql: str, name: str) -> bool:
    return re.search(rf"\b{name}\b", _strip_comments(sql)) is not None


def _two_argument_macro(sql: str, name: str, expand: Callable[[str, str], str]) -> str:
    """Rewrite each ``NAME(first, second)`` in ``sql`` as ``expand(first, second)``."""
    out, pos = [], 0
    while (at := sql.find(f"{name}(", pos)) >= 0:
        depth, i, comma = 0, at + len(name) + 1, -1
        while depth >= 0:
            ch = sql[i]
            if ch == "(":
                depth += 1
            elif ch == ")":
                depth -= 1
            elif ch == "," and depth == 0:
                comma = i
            i += 1
        first = sql[at + len(name) + 1 : comma].strip()
        second = sql[comma + 1 : i - 1].strip()
        out += [sql[pos:at], expand(first, second)]
        pos = i
    return "".join(out) + sql[pos:]


def _dialect_macros(sql: str, dialect: Dialect) -> str:
    """``DAYS_BETWEEN(start, end)`` and ``PAIR_KEY(a, b)`` as this dialect writes them."""
    sql = _two_argument_macro(
        sql, "DAYS_BETWEEN", lambda start, end: dialect.day_difference.format(start=start, end=end)
    )
    return _two_argument_macro(sql, "PAIR_KEY", lambda a, b: dialect.pair_key.format(a=a, b=b))


def render(
    query: Query, dialect: Dialect, mapping: Mapping, holdings: str | None = None
) -> Rendered:
    """The exact SQL text and parameters one warehouse will run. ``holdings`` names the built
    holdings table when a fresh one is attached (see :mod:`reachlist.holdings`); the other kept
    tables lie beside it."""
    sql, params = _expand_lists(query.sql.strip() + "\n", query.params)
    extra: list[str] = []
    for name in KEPT_TABLES:
        if _reads(sql, name):
            table = None if holdings is None else kept_beside(holdings, name)
            extra.append(kept_cte(dialect, table, name))
    views = views_sql(mapping, referenced_tables(sql + "\n".join(extra)), dialect) + extra
    if views:
        prelude = ",\n     ".join(views)
        m = _LEADING_WITH.match(sql)
        if m:
            sql = f"{m.group(1)}WITH {prelude},\n{sql[m.end() :]}"
        else:
            sql = f"WITH {prelude}\n{sql}"
    missing = [n for n in _PARAM.findall(_strip_comments(sql)) if n not in params]
    if missing:
        raise InputError(f"Query {query.label or '(inline)'} needs values for {missing}.")
    sql = _dialect_macros(sql, dialect)
    for standard, own in dialect.type_names:
        sql = re.sub(rf"\bAS {standard}\)", f"AS {own})", sql)
    if dialect.placeholder == "dollar":
        sql = _PARAM.sub(lambda m: "$" + m.group(1), sql)
    return Rendered(sql, params)


def literal(value: Any) -> str:
    """A SQL literal: for display (``reachlist sql --inline``) and for a mapping's constants
    (``{ value = false }``); values of a query are always bound, never written in."""
    if value is None:
        return "NULL"
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, datetime):
        return f"TIMESTAMP '{value.isoformat(sep=' ')}'"
    if isinstance(value, date):
        return f"DATE '{value.isoformat()}'"
    return "'" + str(value).replace("'", "''") + "'"


def inline(rendered: Rendered, dialect: Dialect) -> str:
    """The rendered SQL with values written as literals, for review or for running elsewhere."""
    pattern = r"\$([A-Za-z_]\w*)" if dialect.placeholder == "dollar" else _PARAM.pattern
    return re.sub(pattern, lambda m: literal(rendered.params[m.group(1)]), rendered.sql)
