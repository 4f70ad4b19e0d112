"""What a CRM or email platform receives from a build: the contact file, the holdout file for
the platform's suppression, and where both came from.

The contact file has one row per customer to contact, best score first:

- ``customer_id``, ``campaign_id``;
- ``offer_item`` and ``offer_name`` (the target and its product name), ``offer_code`` when given;
- ``score`` (the reaching rule's historical co-purchase rate, rounded to 4 decimals);
- ``rule_id`` and ``because_bought``: the antecedent items of the reaching rule in words (the
  customer holds every one of them), ready for copy such as "Because you bought ...";
- with contact fields: ``email`` and ``consent_date``.

The holdout file (``NAME.holdout.EXT`` beside the list) holds the held-out customers, so the
platform can suppress them as well. Provenance (campaign id, target, build time, reachlist
version, row counts, the file names) goes into the Parquet file's key-value metadata under
``reachlist``, and for CSV into a sidecar ``NAME.csv.json``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from datetime import datetime
from pathlib import Path
from typing import TYPE_CHECKING, Any

import polars as pl

from reachlist.query import Query

if TYPE_CHECKING:
    from reachlist.lists import ListOutcome
    from reachlist.warehouse import Warehouse

SCORE_DECIMALS = 4
PROVENANCE_KEY = "reachlist"
PROVENANCE_VERSION = 1


def holdout_path(path: str | Path) -> Path:
    """``mats.csv`` -> ``mats.holdout.csv`` (same folder, same format)."""
    p = Path(path)
    return p.with_name(f"{p.stem}.holdout{p.suffix}")


def sidecar_path(path: str | Path) -> Path:
    """``mats.csv`` -> ``mats.csv.json``: provenance beside a CSV file."""
    p = Path(path)
    return p.with_name(p.name + ".json")


def _words(names: list[str]) -> str:
    if len(names) <= 1:
        return "".join(names)
    return ", ".join(names[:-1]) + " and " + names[-1]


def item_names(wh: Warehouse, items: set[str], level: str) -> dict[str, str]:
    """What to call each item in words: a SKU by its product name, a category or department by
    its own name."""
    if level != "sku" or not items:
        return {i: i for i in items}
    found = wh.fetch(Query.from_template("product_names", {"skus": sorted(items)}))
    names = {sku: (name or sku) for sku, name in found.iter_rows()}
    return {i: names.get(i, i) for i in items}


@dataclass(frozen=True)
class Delivery:
    """The frames a build writes, and the provenance that goes with them."""

    contacts: pl.DataFrame
    holdout: pl.DataFrame
    provenance: dict[str, Any]


def delivery_frames(
    wh: Warehouse,
    outcome: ListOutcome,
    *,
    built_at: datetime,
    version: str,
    offer_code: str | None = None,
) -> Delivery:
    """The contact file's and the holdout file's rows for ``outcome``, with provenance."""
    plan = outcome.plan
    level = plan.ruleset.level
    target = plan.target
    wanted = {a for r in plan.rules for a in r.antecedent}
    names = item_names(wh, wanted, level)
    offer = item_names(wh, {target.name}, target.level)[target.name]
    because = {r.rule_id: _words([names[a] for a in r.antecedent]) for r in plan.rules}
    cols: list[pl.Expr] = [
        pl.col("customer_id"),
        pl.lit(plan.campaign_id, dtype=pl.String).alias("campaign_id"),
        pl.lit(str(target), dtype=pl.String).alias("offer_item"),
        pl.lit(offer, dtype=pl.String).alias("offer_name"),
    ]
    if offer_code:
        cols.append(pl.lit(offer_code, dtype=pl.String).alias("offer_code"))
    cols += [
        pl.col("score").round(SCORE_DECIMALS),
        pl.col("rule_id"),
        pl.col("rule_id").replace_strict(because, return_dtype=pl.String).alias("because_bought"),
    ]
    treatment = outcome.treatment.sort(["score", "customer_id"], descending=[True, False])
    contacts = treatment.select(cols)
    if plan.spec.contact:
        facts = wh.fetch(Query.from_template("contact_facts")).select(
            pl.col("customer_id").cast(treatment.schema["customer_id"]),
            pl.col("consent_date").cast(pl.Date),
        )
        contacts = treatment.select(*cols, pl.col("email").cast(pl.String)).join(
            facts, on="customer_id", how="left", maintain_order="left"
        )
    holdout = outcome.holdout.sort("customer_id").select(
        pl.col("customer_id"),
        pl.lit(plan.campaign_id, dtype=pl.String).alias("campaign_id"),
        pl.lit("holdout", dtype=pl.String).alias("contact_group"),
    )
    provenance = {
        "schema_version": PROVENANCE_VERSION,
        "campaign_id": plan.campaign_id,
        "target": str(target),
        "purpose": plan.request.purpose,
        "built_at": built_at.isoformat(),
        "reachlist_version": version,
        "contacts": contacts.height,
        "holdout": holdout.height,
        "columns": contacts.columns,
        "rules": [{"rule_id": r.rule_id, "antecedent": list(r.antecedent)} for r in plan.rules],
    }
    return Delivery(contacts, holdout, provenance)


def provenance_json(provenance: dict[str, Any]) -> str:
    return json.dumps(provenance, indent=2, sort_keys=True, default=str) + "\n"
