"""The warehouse contract (logical tables and columns) and the TOML mapping onto a real warehouse.

A warehouse names things its own way. A mapping file says, per logical table, which physical table
holds it and which physical column holds each logical column; anything not mapped keeps its logical
name. Example::

    # reachlist mapping: logical name = name in your warehouse
    schema = "retail"               # optional: the schema of every table not qualified below

    [customers]
    table = "crm.shoppers"          # schema-qualified names are fine
    customer_id = "shopper_no"
    marketing_consent = "email_opt_in"

    [order_lines]
    table = "sales.basket_rows"
    sku = "article"

On Spark a table can come from Parquet instead of the catalogue: ``path = "/lake/orders.parquet"``
under its section, or ``lake = "/path/to/lake"`` at the top for one ``NAME.parquet`` per table
(``customers.parquet``, ``products.parquet``, ...).

Every query reachlist runs is written against the logical names; ``views_sql`` turns the mapping
into common table expressions so the same query runs on any mapped warehouse.
"""

from __future__ import annotations

import dataclasses
import difflib
import tomllib
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Literal

from reachlist.errors import ContractError, InputError
from reachlist.wording import option

Kind = Literal["id", "integer", "text", "boolean", "date", "timestamp", "number"]
"""``id``: an identifier that may be an integer or text (alphanumeric codes, UUIDs)."""


@dataclass(frozen=True)
class Column:
    name: str
    kind: Kind
    nullable: bool = False
    doc: str = ""


@dataclass(frozen=True)
class Table:
    name: str
    columns: tuple[Column, ...]
    owned: bool = False  # created and written by reachlist (the campaign log)
    doc: str = ""

    def column(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise KeyError(name)

    @property
    def column_names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)


CONTRACT: dict[str, Table] = {
    t.name: t
    for t in (
        Table(
            "customers",
            (
                Column("customer_id", "id"),
                Column("email", "text", nullable=True),
                Column("marketing_consent", "boolean", nullable=True, doc="NULL counts as no"),
                Column("consent_date", "date", nullable=True),
                Column("birth_date", "date", nullable=True, doc="NULL = age not known"),
                Column("region", "text", nullable=True),
            ),
            doc="one row per customer",
        ),
        Table(
            "products",
            (
                Column("sku", "text"),
                Column("name", "text"),
                Column("category", "text"),
                Column("department", "text"),
                Column("age_restricted", "boolean"),
                Column("sensitive", "boolean", doc="true for items of a sensitive category"),
                Column("launch_date", "date", nullable=True),
                Column("stock_on_hand", "integer", nullable=True),
            ),
            doc="the product hierarchy sku -> category -> department",
        ),
        Table(
            "orders",
            (
                Column("order_id", "id"),
                Column("customer_id", "id"),
                Column("ordered_at", "timestamp"),
                Column("channel", "text", nullable=True),
            ),
            doc="one row per checkout (returns are orders too)",
        ),
        Table(
            "order_lines",
            (
                Column("order_id", "id"),
                Column("sku", "text"),
                Column("quantity", "number", doc="negative for returns"),
                Column("net_amount", "number", nullable=True),
            ),
            doc="order lines; returns have negative quantity",
        ),
        Table(
            "suppressions",
            (
                Column("customer_id", "id"),
                Column("reason", "text", nullable=True),
                Column("suppressed_at", "date", nullable=True),
            ),
            doc="customers who must not be contacted",
        ),
        Table(
            "campaigns",
            (
                Column("campaign_id", "text"),
                Column("created_at", "timestamp"),
                Column("target", "text"),
                Column("purpose", "text"),
                Column("parameters", "text", doc="JSON"),
                Column("rules", "text", doc="JSON"),
                Column("counts", "text", doc="JSON"),
                Column("overrides", "text", nullable=True, doc="consent/suppression switched off"),
            ),
            owned=True,
            doc="the campaign log (written by reachlist)",
        ),
        Table(
            "campaign_contacts",
            (
                Column("campaign_id", "text"),
                Column("customer_id", "id"),
                Column("contact_group", "text", doc="treatment or holdout"),
                Column("score", "number", nullable=True),
                Column("rule_id", "text", nullable=True, doc="the reaching rule"),
                Column("contacted_at", "timestamp"),
            ),
            owned=True,
            doc="who was in treatment and who in holdout",
        ),
    )
}

SOURCE_TABLES = tuple(name for name, t in CONTRACT.items() if not t.owned)
LOG_TABLES = tuple(name for name, t in CONTRACT.items() if t.owned)
LAKE_VIEW = "reachlist_"  # prefix of the session views that present Parquet paths as tables


