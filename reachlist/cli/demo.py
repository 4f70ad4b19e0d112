"""`reachlist demo`: the main job end to end on the sample warehouse."""

from __future__ import annotations

from pathlib import Path

import click

from reachlist.cli import main, out
from reachlist.cli.progress import delayed_status

DEMO_TARGET = "SG04-104"  # the sample's heated seedling mat (see sample_warehouse/README.md)


def _step(title: str, args: list[str]) -> None:
    out.print()
    out.print(f"[bold]{title}[/]")
    out.print(f"$ reachlist {' '.join(args)}", highlight=False)
    main.main(args, standalone_mode=False)


@main.command()
@click.option(
    "--dir",
    "directory",
    default="reachlist-demo",
    show_default=True,
    help="Folder for the sample warehouse and the list.",
)
def demo(directory: str) -> None:
    """Build the sample warehouse (if absent) and run the main job on it: rules toward a target,
    a preview of the list, then the list itself with its campaign log entry.

    Example: reachlist demo --dir reachlist-demo
    """
    from reachlist.holdings import build as build_holdings
    from reachlist.render.sample import holdings_line, sample_summary
    from reachlist.sample import build_sample
    from reachlist.warehouse import Warehouse

    folder = Path(directory)
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / "garden.duckdb"
    if not path.exists():
        with delayed_status(out, "Building the sample warehouse"):
            summary = build_sample(path)
            with Warehouse.open(path) as wh:
                built = build_holdings(wh)
        out.print(sample_summary(summary))
        out.print(holdings_line(built))
    w = ["-w", str(path)]
    campaign = ["--campaign", "demo-heated-mat"]
    _step("1. Rules toward the heated seedling mat", ["rules", DEMO_TARGET, *w, "--top", "5"])
    _step("2. Preview the list", ["sizes", DEMO_TARGET, *w, *campaign])
    _step(
        "3. Build it (the demo replaces its own earlier list and campaign)",
        [
            "build",
            DEMO_TARGET,
            *w,
            "--out",
            str(folder / "heated-mat.csv"),
            "--force",
            "--replace",
            *campaign,
        ],
    )
