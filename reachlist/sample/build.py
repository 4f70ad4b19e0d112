"""Assembling the generated chunks into tables and writing the sample warehouse file."""

from __future__ import annotations

import os
import time
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl
import pyarrow as pa
import pyarrow.compute as pc

from reachlist.errors import InputError, StateError
from reachlist.query import template_parts, template_text
from reachlist.sample.catalogue import UNKNOWN_SKUS, Catalogue, cached_catalogue, catalog
from reachlist.sample.generator import (
    DOMAINS,
    REGIONS,
    SUPPRESSION_REASONS,
    Chunk,
    generate_chunk,
    order_day_cdf,
)
from reachlist.sample.past_campaigns import past_campaigns
from reachlist.sample.period import (
    CHUNK,
    EPOCH,
    GENERATOR_VERSION,
    MIN_CUSTOMERS,
    PERIOD_END,
    PERIOD_START,
)
from reachlist.sample.planted import PLANTED_RULES
from reachlist.wording import option

# Assembly and writing
# --------------------------------------------------------------------------------------------

_CUSTOMER_ID0 = 1_000_001
_ORDER_ID0 = 50_000_001


@dataclass(frozen=True)
class SampleSummary:
    """What build_sample wrote."""

    path: str
    seed: int
    customers: int
    products: int
    orders: int
    order_lines: int
    suppressions: int
    first_order_at: datetime
    last_order_at: datetime
    build_seconds: float
    file_bytes: int
    quirks: dict[str, int]


def _dates(day_index: np.ndarray, valid: np.ndarray | None = None) -> pa.Array:
    days = (day_index + (PERIOD_START - date(1970, 1, 1)).days).astype(np.int32)
    mask = None if valid is None else ~valid
    return pa.array(days, type=pa.int32(), mask=mask).cast(pa.date32())


def _timestamps(seconds: np.ndarray, valid: np.ndarray | None = None) -> pa.Array:
    epoch = int((EPOCH - datetime(1970, 1, 1)).total_seconds())
    s = np.nan_to_num(seconds, nan=0).astype(np.int64) + epoch
    mask = None if valid is None else ~valid
    return pa.array(s, type=pa.int64(), mask=mask).cast(pa.timestamp("s"))


def _dict(indices: np.ndarray, values: tuple[str, ...] | list[str]) -> pa.Array:
    return pa.DictionaryArray.from_arrays(
        pa.array(indices.astype(np.int32)), pa.array(list(values), pa.string())
    )


