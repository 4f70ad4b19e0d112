"""The command line: parse, call one library function, render. Nothing else lives here.

This module holds the command group, the shared options and the error handling; the commands
live in one module per family (data, catalog, mining, lists, take-up, campaigns). A command's
module is imported only when that command runs (or shows its own help), so `reachlist --help`
and `--version` start without the numeric stack: ``COMMANDS`` lists them in the order of the work.
"""

from __future__ import annotations

import functools
import os
import sys
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

import click
from rich.console import Console
from rich.text import Text

from reachlist.cli.spelling import CLI_SPELLING
from reachlist.errors import ReachlistError
from reachlist.wording import spelling

if TYPE_CHECKING:
    from reachlist.warehouse import Warehouse  # noqa: F401

DEFAULT_WAREHOUSE = "garden.duckdb"

PIPED_WIDTH = 100
"""Columns when nothing says how wide the screen is (output to a file or a pipe, no terminal)."""


def screen_width() -> int | None:
    """COLUMNS when set; else the width of the terminal on any of stdout, stderr or stdin (so
    `reachlist rules X | less` still fits the screen); else None (a file: PIPED_WIDTH)."""
    if os.environ.get("COLUMNS", "").isdigit():
        return int(os.environ["COLUMNS"])
    for fd in (1, 2, 0):
        try:
            return os.get_terminal_size(fd).columns
        except OSError:
            continue
    return None


def _console(stderr: bool = False) -> Console:
    return Console(stderr=stderr, highlight=False, width=screen_width() or PIPED_WIDTH)


out = _console()
err = _console(stderr=True)


def _fail(exc: ReachlistError) -> None:
    # The message holds user text (a target, a path, a mapping line): never read it as markup.
    err.print(Text.assemble(("Error:", "bold red"), " ", str(exc)), soft_wrap=True)
    sys.exit(exc.exit_code)


READ_ONLY_COMMANDS = frozenset(
    {
        "check",
        "holdings",
        "items",
        "rules",
        "sql",
        "sizes",
        "overlap",
        "estimate",
        "backtest",
        "results",
        "campaigns",
        "brief",
    }
)
"""Commands that never write to the warehouse: they open a DuckDB file read-only, so several can
run at once and a read-only file works. ``build`` joins them when the log goes to --state."""

SESSION_COMMANDS = frozenset({"sizes", "estimate", "backtest", "build", "results"})
"""History commands that read the holdings several times (the list, who each rule reaches, the
estimate's history): on a server warehouse they keep them in temporary tables once
(`reachlist.holdings.prepare`, ``session``); `rules` and `overlap` read them once."""

HISTORY_COMMANDS = frozenset(
    {"rules", "overlap", "sizes", "estimate", "backtest", "build", "results", "brief"}
)
"""Commands that read the order history: they use the holdings file beside a DuckDB warehouse
when it matches the history, and rebuild it first when the history changed (`sql` prints the
self-contained form, which reads the order lines)."""


COMMANDS: dict[str, tuple[str, str]] = {
    # name: (module under reachlist.cli, one line for `reachlist --help`), in the order of the work
    "sample": ("data", "Write the deterministic sample warehouse (DuckDB)."),
    "check": ("data", "Check a warehouse against the contract: every problem, in one table."),
    "holdings": ("data", "Read the order history once into the holdings file beside it."),
    "copy": ("data", "Copy the contract tables into another warehouse (e.g. PostgreSQL)."),
    "items": ("catalog", "Find targets and stand-ins by code, name, category or department."),
    "rules": ("mining", "Rules toward a target (or the strongest overall), every measure."),
    "overlap": ("lists", "Items planned for promotion together that already sell together."),
    "sizes": ("lists", "Preview a list: rules, exclusions, holdout and expected buyers."),
    "sql": ("lists", "The audience SQL exactly as it runs on this warehouse."),
    "estimate": ("takeup", "Expected buyers of a list within the horizon, with an interval."),
    "backtest": ("takeup", "Build the audiences at a past cutoff; predicted against observed."),
    "build": ("lists", "Write the contact list and log the campaign."),
    "brief": ("campaigns", "A one-page HTML brief of a built campaign, to forward."),
    "sent": ("campaigns", "Record the day a built campaign is sent."),
    "campaigns": ("campaigns", "The campaign log, newest first."),
    "results": ("takeup", "Take-up in treatment and holdout after a send, with uplift."),
    "demo": ("demo", "The main job end to end on the sample warehouse."),
}


