"""A clearance list sized to the stock: customers taken, likeliest buyers first, until the
treatment group's expected units reach the units to clear."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from reachlist.errors import InputError
from reachlist.estimate import Calibrated
from reachlist.planning import Plan, item_buyers, item_facts
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["NOT_NEEDED", "Clearance", "size_to_stock"]

NOT_NEEDED = "not_needed"  # excluded_by for customers a clearance list does not need


@dataclass(frozen=True)
class Clearance:
    """How a clearance list was sized to the stock."""

    stock: int
    stock_from: str
    units_per_buyer: float
    buyers_seen: int
    units_from: str
    expected_units: float  # from the treatment group of the list
    customers: int  # customers on the list (treatment and holdout)
    available: int  # customers left after the exclusions
    clears: bool
    basis: str = "co-purchase rate"  # what expected buyers were taken from


def size_to_stock(
    wh: Warehouse, plan: Plan, frame: pl.DataFrame, cal: Calibrated | None = None
) -> tuple[pl.DataFrame, Clearance]:
    """Take kept customers, likeliest buyers first, until the treatment group's expected units
    reach the stock; the rest are marked ``not_needed``.

    With a calibration, a customer's expected buyers are their calibrated take-up probability
    within the horizon and units are those a new buyer took within the horizon in the past;
    without one (``--no-estimate``), the rule's co-purchase rate and the units past holders hold,
    and the clearance says so."""
    req = plan.request
    if req.stock is not None:
        stock, stock_from = req.stock, option("stock")
    else:
        on_hand = item_facts(wh, plan.target)["stock_on_hand"]
        if on_hand is None or on_hand <= 0:
            raise InputError(
                f"Expected a stock to clear for {plan.target}, found products.stock_on_hand "
                f"{on_hand!r}.",
                hint=f"pass {option('stock')} N with the units to clear",
            )
        stock, stock_from = int(on_hand), "products.stock_on_hand"
    kept = frame.filter(pl.col("excluded_by").is_null())
    if cal is not None:
        horizon = plan.request.horizon_days
        latest = cal.latest.people
        per_buyer = cal.units_per_buyer
        buyers = int(latest["bought"].sum())
        units_from = (
            f"new buyers of {plan.rules_target} within {horizon} days of {cal.latest.at:%Y-%m-%d}"
        )
        basis = f"calibrated expected buyers within {horizon} days"
        kept = kept.join(cal.customer_rates(), on="customer_id", how="left").with_columns(
            pl.col("rate").fill_null(0.0).alias("likely")
        )
    else:
        until = plan.spec.lookback.until
        buyers, units = item_buyers(wh, plan.target, until)
        units_from = str(plan.target)
        if buyers == 0 and plan.stand_in is not None:
            buyers, units = item_buyers(wh, plan.stand_in, until)
            units_from = f"{plan.stand_in} (stand-in)"
        if buyers == 0:
            per_buyer, units_from = 1.0, "no history: 1 unit assumed"
        else:
            per_buyer = units / buyers
        basis = "co-purchase rate (no take-up estimate)"
        kept = kept.with_columns(pl.col("score").alias("likely"))
    kept = kept.sort(["likely", "score", "customer_id"], descending=[True, True, False])
    expected = kept.select(
        pl.when(pl.col("contact_group") == "treatment")
        .then(pl.col("likely") * per_buyer)
        .otherwise(0.0)
        .cum_sum()
        .alias("units")
    )["units"]
    reach_at = expected.search_sorted(stock - 1e-9, side="left") if kept.height else 0
    clears = kept.height > 0 and float(expected[-1]) >= stock - 1e-9
    take = int(reach_at) + 1 if clears else kept.height
    chosen = kept.head(take)["customer_id"]
    frame = frame.with_columns(
        pl.when(pl.col("excluded_by").is_null() & ~pl.col("customer_id").is_in(chosen.implode()))
        .then(pl.lit(NOT_NEEDED))
        .otherwise(pl.col("excluded_by"))
        .alias("excluded_by"),
    ).with_columns(
        pl.when(pl.col("excluded_by") == NOT_NEEDED)
        .then(pl.lit(None, dtype=pl.String))
        .otherwise(pl.col("contact_group"))
        .alias("contact_group")
    )
    return frame, Clearance(
        stock=stock,
        stock_from=stock_from,
        units_per_buyer=per_buyer,
        buyers_seen=buyers,
        units_from=units_from,
        expected_units=float(expected[take - 1]) if take else 0.0,
        customers=take,
        available=kept.height,
        clears=clears,
        basis=basis,
    )
