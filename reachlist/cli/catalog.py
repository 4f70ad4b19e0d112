"""`reachlist items`: find targets and stand-ins by name, category or code."""

from __future__ import annotations

import click

from reachlist.cli import main, out, warehouse_options
from reachlist.warehouse import Warehouse


@main.command()
@click.argument("search")
@warehouse_options
@click.option(
    "--since",
    default=None,
    help="Count buyers from this day (YYYY-MM-DD) [default: 12 months before --until].",
)
@click.option(
    "--until",
    default=None,
    help="Count buyers before this day (exclusive) [default: the day after the last order].",
)
@click.option(
    "--top",
    default=10,
    show_default=True,
    type=click.IntRange(1, 1000),
    help="Rows shown of each kind (departments, categories, products).",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
def items(
    wh: Warehouse, search: str, since: str | None, until: str | None, top: int, as_json: bool
) -> None:
    """Products, categories and departments whose code or name contains SEARCH, with how many
    customers bought each: the targets and stand-ins the other commands take.

    Example: reachlist items "seedling mat"
    """
    from reachlist.catalog import find_items
    from reachlist.render.items import items_json, render_items

    found = find_items(wh, search, since=since, until=until, top=top)
    if as_json:
        click.echo(items_json(found))
    else:
        render_items(out, found)
