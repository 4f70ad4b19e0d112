"""What to try when a clearance list cannot clear the stock.

Each proposal is one change to the request, evaluated as a real list: the same exclusions, the
same holdout, expected units from the treatment group at a quick calibrated take-up rate
(``clearance.QUICK_CUTOFFS`` cutoffs). At most ``MOST_STEPS`` are tried, so the work is bounded:
two reuse the mined rules, two mine again (each under the mining budget).

- more rules: twice the ``top`` (at most 100), from the rules already mined;
- a repurchase window: customers who bought the target more than ``REPURCHASE_DAYS`` days ago
  come back (only when the target was excluded for anyone who ever bought it);
- a wider level: antecedents at category level instead of sku;
- a stand-in: the rules of the target's own category (when no stand-in was given).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable

import polars as pl

from reachlist.campaigns import CampaignLog
from reachlist.clearance import QUICK_CUTOFFS, NextStep
from reachlist.errors import ReachlistError
from reachlist.lists import ListOutcome, list_outcome
from reachlist.planning import ListRequest, Plan, plan_list, quote_option
from reachlist.query import Query
from reachlist.rules import RuleSet
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["MOST_STEPS", "REPURCHASE_DAYS", "NextStep", "propose_next_steps"]

MOST_STEPS = 4
REPURCHASE_DAYS = 180  # a repurchase window for a consumable: half a year since the last purchase


def _candidates(wh: Warehouse, plan: Plan) -> list[tuple[str, str, ListRequest, RuleSet | None]]:
    req = plan.request
    quick = dataclasses.replace(
        req,
        estimate=False,
        cutoffs=min(req.cutoffs, QUICK_CUTOFFS),
        campaign_id=plan.campaign_id,  # the same holdout hash as the list
    )
    out: list[tuple[str, str, ListRequest, RuleSet | None]] = []
    mined = plan.ruleset.frame.filter(pl.col("significant")).height
    if not req.rule_ids and req.top < 100 and mined > len(plan.rules):
        top = min(100, 2 * req.top)
        out.append(
            (
                f"{option('top')} {top}",
                f"up to {top} rules instead of {req.top} ({mined:,} significant rules mined)",
                dataclasses.replace(quick, top=top),
                plan.ruleset,
            )
        )
    if req.bought_within_days is None:
        out.append(
            (
                f"{option('bought_within_days')} {REPURCHASE_DAYS}",
                f"customers whose last purchase of the target is over {REPURCHASE_DAYS} days old",
                dataclasses.replace(quick, bought_within_days=REPURCHASE_DAYS),
                plan.ruleset,
            )
        )
    if plan.ruleset.level == "sku" and not req.rule_ids:
        out.append(
            (
                f"{option('level')} category",
                "rules whose antecedents are categories, not single products",
                dataclasses.replace(quick, mining={**req.mining, "level": "category"}),
                None,
            )
        )
    if plan.stand_in is None and plan.target.level == "sku" and not req.rule_ids:
        groups = wh.fetch(Query.from_template("item_groups", {"sku": plan.target.name}))
        if groups.height and groups["category"][0] is not None:
            name = str(groups["category"][0])
            out.append(
                (
                    f"{option('stand_in')} category:{quote_option(name)}",
                    f"the rules of its category {name} (estimates then describe buyers of the "
                    "whole category)",
                    dataclasses.replace(quick, stand_in=f"category:{name}"),
                    None,
                )
            )
    return out[:MOST_STEPS]


def propose_next_steps(
    wh: Warehouse,
    plan: Plan,
    log: CampaignLog | None = None,
    progress: Callable[[str], None] | None = None,
) -> tuple[NextStep, ...]:
    """Each candidate change evaluated as a list; the changes that add the most units first."""
    found: list[NextStep] = []
    candidates = _candidates(wh, plan)
    for n, (change, what, request, rules) in enumerate(candidates, start=1):
        if progress is not None:
            progress(f"Next steps for the stock: {n} of {len(candidates)} ({change})")
        try:
            variant = plan_list(wh, request, rules=rules, now=plan.now)
            outcome: ListOutcome = list_outcome(wh, variant, log)
        except ReachlistError as exc:
            found.append(NextStep(change, what, note=exc.message))
            continue
        c = outcome.clearance
        if c is None or c.expected_units is None:
            note = c.basis if c is not None else "no clearance"
            found.append(NextStep(change, what, note=note))
            continue
        found.append(
            NextStep(
                change,
                what,
                customers=c.customers,
                to_contact=outcome.treatment.height,
                expected_units=c.expected_units,
                clears=c.clears,
            )
        )
    return tuple(
        sorted(found, key=lambda s: (s.expected_units is None, -(s.expected_units or 0.0)))
    )