def _assemble(chunks: list[Chunk], cat: Catalogue) -> dict[str, pa.Table]:
    cust_off = np.cumsum([0] + [c.n for c in chunks])
    ord_off = np.cumsum([0] + [len(c.o_cust) for c in chunks])

    # customers
    cid = _CUSTOMER_ID0 + np.arange(cust_off[-1], dtype=np.int64)
    has_email = np.concatenate([c.has_email for c in chunks])
    domain = np.concatenate([c.domain for c in chunks])
    emails = [
        f"shopper{i}@{DOMAINS[d]}" if h else None
        for i, d, h in zip(cid.tolist(), domain.tolist(), has_email.tolist(), strict=False)
    ]
    consent_day = np.concatenate([c.consent_day for c in chunks])
    age_known = np.concatenate([c.age_known for c in chunks])
    customers = pa.table(
        {
            "customer_id": pa.array(cid),
            "email": pa.array(emails, pa.string()),
            "marketing_consent": pa.array(np.concatenate([c.consent for c in chunks])),
            "consent_date": _dates(
                np.where(consent_day > -(10**8), consent_day, 0), consent_day > -(10**8)
            ),
            "birth_date": _dates(np.concatenate([c.birth_day for c in chunks]), age_known),
            "region": _dict(np.concatenate([c.region for c in chunks]), REGIONS),
        }
    )
    truth = pa.table(
        {
            "customer_id": pa.array(cid),
            "breadth": pa.array(np.concatenate([c.breadth for c in chunks])),
            "favoured_categories": pa.array(
                np.concatenate([c.nfav for c in chunks]).astype(np.int32)
            ),
            "online_share": pa.array(np.concatenate([c.online_share for c in chunks])),
            "general_orders": pa.array(
                np.concatenate([c.n_general_orders for c in chunks]).astype(np.int32)
            ),
        }
    )
    suppressions = pa.table(
        {
            "customer_id": pa.array(
                np.concatenate(
                    [cid[o + c.supp_cust] for c, o in zip(chunks, cust_off, strict=False)]
                )
            ),
            "reason": _dict(np.concatenate([c.supp_reason for c in chunks]), SUPPRESSION_REASONS),
            "suppressed_at": _dates(np.concatenate([c.supp_day for c in chunks])),
        }
    )

    # orders: ids increase with time (ties broken by customer)
    o_cust = np.concatenate([c.o_cust + o for c, o in zip(chunks, cust_off, strict=False)])
    o_t = np.concatenate([c.o_t for c in chunks])
    o_online = np.concatenate([c.o_online for c in chunks])
    rank_order = np.lexsort((o_cust, o_t))
    order_id = np.empty(len(o_t), dtype=np.int64)
    order_id[rank_order] = _ORDER_ID0 + np.arange(len(o_t))
    orders = pa.table(
        {
            "order_id": pa.array(order_id[rank_order]),
            "customer_id": pa.array(cid[o_cust[rank_order]]),
            "ordered_at": _timestamps(o_t[rank_order]),
            "channel": _dict(o_online[rank_order].astype(np.int8), ("store", "online")),
        }
    )
    del rank_order

    # lines, sorted by order id (stable: lines keep their order inside an order)
    l_oid = np.concatenate([order_id[c.l_order + o] for c, o in zip(chunks, ord_off, strict=False)])
    l_sku = np.concatenate([c.l_sku for c in chunks])
    l_qty = np.concatenate([c.l_qty for c in chunks])
    l_cents = np.concatenate([c.l_cents for c in chunks])
    s = np.argsort(l_oid, kind="stable")
    order_lines = pa.table(
        {
            "order_id": pa.array(l_oid[s]),
            "sku": _dict(l_sku[s], list(cat.sku) + list(UNKNOWN_SKUS)),
            "quantity": pa.array(l_qty[s].astype(np.int32)),
            "cents": pa.array(l_cents[s]),
        }
    )
    del s, l_oid, l_sku, l_qty, l_cents

    # planted ground truth
    parts = []
    schema = pa.schema(
        [
            ("rule_id", pa.string()),
            ("customer_id", pa.int64()),
            ("antecedent_held_at", pa.timestamp("s")),
            ("target_bought_at", pa.timestamp("s")),
            ("target_sku", pa.string()),
            ("source", pa.string()),
            ("target_purchases", pa.int32()),
            ("target_full_returns", pa.int32()),
        ]
    )
    for ri, r in enumerate(PLANTED_RULES):
        cols = [np.concatenate([c.planted[ri][j] for c in chunks]) for j in range(7)]
        who = np.concatenate([c.planted[ri][0] + o for c, o in zip(chunks, cust_off, strict=False)])
        _, hold, tgt, src, tsku, n_pur, n_ret = cols
        parts.append(
            pa.table(
                {
                    "rule_id": pa.array([r["rule_id"]] * len(who), pa.string()),
                    "customer_id": pa.array(cid[who]),
                    "antecedent_held_at": _timestamps(hold, ~np.isnan(hold)),
                    "target_bought_at": _timestamps(tgt, ~np.isnan(tgt)),
                    "target_sku": pa.DictionaryArray.from_arrays(
                        pa.array(np.maximum(tsku, 0).astype(np.int32), mask=tsku < 0),
                        pa.array(list(cat.sku), pa.string()),
                    ).cast(pa.string()),
                    "source": _dict(src, ("none", "base", "rule")).cast(pa.string()),
                    "target_purchases": pa.array(n_pur, pa.int32()),
                    "target_full_returns": pa.array(n_ret, pa.int32()),
                },
                schema=schema,
            )
        )
    planted = pa.concat_tables(parts)

    rules = pa.table(
        {
            "rule_id": [r["rule_id"] for r in PLANTED_RULES],
            "antecedent_level": [r["antecedent_level"] for r in PLANTED_RULES],
            "antecedent": [list(r["antecedent"]) for r in PLANTED_RULES],
            "target_level": [r["target_level"] for r in PLANTED_RULES],
            "target": [r["target"] for r in PLANTED_RULES],
            "hazard_30d": [float(r["hazard_30d"]) for r in PLANTED_RULES],
            "base_hazard_30d": [float(r["base_hazard_30d"]) for r in PLANTED_RULES],
            "purpose": [r["purpose"] for r in PLANTED_RULES],
            "description": [r["description"] for r in PLANTED_RULES],
        }
    )
    return {
        "customers": customers,
        "orders": orders,
        "order_lines": order_lines,
        "suppressions": suppressions,
        "sample_customer_truth": truth,
        "sample_planted": planted,
        "sample_rules": rules,
    }


