"""`reachlist campaigns`: what the campaign log holds, newest first."""

from __future__ import annotations

from datetime import UTC, datetime

import click

from reachlist.cli import main, out, warehouse_options
from reachlist.warehouse import Warehouse


@main.command()
@warehouse_options
@click.option("--state", default=None, metavar="PATH",
              help="Local DuckDB file holding the campaign log (the warehouse's log is read too).")
@click.option("--limit", default=50, show_default=True, type=click.IntRange(1, 10_000),
              help="Newest campaigns shown from each log.")
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option("--file-of", "file_of", default=None, metavar="CAMPAIGN_ID",
              help="Print the campaign file CAMPAIGN_ID was built from, to rebuild it.")
def campaigns(wh: Warehouse, state: str | None, limit: int, as_json: bool,
              file_of: str | None) -> None:
    """Campaigns built so far: target, build day, contacted and held-out customers, and when
    their results can be read.

    Example: reachlist campaigns --limit 10
    """
    from reachlist.campaign_list import list_campaigns
    from reachlist.campaigns import CampaignLog
    from reachlist.render.campaigns import campaigns_json, render_campaigns

    if file_of is not None:
        from reachlist.campaign_list import campaign_file_text

        with CampaignLog.open(wh, state) as log:
            click.echo(campaign_file_text(log, file_of), nl=False)
        return
    with CampaignLog.open(wh, state) as log:
        listing = list_campaigns(log, today=datetime.now(UTC).date(), limit=limit)
    if as_json:
        click.echo(campaigns_json(listing))
    else:
        render_campaigns(out, listing)


@main.command()
@click.argument("campaign_id")
@warehouse_options
@click.option("--on", "sent_on", required=True, metavar="YYYY-MM-DD",
              help="The day the campaign's list is (or was) sent.")
@click.option("--state", default=None, metavar="PATH",
              help="Local DuckDB file holding the campaign log.")
def sent(wh: Warehouse, campaign_id: str, sent_on: str, state: str | None) -> None:
    """Record the day CAMPAIGN_ID is sent, when it differs from the build day or --send-date:
    results count the take-up horizon from it, and later contact caps read it.

    Example: reachlist sent introduce-SG04-104-20261203 --on 2026-12-07
    """
    from reachlist.campaigns import CampaignLog
    from reachlist.targets import _as_datetime

    when = _as_datetime(sent_on, "--on")
    with CampaignLog.open(wh, state) as log:
        moved = log.set_send_date(campaign_id, datetime(when.year, when.month, when.day))
        where = log.where
    out.print(f"Campaign {campaign_id}: {moved:,} contacts now sent on {when:%Y-%m-%d} "
              f"(log in {where}).", markup=False)