class _Group(click.Group):
    def list_commands(self, ctx: click.Context) -> list[str]:
        return [*COMMANDS, *sorted(set(self.commands) - set(COMMANDS))]

    def get_command(self, ctx: click.Context, cmd_name: str) -> click.Command | None:
        if cmd_name not in self.commands and cmd_name in COMMANDS:
            import importlib

            importlib.import_module(f"reachlist.cli.{COMMANDS[cmd_name][0]}")
        return self.commands.get(cmd_name)

    def format_commands(self, ctx: click.Context, formatter: click.HelpFormatter) -> None:
        """The command list from ``COMMANDS`` (no command module is imported for it)."""
        rows = [(name, help_) for name, (_, help_) in COMMANDS.items()]
        with formatter.section("Commands, in the order of the work"):
            formatter.write_dl(rows)

    def invoke(self, ctx: click.Context) -> Any:
        # library messages name options as this command line spells them (--horizon, not
        # horizon_days) while a command runs
        with spelling(CLI_SPELLING):
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
    def wrapper(
        *args: Any, warehouse: str, mapping: str | None, connect_timeout: int, **kwargs: Any
    ) -> Any:
        from reachlist.schema import Mapping
        from reachlist.warehouse import Warehouse

        m = Mapping.from_toml(mapping) if mapping else Mapping.identity()
        name = click.get_current_context().command.name
        read_only = name in READ_ONLY_COMMANDS or (name == "build" and bool(kwargs.get("state")))
        with Warehouse.open(
            warehouse, m, read_only=read_only, connect_timeout=connect_timeout
        ) as wh:
            if name in HISTORY_COMMANDS:
                from reachlist.cli.progress import delayed_status
                from reachlist.holdings import prepare

                with delayed_status(err, "Holdings: checking the history's watermark") as step:
                    prepared = prepare(wh, progress=step, session=name in SESSION_COMMANDS)
                if prepared.note:
                    err.print(Text(prepared.note), soft_wrap=False)
            return fn(*args, wh=wh, **kwargs)

    return wrapper


@click.group(cls=_Group)
@click.version_option(package_name="reachlist")
@click.option(
    "--width",
    type=click.IntRange(40, 400),
    default=None,
    metavar="COLUMNS",
    help="Lay screens out for this many columns [default: the terminal's, else 100].",
)
@click.option(
    "--ascii", "ascii_only", is_flag=True, help="Plain ASCII, no colour: for logs and email."
)
@click.pass_context
def main(ctx: click.Context, width: int | None, ascii_only: bool) -> None:
    """reachlist: from order history to targeted-offer customer lists."""
    for console in (out, err):
        console.width = width or screen_width() or PIPED_WIDTH
        if ascii_only:
            console.no_color = True
            stream = sys.stderr if console is err else sys.stdout
            try:  # a copy of the descriptor, written as ASCII: rich then draws ASCII boxes
                fd = os.dup(stream.fileno())
            except (OSError, ValueError, AttributeError):
                continue  # not a real file (a test runner's buffer): colour off is all we can do
            console.file = open(
                fd,
                "w",
                encoding="ascii",
                errors="replace",  # noqa: SIM115
                buffering=1,
            )
    from reachlist.campaign_file import project_defaults_path, read_project_defaults

    path = project_defaults_path()
    if path is not None:  # reachlist.toml here, or REACHLIST_DEFAULTS: defaults for every command
        values = read_project_defaults(path)
        group = ctx.command
        assert isinstance(group, click.Group)
        ctx.default_map = {name: dict(values) for name in group.list_commands(ctx)}


if __name__ == "__main__":  # pragma: no cover
    main()
