"""`reachlist rules`: rules toward a target, or the strongest rules overall."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import click

from reachlist.cli import main, out, warehouse_options
from reachlist.cli.progress import delayed_status
from reachlist.errors import InputError
from reachlist.measures import CORRECTIONS, MEASURES
from reachlist.rules import (
    BREADTH_LIFT,
    DEFAULT_MIN_SUPPORT,
    EXPLORE_MAX_ANTECEDENT,
    mine_rules,
    strongest_rules,
)
from reachlist.warehouse import Warehouse


def mining_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Options shared by every command that mines rules (rules, sql, sizes, build, ...)."""
    for option in reversed(
        [
            click.option(
                "--level",
                default="sku",
                show_default=True,
                type=click.Choice(["sku", "category", "department"]),
                help="Item level of the antecedents.",
            ),
            click.option(
                "--basket",
                default="customer",
                show_default=True,
                type=click.Choice(["customer", "order"]),
                help="Count co-occurrence per customer or per order.",
            ),
            click.option(
                "--since",
                default=None,
                help="Start of the mining window (YYYY-MM-DD); default 12 months before --until.",
            ),
            click.option(
                "--until",
                default=None,
                help="End of the mining window (exclusive); default the day after the last order.",
            ),
            click.option(
                "--min-support",
                default=DEFAULT_MIN_SUPPORT,
                show_default=True,
                type=click.FloatRange(0, 1, min_open=True),
                help="Minimum share of baskets holding X+y.",
            ),
            click.option(
                "--min-confidence",
                default=0.0,
                show_default=True,
                type=click.FloatRange(0, 1),
                help="Keep rules whose confidence (co-purchase rate) is at least this.",
            ),
            click.option(
                "--min-lift",
                default=1.0,
                show_default=True,
                type=click.FloatRange(0),
                help="Keep rules whose lift is at least this.",
            ),
            click.option(
                "--max-antecedent",
                default=3,
                show_default=True,
                type=click.IntRange(1, 5),
                help="Most items in an antecedent.",
            ),
            click.option(
                "--keep-unproductive",
                is_flag=True,
                help="Keep rules that a shorter antecedent matches or beats.",
            ),
            click.option(
                "--correction",
                default="holm",
                show_default=True,
                type=click.Choice(list(CORRECTIONS)),
                help="Multiple-testing correction of the Fisher p-values.",
            ),
        ]
    ):
        fn = option(fn)
    return fn


BREADTH_NOTE = (
    "b.lift: added value over shopping breadth (Mantel-Haenszel risk ratio of holding the target "
    "within deciles of distinct categories held); near 1 = the lift is breadth. Conviction is in "
    "--json/--csv."
)


@main.command()
@click.argument("target", required=False)
@warehouse_options
@mining_options
@click.option(
    "--rank-by",
    "measure",
    # Leverage by default: sorting by lift or confidence puts chance extensions of real rules
    # (three items, a few dozen holders) on top; leverage weighs strength and reach together,
    # as the list builder's default ranking does.
    default="leverage",
    show_default=True,
    type=click.Choice([*MEASURES, BREADTH_LIFT]),
    help="Rank rules by this measure (breadth_lift: toward a TARGET, customer baskets).",
)
@click.option(
    "--top",
    default=20,
    show_default=True,
    type=click.IntRange(1, 10_000),
    help="Rules shown in the table (all go to --json/--csv).",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option("--csv", "csv_path", default=None, help="Also write every rule to this CSV file.")
@click.option("--force", is_flag=True, help="Overwrite an existing --csv file.")
def rules(
    wh: Warehouse,
    target: str | None,
    measure: str,
    top: int,
    as_json: bool,
    csv_path: str | None,
    force: bool,
    **mining: object,
) -> None:
    """Rules toward TARGET (a SKU, category:NAME or department:NAME) with every measure.

    Without TARGET: the strongest rules toward any consequent (exploratory).

    Example: reachlist rules SG04-104 --top 10
    """
    from rich.markup import escape

    from reachlist.export import write_list
    from reachlist.render.rules import render_rules, rules_csv_frame, rules_json

    if target is None and measure == BREADTH_LIFT:
        raise InputError(
            f"Expected a TARGET to rank by {BREADTH_LIFT}, found none: added value over breadth "
            "is measured toward one target.",
            hint="pass a target, for example `reachlist rules SG04-104 --rank-by breadth_lift`",
        )
    note = ""
    with delayed_status(out, "Mining rules") as progress:
        if target is None:
            exploratory = {k: v for k, v in mining.items() if k != "max_antecedent"}
            # the option's default is for rules toward a target; asked for explicitly, a deeper
            # search is narrowed by the library, which says so
            asked = click.get_current_context().get_parameter_source("max_antecedent")
            depth = (
                int(mining["max_antecedent"])  # type: ignore[call-overload]
                if asked is not click.core.ParameterSource.DEFAULT
                else EXPLORE_MAX_ANTECEDENT
            )
            frame, window, n, note = strongest_rules(
                wh,
                measure=measure,
                top=None,  # all of them: the screen shows --top of how many there are
                max_antecedent=depth,
                progress=progress,
                **exploratory,  # type: ignore[arg-type]
            )
            title = f"Strongest rules by {measure}, {n:,} {mining['basket']} baskets, {window}"
            correction = str(mining["correction"])
        else:
            # the screen shows --top rules: their breadth-matched lift is all it reads
            on_screen = not csv_path and not as_json
            rs = mine_rules(
                wh,
                target,
                rank_by=measure,
                progress=progress,
                breadth="later" if on_screen else "now",
                **mining,  # type: ignore[arg-type]
            )
            if on_screen:
                rs = rs.with_breadth(range(min(top, rs.frame.height)))
            frame, window, n, correction = rs.frame, rs.window, rs.n_baskets, rs.correction
            note = rs.note
            title = (
                f"Rules toward {rs.target} ({rs.level} antecedents), {n:,} "
                f"{rs.basket} baskets, {window}"
            )
    if csv_path:
        write_list(rules_csv_frame(frame), csv_path, force=force)
    if as_json:
        click.echo(
            rules_json(
                frame,
                {
                    "schema_version": 2,
                    "target": target,
                    "window": {
                        "since": window.since.isoformat(),
                        "until": window.until.isoformat(),
                    },
                    "n_baskets": n,
                    "correction": correction,
                    "narrowed": note or None,
                },
            )
        )
        return
    tested = int(frame["n_tested"][0]) if frame.height else 0
    render_rules(
        frame,
        out,
        title=title,
        limit=top,
        footer=[
            *([f"[yellow]{escape(note)}[/]"] if note else []),
            f"sig: one-sided Fisher exact test, {correction}-corrected over {tested:,} rules tested "
            "(those meeting --min-support); * = adjusted p < 0.05, ns = not significant.",
            "conf is a historical co-purchase rate, not a take-up forecast.",
            *(
                [BREADTH_NOTE]
                if BREADTH_LIFT in frame.columns
                and target is not None
                and frame[BREADTH_LIFT].is_not_null().any()
                else []
            ),
            *([f"Wrote {frame.height:,} rules to {csv_path}."] if csv_path else []),
        ],
    )
