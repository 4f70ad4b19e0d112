"""`reachlist campaigns`: the campaign log, one line per campaign (fits 80 columns)."""

from __future__ import annotations

import json
from typing import Any

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from reachlist.campaign_list import CampaignListing
from reachlist.render import fmt_count

SCHEMA_VERSION = 1


def render_campaigns(console: Console, listing: CampaignListing) -> None:
    frame = listing.campaigns
    if not listing.logs:
        console.print(
            "0 campaign(s): no campaign log yet. The first `reachlist build` creates it in the "
            "warehouse (or in the --state file)."
        )
        return
    several_logs = frame["log"].n_unique() > 1 if frame.height else False
    table = Table(title="Campaigns, newest first", title_justify="left", expand=False)
    table.add_column("campaign", overflow="fold", max_width=20)
    table.add_column("target", overflow="fold", max_width=18)
    table.add_column("sent", no_wrap=True)
    table.add_column("to contact", justify="right", no_wrap=True)
    table.add_column("held out", justify="right", no_wrap=True)
    table.add_column("results", no_wrap=True)
    for row in frame.iter_rows(named=True):
        results = "ready" if row["results_ready"] else f"from {row['results_from']:%Y-%m-%d}"
        campaign = escape(row["campaign_id"])
        if several_logs:
            campaign += f"\n[dim]{escape(row['log'])}[/dim]"
        target = escape(row["target"]) + f"\n[dim]{escape(row['purpose'])}[/dim]"
        table.add_row(
            campaign,
            target,
            f"{row['sent']:%Y-%m-%d}",
            fmt_count(row["treatment"]),
            fmt_count(row["holdout"]),
            results,
        )
    console.print(table)
    shown = frame.height
    if listing.narrowed:
        console.print(
            f"Showing the newest {shown:,} of {listing.total:,} campaigns (--limit "
            f"{listing.limit:,}); pass a larger --limit to see more."
        )
    else:
        console.print(f"{shown:,} campaign(s) in {', '.join(map(escape, listing.logs))}.")
    console.print(
        "results: when `reachlist results CAMPAIGN` can compare treatment with holdout "
        "(send day plus the take-up horizon)."
    )


def campaigns_json(listing: CampaignListing) -> str:
    rows: list[dict[str, Any]] = []
    for row in listing.campaigns.iter_rows(named=True):
        row = dict(row)
        row["built"] = row["built"].isoformat()
        row["sent"] = row["sent"].isoformat()
        row["results_from"] = row["results_from"].isoformat()
        rows.append(row)
    payload = {
        "schema_version": SCHEMA_VERSION,
        "total": listing.total,
        "limit": listing.limit,
        "logs": list(listing.logs),
        "campaigns": rows,
    }
    return json.dumps(payload, indent=2)
