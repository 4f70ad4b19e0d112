"""The command line: parse, call one library function, render. Nothing else lives here.

This module holds the command group, the shared options and the error handling; the commands
live in one module per family (data, mining, lists, take-up).
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Callable
from typing import Any

import click
from rich.console import Console
from rich.text import Text

from reachlist.errors import ReachlistError
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse

DEFAULT_WAREHOUSE = "garden.duckdb"

def _console(stderr: bool = False) -> Console:
    # Piped output gets 100 columns (rich would pick 80): tables are designed for 100.
    probe = Console(stderr=stderr)
    width = None if probe.is_terminal or "COLUMNS" in os.environ else 100
    return Console(stderr=stderr, highlight=False, width=width)


out = _console()
err = _console(stderr=True)


def _fail(exc: ReachlistError) -> None:
    # The message holds user text (a target, a path, a mapping line): never read it as markup.
    err.print(Text.assemble(("Error:", "bold red"), " ", str(exc)), soft_wrap=True)
    sys.exit(exc.exit_code)


READ_ONLY_COMMANDS = frozenset({
    "check", "items", "rules", "sql", "sizes", "overlap", "estimate", "backtest", "results",
    "campaigns", "brief",
})
"""Commands that never write to the warehouse: they open a DuckDB file read-only, so several can
run at once and a read-only file works. ``build`` joins them when the log goes to --state."""


class _Group(click.Group):
    def invoke(self, ctx: click.Context) -> Any:
        try:
            return super().invoke(ctx)
        except ReachlistError as exc:
            _fail(exc)


def warehouse_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    @click.option(
        "--warehouse",
        "-w",
        envvar="REACHLIST_WAREHOUSE",
        default=DEFAULT_WAREHOUSE,
        show_default=True,
        help="DuckDB file or SQLAlchemy URL (env REACHLIST_WAREHOUSE).",
    )
    @click.option(
        "--mapping",
        "-m",
        envvar="REACHLIST_MAPPING",
        default=None,
        help="TOML file mapping the contract's tables and columns to the warehouse's names.",
    )
    @click.option(
        "--connect-timeout",
        "connect_timeout",
        default=15,
        show_default=True,
        type=click.IntRange(1, 3600),
        metavar="SECONDS",
        help="Give up on a warehouse server that does not answer within this time.",
    )
    @functools.wraps(fn)
    def wrapper(*args: Any, warehouse: str, mapping: str | None, connect_timeout: int,
                **kwargs: Any) -> Any:
        m = Mapping.from_toml(mapping) if mapping else Mapping.identity()
        name = click.get_current_context().command.name
        read_only = name in READ_ONLY_COMMANDS or (name == "build" and bool(kwargs.get("state")))
        with Warehouse.open(warehouse, m, read_only=read_only,
                            connect_timeout=connect_timeout) as wh:
            return fn(*args, wh=wh, **kwargs)

    return wrapper


@click.group(cls=_Group)
@click.version_option(package_name="reachlist")
@click.pass_context
def main(ctx: click.Context) -> None:
    """reachlist: from order history to targeted-offer customer lists."""
    from reachlist.campaign_file import project_defaults_path, read_project_defaults

    path = project_defaults_path()
    if path is not None:  # reachlist.toml here, or REACHLIST_DEFAULTS: defaults for every command
        values = read_project_defaults(path)
        ctx.default_map = {name: dict(values) for name in ctx.command.list_commands(ctx)}


# Command modules register themselves on `main`; imported last to avoid a cycle.
from reachlist.cli import campaigns, catalog, data, demo, lists, mining, takeup  # noqa: E402,F401

if __name__ == "__main__":  # pragma: no cover
    main()
