"""The sample warehouse's campaign history: finished campaigns with holdouts and a planted uplift.

Three campaigns of our invented garden retailer, logged as ``reachlist build`` logs them, so that
``results`` and the uplift learnt from past campaigns (``reachlist.uplift``) have something to
read: two introductions whose offer raised take-up by a planted ratio, and one clearance whose
offer did nothing. The orders are the generator's own and are not changed: each campaign's
audience (holders of a planted rule's antecedent who lacked its target on the send day, with
marketing consent) is split into treatment and holdout at random, a buyer (a first purchase of
the target within the horizon, from ``sample_planted``) going to the holdout with a lower
probability than a non-buyer, so that in expectation the holdout buys at ``p0`` and the treatment
at ``ratio x p0``: the campaign's effect is planted in who was held out, not in the history.
``sample_planted_campaigns`` records each campaign's planted ratio.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import numpy as np
import polars as pl
import pyarrow as pa

__all__ = ["HOLDOUT_SHARE", "HORIZON_DAYS", "PLANTED_CAMPAIGNS", "past_campaigns"]

HORIZON_DAYS = 30
HOLDOUT_SHARE = 0.2

PLANTED_CAMPAIGNS: tuple[dict[str, Any], ...] = (
    {
        "campaign_id": "past-patio-cleaner-2025-06",
        "rule_id": "patio-cleaner",
        "purpose": "introduce",
        "sent_at": datetime(2025, 6, 2, 9, 0),
        "ratio": 1.6,
    },
    {
        "campaign_id": "past-butane-refill-2025-08",
        "rule_id": "butane-refill",
        "purpose": "introduce",
        "sent_at": datetime(2025, 8, 4, 9, 0),
        "ratio": 1.6,
    },
    {
        "campaign_id": "past-frost-fleece-2025-10",
        "rule_id": "frost-fleece",
        "purpose": "clear",
        "sent_at": datetime(2025, 10, 6, 9, 0),
        "ratio": 1.0,
    },
)


def past_campaigns(
    planted: pa.Table, rules: pa.Table, customers: pa.Table, seed: int
) -> tuple[list[tuple[dict[str, Any], pl.DataFrame]], pa.Table]:
    """Each planted campaign's log record (as plain values) and contacts, and the truth table."""
    p = pl.from_arrow(planted)
    r = pl.from_arrow(rules)
    c = pl.from_arrow(customers)
    assert isinstance(p, pl.DataFrame) and isinstance(r, pl.DataFrame)
    assert isinstance(c, pl.DataFrame)
    consenting = c.filter(pl.col("marketing_consent"))["customer_id"]
    rng = np.random.default_rng([int(seed), 20250602])
    out: list[tuple[dict[str, Any], pl.DataFrame]] = []
    truth: dict[str, list[Any]] = {
        k: []
        for k in (
            "campaign_id",
            "rule_id",
            "target",
            "purpose",
            "sent_at",
            "horizon_days",
            "holdout_share",
            "planted_ratio",
            "customers",
            "buyers",
        )
    }
    for spec in PLANTED_CAMPAIGNS:
        sent = spec["sent_at"]
        day = datetime(sent.year, sent.month, sent.day)
        end = day + timedelta(days=HORIZON_DAYS)
        rule = r.filter(pl.col("rule_id") == spec["rule_id"]).row(0, named=True)
        audience = (
            p.filter(
                (pl.col("rule_id") == spec["rule_id"])
                & (pl.col("antecedent_held_at") < day)
                & (pl.col("target_bought_at").is_null() | (pl.col("target_bought_at") >= day))
                & pl.col("customer_id").is_in(consenting.implode())
            )
            .select(
                "customer_id",
                (
                    pl.col("target_bought_at").is_not_null() & (pl.col("target_bought_at") < end)
                ).alias("bought"),
            )
            .unique("customer_id")
            .sort("customer_id")
        )
        bought = audience["bought"].to_numpy()
        rate = float(bought.mean()) if bought.size else 0.0
        h, ratio = HOLDOUT_SHARE, float(spec["ratio"])
        p0 = rate / ((1 - h) * ratio + h)  # holdout rate; treatment ratio x p0
        to_holdout = np.where(
            bought,
            h * p0 / rate if rate else h,
            h * (1 - p0) / (1 - rate) if rate < 1 else h,
        )
        held = rng.random(bought.size) < to_holdout
        contacts = pl.DataFrame(
            {
                "customer_id": audience["customer_id"],
                "contact_group": np.where(held, "holdout", "treatment"),
                "score": float(rule["hazard_30d"]),
                "rule_id": spec["rule_id"],
            }
        )
        target = rule["target"] if rule["target_level"] == "sku" else None
        target = target or f"{rule['target_level']}:{rule['target']}"
        antecedent = list(rule["antecedent"])
        record = {
            "campaign_id": spec["campaign_id"],
            "created_at": sent,
            "sent_at": sent,
            "target": target,
            "purpose": spec["purpose"],
            "parameters": {
                "window": [day - timedelta(days=365), day],
                "level": rule["antecedent_level"],
                "holdout": HOLDOUT_SHARE,
                "horizon_days": HORIZON_DAYS,
                "stand_in": None,
                "send_date": day.date().isoformat(),
                "note": "sample history: planted campaign",
            },
            "rules": [
                {
                    "rank": 1,
                    "rule_id": spec["rule_id"],
                    "antecedent": antecedent,
                    "consequent": rule["target"],
                    "confidence": float(rule["hazard_30d"]),
                    "lift": 1.0,
                    "n_antecedent": 0,
                    "n_both": 0,
                    "significant": True,
                }
            ],
            "counts": {
                "listed": contacts.height,
                "treatment": int((~held).sum()),
                "holdout": int(held.sum()),
            },
        }
        out.append((record, contacts))
        truth["campaign_id"].append(spec["campaign_id"])
        truth["rule_id"].append(spec["rule_id"])
        truth["target"].append(target)
        truth["purpose"].append(spec["purpose"])
        truth["sent_at"].append(sent)
        truth["horizon_days"].append(HORIZON_DAYS)
        truth["holdout_share"].append(HOLDOUT_SHARE)
        truth["planted_ratio"].append(ratio)
        truth["customers"].append(contacts.height)
        truth["buyers"].append(int(bought.sum()))
    table = pa.table(
        {
            "campaign_id": pa.array(truth["campaign_id"], pa.string()),
            "rule_id": pa.array(truth["rule_id"], pa.string()),
            "target": pa.array(truth["target"], pa.string()),
            "purpose": pa.array(truth["purpose"], pa.string()),
            "sent_at": pa.array(truth["sent_at"], pa.timestamp("s")),
            "horizon_days": pa.array(truth["horizon_days"], pa.int32()),
            "holdout_share": pa.array(truth["holdout_share"], pa.float64()),
            "planted_ratio": pa.array(truth["planted_ratio"], pa.float64()),
            "customers": pa.array(truth["customers"], pa.int64()),
            "buyers": pa.array(truth["buyers"], pa.int64()),
        }
    )
    return out, table
