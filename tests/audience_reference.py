"""An independent polars implementation of the audience definition, computed from the raw tables.

It shares no code with reachlist.audience: the tests run the generated SQL on a real database and
compare its rows with these.
"""

from __future__ import annotations

import hashlib
from datetime import datetime, timedelta
from pathlib import Path

import duckdb
import polars as pl

from reachlist.audience import AudienceSpec
from reachlist.targets import Target

TABLES = ("customers", "products", "orders", "order_lines", "suppressions")
FLAGS = (
    "has_target",
    "returned_target",
    "no_consent",
    "suppressed",
    "not_adult",
    "outside_region",
    "outside_channel",
    "no_recent_order",
)
ORDER = (
    "has_target",
    "returned_target",
    "no_consent",
    "suppressed",
    "contacted_recently",
    "held_out_elsewhere",
    "global_holdout",
    "not_adult",
    "outside_region",
    "outside_channel",
    "no_recent_order",
    "no_address",
)


def load(path: Path | str) -> dict[str, pl.DataFrame]:
    con = duckdb.connect(str(path), read_only=True)
    try:
        return {t: con.sql(f"SELECT * FROM {t}").pl() for t in TABLES}
    finally:
        con.close()


def held(
    tables: dict[str, pl.DataFrame], level: str, since: datetime, until: datetime
) -> pl.DataFrame:
    """(customer_id, item) for every item a customer holds in [since, until)."""
    lines = tables["order_lines"].unique()  # exact duplicate lines count once
    orders = tables["orders"].filter(
        (pl.col("ordered_at") >= since)
        & (pl.col("ordered_at") < until)
        & pl.col("customer_id").is_not_null()
    )
    net = (
        lines.join(orders.select("order_id", "customer_id"), on="order_id")
        .group_by("customer_id", "sku")
        .agg(pl.col("quantity").sum())
        .filter(pl.col("quantity") > 0)
    )
    items = tables["products"].select("sku", pl.col(level).alias("item"))
    return net.join(items, on="sku").select("customer_id", "item").unique()


def reach_pairs(tables: dict[str, pl.DataFrame], spec: AudienceSpec) -> pl.DataFrame:
    h = held(tables, spec.level, spec.lookback.since, spec.lookback.until)
    frames = []
    for rule in spec.rules:
        need = set(rule.antecedent)
        who = (
            h.filter(pl.col("item").is_in(list(need)))
            .group_by("customer_id")
            .agg(pl.col("item").n_unique().alias("n"))
            .filter(pl.col("n") == len(need))
            .select("customer_id", pl.lit(rule.rank, dtype=pl.Int64).alias("rule_rank"))
        )
        frames.append(who)
    return pl.concat(frames).sort("rule_rank", "customer_id")


def target_holders(
    tables: dict[str, pl.DataFrame], target: Target, since: datetime, until: datetime
) -> set[int]:
    h = held(tables, target.level, since, until)
    return set(h.filter(pl.col("item") == target.name)["customer_id"].to_list())


def target_returners(
    tables: dict[str, pl.DataFrame], target: Target, since: datetime, until: datetime
) -> set[int]:
    """Customers with a target SKU they bought (some line of positive quantity) and whose net
    quantity of it in [since, until) is zero or less."""
    lines = tables["order_lines"].unique()
    orders = tables["orders"].filter(
        (pl.col("ordered_at") >= since)
        & (pl.col("ordered_at") < until)
        & pl.col("customer_id").is_not_null()
    )
    skus = tables["products"].filter(pl.col(target.level) == target.name)["sku"]
    per_sku = (
        lines.filter(pl.col("sku").is_in(skus.implode()))
        .join(orders.select("order_id", "customer_id"), on="order_id")
        .group_by("customer_id", "sku")
        .agg(pl.col("quantity").sum().alias("net"), (pl.col("quantity") > 0).any().alias("bought"))
    )
    return set(per_sku.filter(pl.col("bought") & (pl.col("net") <= 0))["customer_id"].to_list())


