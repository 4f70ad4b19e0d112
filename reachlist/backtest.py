"""A time-split backtest: build the audiences at a past cutoff, predict, then look at who bought.

Everything on the prediction side uses data before the cutoff only: rules are mined in the 12
months up to the cutoff, audiences hold antecedents inside that window and lack the target at the
cutoff, and the estimate is calibrated on cutoffs whose outcomes end by the cutoff
(``reachlist.estimate``). Only the observation, who bought in ``[cutoff, cutoff + horizon)``,
reads later orders.

>>> bt = backtest(wh, "SG04-104", cutoff="2026-06-30", horizon_days=30)    # doctest: +SKIP
>>> bt.combined.predicted, bt.combined.observed                            # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import Any

import polars as pl

from reachlist import ids
from reachlist.audience import AudienceSpec, ChosenRule, choose_rules
from reachlist.errors import InputError
from reachlist.estimate import (
    COMBINED,
    DEFAULT_HORIZON,
    MAX_CUTOFFS,
    Calibrated,
    TakeUpReport,
    calibrate_audience,
    forward_query,
)
from reachlist.stats import gains_chart_points, gains_table
from reachlist.targets import Target, Window, _as_datetime, parse_target, resolve_target
from reachlist.warehouse import Warehouse
from reachlist.wording import option, spelled_as

__all__ = ["Backtest", "BacktestRow", "backtest"]

LOOKBACK_DAYS = 365


@dataclass(frozen=True)
class BacktestRow:
    """One audience (a rule's, or the combined list) at the cutoff: predicted against observed."""

    label: str  # rule id, or "combined"
    rule: ChosenRule | None
    customers: int
    estimate: TakeUpReport
    naive: float  # expected buyers if rule confidence were take-up (it is not)
    observed: int

    @property
    def predicted(self) -> float:
        return self.estimate.expected.expected

    @property
    def covered(self) -> bool:
        e = self.estimate.expected
        return e.low <= self.observed <= e.high

    def as_dict(self) -> dict[str, Any]:
        e = self.estimate
        av = e.added_value
        return {
            "audience": self.label,
            "antecedent": list(self.rule.antecedent) if self.rule else None,
            "customers": self.customers,
            "predicted": self.predicted,
            "interval": [e.expected.low, e.expected.high],
            "observed": self.observed,
            "covered": self.covered,
            "naive_confidence": self.naive,
            "breadth_matched_rate": e.breadth_matched_rate,
            "base_rate": e.base_rate,
            "observed_rate": self.observed / self.customers if self.customers else None,
            "added_value_over_breadth": None if av is None else av.estimate,
            "confidence": self.rule.confidence if self.rule else None,
            "lift": self.rule.lift if self.rule else None,
        }


@dataclass(frozen=True)
class Backtest:
    target: Target
    cutoff: datetime
    horizon_days: int
    window: Window
    rows: list[BacktestRow]  # one per rule, then the combined list
    gains: pl.DataFrame  # by score decile of the combined list (reachlist.stats.gains_table)
    base_rate: float  # observed take-up of customers lacking the target outside the list
    calibration: Calibrated

    @property
    def combined(self) -> BacktestRow:
        return self.rows[-1]

    def chart_points(self) -> pl.DataFrame:
        return gains_chart_points(self.gains)

    def as_dict(self) -> dict[str, Any]:
        c = self.calibration
        return {
            "target": str(self.target),
            "cutoff": self.cutoff.date().isoformat(),
            "horizon_days": self.horizon_days,
            "mining_window": [
                self.window.since.date().isoformat(),
                self.window.until.date().isoformat(),
            ],
            "n_backtests": c.calibration.n_backtests,
            "method": self.combined.estimate.expected.method,
            "level": self.combined.estimate.expected.level,
            "factor": c.calibration.factor,
            "rule_weight": c.weight.weight,
            "observed_base_rate": self.base_rate,
            "audiences": [r.as_dict() for r in self.rows],
            "gains": self.gains.to_dicts(),
        }


def backtest(
    wh: Warehouse,
    target: str | Target,
    *,
    cutoff: date | datetime | str,
    horizon_days: int = DEFAULT_HORIZON,
    top: int = 5,
    rank_by: str = "leverage",
    level: str = "sku",
    mining: dict[str, Any] | None = None,
    interval_level: float = 0.9,
    max_cutoffs: int = MAX_CUTOFFS,
) -> Backtest:
    """Build the audiences for ``target`` as of ``cutoff`` from earlier data, predict their buyers
    within ``horizon_days``, and count who actually bought."""
    from reachlist.rules import mine_rules

    at = _as_datetime(cutoff, option("cutoff"))
    if horizon_days < 1:
        raise InputError(
            f"Expected a horizon of at least 1 day, found {horizon_days}.",
            hint=f"pass {option('horizon_days')} 30",
        )
    tgt = resolve_target(wh, parse_target(target) if isinstance(target, str) else target)
    window = Window(at - timedelta(days=LOOKBACK_DAYS), at)
    rules = mine_rules(
        wh,
        tgt,
        level=level,
        since=window.since,
        until=window.until,
        **(mining or {}),
    )
    chosen = choose_rules(rules, top=top, rank_by=rank_by)
    spec = AudienceSpec(target=tgt, rules=chosen, level=rules.level, lookback=window)
    with spelled_as("as_of", "cutoff"):  # the estimate's as_of is this cutoff
        cal = calibrate_audience(
            wh,
            tgt,
            spec=spec,
            horizon_days=horizon_days,
            as_of=at,
            level=interval_level,
            max_cutoffs=max_cutoffs,
        )
    # The observation: the only read after the cutoff.
    outcome = ids.normalise_frame(
        wh.fetch(forward_query(tgt, at, at + timedelta(days=horizon_days)))
    ).select("customer_id", pl.col("bought").cast(pl.Int64))
    people = cal.now.people.join(outcome, on="customer_id", how="left")
    people = people.with_columns(pl.col("bought").fill_null(0))

    rows = []
    best_conf = pl.lit(0.0)
    for rule in chosen:
        members = people.filter(pl.col(f"g{rule.rank}"))
        if members.height == 0:
            continue
        rows.append(
            BacktestRow(
                rule.rule_id,
                rule,
                members.height,
                cal.report(rule.rank),
                members.height * rule.confidence,
                int(members["bought"].sum()),
            )
        )
        best_conf = (
            pl.when(pl.col(f"g{rule.rank}") & (pl.lit(rule.confidence) > best_conf))
            .then(pl.lit(rule.confidence))
            .otherwise(best_conf)
        )
    members = people.filter(pl.col(f"g{COMBINED}"))
    naive = float(members.select(best_conf.sum()).item())
    rows.append(
        BacktestRow(
            "combined",
            None,
            members.height,
            cal.report(COMBINED),
            naive,
            int(members["bought"].sum()),
        )
    )
    scores = cal.customer_rates().join(members.select("customer_id", "bought"), on="customer_id")
    gains = (
        gains_table(scores["rate"].to_numpy(), scores["bought"].to_numpy())
        if scores["bought"].sum() > 0
        else pl.DataFrame()
    )
    # everyone lacking the target at the cutoff (the estimate brought only the audience)
    outside = outcome.filter(~pl.col("customer_id").is_in(members["customer_id"].implode()))
    base = float(outside["bought"].mean()) if outside.height else float("nan")  # type: ignore[arg-type]
    return Backtest(tgt, at, horizon_days, window, rows, gains, base, cal)
