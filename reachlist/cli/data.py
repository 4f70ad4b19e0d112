"""Commands about the warehouse itself: sample, check, holdings, copy."""

from __future__ import annotations

import click

from reachlist.cli import err, main, out, warehouse_options
from reachlist.warehouse import Warehouse


@main.command()
@click.option("--out", "out_path", required=True, help="DuckDB file to write.")
@click.option(
    "--customers",
    default=20_000,
    show_default=True,
    type=click.IntRange(500, 10_000_000),
    help="Customers to generate (500 to 10,000,000).",
)
@click.option(
    "--seed",
    default=7,
    show_default=True,
    type=click.IntRange(0, 2**32 - 1),
    help="Random seed: the same seed and size always give the same warehouse.",
)
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
def sample(out_path: str, customers: int, seed: int, force: bool) -> None:
    """Write the fictional garden-and-home retailer's warehouse (deterministic).

    Example: reachlist sample --out garden.duckdb --customers 20000
    """
    from reachlist.render.sample import sample_summary
    from reachlist.sample import build_sample

    summary = build_sample(out_path, customers=customers, seed=seed, overwrite=force)
    out.print(sample_summary(summary))
    from reachlist.holdings import build
    from reachlist.render.sample import holdings_line
    from reachlist.warehouse import Warehouse

    with Warehouse.open(out_path) as wh:
        out.print(holdings_line(build(wh)))


@main.command()
@warehouse_options
def holdings(wh: Warehouse) -> None:
    """Read the order history once into the holdings file beside a DuckDB warehouse (one row
    per customer, SKU and day). Every command that reads the history then uses it, and
    rebuilds it when the history has changed.

    Example: reachlist holdings -w garden.duckdb
    """
    from reachlist.cli.progress import delayed_status
    from reachlist.holdings import build
    from reachlist.render.sample import holdings_line

    with delayed_status(err, "Holdings") as step:
        built = build(wh, progress=step)
    out.print(holdings_line(built))


@main.command()
@warehouse_options
@click.option("--json", "as_json", is_flag=True, help="Print JSON (numbers as numbers).")
def check(wh: Warehouse, as_json: bool) -> None:
    """Validate a warehouse against the contract and count its data quirks.

    Example: reachlist check -w postgresql+psycopg://me@db/shop -m shop-mapping.toml
    """
    from reachlist.check import check_warehouse
    from reachlist.errors import ContractError
    from reachlist.render.check import check_json, render_check

    report = check_warehouse(wh)
    if as_json:
        click.echo(check_json(report))
    else:
        render_check(report, out)
    if not report.ok:
        n = len(report.errors)
        raise ContractError(
            f"Expected a warehouse that matches the contract, found {n:,} error(s) "
            f"{'in the JSON' if as_json else 'listed above'}.",
            hint="apply the fix of each row (mapping lines go in the file passed with -m), then "
            "run check again",
        )


@main.command("copy")
@click.argument("source")
@click.option("--to", "dest", required=True, help="SQLAlchemy URL of the destination warehouse.")
@click.option("--schema", default=None, help="Create the tables in this schema.")
@click.option("--replace", is_flag=True, help="Drop and reload tables that already exist.")
def copy_cmd(source: str, dest: str, schema: str | None, replace: bool) -> None:
    """Copy the contract tables of SOURCE (a DuckDB file) into another warehouse.

    Example: reachlist copy garden.duckdb --to postgresql+psycopg://me@db/test --schema garden
    """
    from reachlist.transfer import copy_warehouse

    copied = copy_warehouse(source, dest, schema=schema, replace=replace)
    for name, n in copied.items():
        out.print(f"{name:<14} {n:>12,} rows")
    if schema:
        out.print(f'Map it with a mapping file holding: schema = "{schema}"')
