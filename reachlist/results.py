"""After a campaign: take-up in treatment and holdout, the uplift, and whether the holdout could tell.

Contacts come from the campaign log (which may live in another database than the orders); buyers
of the target within the horizon after each contact's send time come from the warehouse
(``sql/item_buyers.sql``) and are joined in memory.

>>> r = campaign_results(wh, log, "spring-mats-2026", horizon_days=30)    # doctest: +SKIP
>>> r.sentence()                                                           # doctest: +SKIP
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

import polars as pl

from reachlist import ids
from reachlist.audience import AudienceSpec, ChosenRule
from reachlist.campaigns import CampaignLog
from reachlist.errors import EmptyResultError, InputError, ReachlistError
from reachlist.estimate import COMBINED, DEFAULT_HORIZON, TakeUpReport, calibrate_audience
from reachlist.query import Query
from reachlist.stats import (
    DetectableUplift,
    Interval,
    difference_interval,
    minimum_detectable_uplift,
    ratio_interval,
    wilson_interval,
)
from reachlist.targets import (
    Target,
    Window,
    item_buyers_query,
    last_order_day,
    parse_target,
)
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["CampaignResults", "GroupTakeUp", "buyers_query", "campaign_results"]


def buyers_query(target: Target, sent: datetime, horizon: timedelta) -> Query:
    """Customers who bought ``target`` within the horizon after a send and their net units.
    The horizon counts whole days from the day of the send (the holdings' grain)."""
    day = datetime(sent.year, sent.month, sent.day)
    return item_buyers_query(target, day, day + horizon)


@dataclass(frozen=True)
class GroupTakeUp:
    group: str
    customers: int
    buyers: int
    units: float
    rate: Interval  # Wilson 95%


@dataclass(frozen=True)
class CampaignResults:
    campaign_id: str
    target: Target
    sent: datetime  # earliest send time
    horizon_days: int
    complete: bool  # every contact's horizon ends before the last order day
    treatment: GroupTakeUp
    holdout: GroupTakeUp
    difference: Interval | None  # p_treatment - p_holdout, Newcombe 95%
    ratio: Interval | None  # p_treatment / p_holdout, log scale 95%
    detectable: DetectableUplift | None  # what this split could detect at the holdout's rate
    predicted: TakeUpReport | None  # the calibrated estimate for the treatment group
    prediction_note: str
    # One denominator: the estimate is about treated customers who lacked what it learns from
    # (the target, or the stand-in) at as-of; observed buyers among those same customers.
    observed_about: int | None = None
    # What build logged (counts.estimate): the promise made when the list was built
    promised: dict[str, Any] | None = None

    def sentence(self) -> str:
        """A plain sentence on whether the holdout was big enough to tell."""
        if self.holdout.customers == 0:
            return "No holdout was kept, so the campaign's effect cannot be measured."
        if self.ratio is None or self.difference is None:
            return "No buyers in either group yet, so the holdout cannot tell anything."
        r = self.ratio
        if r.low > 1:
            return (
                f"The holdout was big enough: treated customers bought more often "
                f"(x{r.estimate:.2f}, 95% CI x{r.low:.2f} to x{r.high:.2f})."
            )
        if r.high < 1:
            return (
                f"The holdout was big enough: treated customers bought less often "
                f"(x{r.estimate:.2f}, 95% CI x{r.low:.2f} to x{r.high:.2f})."
            )
        d = self.detectable
        if d is not None and math.isfinite(d.relative):
            return (
                f"The holdout was too small to tell: with {self.holdout.customers:,} held out "
                f"it could only detect an uplift of +{d.relative:.0%} or more (80% power), "
                f"and the observed ratio x{r.estimate:.2f} has a 95% CI of x{r.low:.2f} to "
                f"x{_num(r.high)}."
            )
        return (
            f"The holdout could not tell: the 95% CI of the ratio, x{r.low:.2f} to "
            f"x{_num(r.high)}, includes no effect."
        )

    def as_dict(self) -> dict[str, Any]:
        def grp(g: GroupTakeUp) -> dict[str, Any]:
            return {
                "customers": g.customers,
                "buyers": g.buyers,
                "units": g.units,
                "rate": g.rate.estimate,
                "rate_ci": [g.rate.low, g.rate.high],
            }

        p = self.predicted
        return {
            "campaign_id": self.campaign_id,
            "target": str(self.target),
            "sent": self.sent.isoformat(),
            "horizon_days": self.horizon_days,
            "complete": self.complete,
            "treatment": grp(self.treatment),
            "holdout": grp(self.holdout),
            "difference": None if self.difference is None else list(self.difference),
            "relative_uplift": None if self.ratio is None else list(self.ratio),
            "minimum_detectable_uplift": None
            if self.detectable is None
            else self.detectable.relative,
            "predicted_buyers": None if p is None else p.expected.expected,
            "predicted_interval": None if p is None else [p.expected.low, p.expected.high],
            "predicted_for": None if p is None else p.audience,
            "observed_among_predicted": self.observed_about,
            "prediction_note": self.prediction_note,
            "promised_at_build": self.promised,
            "verdict": self.sentence(),
        }


def _num(x: float | Any) -> str:
    x = float(x)
    return f"{x:.2f}" if math.isfinite(x) else "infinity"


def _spec_from_record(record: dict[str, Any], target: Target) -> AudienceSpec | None:
    """The audience definition the campaign was built with, from its log record."""
    try:
        p = record["parameters"]
        since, until = (datetime.fromisoformat(str(v)) for v in p["window"])
        rules = tuple(
            ChosenRule(**{**r, "antecedent": tuple(r["antecedent"])}) for r in record["rules"]
        )
        return AudienceSpec(target, rules, p["level"], Window(since, until))
    except (KeyError, TypeError, ValueError, ReachlistError):
        return None


def campaign_results(
    wh: Warehouse,
    log: CampaignLog,
    campaign_id: str,
    *,
    horizon_days: int = DEFAULT_HORIZON,
    predict: bool = True,
) -> CampaignResults:
    """Take-up in treatment and holdout within ``horizon_days`` of each contact's send time."""
    if horizon_days < 1:
        raise InputError(
            f"Expected a horizon of at least 1 day, found {horizon_days}.",
            hint=f"pass {option('horizon_days')} 30",
        )
    record = log.campaign(campaign_id)
    if record is None:
        raise InputError(
            f"Expected campaign {campaign_id!r} in the campaign log at {log.where}, found no such "
            "campaign.",
            hint=f"check the id (it is printed by `reachlist build`), or pass {option('state')} PATH when "
            "the log is kept in a local file",
        )
    target = parse_target(str(record["target"]))
    contacts = ids.normalise_frame(log.contacts(campaign_id)).select(
        "customer_id",
        "contact_group",
        pl.col("contacted_at").cast(pl.Datetime("us")),
    )
    if contacts.height == 0:
        raise EmptyResultError(
            f"Expected contacts for campaign {campaign_id!r}, found none.",
            hint="rebuild the campaign with `reachlist build`",
        )
    horizon = timedelta(days=horizon_days)
    bought = []
    for (sent,) in contacts.select("contacted_at").unique().iter_rows():
        buyers = wh.fetch(buyers_query(target, sent, horizon))
        bought.append(
            buyers.select(
                pl.col("customer_id").cast(contacts.schema["customer_id"], strict=False),
                pl.col("units").cast(pl.Float64),
                pl.lit(sent, dtype=pl.Datetime("us")).alias("contacted_at"),
            )
        )
    joined = contacts.join(pl.concat(bought), on=["customer_id", "contacted_at"], how="left")
    first_sent = contacts["contacted_at"].min()
    last_sent = contacts["contacted_at"].max()
    assert isinstance(first_sent, datetime) and isinstance(last_sent, datetime)
    complete = last_sent + horizon <= last_order_day(wh)

    def group(name: str) -> GroupTakeUp:
        g = joined.filter(pl.col("contact_group") == name)
        n = g.height
        k = int(g["units"].is_not_null().sum())
        units = float(g["units"].fill_null(0).sum())
        rate = wilson_interval(k, n) if n else Interval(math.nan, math.nan, math.nan)
        return GroupTakeUp(name, n, k, units, rate)

    t, h = group("treatment"), group("holdout")
    diff = ratio = None
    if t.customers and h.customers and (t.buyers or h.buyers):
        diff = difference_interval(t.buyers, t.customers, h.buyers, h.customers)
        ratio = ratio_interval(t.buyers, t.customers, h.buyers, h.customers)
    detectable = None
    if t.customers and h.customers:
        base = h.buyers / h.customers if h.buyers else max(t.buyers, 1) / (t.customers + 1)
        try:
            detectable = minimum_detectable_uplift(
                t.customers + h.customers,
                h.customers / (t.customers + h.customers),
                min(max(base, 1e-6), 1 - 1e-6),
            )
        except ReachlistError:
            detectable = None

    predicted, note, observed_about = None, "", None
    if predict and t.customers:
        spec = _spec_from_record(record, target)
        stand_in = (record.get("parameters") or {}).get("stand_in")
        learnt_from = target
        as_of = datetime(first_sent.year, first_sent.month, first_sent.day)
        if spec is not None:
            as_of = min(as_of, spec.lookback.until)
        treatment = joined.filter(pl.col("contact_group") == "treatment")
        treated_ids = treatment["customer_id"]
        try:
            # a stand-in campaign's estimate is learnt from the stand-in, as build did
            learnt_from = parse_target(str(stand_in)) if stand_in else target
            cal = calibrate_audience(
                wh,
                learnt_from,
                spec=spec,
                customers=treated_ids,
                horizon_days=horizon_days,
                as_of=as_of,
            ).for_customers(treated_ids)
            predicted = cal.report(COMBINED, given=treated_ids.n_unique())
            about = cal.members(COMBINED)["customer_id"]
            about = about.cast(treated_ids.dtype, strict=False)
            observed_about = int(
                treatment.filter(pl.col("customer_id").is_in(about.implode()))["units"]
                .is_not_null()
                .sum()
            )
            note = (
                f"estimated as of {as_of:%Y-%m-%d} for the {predicted.audience:,} treated "
                f"customers who lacked {learnt_from} then, from "
                f"{predicted.expected.n_backtests} backtests; it forecasts take-up without "
                "the offer, so the holdout's rate is its fair comparison"
            )
            if learnt_from != target:
                note += (
                    f"; learnt from buyers of the stand-in {learnt_from}, while the observed "
                    f"buyers are of {target}"
                )
        except ReachlistError as exc:
            note = f"no estimate: {exc.message}"
    promised = None
    logged = (record.get("counts") or {}).get("estimate")
    if isinstance(logged, dict) and logged.get("expected") is not None:
        promised = logged
    return CampaignResults(
        campaign_id,
        target,
        first_sent,
        horizon_days,
        complete,
        t,
        h,
        diff,
        ratio,
        detectable,
        predicted,
        note,
        observed_about,
        promised,
    )