def lake_view(table: str, path: str) -> str:
    """The session view a Parquet path is read as: one per path, so two mappings in one session
    never read each other's files."""
    import hashlib

    return f"{LAKE_VIEW}{table}_{hashlib.sha256(path.encode()).hexdigest()[:10]}"


@dataclass(frozen=True)
class ColumnSource:
    """Where a logical column comes from when it is not a physical column: a SQL expression over
    the mapped table (``{ sql = "CAST(article_no AS VARCHAR)" }``, run as written: it is the
    warehouse owner's own SQL) or a constant (``{ value = false }``, written as a literal)."""

    kind: Literal["sql", "value"]
    sql: str = ""
    value: object = None

    def describe(self) -> str:
        return (
            f"{{ sql = {self.sql!r} }}" if self.kind == "sql" else f"{{ value = {self.value!r} }}"
        )


@dataclass(frozen=True)
class TableMap:
    logical: str
    physical: tuple[str, ...]  # schema parts + table name, unquoted
    columns: dict[str, str] = field(default_factory=dict)  # logical -> physical
    sources: dict[str, ColumnSource] = field(default_factory=dict)  # logical -> expression/constant
    # logical -> SQL type: physical columns whose type reachlist casts (TIMESTAMP_NS -> TIMESTAMP,
    # an integer SKU -> text); filled in by the warehouse from the physical types it finds
    casts: dict[str, str] = field(default_factory=dict)
    # a Parquet file or folder holding the table (engines that read files: Spark); the table is
    # then read as a session view named by ``physical``
    path: str | None = None

    def column(self, logical: str) -> str:
        return self.columns.get(logical, logical)

    def source(self, logical: str) -> ColumnSource | None:
        return self.sources.get(logical)

    @property
    def is_identity(self) -> bool:
        return (
            self.physical == (self.logical,)
            and not self.sources
            and not self.casts
            and all(self.column(c) == c for c in CONTRACT[self.logical].column_names)
        )

    @property
    def physical_name(self) -> str:
        return ".".join(self.physical)


