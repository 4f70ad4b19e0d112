"""Finding targets and stand-ins: products, categories and departments whose code or name holds
a search text, with how many customers bought each inside a window.

A CRM manager knows the product by name ("heated mat"), not by its code; this turns the name into
the target text the other commands take (``SG04-104``, ``category:Heated mats``) and shows how
many customers bought each candidate, which is what decides whether rules toward it can be mined.

>>> found = find_items(wh, "mat")                                    # doctest: +SKIP
>>> found.items.select("target", "buyers").head(3)                   # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date, datetime

import polars as pl

from reachlist.errors import EmptyResultError, InputError
from reachlist.query import Query
from reachlist.targets import LEVEL_COLUMN, Window, mining_window
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["DEFAULT_MOST_COUNTED", "DEFAULT_TOP", "ItemSearch", "find_items", "like_pattern"]

DEFAULT_TOP = 10  # rows shown per kind (departments, categories, products)
DEFAULT_MOST_COUNTED = 2_000  # products (or groups) whose buyers one search counts at most
MAX_SEARCH_LENGTH = 200

_COLUMNS = [
    "kind",
    "target",
    "name",
    "category",
    "department",
    "skus",
    "buyers",
    "units",
    "net_amount",
]


@dataclass(frozen=True)
class ItemSearch:
    """What a search found: one row per item, departments and categories before products, each
    kind with the most buyers first; ``matched`` counts every match, ``notes`` say what was cut."""

    text: str
    window: Window
    items: pl.DataFrame
    matched: dict[str, int]
    notes: list[str] = field(default_factory=list)


def like_pattern(text: str) -> str:
    """The LIKE pattern for "contains ``text``", case-insensitive, with ``!`` as escape."""
    escaped = text.lower().replace("!", "!!").replace("%", "!%").replace("_", "!_")
    return f"%{escaped}%"


def _check_text(text: str) -> str:
    cleaned = text.strip()
    if not cleaned:
        raise InputError(
            "Expected a search text (part of a product code, name, category or department), "
            "found an empty string.",
            hint='pass a word from the product name, for example reachlist items "mat"',
        )
    if len(cleaned) > MAX_SEARCH_LENGTH:
        raise InputError(
            f"Expected a search text of at most {MAX_SEARCH_LENGTH} characters, found "
            f"{len(cleaned):,}.",
            hint="search for a word of the product name or code",
        )
    return cleaned


def find_items(
    wh: Warehouse,
    text: str,
    *,
    since: date | datetime | str | None = None,
    until: date | datetime | str | None = None,
    top: int = DEFAULT_TOP,
    most_counted: int = DEFAULT_MOST_COUNTED,
) -> ItemSearch:
    """Products, categories and departments whose code or name contains ``text``.

    Buyers are customers whose net quantity inside the window is positive (the mining window by
    default: the year up to the last order). Buyers are counted for at most ``most_counted``
    matching products and as many groups of each level, the first by code or name; ``notes`` says
    when more matched. ``top`` rows of each kind are kept."""
    if top < 1 or most_counted < 1:
        raise InputError(
            f"Expected top and most_counted of at least 1, found {top} and {most_counted}.",
            hint=f"pass {option('top')} 1 or more",
        )
    cleaned = _check_text(text)
    window = mining_window(wh, since, until)
    params = {
        "pattern": like_pattern(cleaned),
        "since": window.since,
        "until": window.until,
        "most": most_counted,
    }
    counts = wh.fetch(Query.from_template("item_match_counts", {"pattern": params["pattern"]}))
    matched = {kind: int(counts[kind][0] or 0) for kind in ("departments", "categories", "skus")}
    notes = [
        f"{matched[kind]:,} {label} match; buyers were counted for the first {most_counted:,} "
        f"by {'code' if kind == 'skus' else 'name'} (search for a longer text to see the rest)."
        for kind, label in (
            ("skus", "products"),
            ("categories", "categories"),
            ("departments", "departments"),
        )
        if matched[kind] > most_counted
    ]
    parts = []
    for level in ("department", "category"):
        kind = f"{'categories' if level == 'category' else 'departments'}"
        if matched[kind] == 0:
            continue
        groups = wh.fetch(Query.from_template("group_search", params, level=LEVEL_COLUMN[level]))
        parts.append(
            groups.select(
                pl.lit(level).alias("kind"),
                (pl.lit(f"{level}:") + pl.col("item").cast(pl.String)).alias("target"),
                pl.col("item").cast(pl.String).alias("name"),
                pl.lit(None, pl.String).alias("category"),
                pl.lit(None, pl.String).alias("department"),
                pl.col("skus").cast(pl.Int64),
                pl.col("buyers").cast(pl.Int64),
                pl.col("units").cast(pl.Float64),
                pl.col("net_amount").cast(pl.Float64),
            )
        )
    if matched["skus"]:
        skus = wh.fetch(Query.from_template("item_search", params))
        parts.append(
            skus.select(
                pl.lit("sku").alias("kind"),
                pl.col("sku").cast(pl.String).alias("target"),
                pl.col("name").cast(pl.String),
                pl.col("category").cast(pl.String),
                pl.col("department").cast(pl.String),
                pl.lit(1, pl.Int64).alias("skus"),
                pl.col("buyers").cast(pl.Int64),
                pl.col("units").cast(pl.Float64),
                pl.col("net_amount").cast(pl.Float64),
            )
        )
    if not parts:
        total = wh.scalar(Query.from_template("product_count"))
        raise EmptyResultError(
            f"Expected products, categories or departments whose code or name contains "
            f"{cleaned!r}, found none among {int(total or 0):,} products.",
            hint="search for a shorter part of the name or code",
        )
    order = {"department": 0, "category": 1, "sku": 2}
    items = (
        pl.concat(parts)
        .with_columns(pl.col("kind").replace_strict(order, return_dtype=pl.Int8).alias("_order"))
        .sort(["_order", "buyers", "target"], descending=[False, True, False])
        .group_by("_order", maintain_order=True)
        .head(top)
        .drop("_order")
        .select(_COLUMNS)
    )
    for kind, label in (
        ("skus", "products"),
        ("categories", "categories"),
        ("departments", "departments"),
    ):
        shown = min(matched[kind], top)
        if matched[kind] > shown:
            notes.append(
                f"{shown:,} of {matched[kind]:,} matching {label} shown, most buyers "
                f"first ({option('top')} to change)."
            )
    return ItemSearch(cleaned, window, items, matched, notes)
