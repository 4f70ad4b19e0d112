"""`reachlist campaigns`: what the campaign log holds, newest first."""

from __future__ import annotations

from datetime import UTC, datetime

import click

from reachlist.cli import main, out, warehouse_options
from reachlist.warehouse import Warehouse


@main.command()
@warehouse_options
@click.option(
    "--state",
    default=None,
    metavar="PATH",
    help="Local DuckDB file holding the campaign log (the warehouse's log is read too).",
)
@click.option(
    "--limit",
    default=50,
    show_default=True,
    type=click.IntRange(1, 10_000),
    help="Newest campaigns shown from each log.",
)
@click.option("--json", "as_json", is_flag=True, help="Print JSON instead of a table.")
@click.option(
    "--file-of",
    "file_of",
    default=None,
    metavar="CAMPAIGN_ID",
    help="Print the campaign file CAMPAIGN_ID was built from, to rebuild it.",
)
def campaigns(
    wh: Warehouse, state: str | None, limit: int, as_json: bool, file_of: str | None
) -> None:
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
@click.option(
    "--on",
    "sent_on",
    required=True,
    metavar="YYYY-MM-DD",
    help="The day the campaign's list is (or was) sent.",
)
@click.option(
    "--state", default=None, metavar="PATH", help="Local DuckDB file holding the campaign log."
)
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
    out.print(
        f"Campaign {campaign_id}: {moved:,} contacts now sent on {when:%Y-%m-%d} (log in {where}).",
        markup=False,
    )


@main.command()
@click.argument("campaign_id")
@warehouse_options
@click.option(
    "--out",
    "out_path",
    default=None,
    metavar="FILE.html",
    help="Write the brief to this HTML file (one self-contained page).",
)
@click.option("--force", is_flag=True, help="Overwrite an existing file.")
@click.option(
    "--state", default=None, metavar="PATH", help="Local DuckDB file holding the campaign log."
)
@click.option("--json", "as_json", is_flag=True, help="Print the brief's numbers as JSON.")
def brief(
    wh: Warehouse,
    campaign_id: str,
    out_path: str | None,
    force: bool,
    state: str | None,
    as_json: bool,
) -> None:
    """A one-page brief of a built campaign to forward: the waterfall, the rules in words,
    expected buyers with their interval, holdout power and the cautions.

    Example: reachlist brief winter-mats --out winter-mats.html
    """
    import json

    from reachlist.brief import brief_data
    from reachlist.campaigns import CampaignLog
    from reachlist.errors import InputError

    if out_path is None and not as_json:
        raise InputError(
            "Expected --out FILE.html or --json, found neither.",
            hint="pass --out brief.html to write the page",
        )
    if out_path is not None:
        _check_html_destination(out_path, force)
    with CampaignLog.open(wh, state) as log:
        data = brief_data(wh, log, campaign_id)
    if as_json:
        click.echo(json.dumps(data, indent=2, default=str))
    if out_path is not None:
        from reachlist.export import stage_text
        from reachlist.render.brief import brief_html

        staged = stage_text(brief_html(data), out_path, force=force)
        staged.publish()
        staged.settle()
        if not as_json:
            out.print(f"Wrote the brief of {campaign_id} to {out_path}.", markup=False)


def _check_html_destination(path: str, force: bool) -> None:
    from pathlib import Path

    from reachlist.errors import InputError, StateError

    p = Path(path)
    if p.suffix.lower() not in (".html", ".htm"):
        raise InputError(
            f"Expected a brief file ending in .html, found {path!r}.",
            hint="name it like winter-mats.html",
        )
    if p.is_dir():
        raise StateError(
            f"Expected a file path for the brief, found a directory at {path!r}.",
            hint="give a file name such as winter-mats.html",
        )
    if not p.parent.is_dir():
        raise StateError(
            f"Expected an existing directory for {path!r}, found none at {str(p.parent)!r}.",
            hint="create the directory first",
        )
    if p.exists() and not force:
        raise StateError(
            f"File {path!r} already exists; nothing was written.",
            hint="pass --force to overwrite it, or choose another --out",
        )
