"""Commands that turn rules into customer lists: sql, sizes, build; and the promotion overlap."""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

from reachlist.audience import RANK_MEASURES, Filters
from reachlist.cli import err, main, out, warehouse_options
from reachlist.cli.mining import mining_options
from reachlist.cli.progress import delayed_status
from reachlist.estimate import DEFAULT_HORIZON, MAX_CUTOFFS
from reachlist.holdout import DEFAULT_GLOBAL_SHARE, DEFAULT_SHARE
from reachlist.planning import DEFAULT_CAP_DAYS, DEFAULT_MIN_AUDIENCE, PURPOSES, ListRequest
from reachlist.warehouse import Warehouse


def _campaign_file(ctx: click.Context, _param: click.Parameter, value: str | None) -> Any:
    """Read a campaign file before the other options: its values become their defaults (the
    command line still wins)."""
    if value is None:
        return None
    from reachlist.campaign_file import read_campaign_file

    found = read_campaign_file(value)
    ctx.default_map = {**(ctx.default_map or {}), **found.values}
    return found


def list_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Options shared by sql, sizes and build: which rules, which exclusions, which campaign."""
    for option in reversed(
        [
            click.option(
                "--campaign-file",
                "campaign_file",
                default=None,
                metavar="FILE.toml",
                is_eager=True,
                callback=_campaign_file,
                help="Read the campaign's options from this file (the README's "
                "'Campaign files'); options given here win over it.",
            ),
            click.option(
                "--purpose",
                default="introduce",
                show_default=True,
                type=click.Choice(PURPOSES),
                help="introduce: a new or under-adopted item; clear: surplus stock.",
            ),
            click.option(
                "--stand-in",
                default=None,
                metavar="ITEM",
                help="Use the rules of this existing sku or category:NAME (for an item "
                "without history); the estimates are then borrowed from it.",
            ),
            click.option(
                "--top",
                default=5,
                show_default=True,
                type=click.IntRange(1, 100),
                help="Use this many significant rules.",
            ),
            click.option(
                "--rank-by",
                default="leverage",
                show_default=True,
                type=click.Choice(RANK_MEASURES),
                help="Measure that ranks the rules.",
            ),
            click.option(
                "--rule",
                "rule_ids",
                multiple=True,
                metavar="ID",
                help="Use these rules (ids from `reachlist rules`) instead of --top.",
            ),
            click.option(
                "--bought-within",
                default=None,
                type=click.IntRange(1, 36_500),
                metavar="DAYS",
                help="Exclude only customers who bought the target in these last days "
                "[default: ever].",
            ),
            click.option(
                "--cap-days",
                default=DEFAULT_CAP_DAYS,
                show_default=True,
                type=click.IntRange(0, 3_650),
                help="Exclude customers contacted in these last days (campaign log); "
                "0 switches the cap off.",
            ),
            click.option(
                "--region",
                "regions",
                multiple=True,
                help="Keep only customers of this region (repeatable).",
            ),
            click.option(
                "--channel",
                "channels",
                multiple=True,
                help="Keep only customers with an order through this channel in the "
                "window (repeatable).",
            ),
            click.option(
                "--ordered-within",
                default=None,
                type=click.IntRange(1, 36_500),
                metavar="DAYS",
                help="Keep only customers with an order in these last days.",
            ),
            click.option(
                "--adult-age",
                default=18,
                show_default=True,
                type=click.IntRange(1, 99),
                help="Age of an adult, for age-restricted targets.",
            ),
            click.option(
                "--holdout",
                default=DEFAULT_SHARE,
                show_default=True,
                type=click.FloatRange(0, 1, max_open=True),
                help="Share of the list kept back (not contacted) to measure take-up.",
            ),
            click.option(
                "--global-holdout",
                "global_holdout",
                default=DEFAULT_GLOBAL_SHARE,
                show_default=True,
                type=click.FloatRange(0, 0.5, max_open=True),
                metavar="SHARE",
                help="Share of all customers kept out of every campaign as a standing "
                "control group (0 switches it off).",
            ),
            click.option(
                "--campaign",
                "campaign_id",
                default=None,
                metavar="ID",
                help="Campaign id [default: PURPOSE-TARGET-YYYYMMDD]; it seeds the holdout.",
            ),
            click.option(
                "--send-date",
                default=None,
                metavar="YYYY-MM-DD",
                help="The day the list is sent: the contact cap counts back from it "
                "and results count the horizon from it [default: --until, else "
                "today].",
            ),
            click.option(
                "--stock",
                default=None,
                type=click.IntRange(1, 10**12),
                help="clear: units to clear [default: products.stock_on_hand].",
            ),
            click.option(
                "--ignore-consent",
                is_flag=True,
                help="Do not exclude customers without marketing consent (printed and logged).",
            ),
            click.option(
                "--ignore-suppressions",
                is_flag=True,
                help="Do not exclude suppressed customers (printed and logged).",
            ),
            click.option(
                "--allow-sensitive",
                is_flag=True,
                help="Allow a target or rule in a sensitive category.",
            ),
            click.option(
                "--merge-duplicates",
                is_flag=True,
                help="Accept customer ids on several rows of customers: each is listed "
                "once and read by its strictest row (no consent if any row says none, "
                "an adult only if every row says so) [default: refuse].",
            ),
        ]
    ):
        fn = option(fn)
    return fn


def estimate_options(fn: Callable[..., Any]) -> Callable[..., Any]:
    """Options of the commands that size and estimate the list: sizes and build."""
    fn = click.option(
        "--min-audience",
        default=DEFAULT_MIN_AUDIENCE,
        show_default=True,
        type=click.IntRange(0, 10**12),
        metavar="N",
        help="Do not propose a rule whose audience after the exclusions is "
        "smaller; 0 for no minimum.",
    )(fn)
    fn = click.option(
        "--price",
        default=None,
        type=float,
        metavar="AMOUNT",
        help="Net price per unit for the offer's economics [default: the target's over the "
        "last year].",
    )(fn)
    fn = click.option(
        "--margin",
        default=None,
        type=float,
        metavar="PCT",
        help="Gross margin, % of the net price: adds net margin to the economics.",
    )(fn)
    fn = click.option(
        "--discount",
        default=None,
        type=float,
        metavar="PCT",
        help="The offer's discount, % of the net price: shows incremental units and revenue "
        "and the coupon cost.",
    )(fn)
    fn = click.option(
        "--no-estimate",
        is_flag=True,
        help="Skip the take-up estimate (a quicker preview; a clearance is then "
        "sized by a quick calibration on the 3 newest cutoffs).",
    )(fn)
    fn = click.option(
        "--cutoffs",
        default=MAX_CUTOFFS,
        show_default=True,
        type=click.IntRange(1, 60),
        metavar="N",
        help="Past cutoffs the estimate is calibrated on; fewer is quicker on a "
        "large warehouse, with a wider interval.",
    )(fn)
    return click.option(
        "--horizon",
        "horizon_days",
        default=DEFAULT_HORIZON,
        show_default=True,
        type=click.IntRange(1, 1_825),
        metavar="DAYS",
        help="Expected buyers within this many days.",
    )(fn)


def _request(target: str, opts: dict[str, Any], *, contact: bool = False) -> ListRequest:
    mining = {k: opts.pop(k) for k in list(opts) if k in _MINING_KEYS}
    since, until = mining.pop("since"), mining.pop("until")
    return ListRequest(
        target=target,
        purpose=opts["purpose"],
        stand_in=opts["stand_in"],
        top=opts["top"],
        rank_by=opts["rank_by"],
        rule_ids=tuple(opts["rule_ids"]),
        since=since,
        until=until,
        mining=mining,
        bought_within_days=opts["bought_within"],
        cap_days=opts["cap_days"],
        filters=Filters(tuple(opts["regions"]), tuple(opts["channels"]), opts["ordered_within"]),
        adult_age=opts["adult_age"],
        holdout=opts["holdout"],
        global_holdout=opts.get("global_holdout", DEFAULT_GLOBAL_SHARE),
        campaign_id=opts["campaign_id"],
        ignore_consent=opts["ignore_consent"],
        ignore_suppressions=opts["ignore_suppressions"],
        allow_sensitive=opts["allow_sensitive"],
        merge_duplicates=opts["merge_duplicates"],
        stock=opts["stock"],
        contact=contact,
        min_audience=opts.get("min_audience", 0),
        send_date=opts.get("send_date"),
        campaign_file=opts["campaign_file"].text if opts.get("campaign_file") else None,
        estimate="no_estimate" in opts and not opts["no_estimate"],
        horizon_days=opts.get("horizon_days", DEFAULT_HORIZON),
        cutoffs=opts.get("cutoffs", MAX_CUTOFFS),
        discount=opts.get("discount"),
        margin=opts.get("margin"),
        price=opts.get("price"),
    )


_MINING_KEYS = (
    "level",
    "basket",
    "since",
    "until",
    "min_support",
    "min_confidence",
    "min_lift",
    "max_antecedent",
    "keep_unproductive",
    "correction",
)


@main.command("sql")
@click.argument("target")
@warehouse_options
@mining_options
@list_options
@click.option(
    "--inline",
    "inline_values",
    is_flag=True,
    help="Write the values into the SQL (to run it elsewhere) instead of listing them.",
)
@click.option("--with-contact", is_flag=True, help="Include the email column.")
def sql_cmd(
    wh: Warehouse, target: str, inline_values: bool, with_contact: bool, **opts: Any
) -> None:
    """Print the audience SQL for TARGET exactly as it runs on this warehouse.

    Example: reachlist sql SG04-104 --inline > audience.sql
    """
    from reachlist.planning import plan_list
    from reachlist.render.lists import (
        render_caution,
        render_plan_header,
        render_warnings,
        sql_text,
    )

    with delayed_status(err, "Mining rules") as progress:
        plan = plan_list(wh, _request(target, opts, contact=with_contact), progress=progress)
    click.echo(sql_text(plan.sql(wh), wh.dialect, inline=inline_values), nl=False)
    render_plan_header(plan, err)
    err.print(
        f"[dim]sizes and build leave out rules whose audience after the exclusions is below "
        f"--min-audience (default {DEFAULT_MIN_AUDIENCE}); if they report a rule not proposed, "
        "pass the rules they keep with --rule for their exact SQL.[/]"
    )
    render_warnings(plan, err)
    render_caution(err)


@main.command()
@click.argument("target")
@warehouse_options
@mining_options
@list_options
@estimate_options
@click.option(
    "--state",
    default=None,
    metavar="PATH",
    help="Local DuckDB file holding the campaign log (for a read-only warehouse).",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON (numbers as numbers).")
def sizes(wh: Warehouse, target: str, state: str | None, as_json: bool, **opts: Any) -> None:
    """Preview the list for TARGET: reach per rule, exclusions, list and holdout sizes, and
    baseline buyers within the horizon with an interval from past backtests.

    Example: reachlist sizes SG04-104 --purpose introduce --region North
    """
    from reachlist.campaigns import CampaignLog
    from reachlist.lists import preview_list
    from reachlist.planning import plan_list
    from reachlist.render.lists import render_sizes

    # A preview writes nothing: a --state file that does not exist yet is not created (the
    # warehouse's own log, when it has one, is still read for the contact cap).
    log = CampaignLog.open(wh, state) if state is None or Path(state).exists() else CampaignLog(wh)
    try:
        with delayed_status(err if as_json else out, "Mining rules") as progress:
            plan = plan_list(wh, _request(target, opts), progress=progress)
            progress(
                "Sizing the audience" + ("" if opts["no_estimate"] else " and backtesting take-up")
            )
            outcome = preview_list(wh, plan, log)
            c = outcome.clearance
            if c is not None and c.expected_units is not None and not c.clears:
                from reachlist.stock_steps import propose_next_steps

                outcome.next_steps = propose_next_steps(wh, outcome.plan, log, progress)
    finally:
        if log is not None:
            log.close()
    if as_json:
        from reachlist.render.lists import outcome_json

        click.echo(outcome_json(outcome))
        return
    render_sizes(outcome, out)


@main.command()
@click.argument("target")
@warehouse_options
@mining_options
@list_options
@estimate_options
@click.option(
    "--out", "out_path", required=True, metavar="FILE", help="List file to write: .csv or .parquet."
)
@click.option("--force", is_flag=True, help="Overwrite an existing list file.")
@click.option("--replace", is_flag=True, help="Replace the campaign log's record of this campaign.")
@click.option(
    "--with-contact", is_flag=True, help="Add contact fields (email, consent date) to the list."
)
@click.option(
    "--offer-code",
    default=None,
    metavar="CODE",
    help="The offer's code (a coupon or promotion code), written on every row.",
)
@click.option(
    "--state",
    default=None,
    metavar="PATH",
    help="Keep the campaign log in this local DuckDB file (for a read-only warehouse).",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON (numbers as numbers).")
def build(
    wh: Warehouse,
    target: str,
    out_path: str,
    force: bool,
    replace: bool,
    with_contact: bool,
    offer_code: str | None,
    state: str | None,
    as_json: bool,
    **opts: Any,
) -> None:
    """Write the contact list for TARGET and record the campaign in the campaign log.

    Example: reachlist build SG04-104 --out winter-mats.csv --campaign winter-mats
    """
    from reachlist.campaigns import CampaignLog
    from reachlist.export import check_destination
    from reachlist.lists import build_list
    from reachlist.planning import plan_list
    from reachlist.render.lists import render_built

    check_destination(out_path, force=force)
    with (
        delayed_status(err if as_json else out, "Mining rules") as progress,
        CampaignLog.open(wh, state) as log,
    ):
        request = dataclasses.replace(
            _request(target, opts, contact=with_contact), offer_code=offer_code
        )
        plan = plan_list(wh, request, progress=progress)
        progress("Building the list")
        built = build_list(wh, plan, out_path, log=log, force=force, replace=replace)
    if as_json:
        from reachlist.render.lists import outcome_json

        click.echo(outcome_json(built.outcome, built))
        return
    render_built(built, out)


@main.command()
@click.argument("items", nargs=-1, required=True)
@warehouse_options
@click.option(
    "--basket",
    default="order",
    show_default=True,
    type=click.Choice(["order", "customer"]),
    help="Bought together in one order, or by one customer in the window.",
)
@click.option(
    "--since",
    default=None,
    help="Start of the window (YYYY-MM-DD); default 12 months before --until.",
)
@click.option(
    "--until",
    default=None,
    help="End of the window (exclusive); default the day after the last order.",
)
@click.option(
    "--alpha",
    default=0.05,
    show_default=True,
    type=click.FloatRange(0, 1, min_open=True, max_open=True),
    help="Significance level after correction.",
)
@click.option("--all", "show_all", is_flag=True, help="Show every pair and triple tested.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON (numbers as numbers).")
def overlap(
    wh: Warehouse,
    items: tuple[str, ...],
    basket: str,
    since: str | None,
    until: str | None,
    alpha: float,
    show_all: bool,
    as_json: bool,
) -> None:
    """Which of the ITEMS planned for promotion together already sell together.

    Example: reachlist overlap SG04-101 PC06-101 OL26-101
    """
    from reachlist.overlap import promotion_overlap
    from reachlist.render.lists import render_overlap

    with delayed_status(out, "Counting baskets"):
        report = promotion_overlap(
            wh, list(items), basket=basket, since=since, until=until, alpha=alpha
        )
    if as_json:
        import dataclasses
        import json

        data = {"schema_version": 1, **dataclasses.asdict(report)}
        data["window"] = {
            "since": report.window.since.isoformat(),
            "until": report.window.until.isoformat(),
        }
        click.echo(json.dumps(data, indent=2, default=str))
        return
    render_overlap(report, out, show_all=show_all)
