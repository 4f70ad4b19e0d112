"""A campaign brief: what a built campaign is, in numbers a manager can forward.

Everything comes from the campaign log (the record ``build`` wrote: parameters, rules, counts,
waterfall, estimate) and the products table (names for the rules' items), so a brief can be made
at any time after the build without recomputing the list. ``brief_data`` is the brief as plain
values (the same numbers the HTML page shows, and its embedded JSON).

>>> with CampaignLog.open(wh) as log:                                      # doctest: +SKIP
...     data = brief_data(wh, log, "winter-mats")
"""

from __future__ import annotations

import math
from typing import Any

from reachlist.campaigns import CampaignLog
from reachlist.delivery import item_names
from reachlist.errors import InputError, ReachlistError
from reachlist.query import Query
from reachlist.stats.power import minimum_detectable_uplift
from reachlist.targets import parse_target
from reachlist.warehouse import Warehouse
from reachlist.wording import option

SCHEMA_VERSION = 1

CAUTIONS = (
    "Direct marketing is regulated (consent, data protection, opt-outs). reachlist's defaults "
    "are not legal advice; local law and your organisation's policy take precedence.",
    "Expected buyers are a baseline: customers expected to buy within the horizon without the "
    "offer, estimated from past cutoffs. The offer's effect is measured afterwards, against the "
    "holdout (`reachlist results`).",
    "Rules describe what customers bought together in the past; they do not show that one "
    "purchase causes another.",
)


def _find(log: CampaignLog, campaign_id: str) -> tuple[CampaignLog, dict[str, Any]]:
    for one in (log, *log.also):
        if one.db.physical_columns("campaigns") is None:
            continue
        record = one.campaign(campaign_id)
        if record is not None:
            return one, record
    raise InputError(
        f"Expected campaign {campaign_id!r} in the campaign log at {log.where}, found no such "
        "campaign.",
        hint=f"list the logged campaigns with `reachlist campaigns` (with {option('state')} PATH when the "
        "log is kept in a local file)",
    )


def brief_data(wh: Warehouse, log: CampaignLog, campaign_id: str) -> dict[str, Any]:
    """The brief of a logged campaign as plain values (numbers as numbers)."""
    holder, record = _find(log, campaign_id)
    params, counts = record["parameters"], record["counts"]
    level = str(params.get("level", "sku"))
    target = parse_target(str(record["target"]))
    per_rule_rows = holder.db.fetch(
        Query.from_template("contacts_per_rule", {"campaign_id": campaign_id})
    )
    per_rule: dict[str, dict[str, int]] = {}
    for rule_id, group, n in per_rule_rows.iter_rows():
        per_rule.setdefault(str(rule_id), {"treatment": 0, "holdout": 0})[str(group)] = int(n)
    items = {a for r in record["rules"] for a in r["antecedent"]}
    names = item_names(wh, items, level)
    offer = item_names(wh, {target.name}, target.level)[target.name]
    rules = []
    for r in record["rules"]:
        groups = per_rule.get(r["rule_id"], {"treatment": 0, "holdout": 0})
        rules.append(
            {
                "rank": r["rank"],
                "rule_id": r["rule_id"],
                "antecedent": list(r["antecedent"]),
                "in_words": "bought " + " and ".join(names[a] for a in r["antecedent"]),
                "co_purchase_rate": r["confidence"],
                "lift": r["lift"],
                "breadth_lift": r.get("breadth_lift"),
                "significant": bool(r["significant"]),
                "treatment": groups["treatment"],
                "holdout": groups["holdout"],
            }
        )
    treatment, holdout = int(counts["treatment"]), int(counts["holdout"])
    estimate = counts.get("estimate") or {}
    expected = None
    if "expected" in estimate and estimate["expected"] is not None:
        expected = {
            k: estimate.get(k)
            for k in ("expected", "low", "high", "level", "n_backtests", "horizon_days")
        }
    response = None
    uplift = estimate.get("uplift")
    if (
        expected is not None
        and isinstance(expected["expected"], float | int)
        and isinstance(uplift, dict)
        and uplift.get("measured_ratio") is not None
    ):
        baseline, (low, high) = float(expected["expected"]), uplift["interval"]
        response = {
            "ratio": uplift["ratio"],
            "ratio_interval": [low, high],
            "response_buyers": baseline * uplift["ratio"],
            "incremental_buyers": baseline * (uplift["ratio"] - 1),
            "incremental_interval": [baseline * (low - 1), baseline * (high - 1)],
            "note": uplift.get("note"),
        }
    power = None
    listed = treatment + holdout
    if treatment and holdout:
        base = None
        if expected is not None and expected["expected"] is not None:
            base = expected["expected"] / treatment
        if base is None or not 0 < base < 1:
            base = (
                estimate.get("base_rate") if isinstance(estimate.get("base_rate"), float) else None
            )
        if base is not None and 0 < base < 1:
            try:
                m = minimum_detectable_uplift(listed, holdout / listed, base)
                power = {
                    "baseline_rate": base,
                    "detectable_relative_uplift": m.relative if math.isfinite(m.relative) else None,
                    "alpha": m.alpha,
                    "power": m.power,
                }
            except ReachlistError:
                power = None
    return {
        "schema_version": SCHEMA_VERSION,
        "campaign_id": campaign_id,
        "target": str(target),
        "offer_name": offer,
        "purpose": record["purpose"],
        "built_at": record["created_at"].isoformat(),
        "send_date": params.get("send_date"),
        "window": [str(w) for w in params.get("window", [])],
        "level": level,
        "reached": int(counts["reached"]),
        "listed": listed,
        "treatment": treatment,
        "holdout": holdout,
        "holdout_share": params.get("holdout"),
        "waterfall": [
            {
                "step": s["label"],
                "removed": int(s["removed"]),
                "left": int(s["remaining"]),
                "in_use": bool(s["in_use"]),
            }
            for s in counts["waterfall"]
        ],
        "rules": rules,
        "expected_buyers": expected,
        "with_the_offer": response,  # from the uplift learnt from past campaigns, when any
        "estimate_skipped": estimate.get("skipped"),
        "holdout_power": power,
        "overrides": record.get("overrides"),
        "cautions": list(CAUTIONS),
        "log": holder.where,
    }
