"""What the campaign logs hold: one line per campaign, newest first (``reachlist campaigns``).

Each campaign shows its target, purpose, when it was built and sent (``--send-date``, or set
later with ``reachlist sent``; the build day when never given), how many customers were listed,
contacted and held out, and when its results can be read (the send day plus the take-up horizon
it was estimated for; ``results`` reads the log and the order history after it).

>>> with CampaignLog.open(wh, state) as log:                              # doctest: +SKIP
...     listing = list_campaigns(log, today=date(2026, 12, 3))
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import Any

import polars as pl

from reachlist.campaigns import CampaignLog
from reachlist.errors import InputError
from reachlist.estimate import DEFAULT_HORIZON
from reachlist.query import Query
from reachlist.wording import option

MAX_LIMIT = 10_000
"""The most campaigns one listing reads from each log (a bound, not a page size)."""

COLUMNS: dict[str, Any] = {
    "log": pl.String,
    "campaign_id": pl.String,
    "target": pl.String,
    "purpose": pl.String,
    "built": pl.Datetime("us"),
    "sent": pl.Date,
    "listed": pl.Int64,
    "treatment": pl.Int64,
    "holdout": pl.Int64,
    "horizon_days": pl.Int64,
    "results_from": pl.Date,
    "results_ready": pl.Boolean,
}


@dataclass(frozen=True)
class CampaignListing:
    """Campaigns across the logs read, newest first; ``total`` counts every campaign present."""

    campaigns: pl.DataFrame
    total: int
    limit: int
    logs: tuple[str, ...]

    @property
    def narrowed(self) -> bool:
        return self.total > self.campaigns.height


def _count(value: Any) -> int | None:
    return int(value) if isinstance(value, int | float) else None


def _row(where: str, raw: dict[str, Any], today: date) -> dict[str, Any]:
    parameters = json.loads(raw["parameters"] or "{}")
    counts = json.loads(raw["counts"] or "{}")
    horizon = _count(parameters.get("horizon_days")) or DEFAULT_HORIZON
    built = raw["created_at"]
    if isinstance(built, str):
        built = datetime.fromisoformat(built)
    sent = parameters.get("send_date")
    sent_on = date.fromisoformat(str(sent)[:10]) if sent else built.date()
    ready_on = sent_on + timedelta(days=horizon)
    return {
        "log": where,
        "campaign_id": raw["campaign_id"],
        "target": raw["target"],
        "purpose": raw["purpose"],
        "built": built,
        "sent": sent_on,
        "listed": _count(counts.get("listed")),
        "treatment": _count(counts.get("treatment")),
        "holdout": _count(counts.get("holdout")),
        "horizon_days": horizon,
        "results_from": ready_on,
        "results_ready": today >= ready_on,
    }


def list_campaigns(log: CampaignLog, *, today: date, limit: int = 50) -> CampaignListing:
    """The newest ``limit`` campaigns of every log ``log`` reads (its own and, with a state
    file, the warehouse's), newest first. Raises ``InputError`` for a limit out of range."""
    if not 1 <= limit <= MAX_LIMIT:
        raise InputError(
            f"Expected a limit from 1 to {MAX_LIMIT:,} campaigns, found {limit:,}.",
            hint=f"pass {option('limit')} 50 (the newest campaigns come first)",
        )
    rows: list[dict[str, Any]] = []
    total = 0
    logs: list[str] = []
    for one in (log, *log.also):
        if one.db.physical_columns("campaigns") is None:
            continue
        logs.append(one.where)
        total += int(one.db.fetch(Query.from_template("campaign_count"))["n"][0])
        found = one.db.fetch(Query.from_template("campaign_list", {"limit": limit}))
        rows.extend(_row(one.where, raw, today) for raw in found.iter_rows(named=True))
    frame = pl.DataFrame(rows, schema=COLUMNS) if rows else pl.DataFrame(schema=COLUMNS)
    frame = frame.sort(["built", "campaign_id"], descending=[True, False]).head(limit)
    return CampaignListing(frame, total, limit, tuple(logs))


def campaign_file_text(log: CampaignLog, campaign_id: str) -> str:
    """The campaign file a logged campaign was built from, as it was written."""
    for one in (log, *log.also):
        if one.db.physical_columns("campaigns") is None:
            continue
        record = one.campaign(campaign_id)
        if record is None:
            continue
        text = record["parameters"].get("campaign_file")
        if not text:
            raise InputError(
                f"Expected campaign {campaign_id!r} to have been built from a campaign file, "
                "found one built from command-line options.",
                hint=f"its options are in the log's parameters; `reachlist campaigns {option('as_json=True')}` "
                "lists the campaigns",
            )
        return str(text)
    raise InputError(
        f"Expected campaign {campaign_id!r} in the campaign log at {log.where}, found no such "
        "campaign.",
        hint="list the logged campaigns with `reachlist campaigns`",
    )
