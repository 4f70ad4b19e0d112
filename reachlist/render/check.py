"""Rendering of `reachlist check`."""

from __future__ import annotations

from rich.console import Console
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
]


def render_check(report: CheckReport, console: Console) -> None:
    c = report.counts
    console.print(
        f"[bold]Warehouse[/] {report.warehouse} ({report.dialect}); mapping: {report.mapping}"
    )
    console.print("[green]Contract: every table and column found, with usable types.[/]")
    tables = Table(title="Tables", title_justify="left", show_edge=False)
    tables.add_column("logical")
    tables.add_column("in the warehouse")
    tables.add_column("rows", justify="right")
    for name, physical in report.tables.items():
        tables.add_row(name, physical, fmt_count(c.get(name)))
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
