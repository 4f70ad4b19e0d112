"""`reachlist demo`: the main job end to end on the sample warehouse."""

from __future__ import annotations

from pathlib import Path

import click

from reachlist.cli import main, out
from reachlist.cli.progress import delayed_status

DEMO_TARGET = "SG04-104"  # the sample's heated seedling mat (see sample_warehouse/README.md)


@main.command()
@click.option("--dir", "directory", default="reachlist-demo", show_default=True,
              help="Folder for the sample warehouse and the list.")
def demo(directory: str) -> None:
    """Build the sample warehouse (if absent) and run the main job on it."""
    from reachlist.render.rules import render_rules
    from reachlist.rules import mine_rules
    from reachlist.render.sample import sample_summary
    from reachlist.sample import build_sample
    from reachlist.warehouse import Warehouse

    folder = Path(directory)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "garden.duckdb"
    if not path.exists():
        with delayed_status(out, "Building the sample warehouse"):
            summary = build_sample(path)
        out.print(sample_summary(summary))
    out.print(f"[bold]1. Rules toward the heated seedling mat ({DEMO_TARGET})[/]")
    out.print(f"$ reachlist rules {DEMO_TARGET} -w {path} --top 5")
    with Warehouse.open(path, read_only=True) as wh, delayed_status(out, "Mining") as progress:
        rs = mine_rules(wh, DEMO_TARGET, progress=progress)
    render_rules(rs.frame, out, title=f"Rules toward {rs.target}, {rs.n_baskets:,} customer "
                 f"baskets, {rs.window}", limit=5, footer=[])