def _write(
    tmp: Path, tables: dict[str, pa.Table], history: list[tuple[dict[str, Any], pl.DataFrame]]
) -> None:
    from reachlist.campaigns import CampaignLog, CampaignRecord
    from reachlist.warehouse import Warehouse

    with Warehouse.open(tmp, create=True) as wh:
        wh.run_statement(template_text("sample_tables"))
        for name, sql in template_parts("sample_loads").items():
            wh.insert_arrow(name, tables[name], sql)
        log = CampaignLog(wh)
        for record, contacts in history:  # the campaign log, as build writes it
            log.record(CampaignRecord(**record), contacts)
        wh.run_statement("CHECKPOINT")


def build_sample(
    path: str | os.PathLike[str],
    customers: int = 20_000,
    seed: int = 7,
    *,
    overwrite: bool = False,
) -> SampleSummary:
    """Generate the sample warehouse into a DuckDB file at ``path`` and return a summary.

    Deterministic: the same (customers, seed) always gives identical tables. The file is written
    to a temporary file in the same directory and moved into place, so ``path`` never holds a
    half-written warehouse. An existing file is refused (StateError) unless ``overwrite=True``.
    """
    started = time.perf_counter()
    if isinstance(customers, bool) or not isinstance(customers, int | np.integer):
        raise InputError(
            f"expected a whole number of customers, found {customers!r}.",
            hint=f"pass an integer of at least {MIN_CUSTOMERS}.",
        )
    if customers < MIN_CUSTOMERS:
        raise InputError(
            f"expected at least {MIN_CUSTOMERS} customers, found {customers}.",
            hint=f"pass customers >= {MIN_CUSTOMERS} (the default is 20,000).",
        )
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise InputError(
            f"expected a non-negative integer seed, found {seed!r}.",
            hint="pass a seed such as 7 (the default).",
        )
    target = Path(path)
    if target.is_dir():
        raise StateError(
            f"expected a file path for the sample warehouse, found a directory at {target}.",
            hint="give a file name such as sample.duckdb.",
        )
    if target.exists() and not overwrite:
        raise StateError(
            f"expected no file at {target}, found an existing file.",
            hint=f"pass {option('overwrite=True')} to replace it, or choose another path.",
        )
    if not target.parent.is_dir():
        raise InputError(
            f"expected an existing directory for {target}, found none at {target.parent}.",
            hint="create the directory first.",
        )

    cat = cached_catalogue()
    day_cdf = order_day_cdf()
    chunks = []
    for k, start in enumerate(range(0, customers, CHUNK)):
        chunks.append(generate_chunk(int(seed), k, min(CHUNK, customers - start), cat, day_cdf))
    tables = _assemble(chunks, cat)
    quirks: dict[str, int] = {}
    for c in chunks:
        for key, v in c.quirks.items():
            quirks[key] = quirks.get(key, 0) + int(v)
    del chunks
    cust = tables["customers"]
    quirks["customers_without_consent"] = cust.num_rows - int(
        pc.sum(cust["marketing_consent"]).as_py()
    )
    quirks["customers_age_unknown"] = cust["birth_date"].null_count
    quirks["customers_without_email"] = cust["email"].null_count
    quirks["suppression_rows"] = tables["suppressions"].num_rows
    tables["products"] = catalog()

    ts = tables["orders"]["ordered_at"]
    first = pc.min(ts).as_py()
    last = pc.max(ts).as_py()
    meta = {
        "generator": "reachlist.sample",
        "generator_version": GENERATOR_VERSION,
        "seed": str(seed),
        "customers": str(customers),
        "period_start": PERIOD_START.isoformat(),
        "period_end": PERIOD_END.isoformat(),
        **{f"quirk.{k}": str(v) for k, v in quirks.items()},
    }
    tables["sample_meta"] = pa.table({"key": list(meta), "value": list(meta.values())})
    history, tables["sample_planted_campaigns"] = past_campaigns(
        tables["sample_planted"], tables["sample_rules"], tables["customers"], int(seed)
    )

    tmp = target.with_name(f".{target.name}.tmp-{os.getpid()}")
    for leftover in (tmp, Path(f"{tmp}.wal")):
        leftover.unlink(missing_ok=True)
    try:
        _write(tmp, tables, history)
        # a WAL left next to an earlier file at this path would be replayed into the new one
        Path(f"{target}.wal").unlink(missing_ok=True)
        os.replace(tmp, target)
    finally:
        for leftover in (tmp, Path(f"{tmp}.wal")):
            leftover.unlink(missing_ok=True)

    return SampleSummary(
        path=str(target),
        seed=int(seed),
        customers=customers,
        products=tables["products"].num_rows,
        orders=tables["orders"].num_rows,
        order_lines=tables["order_lines"].num_rows,
        suppressions=tables["suppressions"].num_rows,
        first_order_at=first,
        last_order_at=last,
        build_seconds=round(time.perf_counter() - started, 3),
        file_bytes=target.stat().st_size,
        quirks=quirks,
    )
