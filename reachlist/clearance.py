"""A clearance list sized to the stock: customers taken, likeliest buyers first, until the
treatment group's expected units reach the units to clear.

Expected units always come from a calibrated take-up probability (``reachlist.estimate``), never
from the rules' co-purchase rate, which overstates take-up many times over. The quick mode (no
estimate asked for) calibrates on the ``QUICK_CUTOFFS`` newest cutoffs only; where no calibration
is possible at all, the stock is not sized: the list is not cut and the clearance says why."""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

from reachlist.errors import InputError
from reachlist.estimate import Calibrated
from reachlist.planning import Plan, item_facts
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["NOT_NEEDED", "QUICK_CUTOFFS", "Clearance", "NextStep", "size_to_stock"]

NOT_NEEDED = "not_needed"  # excluded_by for customers a clearance list does not need
# Cutoffs of the cheap calibration a clearance uses when no full estimate was asked for: two
# backtests, one history query and one reach query, as in the full estimate but shorter.
QUICK_CUTOFFS = 3


@dataclass(frozen=True)
class Clearance:
    """How a clearance list was sized to the stock."""

    stock: int
    stock_from: str
    units_per_buyer: float
    buyers_seen: int
    units_from: str
    expected_units: float | None  # from the treatment group of the list; None: not sized
    customers: int  # customers on the list (treatment and holdout)
    available: int  # customers left after the exclusions
    clears: bool
    basis: str  # what expected buyers were taken from, or why the stock was not sized
    cutoffs: int = 0  # past cutoffs the take-up probability was calibrated on
    # listed customers who already hold what the estimate learns from (a stand-in, or the target
    # with a repurchase window): no take-up is estimated for them, so they count for no units
    unestimated: int = 0

    @property
    def sized(self) -> bool:
        return self.expected_units is not None


@dataclass(frozen=True)
class NextStep:
    """One change to a clearance request and what it would do to the list."""

    change: str  # the options to add, as typed
    what: str  # the change in words
    customers: int = 0  # on the list (treatment and holdout)
    to_contact: int = 0
    expected_units: float | None = None  # from the treatment group; None: not evaluated
    clears: bool = False
    note: str | None = None  # why it could not be evaluated


def size_to_stock(
    wh: Warehouse,
    plan: Plan,
    frame: pl.DataFrame,
    cal: Calibrated | None,
    why_not: str | None = None,
) -> tuple[pl.DataFrame, Clearance]:
    """Take kept customers, likeliest buyers first, until the treatment group's expected units
    reach the stock; the rest are marked ``not_needed``.

    A customer's expected buyers are their calibrated take-up probability within the horizon and
    units are those a new buyer took within the horizon at the latest complete cutoff. Without a
    calibration (``why_not`` says why) the stock is not sized and nobody is cut."""
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
    if cal is None:
        # No calibrated take-up: refuse to size rather than fall back to the co-purchase rate.
        return frame, Clearance(
            stock=stock,
            stock_from=stock_from,
            units_per_buyer=0.0,
            buyers_seen=0,
            units_from="",
            expected_units=None,
            customers=kept.height,
            available=kept.height,
            clears=False,
            basis=f"not sized: {why_not or 'no calibrated take-up'}",
        )
    horizon = plan.request.horizon_days
    per_buyer = cal.units_per_buyer
    buyers = cal.latest.buyers()
    units_from = (
        f"new buyers of {plan.rules_target} within {horizon} days of {cal.latest.at:%Y-%m-%d}"
    )
    cutoffs = len(cal.history.cutoffs)
    basis = f"calibrated expected buyers within {horizon} days ({cutoffs} cutoffs)"
    kept = kept.join(cal.customer_rates(), on="customer_id", how="left").with_columns(
        pl.col("rate").is_null().alias("unestimated"),
        pl.col("rate").fill_null(0.0).alias("likely"),
    )
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
        cutoffs=cutoffs,
        unestimated=int(kept.head(take)["unestimated"].sum()),
    )
