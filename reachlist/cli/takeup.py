"""Take-up commands: estimate (a list's expected buyers), backtest (a past cutoff), results (a
campaign against its holdout)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import click

from reachlist.audience import RANK_MEASURES
from reachlist.cli import err, main, out, warehouse_options
from reachlist.cli.lists import _request, list_options
from reachlist.cli.mining import mining_options
from reachlist.cli.progress import delayed_status
from reachlist.estimate import DEFAULT_HORIZON
from reachlist.warehouse import Warehouse

_horizon = click.option(
    "--horizon",
    "horizon_days",
    default=DEFAULT_HORIZON,
    show_default=True,
    type=click.IntRange(1, 1_825),
    metavar="DAYS",
    help="Days after the send (or cutoff) in which a purchase counts.",
)
_json = click.option("--json", "as_json", is_flag=True, help="Print JSON instead of tables.")


@main.command()
@click.argument("target")
@warehouse_options
@mining_options
@list_options
@_horizon
@click.option(
    "--cutoffs",
    default=13,
    show_default=True,
    type=click.IntRange(1, 60),
    metavar="N",
    help="Past cutoffs the estimate is calibrated on; fewer is quicker on a large "
    "warehouse, with a wider interval.",
)
@click.option(
    "--uplift",
    default=0.5,
    show_default=True,
    type=click.FloatRange(0, min_open=True),
    help="Relative uplift the holdout should detect (0.5 = +50%).",
)
@click.option(
    "--state",
    default=None,
    metavar="PATH",
    help="Local DuckDB file holding the campaign log (for a read-only warehouse).",
)
@_json
def estimate(
    wh: Warehouse,
    target: str,
    horizon_days: int,
    uplift: float,
    state: str | None,
    as_json: bool,
    **opts: Any,
) -> None:
    """Baseline take-up of the list for TARGET, calibrated on the warehouse's past.

    Example: reachlist estimate SG04-104 --horizon 30 --cutoffs 6
    """
    from reachlist.campaigns import CampaignLog
    from reachlist.estimate import estimate_takeup, holdout_planning
    from reachlist.lists import preview_list
    from reachlist.planning import plan_list
    from reachlist.render.takeup import render_estimate, render_holdout_planning, to_json

    log = CampaignLog.open(wh, state) if state is None or Path(state).exists() else None
    try:
        with delayed_status(err, "Mining rules") as progress:
            plan = plan_list(wh, _request(target, opts), progress=progress)
            progress("Sizing the audience")
            outcome = preview_list(wh, plan, log)
            progress("Backtesting the estimate")
            report = estimate_takeup(
                wh,
                plan.target,
                spec=plan.spec,
                customers=outcome.treatment["customer_id"],
                horizon_days=horizon_days,
                max_cutoffs=plan.request.cutoffs,
            )
    finally:
        if log is not None:
            log.close()
    planning = holdout_planning(
        outcome.listed.height, plan.request.holdout, report.rate, wanted_uplift=uplift
    )
    if as_json:
        click.echo(
            to_json({"schema_version": 2, **report.as_dict(), "holdout": planning.as_dict()})
        )
        return
    render_estimate(report, out)
    render_holdout_planning(planning, out)


@main.command("backtest")
@click.argument("target")
@warehouse_options
@click.option(
    "--cutoff",
    required=True,
    metavar="DATE",
    help="Build the audiences as of this day (YYYY-MM-DD) from earlier data only.",
)
@_horizon
@click.option(
    "--level",
    default="sku",
    show_default=True,
    type=click.Choice(["sku", "category", "department"]),
    help="Item level of the antecedents.",
)
@click.option(
    "--top",
    default=5,
    show_default=True,
    type=click.IntRange(1, 100),
    help="Significant rules to backtest.",
)
@click.option(
    "--rank-by",
    default="leverage",
    show_default=True,
    type=click.Choice(RANK_MEASURES),
    help="Measure that ranks the rules.",
)
@click.option(
    "--basket",
    default="customer",
    show_default=True,
    type=click.Choice(["customer", "order"]),
    help="Mine rules from customers' holdings or from single orders (as for the list).",
)
@click.option(
    "--min-support",
    default=0.002,
    show_default=True,
    type=click.FloatRange(0, 1, min_open=True),
    help="Least share of baskets holding a rule's items (as for the list).",
)
@click.option(
    "--max-antecedent",
    default=3,
    show_default=True,
    type=click.IntRange(1, 5),
    help="Most items in a rule's antecedent (as for the list).",
)
@click.option(
    "--cutoffs",
    default=13,
    show_default=True,
    type=click.IntRange(1, 60),
    metavar="N",
    help="Past cutoffs the estimate is calibrated on (as for the list).",
)
@click.option(
    "--chart",
    "chart_path",
    default=None,
    metavar="FILE.svg",
    help="Also write the gains chart to this SVG file.",
)
@_json
def backtest_cmd(
    wh: Warehouse,
    target: str,
    cutoff: str,
    horizon_days: int,
    level: str,
    top: int,
    rank_by: str,
    basket: str,
    min_support: float,
    max_antecedent: int,
    cutoffs: int,
    chart_path: str | None,
    as_json: bool,
) -> None:
    """Backtest TARGET: audiences and estimates as of --cutoff against who bought after it.

    Example: reachlist backtest SG04-104 --cutoff 2026-06-01 --chart gains.svg
    """
    from reachlist.backtest import backtest
    from reachlist.render.takeup import render_backtest, to_json, write_chart

    with delayed_status(err, "Backtesting") as _progress:
        bt = backtest(
            wh,
            target,
            cutoff=cutoff,
            horizon_days=horizon_days,
            top=top,
            rank_by=rank_by,
            level=level,
            max_cutoffs=cutoffs,
            mining={"basket": basket, "min_support": min_support, "max_antecedent": max_antecedent},
        )
    if chart_path and bt.gains.height:
        write_chart(bt.chart_points(), chart_path, f"Gains: {bt.target}, cutoff {cutoff}")
    if as_json:
        click.echo(to_json(bt.as_dict()))
        return
    render_backtest(bt, out)
    if chart_path:
        out.print(f"Wrote the gains chart to {chart_path}.")


@main.command()
@click.argument("campaign_id")
@warehouse_options
@_horizon
@click.option(
    "--state", default=None, metavar="PATH", help="Local DuckDB file holding the campaign log."
)
@click.option("--no-estimate", is_flag=True, help="Skip the predicted-versus-observed check.")
@_json
def results(
    wh: Warehouse,
    campaign_id: str,
    horizon_days: int,
    state: str | None,
    no_estimate: bool,
    as_json: bool,
) -> None:
    """Take-up of CAMPAIGN_ID in treatment and holdout, uplift, and whether the holdout could
    tell.

    Example: reachlist results winter-mats --horizon 30
    """
    from reachlist.campaigns import CampaignLog
    from reachlist.render.takeup import render_results, to_json
    from reachlist.results import campaign_results

    with CampaignLog.open(wh, state) as log:
        r = campaign_results(
            wh, log, campaign_id, horizon_days=horizon_days, predict=not no_estimate
        )
    if as_json:
        click.echo(to_json(r.as_dict()))
        return
    render_results(r, out)
