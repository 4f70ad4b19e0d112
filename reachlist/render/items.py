"""`reachlist items`: what a search for a target found."""

from __future__ import annotations

import json
from typing import Any

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from reachlist.catalog import ItemSearch
from reachlist.render import fmt_count

SCHEMA_VERSION = 1


def render_items(console: Console, found: ItemSearch) -> None:
    table = Table(
        title=f"Items matching {escape(repr(found.text))}; buyers in {found.window}",
        title_justify="left",
        expand=False,
    )
    table.add_column("target", overflow="fold", max_width=30)
    table.add_column("name", overflow="fold", ratio=1)
    table.add_column("buyers", justify="right", no_wrap=True)
    table.add_column("units", justify="right", no_wrap=True)
    for row in found.items.iter_rows(named=True):
        if row["kind"] == "sku":
            name = row["name"] or ""
        else:
            name = f"{row['kind']}, {row['skus']:,} SKU{'s' if row['skus'] != 1 else ''}"
        table.add_row(
            escape(row["target"]),
            escape(name),
            fmt_count(row["buyers"]),
            fmt_count(int(round(row["units"]))),
        )
    console.print(table)
    for note in found.notes:
        console.print(escape(note))
    console.print(
        "Pass a target as shown (reachlist rules TARGET). For a new item without history, its "
        "category can stand in: --stand-in category:NAME."
    )


def items_json(found: ItemSearch) -> str:
    payload: dict[str, Any] = {
        "schema_version": SCHEMA_VERSION,
        "search": found.text,
        "window": {
            "since": found.window.since.isoformat(),
            "until": found.window.until.isoformat(),
        },
        "matched": found.matched,
        "items": found.items.to_dicts(),
        "notes": found.notes,
    }
    return json.dumps(payload, indent=2)
