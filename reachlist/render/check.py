"""Rendering of `reachlist check`."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from reachlist.check import CheckReport
from reachlist.render import fmt_count

_QUIRKS = [
    ("return_lines", "return lines (negative quantity)", "not counted as purchases"),
    ("zero_quantity_lines", "zero-quantity lines", "ignored"),
    ("duplicate_lines", "exact duplicate lines", "counted once"),
    ("unknown_sku_lines", "lines with a SKU not in products", "ignored in mining"),
    ("unknown_skus", "distinct unknown SKUs", ""),
    ("lines_without_order", "lines whose order is missing", "ignored"),
    ("orders_without_customer", "orders whose customer is missing", "ignored"),
    ("customers_without_consent", "customers without marketing consent", "excluded from lists"),
    ("customers_age_unknown", "customers of unknown age", "excluded for restricted items"),
    ("customers_without_email", "customers without email", ""),
    ("customers_suppressed", "customers on the suppression list", "excluded from lists"),
    ("age_restricted_products", "age-restricted products", ""),
    ("sensitive_categories", "sensitive categories", "need an explicit flag"),
    ("products_never_sold", "products with no order lines", "need a stand-in to target"),
    ("products_ungrouped", "products without category/dept.", "left out at that level"),
]


def problems_table(report: CheckReport) -> Table:
    table = Table(title="Problems", title_justify="left", show_lines=True, expand=True)
    table.add_column("", no_wrap=True, width=1)
    table.add_column("what", ratio=2, overflow="fold")
    table.add_column("where", ratio=3, overflow="fold")
    table.add_column("found", ratio=3, overflow="fold")
    table.add_column("fix", ratio=4, overflow="fold")
    for p in report.problems:
        mark = "[red]x[/]" if p.severity == "error" else "[yellow]![/]"
        table.add_row(mark, escape(p.what), escape(p.where), escape(p.found), escape(p.fix))
    return table


def render_check(report: CheckReport, console: Console) -> None:
    c = report.counts
    console.print(
        f"[bold]Warehouse[/] {escape(report.warehouse)} ({report.dialect}); mapping: "
        f"{escape(report.mapping)}"
    )
    errors, warnings = len(report.errors), len(report.problems) - len(report.errors)
    if report.problems:
        console.print(problems_table(report))
        console.print(
            f"{errors:,} error(s) (x: lists cannot be built until fixed), {warnings:,} "
            "warning(s) (!: handled by every command, and reported)."
        )
    if report.casts:
        console.print(
            "Read with a conversion (lossless, no action needed): "
            + escape("; ".join(report.casts))
            + "."
        )
    if errors:
        return
    console.print("[green]Contract: every table and column found, with usable types.[/]")
    tables = Table(title="Tables", title_justify="left", show_edge=False)
    tables.add_column("logical")
    tables.add_column("in the warehouse")
    tables.add_column("rows", justify="right")
    for name, physical in report.tables.items():
        tables.add_row(name, escape(physical), fmt_count(c.get(name)))
    for name, present in report.log_tables_present.items():
        tables.add_row(name, "present" if present else "(created on first build)", "")
    console.print(tables)
    console.print(
        f"Orders from {fmt_count(c['first_order_at'])} to {fmt_count(c['last_order_at'])}; "
        f"{fmt_count(c['channels'])} channels; {fmt_count(c['categories'])} categories in "
        f"{fmt_count(c['departments'])} departments."
    )
    quirks = Table(title="Data quirks", title_justify="left", show_edge=False)
    quirks.add_column("what")
    quirks.add_column("count", justify="right")
    quirks.add_column("how reachlist treats it")
    for key, label, treatment in _QUIRKS:
        quirks.add_row(label, fmt_count(c.get(key)), treatment)
    console.print(quirks)


def check_json(report: CheckReport) -> str:
    """`check --json`: problems, conversions, tables and counts (dates as ISO text)."""
    import dataclasses
    import json

    payload = {
        "schema_version": 1,
        "ok": report.ok,
        **{k: v for k, v in dataclasses.asdict(report).items()},
    }
    return json.dumps(
        payload, indent=2, default=lambda v: v.isoformat() if hasattr(v, "isoformat") else str(v)
    )