@dataclass(frozen=True)
class Mapping:
    """Logical contract -> physical names. ``Mapping.identity()`` is the sample warehouse's."""

    tables: dict[str, TableMap]
    source: str = "(built-in identity mapping)"

    @classmethod
    def identity(cls) -> Mapping:
        return cls({name: TableMap(name, (name,)) for name in CONTRACT})

    @classmethod
    def from_toml(cls, path: str | Path) -> Mapping:
        p = Path(path)
        try:
            raw = tomllib.loads(p.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise InputError(
                f"Mapping file {str(p)!r} was not found.",
                hint=f"pass {option('mapping')} with the path of an existing TOML file",
            ) from None
        except IsADirectoryError:
            raise InputError(
                f"Expected a mapping file (TOML) at {str(p)!r}, found a folder.",
                hint="pass the path of the .toml file itself",
            ) from None
        except UnicodeDecodeError:
            raise InputError(
                f"Expected a mapping file (TOML text) at {str(p)!r}, found binary data.",
                hint="pass the path of the .toml mapping file",
            ) from None
        except PermissionError:
            raise InputError(
                f"Expected a readable mapping file at {str(p)!r}, found no permission to read it.",
                hint="check the file's permissions",
            ) from None
        except tomllib.TOMLDecodeError as exc:
            raise InputError(
                f"Mapping file {str(p)!r} is not valid TOML: {exc}.",
                hint="check the line named; see DEVELOPERS.md for the mapping format",
            ) from None
        return cls.from_dict(raw, source=str(p))

    @classmethod
    def from_dict(cls, raw: dict[str, object], source: str = "(mapping)") -> Mapping:
        default_schema = raw.get("schema")
        if default_schema is not None and (
            not isinstance(default_schema, str) or not default_schema.strip()
        ):
            raise InputError(
                f"Mapping {source}: schema must be a non-empty string, found {default_schema!r}.",
                hint='write schema = "name_of_your_schema" at the top of the file',
            )
        base: tuple[str, ...] = (default_schema.strip(),) if default_schema else ()
        tables = {name: TableMap(name, (*base, name)) for name in CONTRACT}
        lake = raw.get("lake")
        if lake is not None:
            if not isinstance(lake, str) or not lake.strip():
                raise InputError(
                    f"Mapping {source}: lake must be a folder path, found {lake!r}.",
                    hint='write lake = "/path/to/lake" (one NAME.parquet per contract table)',
                )
            for name in SOURCE_TABLES:
                file = f"{lake.rstrip('/')}/{name}.parquet"
                tables[name] = TableMap(name, (lake_view(name, file),), path=file)
        for key, section in raw.items():
            if key in ("schema", "lake"):
                continue
            if key not in CONTRACT:
                raise InputError(
                    f"Mapping {source}: [{key}] is not a table of the contract "
                    f"(expected one of {', '.join(CONTRACT)}).",
                    hint=_suggest(key, list(CONTRACT)),
                )
            if not isinstance(section, dict):
                raise InputError(
                    f'Mapping {source}: [{key}] must be a table of name = "value" lines, '
                    f"found {type(section).__name__}.",
                    hint=f'write [{key}] on its own line, then table = "your_table"',
                )
            table = CONTRACT[key]
            physical: tuple[str, ...] = tables[key].physical
            path = tables[key].path
            columns: dict[str, str] = {}
            sources: dict[str, ColumnSource] = {}
            for col, value in section.items():
                if col == "path" and not table.owned:
                    if not isinstance(value, str) or not value.strip():
                        raise InputError(
                            f"Mapping {source}: {key}.path must be a Parquet file or folder, "
                            f"found {value!r}.",
                            hint=f'write path = "/path/to/lake/{key}.parquet"',
                        )
                    path = value.strip()
                    physical = (lake_view(key, path),)
                    continue
                if col != "table" and col not in table.column_names:
                    raise InputError(
                        f"Mapping {source}: {key}.{col} is not a column of {key} "
                        f"(expected table or one of {', '.join(table.column_names)}).",
                        hint=_suggest(col, ["table", *table.column_names]),
                    )
                if isinstance(value, dict) and col != "table" and not table.owned:
                    sources[col] = _column_source(value, f"{key}.{col}", source)
                    continue
                if not isinstance(value, str) or not value.strip():
                    expression = (
                        ""
                        if table.owned or col == "table"
                        else (', { sql = "EXPRESSION" } or { value = CONSTANT }')
                    )
                    raise InputError(
                        f"Mapping {source}: {key}.{col} must be a non-empty string"
                        f"{' or a table' if expression else ''}, found {value!r}.",
                        hint=f'write {col} = "name_in_your_warehouse"{expression}',
                    )
                if col == "table":
                    parts = tuple(part.strip() for part in value.split("."))
                    physical = parts if len(parts) > 1 else (*base, *parts)
                else:
                    columns[col] = value
            tables[key] = TableMap(key, physical, columns, sources, path=path)
        return cls(tables, source=source)

    @property
    def paths(self) -> dict[str, str]:
        """Tables read from files: logical name -> Parquet path."""
        return {name: t.path for name, t in self.tables.items() if t.path is not None}

    def with_casts(self, casts: dict[str, dict[str, str]]) -> Mapping:
        """The same mapping with the casts a warehouse's physical types need."""
        tables = {
            name: dataclasses.replace(t, casts=dict(casts.get(name, {})))
            for name, t in self.tables.items()
        }
        return Mapping(tables, source=self.source)

    def table(self, logical: str) -> TableMap:
        return self.tables[logical]

    def key_for(self, logical_table: str, logical_column: str | None = None) -> str:
        """The mapping-file key that names a table or column (for error messages)."""
        if logical_column is None:
            return f"[{logical_table}] table"
        return f"[{logical_table}] {logical_column}"


def _column_source(value: dict[str, object], where: str, source: str) -> ColumnSource:
    keys = sorted(value)
    if keys == ["sql"] and isinstance(value["sql"], str) and value["sql"].strip():
        text = value["sql"].strip()
        if ";" in text or "--" in text or "/*" in text:
            raise InputError(
                f"Mapping {source}: {where} must be one SQL expression, found {text!r} (a ';' or "
                "a comment would end or hide part of reachlist's query).",
                hint='write one expression such as { sql = "CAST(article_no AS VARCHAR)" }',
            )
        return ColumnSource("sql", sql=text)
    if keys == ["value"] and isinstance(value["value"], bool | int | float | str | date):
        return ColumnSource("value", value=value["value"])
    raise InputError(
        f'Mapping {source}: {where} must be a column name, {{ sql = "EXPRESSION" }} or '
        f"{{ value = CONSTANT }}, found {value!r}.",
        hint='for example { sql = "CAST(article_no AS VARCHAR)" } or { value = false }',
    )


def _suggest(word: str, choices: list[str]) -> str:
    close = difflib.get_close_matches(word, choices, n=1)
    if close:
        return f"did you mean {close[0]!r}?"
    return "use one of the names listed"


def require_table(name: str) -> Table:
    try:
        return CONTRACT[name]
    except KeyError:
        raise ContractError(f"{name!r} is not a table of the contract.") from None