def audience(tables: dict[str, pl.DataFrame], spec: AudienceSpec) -> pl.DataFrame:
    """customer_id, rule_id, score and the seven SQL flags, one row per reached customer."""
    pairs = reach_pairs(tables, spec)
    by_rank = {r.rank: r for r in spec.rules}
    # best rule: the highest score, then the better rank
    scores = pl.DataFrame(
        {"rule_rank": [r.rank for r in spec.rules], "score": [r.score for r in spec.rules]},
        schema={"rule_rank": pl.Int64, "score": pl.Float64},
    )
    best = (
        pairs.join(scores, on="rule_rank")
        .sort(["customer_id", "score", "rule_rank"], descending=[False, True, False])
        .group_by("customer_id", maintain_order=True)
        .first()
        .select("customer_id", "rule_rank")
    )
    until = spec.lookback.until
    target_since = (
        datetime(1900, 1, 1)
        if spec.bought_within_days is None
        else until - timedelta(days=spec.bought_within_days)
    )
    owners = target_holders(tables, spec.target, target_since, until)
    returners = target_returners(tables, spec.target, target_since, until)
    # a customer id on several rows: every row is kept, and each flag is true if any row sets it
    cust: dict[int, list[dict]] = {}
    for r in tables["customers"].iter_rows(named=True):
        cust.setdefault(r["customer_id"], []).append(r)
    suppressed = set(tables["suppressions"]["customer_id"].to_list())
    orders = tables["orders"]
    f = spec.filters
    channel_ok = set(
        orders.filter(
            pl.col("channel").is_in(list(f.channels))
            & (pl.col("ordered_at") >= spec.lookback.since)
            & (pl.col("ordered_at") < until)
        )["customer_id"].to_list()
    )
    active_ok = (
        set(
            orders.filter(
                (pl.col("ordered_at") >= until - timedelta(days=f.ordered_within_days))
                & (pl.col("ordered_at") < until)
            )["customer_id"].to_list()
        )
        if f.ordered_within_days is not None
        else set()
    )
    rows = []
    for cid, rank in best.iter_rows():
        crows = cust.get(cid) or [{}]  # missing from customers: nothing known
        rule = by_rank[rank]
        births = [c.get("birth_date") for c in crows]
        rows.append(
            {
                "customer_id": cid,
                "rule_id": rule.rule_id,
                "score": rule.score,
                "has_target": cid in owners,
                "returned_target": cid in returners and cid not in owners,
                "no_consent": any(c.get("marketing_consent") is not True for c in crows),
                "suppressed": cid in suppressed,
                "not_adult": spec.age_restricted
                and any(b is None or b > spec.adult_born_by for b in births),
                "outside_region": bool(f.regions)
                and any(c.get("region") not in f.regions for c in crows),
                "outside_channel": bool(f.channels) and cid not in channel_ok,
                "no_recent_order": f.ordered_within_days is not None and cid not in active_ok,
            }
        )
    schema = {"customer_id": pl.Int64, "rule_id": pl.String, "score": pl.Float64}
    schema.update({k: pl.Boolean for k in FLAGS})
    return pl.DataFrame(rows, schema=schema).sort("customer_id")


def with_address(tables: dict[str, pl.DataFrame]) -> set[int]:
    """Customers the email channel can reach: their first address (in sort order, the one the
    audience reads) has an @. A customer missing from customers has none."""
    first: dict[int, str] = {}
    for cid, email in tables["customers"].select("customer_id", "email").iter_rows():
        if email is not None and (cid not in first or email < first[cid]):
            first[cid] = email
    return {c for c, email in first.items() if "@" in email}


def first_exclusion(row: dict, in_use: set[str]) -> str | None:
    for key in ORDER:
        if key in in_use and row.get(key):
            return key
    return None


def in_holdout(campaign_id: str, customer_id: int, share: float) -> bool:
    h = hashlib.sha256(f"{campaign_id}:{customer_id}".encode()).digest()
    return int.from_bytes(h[:8], "big") < share * 2**64


def normalise(frame: pl.DataFrame) -> pl.DataFrame:
    """SQL results in the reference's types and order (for exact comparison)."""
    cols = ["customer_id", "rule_id", "score", *FLAGS]
    return (
        frame.select(
            pl.col("customer_id").cast(pl.Int64),
            pl.col("rule_id").cast(pl.String),
            pl.col("score").cast(pl.Float64),
            *[pl.col(k).cast(pl.Boolean) for k in FLAGS],
        )
        .select(cols)
        .sort("customer_id")
    )


def make_ruleset(target: Target, rules: list[tuple], *, level: str = "sku", window=None) -> RuleSet:  # noqa: F821
    """A RuleSet built by hand: rules are (rule_id, antecedent, confidence[, lift, significant])."""
    from reachlist.rules import RuleSet
    from reachlist.targets import Window

    window = window or Window(datetime(2025, 1, 1), datetime(2026, 1, 1))
    rows = []
    for spec in rules:
        rule_id, antecedent, confidence, *rest = spec
        lift = rest[0] if rest else 2.0
        significant = rest[1] if len(rest) > 1 else True
        n_ante = 100
        rows.append(
            {
                "rule_id": rule_id,
                "antecedent": list(antecedent),
                "consequent": target.name,
                "n_baskets": 1000,
                "n_antecedent": n_ante,
                "n_consequent": 50,
                "n_both": round(confidence * n_ante),
                "support": confidence * n_ante / 1000,
                "coverage": n_ante / 1000,
                "confidence": confidence,
                "lift": lift,
                "leverage": 0.01,
                "conviction": 1.5,
                "p_value": 0.001,
                "p_adjusted": 0.01 if significant else 0.5,
                "significant": significant,
                "productive": True,
            }
        )
    return RuleSet(target, level, "customer", window, 1000, "holm", pl.DataFrame(rows))
