"""Honest take-up: how many of an audience will start buying the target within the horizon.

Rule confidence is a stock (holders who already hold the target); take-up is a flow. The estimate
here is learnt from the warehouse's own past, never from confidence:

1. Cutoffs one horizon apart, going back from ``as_of`` while history allows (at most
   ``max_cutoffs``). At each, every customer who lacks the target gets a shopping breadth
   (distinct categories held in the 12 months before the cutoff) and an outcome (bought the target
   within the horizon after it): ``sql/forward_takeup.sql`` for one cutoff; the estimate asks
   ``sql/takeup_history.sql`` for all of them at once and :func:`takeup_cells` turns them into
   counts by audience group, breadth and outcome: here from one row per customer on one
   machine, in the warehouse on a cluster (then what comes back does not grow with the
   customers, apart from those the rules reach at ``as_of``: the list is made of them).
2. The raw prediction for an audience is breadth-matched: forward take-up per breadth decile at
   the latest complete cutoff (one horizon before ``as_of``), applied to the audience's breadth
   mix (:func:`reachlist.stats.breadth_matched_expectation`).
3. Backtests: the same audience definition is rebuilt at every earlier cutoff (the rules' reach
   with the lookback window shifted; or the same customers when only ids are given), predicted the
   same way from the cutoff one horizon before it, and compared with who bought. Each rule's
   audience and the combined audience are separate backtests. Given only customer ids (no rules),
   the same customers cannot be followed back without bias (lacking the target today, they bought
   nothing earlier), so the backtests test the breadth method on each breadth decile instead.
4. The rule's added value over breadth is a Mantel-Haenszel risk ratio of audience members over
   everyone else lacking the target, within breadth deciles, pooled over the cutoffs. It adjusts
   the prediction only as far as the backtests show it helps (:func:`reachlist.stats.rule_weight`).
5. :func:`reachlist.stats.calibrate` turns the backtests' errors into a factor and an interval.

>>> report = estimate_takeup(wh, target, spec=plan.spec, customers=ids)   # doctest: +SKIP
>>> report.expected.expected, report.expected.low, report.expected.high     # doctest: +SKIP
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from typing import Any

import numpy as np
import polars as pl

from reachlist import ids as ids_
from reachlist.audience import (
    AudienceSpec,
    cutoff_bits_ctes,
    reach_at_cutoffs_parts,
    reach_bits_at_cutoffs_query,
    reach_query,
)
from reachlist.errors import EmptyResultError, InputError, ReachlistError
from reachlist.query import BuiltWindow, Query, template_parts, with_parts
from reachlist.stats import (
    Calibration,
    DetectableUplift,
    HoldoutPlan,
    RuleWeight,
    StratifiedRatio,
    TakeUpEstimate,
    assign_decile,
    breadth_deciles_counted,
    breadth_matched_expectation,
    calibrate,
    decile_rates,
    holdout_share_needed,
    mantel_haenszel_risk_ratio,
    minimum_detectable_uplift,
    rule_weight,
)
from reachlist.targets import (
    LEVEL_COLUMN,
    Target,
    Window,
    _as_datetime,
    day_of,
    first_order_time,
    last_order_day,
)
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = [
    "BREADTH_DAYS",
    "DEFAULT_HORIZON",
    "Calibrated",
    "HoldoutPlanning",
    "TakeUpReport",
    "calibrate_audience",
    "estimate_takeup",
    "forward_query",
    "holdout_planning",
]

DEFAULT_HORIZON = 30
BREADTH_DAYS = 365  # breadth: distinct categories held in the 12 months before a cutoff
MIN_HISTORY_DAYS = 180  # a cutoff needs this much order history before it
MAX_CUTOFFS = 13  # one horizon back plus a year of monthly backtests at the default horizon
COMBINED = 0  # group number of the combined audience; rules use their rank


def forward_query(target: Target, cutoff: datetime, outcome_until: datetime) -> Query:
    """Breadth and forward take-up of every customer lacking ``target`` at ``cutoff``."""
    if outcome_until < cutoff:
        raise InputError(
            f"Expected the outcome window to end at or after the cutoff {cutoff:%Y-%m-%d}, "
            f"found {outcome_until:%Y-%m-%d}.",
            hint="pass a horizon of at least 1 day",
        )
    return Query.from_template(
        "forward_takeup",
        {
            "target": target.name,
            "cutoff": day_of(cutoff),
            "outcome_until": day_of(outcome_until),
            "breadth_since": day_of(cutoff - timedelta(days=BREADTH_DAYS)),
        },
        target_level=LEVEL_COLUMN[target.level],
    )


MOST_CUTOFFS = 60  # cutoffs one history query follows (one bit each in a 64-bit integer)


def _history_slots(
    target: Target, as_of: datetime, horizon: int, last: int, built: BuiltWindow | None = None
) -> tuple[dict[str, Any], dict[str, str]]:
    """Values and generated fragments shared by the two shapes of sql/takeup_history.sql; with
    ``built`` (``Warehouse.built_window``) the breadth is read where the holdings file keeps it
    for these cutoffs."""
    if not 0 <= last <= MOST_CUTOFFS:
        raise InputError(
            f"Expected at most {MOST_CUTOFFS} cutoffs, found {last}.",
            hint=f"pass {option('cutoffs')} 13",
        )
    ks = range(last + 1)
    params: dict[str, Any] = {
        "target": target.name,
        "as_of": day_of(as_of),
        "horizon": horizon,
        "breadth_days": BREADTH_DAYS,
    }
    parts = template_parts("takeup_history")
    if built is not None and built.has_breadth(params["as_of"], horizon, BREADTH_DAYS, last):
        del params["breadth_days"]
        breadth = parts["breadth_built"].format(
            built_columns=",\n".join(f"           breadth_{k}" for k in ks),
            built_table=built.breadth_table,
        )
    else:
        breadth = _breadth_derived(parts, last)
    slots = {
        "target_level": LEVEL_COLUMN[target.level],
        "cutoff_numbers": "(VALUES " + ", ".join(f"({k})" for k in ks) + ")",
        "breadth_ctes": breadth,
        "target_sums": ",\n".join(
            f"           sum(CASE WHEN t.age > {k} * :horizon THEN t.quantity ELSE 0 END) "
            f"AS before_{k},\n"
            f"           sum(CASE WHEN t.age <= {k} * :horizon AND t.age > {k - 1} * :horizon "
            f"THEN t.quantity ELSE 0 END) AS in_{k}"
            for k in ks
        ),
        "target_columns": ",\n".join(
            f"           max(CASE WHEN before_{k} > 0 THEN 1 ELSE 0 END) AS had_{k},\n"
            f"           max(CASE WHEN in_{k} > 0 THEN 1 ELSE 0 END) AS bought_{k},\n"
            f"           sum(CASE WHEN in_{k} > 0 THEN in_{k} ELSE 0 END) AS units_{k}"
            for k in ks
        ),
    }
    return params, slots


def _breadth_derived(parts: dict[str, str], last: int) -> str:
    """The CTEs that work each customer's breadth at cutoffs 0 .. ``last`` out of ``past``."""
    return parts["breadth_derived"].format(
        held_bits=cutoff_bits_ctes("held_bits", "past", ":breadth_days", ":horizon", last),
        # a count of the rows with bit k set, not a sum of the bit: a count's state is one
        # 64-bit integer where a sum's is 128 bits (the history query 7.9 s -> 6.2 s at 1M)
        breadth_columns=",\n".join(
            f"           count(CASE WHEN (bits >> {k}) & 1 = 1 THEN 1 END) AS breadth_{k}"
            for k in range(last + 1)
        ),
    )


def breadth_query(as_of: datetime, horizon: int, last: int) -> Query:
    """Every customer's breadth at cutoffs ``as_of - k * horizon``, k = 0 .. ``last``: what the
    holdings file keeps for the default estimate (sql/takeup_history.sql, breadth_rows)."""
    parts = template_parts("takeup_history")
    final = parts["breadth_rows"].format(
        breadth_names=",\n".join(f"       breadth_{k}" for k in range(last + 1))
    )
    return Query(
        with_parts([parts["past"], _breadth_derived(parts, last)], final),
        {"as_of": day_of(as_of), "horizon": horizon, "breadth_days": BREADTH_DAYS},
        label="breadth",
    )


def takeup_history_query(
    target: Target, as_of: datetime, horizon: int, last: int, built: BuiltWindow | None = None
) -> Query:
    """Breadth and forward take-up at cutoffs ``as_of - k * horizon`` for k = 0 .. ``last``, in
    one query (sql/takeup_history.sql); reads nothing at or after ``as_of``. ``built``: see
    ``_history_slots``."""
    params, slots = _history_slots(target, as_of, horizon, last, built)
    parts = template_parts("takeup_history")
    ks = range(last + 1)
    # small types: a million customers at 14 cutoffs is 56 million values
    final = parts["wide"].format(
        final_columns=",\n".join(
            f"       CAST(coalesce({src}.{col}_{k}, 0) AS {to}) AS {col}_{k}"
            for k in ks
            for src, col, to in (
                ("b", "breadth", "INTEGER"),
                ("t", "had", "SMALLINT"),
                ("t", "bought", "SMALLINT"),
                ("t", "units", "DOUBLE PRECISION"),
            )
        )
    )
    ctes = [parts["past"], parts["ctes"].format(**slots)]
    return Query(with_parts(ctes, final), params, label="takeup_history")


def takeup_history(
    wh: Warehouse, target: Target, as_of: datetime, horizon: int, last: int
) -> list[pl.DataFrame]:
    """For k = 0 .. ``last``: the customers lacking ``target`` at cutoff ``as_of - k * horizon``
    with their breadth, whether they bought within the horizon and the units (the rows
    ``forward_query`` gives for that cutoff, from one pass)."""
    return _per_cutoff(_wide_history(wh, target, as_of, horizon, last), horizon, last)


def _wide_history(
    wh: Warehouse, target: Target, as_of: datetime, horizon: int, last: int
) -> pl.DataFrame:
    """The history query's rows as they come: one per customer, every cutoff's columns."""
    query = takeup_history_query(target, as_of, horizon, last, wh.built_window)
    return ids_.normalise_frame(wh.fetch(query))


def _lacking_at(k: int, horizon: int) -> pl.Expr:
    """True for the history's rows that are customers lacking the target at cutoff k."""
    return (pl.col("first_age") > k * horizon) & (pl.col(f"had_{k}") == 0)


def _per_cutoff(wide: pl.DataFrame, horizon: int, last: int) -> list[pl.DataFrame]:
    out = []
    for k in range(last + 1):
        out.append(  # lazily, so only the cutoff's own columns are filtered
            wide.lazy()
            .filter(_lacking_at(k, horizon))
            .select(
                "customer_id",
                pl.col(f"breadth_{k}").alias("breadth"),
                pl.col(f"bought_{k}").alias("bought"),
                pl.col(f"units_{k}").alias("units"),
            )
            .collect()
        )
    return out


EVERYONE = -1  # the cells' group of every customer lacking the target at a cutoff


def takeup_cells_query(
    target: Target,
    as_of: datetime,
    horizon: int,
    last: int,
    spec: AudienceSpec | None = None,
    one_by_one: int = 0,
    built: BuiltWindow | None = None,
) -> Query:
    """The take-up history at cutoffs k = 1 .. ``last`` counted in the warehouse, plus the
    customers lacking the target at k = 0 .. ``one_by_one`` one row each (sql/takeup_history.sql,
    "cells"). A cell is (k, grp, breadth, bought) with its customers and their net units of the
    target; ``grp`` is ``EVERYONE``, or with ``spec``'s rules a rule's rank (who it reaches at
    cutoff k, the lookback window shifted to end there) or ``COMBINED`` (who any rule reaches)."""
    if not 1 <= last <= MOST_CUTOFFS or not 0 <= one_by_one <= last:
        raise InputError(
            f"Expected 1 to {MOST_CUTOFFS} past cutoffs, found {last} (customers one by one "
            f"up to {one_by_one}).",
            hint=f"pass {option('cutoffs')} 13",
        )
    params, slots = _history_slots(target, as_of, horizon, last, built)
    params["one_by_one"] = one_by_one
    for col, src in (("breadth", "b"), ("had", "t"), ("bought", "t"), ("units", "t")):
        slots[f"{col}_cases"] = " ".join(f"WHEN {k} THEN {src}.{col}_{k}" for k in range(last + 1))
    parts = template_parts("takeup_history")
    ctes = [parts["past"], parts["ctes"].format(**slots), parts["people_at"].format(**slots)]
    final = parts["cells_plain"]
    if spec is not None and spec.rules:
        if one_by_one:
            raise InputError("Expected customers one by one at as_of only, with rules.")
        # as_of itself is the first cutoff of the reach (k = 0)
        ats = [as_of - timedelta(days=horizon * k) for k in range(last + 1)]
        reach_ctes, reach_params = reach_at_cutoffs_parts(spec, ats)
        ctes += [*reach_ctes, parts["members"]]
        params.update(reach_params)
        del params["one_by_one"]  # only the customers reached at as_of come one by one
        final = parts["cells_reached"]
    return Query(with_parts(ctes, final), params, label="takeup cells")


@dataclass(frozen=True)
class TakeUpCells:
    """What ``takeup_cells`` returns: per past cutoff k = 1 .. last its cells (grp, breadth,
    bought, customers, units); per k = 0 .. one_by_one the customers lacking the target there one
    row each (customer_id, breadth, bought, units), with rules only those a rule reaches at
    as_of; and then who each rule reaches at as_of among them (customer_id, rule_rank)."""

    cells: list[pl.DataFrame]
    people: list[pl.DataFrame]
    reached: pl.DataFrame | None


def takeup_cells(
    wh: Warehouse,
    target: Target,
    as_of: datetime,
    horizon: int,
    last: int,
    spec: AudienceSpec | None = None,
    one_by_one: int = 0,
    counting: str | None = None,
) -> TakeUpCells:
    """The take-up history at cutoffs k = 1 .. ``last`` as cells, and the customers at as_of.

    ``counting="engine"`` counts in the warehouse (``takeup_cells_query``: one query whose
    result does not grow with the customers); ``"memory"`` fetches one row per customer
    (``takeup_history``) and who the rules reach (``reach_bits_at_cutoffs_query``) and counts
    here.
    The default follows the warehouse: in the engine on a cluster (Spark), in memory on one
    machine, where the counting query measured slower (bench/estimate_history.py)."""
    if counting is None:
        counting = "engine" if wh.counts_in_engine else "memory"
    if counting not in ("memory", "engine"):
        raise InputError(
            f"Expected counting to be memory or engine, found {counting!r}.",
            hint="pass counting='memory' or counting='engine', or leave it out",
        )
    if counting == "memory":
        return _cells_in_memory(wh, target, as_of, horizon, last, spec, one_by_one)
    q = takeup_cells_query(target, as_of, horizon, last, spec, one_by_one, wh.built_window)
    rows = ids_.normalise_frame(wh.fetch(q)).with_columns(
        pl.col("k").cast(pl.Int64),
        pl.col("grp").cast(pl.Int64),
        pl.col("breadth").cast(pl.Int64),
        pl.col("bought").cast(pl.Int64),
        pl.col("customers").cast(pl.Int64),
        pl.col("units").cast(pl.Float64),
    )
    single = rows.filter(pl.col("customer_id").is_not_null())
    people = [
        single.filter(pl.col("k") == k)
        .select("customer_id", "breadth", "bought", "units")
        .unique("customer_id")
        .sort("customer_id")
        for k in range(one_by_one + 1)
    ]
    reached = None
    if spec is not None and spec.rules:
        reached = single.select("customer_id", pl.col("grp").alias("rule_rank"))
    # Everyone lacking the target is the rows outside every rule (grp NULL) plus those of any
    # rule (grp 0); the customers one by one count in their cutoff's cells too.
    past = rows.filter(pl.col("k") >= 1)
    everyone = past.filter(pl.col("grp").is_null() | (pl.col("grp") == COMBINED)).with_columns(
        grp=pl.lit(EVERYONE, pl.Int64)
    )
    groups = past.filter(pl.col("grp").is_not_null())
    cells = (
        pl.concat([everyone, groups])
        .group_by("k", "grp", "breadth", "bought")
        .agg(pl.col("customers").sum(), pl.col("units").sum())
        .sort("k", "grp", "breadth", "bought")
    )
    return TakeUpCells(
        [
            cells.filter(pl.col("k") == k).select("grp", "breadth", "bought", "customers", "units")
            for k in range(1, last + 1)
        ],
        people,
        reached,
    )


def _cells_in_memory(
    wh: Warehouse,
    target: Target,
    as_of: datetime,
    horizon: int,
    last: int,
    spec: AudienceSpec | None,
    one_by_one: int,
) -> TakeUpCells:
    """``takeup_cells`` counted here from one row per customer: the same cells, customers and
    reach as the counting query (the tests compare the two)."""
    takeup_cells_query(target, as_of, horizon, last, spec, one_by_one)  # the same bounds
    full = _wide_history(wh, target, as_of, horizon, last)
    wide = [
        f.with_columns(
            pl.col("breadth").cast(pl.Int64),
            pl.col("bought").cast(pl.Int64),
            pl.col("units").cast(pl.Float64),
        )
        for f in _per_cutoff(full, horizon, one_by_one)
    ]
    # Who each rule reaches, one row per (customer, rule) with a bit per cutoff, placed once at
    # the customer's row of the history (in row order, so every cell adds its customers in the
    # order the rows come); each cutoff's groups are then read from the bits.
    row = rank = bits = np.zeros(0, np.int64)
    found = None
    if spec is not None and spec.rules:
        ats = [as_of - timedelta(days=horizon * k) for k in range(last + 1)]
        found = ids_.normalise_frame(wh.fetch(reach_bits_at_cutoffs_query(spec, ats))).select(
            "customer_id",
            pl.col("rule_rank").cast(pl.Int64),
            pl.col("bits").cast(pl.Int64),
        )
        rows = full.select("customer_id").with_row_index("row")
        placed = found.join(rows, on="customer_id", how="inner").sort("row", "rule_rank")
        row = placed["row"].to_numpy().astype(np.int64)
        rank = placed["rule_rank"].to_numpy()
        bits = placed["bits"].to_numpy()
    first_age = full["first_age"].to_numpy()
    cells = []
    for k in range(1, last + 1):
        lacking = (first_age > k * horizon) & (full[f"had_{k}"].to_numpy() == 0)
        hit = None
        if found is not None:
            hit = ((bits >> k) & 1).astype(bool)
            hit &= lacking[row]
        cells.append(
            _count_cells(
                lacking,
                full[f"breadth_{k}"].to_numpy(),
                full[f"bought_{k}"].to_numpy(),
                full[f"units_{k}"].to_numpy().astype(np.float64, copy=False),
                (row[hit], rank[hit]) if hit is not None else None,
            )
        )
    if found is None:
        return TakeUpCells(cells, wide, None)
    now_reached = (
        found.filter((pl.col("bits") & 1) == 1)
        .select("customer_id", "rule_rank")
        .sort("rule_rank", "customer_id")
    )
    reached = now_reached.join(wide[0].select("customer_id"), on="customer_id", how="semi")
    now = wide[0].join(reached.select("customer_id").unique(), on="customer_id", how="semi")
    return TakeUpCells(cells, [now.sort("customer_id")], reached)


_CELL_SCHEMA = {
    "grp": pl.Int64,
    "breadth": pl.Int64,
    "bought": pl.Int64,
    "customers": pl.Int64,
    "units": pl.Float64,
}


def _count_cells(
    lacking: np.ndarray,
    breadth: np.ndarray,
    bought: np.ndarray,
    units: np.ndarray,
    reached: tuple[np.ndarray, np.ndarray] | None,
) -> pl.DataFrame:
    """Customers and their net units per (grp, breadth, bought), in that order, at one cutoff:
    ``EVERYONE`` is the rows ``lacking`` the target; with ``reached`` = (rows, rule ranks) of
    the rules' reach among them, each rank and ``COMBINED`` (rows any rule reaches) too.

    One count over a dense key (breadth from 0, bought 0 or 1: a few thousand keys) where a
    hash group-by of millions of rows took several times longer. Everyone and the combined
    audience are counted over all rows with 0/1 weights rather than gathered (at 1M customers
    the 13 cutoffs' cells took 0.47-0.53 s gathered); every sum adds its rows in row order, as
    the counting query's tests expect."""
    n_breadth = int(breadth.max(initial=0)) + 1
    key = breadth.astype(np.int64) * 2 + bought
    width = n_breadth * 2
    rows, ranks = reached if reached is not None else (np.zeros(0, np.int64),) * 2
    top = int(ranks.max(initial=0))
    customers = np.zeros((top + 2) * width, np.int64)
    units_sum = np.zeros((top + 2) * width, np.float64)
    weights = lacking.astype(np.float64)
    customers[:width] = np.bincount(key, weights=weights, minlength=width)
    units_sum[:width] = np.bincount(key, weights=np.where(lacking, units, 0.0), minlength=width)
    if reached is not None:  # (EVERYONE = -1 first, COMBINED = 0 next, then the ranks)
        anyone = np.zeros(lacking.size, dtype=bool)
        anyone[rows] = True
        weights = anyone.astype(np.float64)
        customers[width : 2 * width] = np.bincount(key, weights=weights, minlength=width)
        units_sum[width : 2 * width] = np.bincount(
            key, weights=np.where(anyone, units, 0.0), minlength=width
        )
        by_rank = (ranks + 1) * width + key[rows]
        size = customers.size
        customers[2 * width :] = np.bincount(by_rank, minlength=size)[2 * width :]
        units_sum[2 * width :] = np.bincount(by_rank, weights=units[rows], minlength=size)[
            2 * width :
        ]
    used = np.flatnonzero(customers)
    return pl.DataFrame(
        {
            "grp": used // width + EVERYONE,
            "breadth": used // 2 % n_breadth,
            "bought": used % 2,
            "customers": customers[used],
            "units": units_sum[used],
        },
        schema=_CELL_SCHEMA,
    )


@dataclass(frozen=True)
class _Cutoff:
    """Customers lacking the target at one past cutoff, as counted cells: grp (``EVERYONE`` or
    an audience group), breadth, bought, customers, units, and the breadth decile."""

    at: datetime
    cells: pl.DataFrame
    edges: np.ndarray
    # tables() per group: the estimate asks each cutoff for the same group's tables once per
    # later cutoff (added value since each backtest), so they are counted once and kept
    _tables: dict[int, np.ndarray] = dataclasses.field(
        default_factory=dict, init=False, compare=False, repr=False
    )

    def group(self, group: int) -> pl.DataFrame:
        return self.cells.filter(pl.col("grp") == group)

    def size(self, group: int = EVERYONE) -> int:
        return int(self.group(group)["customers"].sum())

    def buyers(self, group: int = EVERYONE) -> int:
        g = self.group(group)
        return int((g["customers"] * g["bought"]).sum())

    def _by_decile(self, cells: pl.DataFrame, bought: int | None = None) -> np.ndarray:
        if bought is not None:
            cells = cells.filter(pl.col("bought") == bought)
        return np.bincount(
            cells["decile"].to_numpy(),
            weights=cells["customers"].to_numpy().astype(float),
            minlength=len(self.edges) + 1,
        )

    def counts(self) -> tuple[np.ndarray, np.ndarray]:
        """Customers and buyers per breadth decile."""
        everyone = self.group(EVERYONE)
        return self._by_decile(everyone), self._by_decile(everyone, bought=1)

    def tables(self, group: int) -> np.ndarray:
        """One 2x2 per decile: [[members bought, not], [others bought, not]]."""
        kept = self._tables.get(group)
        if kept is not None:
            return kept
        members, everyone = self.group(group), self.group(EVERYONE)
        mb, mn = self._by_decile(members, 1), self._by_decile(members, 0)
        out = np.stack(
            [mb, mn, self._by_decile(everyone, 1) - mb, self._by_decile(everyone, 0) - mn], axis=1
        ).reshape(-1, 2, 2)
        self._tables[group] = out
        return out


@dataclass(frozen=True)
class _Present:
    """Customers lacking the target at as_of itself, one row each: customer_id, breadth, decile
    (by the latest past cutoff's edges) and a flag per audience group; no outcomes."""

    at: datetime
    people: pl.DataFrame
    edges: np.ndarray


@dataclass(frozen=True)
class TakeUpReport:
    """Expected take-up of an audience, how it was reached, and what it rests on."""

    target: Target
    as_of: datetime
    horizon_days: int
    audience: int  # customers lacking the target the estimate is about
    already_hold: int  # given customers who already hold the target (left out)
    expected: TakeUpEstimate  # calibrated expected buyers with the interval
    units_per_buyer: float  # net units a new buyer took within the horizon, in the past
    breadth_matched_rate: float  # raw: the audience's breadth mix at past forward rates
    base_rate: float  # forward take-up of customers lacking the target outside the audience
    overall_rate: float  # forward take-up of everyone lacking the target
    added_value: StratifiedRatio | None  # rule over breadth (MH risk ratio), None if unmeasurable
    weight: RuleWeight  # how much of the rule adjustment the backtests support
    calibration_cutoff: datetime  # the latest cutoff whose outcome is known
    cutoffs: int
    backtests: pl.DataFrame  # cutoff, group, customers, breadth_matched, predicted, observed

    @property
    def expected_units(self) -> tuple[float, float, float]:
        e, u = self.expected, self.units_per_buyer
        return e.expected * u, e.low * u, e.high * u

    @property
    def rate(self) -> float:
        return self.expected.expected / self.audience if self.audience else 0.0

    def as_dict(self) -> dict[str, object]:
        e = self.expected
        units = self.expected_units
        av = self.added_value
        return {
            "target": str(self.target),
            "as_of": self.as_of.date().isoformat(),
            "horizon_days": self.horizon_days,
            "audience": self.audience,
            "already_hold": self.already_hold,
            "expected_buyers": e.expected,
            "interval": [e.low, e.high],
            "level": e.level,
            "n_backtests": e.n_backtests,
            "method": e.method,
            "factor": e.factor,
            "expected_units": units[0],
            "units_interval": [units[1], units[2]],
            "units_per_buyer": self.units_per_buyer,
            "breadth_matched_rate": self.breadth_matched_rate,
            "base_rate": self.base_rate,
            "overall_rate": self.overall_rate,
            "added_value_over_breadth": None
            if av is None
            else {"risk_ratio": av.estimate, "low": av.low, "high": av.high, "crude": av.crude},
            "rule_weight": self.weight.weight,
            "rule_weight_reason": self.weight.reason,
            "calibration_cutoff": self.calibration_cutoff.date().isoformat(),
            "cutoffs": self.cutoffs,
        }


# -- history ------------------------------------------------------------------------------------
def _cutoffs(first: datetime, as_of: datetime, horizon: int, most: int) -> list[datetime]:
    """``as_of - horizon``, then one horizon further back each time, while history allows."""
    out: list[datetime] = []
    c = as_of - timedelta(days=horizon)
    while len(out) < most and c - timedelta(days=MIN_HISTORY_DAYS) >= first:
        out.append(c)
        c -= timedelta(days=horizon)
    return out


def _past_cutoff(target: Target, at: datetime, cells: pl.DataFrame) -> _Cutoff:
    """One past cutoff from its cells (``takeup_cells``), with breadth deciles of everyone
    lacking the target there."""
    everyone = cells.filter(pl.col("grp") == EVERYONE)
    if everyone.height == 0 or int(everyone["customers"].sum()) == 0:
        raise EmptyResultError(
            f"Expected customers lacking {target} at {at:%Y-%m-%d}, found none.",
            hint=f"choose a later {option('as_of')} or a target fewer customers already hold",
        )
    edges = breadth_deciles_counted(everyone["breadth"].to_numpy(), everyone["customers"])
    decile = assign_decile(cells["breadth"].to_numpy(), edges)
    return _Cutoff(at, cells.with_columns(pl.Series("decile", decile)), edges)


def _present(
    target: Target,
    at: datetime,
    people: pl.DataFrame,
    groups: pl.DataFrame | None,
    ranks: Sequence[int],
    edges: np.ndarray,
) -> _Present:
    """The customers lacking the target at as_of (from ``takeup_history`` at k = 0), with their
    breadth deciles and the audience groups they belong to."""
    people = people.select("customer_id", pl.col("breadth").cast(pl.Int64))
    if people.height == 0:
        raise EmptyResultError(
            f"Expected customers lacking {target} at {at:%Y-%m-%d}, found none.",
            hint=f"choose a later {option('as_of')} or a target fewer customers already hold",
        )
    people = people.with_columns(
        pl.Series("decile", assign_decile(people["breadth"].to_numpy(), edges))
    )
    flags = []
    for g in ranks:
        if groups is None or groups.height == 0:
            ids = pl.Series([], dtype=pl.Int64)
        elif g == COMBINED:
            ids = groups["customer_id"]
        else:
            ids = groups.filter(pl.col("rule_rank") == g)["customer_id"]
        ids = ids_.like(ids, people.schema["customer_id"])
        flags.append(pl.col("customer_id").is_in(ids.implode()).alias(f"g{g}"))
    return _Present(at, people.with_columns(flags), edges)


def _groups_at(
    wh: Warehouse, spec: AudienceSpec | None, ids: pl.Series | None, at: datetime
) -> pl.DataFrame:
    """(customer_id, rule_rank) of the audience definition rebuilt at ``at``."""
    if spec is None:
        assert ids is not None
        return pl.DataFrame({"customer_id": ids, "rule_rank": COMBINED})
    length = spec.lookback.until - spec.lookback.since
    shifted = dataclasses.replace(spec, lookback=Window(at - length, at))
    return ids_.normalise_frame(wh.fetch(reach_query(shifted))).with_columns(
        pl.col("rule_rank").cast(pl.Int64)
    )


def _mh(tables: Iterable[np.ndarray]) -> StratifiedRatio | None:
    stacked = [t for t in tables if t.size]
    if not stacked:
        return None
    try:
        return mantel_haenszel_risk_ratio(np.concatenate(stacked))
    except ReachlistError:  # no members, or no buyers on one side: nothing to measure
        return None


def _prediction(rates_at: _Cutoff, breadth: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Expected buyers among customers of these breadths (each counted ``weights`` times) at the
    decile take-up rates of ``rates_at``."""
    n, b = rates_at.counts()
    mix = np.bincount(
        assign_decile(breadth, rates_at.edges), weights=weights, minlength=len(n)
    ).astype(float)
    return breadth_matched_expectation(n, b, mix).expected_buyers


@dataclass(frozen=True)
class _History:
    cutoffs: list[_Cutoff]  # newest first; every outcome is known
    ranks: list[int]
    # Only customer ids were given: following them back in time would be biased (they lack the
    # target today, so they cannot have bought it at any earlier cutoff). The backtests then test
    # the breadth-matched method itself, one audience per breadth decile, and no rule effect is
    # measured.
    fixed_ids: bool = False
    # customers lacking the target at as_of itself, with their breadth (no outcome is read): with
    # rules only those a rule reaches, and who each rule reaches among them (now_reached)
    now_people: pl.DataFrame | None = None
    now_reached: pl.DataFrame | None = None

    def _audiences(self, now: _Cutoff) -> list[tuple[int, pl.DataFrame]]:
        everyone = now.group(EVERYONE)
        if self.fixed_ids:
            return [
                (-1 - k, everyone.filter(pl.col("decile") == k)) for k in range(len(now.edges) + 1)
            ]
        return [(g, now.group(g)) for g in self.ranks]

    def added_value(self, group: int, since: int = 0) -> StratifiedRatio | None:
        if self.fixed_ids:
            return None
        return _mh(c.tables(group) for c in self.cutoffs[since:])

    def backtests(self) -> pl.DataFrame:
        rows = []
        for j in range(len(self.cutoffs) - 1):
            now, before = self.cutoffs[j], self.cutoffs[j + 1]
            for g, members in self._audiences(now):
                weights = members["customers"].to_numpy()
                customers = int(weights.sum())
                if customers == 0:
                    continue
                base = _prediction(before, members["breadth"].to_numpy(), weights.astype(float))
                if base <= 0:
                    continue
                prior = self.added_value(g, since=j + 1)
                rr = prior.estimate if prior is not None else 1.0
                rows.append(
                    {
                        "cutoff": now.at,
                        "group": g,
                        "customers": customers,
                        "breadth_matched": base,
                        "rule_adjusted": base * rr,
                        "observed": int((members["customers"] * members["bought"]).sum()),
                    }
                )
        schema: dict[str, pl.DataType] = {
            "cutoff": pl.Datetime("us"),
            "group": pl.Int64(),
            "customers": pl.Int64(),
            "breadth_matched": pl.Float64(),
            "rule_adjusted": pl.Float64(),
            "observed": pl.Int64(),
        }
        return pl.DataFrame(rows, schema=schema)


def _history(
    wh: Warehouse,
    target: Target,
    as_of: datetime,
    horizon: int,
    spec: AudienceSpec | None,
    ids: pl.Series | None,
    max_cutoffs: int,
    counting: str | None = None,
) -> _History:
    ats = _cutoffs(first_order_time(wh), as_of, horizon, max_cutoffs)
    if not ats:
        raise EmptyResultError(
            f"Expected at least {MIN_HISTORY_DAYS + horizon} days of order history before "
            f"{as_of:%Y-%m-%d} to calibrate a {horizon}-day take-up estimate, found less.",
            hint=f"choose a later {option('as_of')} or a shorter {option('horizon_days')}",
        )
    ranks = [COMBINED] + ([r.rank for r in spec.rules] if spec is not None else [])
    # one pass: the past cutoffs as cells; the customers at as_of one by one (and, given only
    # ids, at the latest past cutoff too: the report's outside rate leaves the given ones out)
    taken = takeup_cells(
        wh, target, as_of, horizon, len(ats), spec, 1 if spec is None else 0, counting
    )
    cells = list(taken.cells)
    if spec is None:
        assert ids is not None
        cells[0] = pl.concat([cells[0], _cells_of(taken.people[1], ids, COMBINED)])
    cutoffs = [_past_cutoff(target, at, cells[k - 1]) for k, at in enumerate(ats, start=1)]
    return _History(
        cutoffs,
        ranks,
        fixed_ids=spec is None,
        now_people=taken.people[0],
        now_reached=taken.reached,
    )


def _cells_of(people: pl.DataFrame, ids: pl.Series, group: int) -> pl.DataFrame:
    """``takeup_cells``' rows for the customers of ``people`` (one cutoff of
    ``takeup_history``) whose ids are ``ids``, as group ``group``."""
    ids = ids_.like(ids, people.schema["customer_id"])
    return (
        people.filter(pl.col("customer_id").is_in(ids.implode()))
        .group_by(pl.col("breadth").cast(pl.Int64), pl.col("bought").cast(pl.Int64))
        .agg(pl.len().cast(pl.Int64).alias("customers"), pl.col("units").cast(pl.Float64).sum())
        .select(pl.lit(group, pl.Int64).alias("grp"), "breadth", "bought", "customers", "units")
        .sort("breadth", "bought")
    )


def _calibrated(history: _History) -> tuple[Calibration, RuleWeight, pl.DataFrame]:
    bt = history.backtests()
    weight = rule_weight(bt["breadth_matched"], bt["rule_adjusted"], bt["observed"])
    bt = bt.with_columns(
        pl.Series(
            "predicted",
            [
                weight.apply(b, r)
                for b, r in zip(bt["breadth_matched"], bt["rule_adjusted"], strict=True)
            ],
            dtype=pl.Float64,
        )
    )
    cal = calibrate(
        bt["predicted"].to_numpy(), bt["observed"].to_numpy(), cutoffs=bt["cutoff"].to_numpy()
    )
    return cal, weight, bt


# -- the estimate -------------------------------------------------------------------------------
@dataclass(frozen=True)
class Calibrated:
    """Everything learnt from the past for one audience definition, ready to predict at as_of."""

    target: Target
    as_of: datetime
    horizon_days: int
    level: float
    history: _History
    calibration: Calibration
    weight: RuleWeight
    backtests: pl.DataFrame
    now: _Present  # customers lacking the target at as_of with breadth and groups; no outcomes

    @property
    def latest(self) -> _Cutoff:
        return self.history.cutoffs[0]

    def added_value(self, group: int) -> StratifiedRatio | None:
        return self.history.added_value(group)

    def members(self, group: int) -> pl.DataFrame:
        return self.now.people.filter(pl.col(f"g{group}"))

    @property
    def units_per_buyer(self) -> float:
        """Net units a new buyer took within the horizon at the latest complete cutoff."""
        latest = self.latest
        buyers = latest.buyers()
        if not buyers:
            return 1.0
        units = latest.group(EVERYONE).filter(pl.col("bought") == 1)["units"].sum()
        return float(units) / buyers

    def for_customers(self, customers: Iterable[int] | pl.Series) -> Calibrated:
        """The same calibration with the audience narrowed to ``customers`` (for example a
        list's treatment group after a clearance cut). With an ``AudienceSpec`` the backtests
        rebuild the audience from the rules, so they do not depend on the ids and stay valid."""
        ids = ids_.like(_as_ids(customers), self.now.people.schema["customer_id"])
        people = self.now.people.with_columns(
            (pl.col(f"g{COMBINED}") & pl.col("customer_id").is_in(ids.implode())).alias(
                f"g{COMBINED}"
            )
        )
        return dataclasses.replace(self, now=_Present(self.now.at, people, self.now.edges))

    def customer_rates(self) -> pl.DataFrame:
        """customer_id and calibrated take-up probability of every audience member at as_of."""
        n, b = self.latest.counts()
        rates = decile_rates(n, b)
        people = self.now.people.filter(pl.col(f"g{COMBINED}"))
        rule_ranks = [g for g in self.history.ranks if g != COMBINED]
        factors = np.ones(people.height)
        if rule_ranks:
            factors = np.zeros(people.height)
            for g in rule_ranks:
                av = self.added_value(g)
                f = (av.estimate if av is not None else 1.0) ** self.weight.weight
                factors = np.where(people[f"g{g}"].to_numpy(), np.maximum(factors, f), factors)
        else:
            av = self.added_value(COMBINED)
            factors *= (av.estimate if av is not None else 1.0) ** self.weight.weight
        p = np.minimum(self.calibration.factor * rates[self._deciles(people)] * factors, 1.0)
        return pl.DataFrame({"customer_id": people["customer_id"], "rate": p})

    def _deciles(self, people: pl.DataFrame) -> np.ndarray:
        return assign_decile(people["breadth"].to_numpy(), self.latest.edges)

    def report(self, group: int = COMBINED, given: int | None = None) -> TakeUpReport:
        members = self.members(group)
        if members.height == 0:
            raise EmptyResultError(
                f"Expected audience customers lacking {self.target} at {self.as_of:%Y-%m-%d}, "
                f"found none{f' of {given:,}' if given else ''}.",
                hint="check the audience: its customers already hold the target, or none is "
                "reached",
            )
        latest = self.latest
        base = _prediction(latest, members["breadth"].to_numpy())
        added = self.added_value(group)
        raw = self.weight.apply(base, base * (added.estimate if added is not None else 1.0))
        # at the latest past cutoff: everyone lacking the target, and those outside the group
        n_all, b_all = latest.size(), latest.buyers()
        n_out, b_out = n_all - latest.size(group), b_all - latest.buyers(group)
        return TakeUpReport(
            target=self.target,
            as_of=self.as_of,
            horizon_days=self.horizon_days,
            audience=members.height,
            already_hold=(given - members.height) if given is not None else 0,
            expected=self.calibration.predict(raw, level=self.level),
            units_per_buyer=self.units_per_buyer,
            breadth_matched_rate=base / members.height,
            base_rate=b_out / n_out if n_out else math.nan,
            overall_rate=b_all / n_all,
            added_value=added,
            weight=self.weight,
            calibration_cutoff=latest.at,
            cutoffs=len(self.history.cutoffs),
            backtests=self.backtests,
        )


def calibrate_audience(
    wh: Warehouse,
    target: Target,
    *,
    spec: AudienceSpec | None = None,
    customers: Iterable[int] | pl.Series | None = None,
    horizon_days: int = DEFAULT_HORIZON,
    as_of: date | datetime | str | None = None,
    level: float = 0.9,
    max_cutoffs: int = MAX_CUTOFFS,
    counting: str | None = None,
) -> Calibrated:
    """Backtests and calibration for an audience definition; reads nothing at or after as_of.
    ``counting`` is where the history is counted (see :func:`takeup_cells`)."""
    if horizon_days < 1:
        raise InputError(
            f"Expected a horizon of at least 1 day, found {horizon_days}.",
            hint=f"pass {option('horizon_days')} 30",
        )
    if spec is None and customers is None:
        raise InputError(
            "Expected an audience (customer ids or an AudienceSpec), found neither.",
            hint="pass customers=... or spec=...",
        )
    if as_of is not None:
        when = _as_datetime(as_of, option("as_of"))
    elif spec is not None:
        when = spec.lookback.until
    else:
        when = last_order_day(wh)
    ids = None if customers is None else _as_ids(customers)
    history = _history(wh, target, when, horizon_days, spec, ids, max_cutoffs, counting)
    cal, weight, bt = _calibrated(history)
    now_people = history.now_people
    assert now_people is not None
    if spec is None:
        groups = pl.DataFrame({"customer_id": ids, "rule_rank": COMBINED})
    elif history.now_reached is not None:
        groups = history.now_reached
    else:
        groups = _groups_at(wh, spec, None, when)
    if ids is not None and spec is not None and history.now_reached is not None:
        # The history brought the customers the rules reach at as_of. Given customers beyond
        # them (reached at another time, or holding the target by now) need everyone's breadth
        # to tell which: one more query, customer-sized, only then.
        given = ids_.like(ids, now_people.schema["customer_id"])
        if not given.is_in(now_people["customer_id"].implode()).all():
            now_people = takeup_history(wh, target, when, horizon_days, 0)[0]
    if ids is not None and spec is not None:
        # the given customers are the combined audience; rules still mark whom they reach
        groups = pl.concat(
            [
                groups.filter(pl.col("rule_rank") != COMBINED),
                pl.DataFrame(
                    {"customer_id": ids, "rule_rank": COMBINED},
                    schema={"customer_id": ids.dtype, "rule_rank": pl.Int64},
                ),
            ]
        )
        ranks = history.ranks
        now = _present(target, when, now_people, groups, ranks, edges=history.cutoffs[0].edges)
        now = _Present(
            now.at,
            now.people.with_columns(pl.col("customer_id").is_in(ids.implode()).alias("g0")),
            now.edges,
        )
    else:
        # Breadth at as_of, read with an empty outcome window: nothing at or after as_of.
        now = _present(
            target,
            when,
            now_people,
            groups,
            history.ranks,
            edges=history.cutoffs[0].edges,
        )
    return Calibrated(target, when, horizon_days, level, history, cal, weight, bt, now)


def estimate_takeup(
    wh: Warehouse,
    target: Target,
    *,
    spec: AudienceSpec | None = None,
    customers: Iterable[int] | pl.Series | None = None,
    horizon_days: int = DEFAULT_HORIZON,
    as_of: date | datetime | str | None = None,
    level: float = 0.9,
    max_cutoffs: int = MAX_CUTOFFS,
    counting: str | None = None,
) -> TakeUpReport:
    """Expected buyers of ``target`` within ``horizon_days`` after ``as_of`` in an audience.

    The audience is ``customers`` (ids, for example a list's treatment group) or, without them,
    everyone ``spec``'s rules reach at ``as_of``. ``spec`` also lets the backtests rebuild the
    audience at past cutoffs; without it they backtest the breadth method on breadth deciles. Nothing at
    or after ``as_of`` is read. ``as_of`` defaults to the end of ``spec``'s lookback window, else
    the day after the last order.
    """
    ids = None if customers is None else _as_ids(customers)
    c = calibrate_audience(
        wh,
        target,
        spec=spec,
        customers=ids,
        horizon_days=horizon_days,
        as_of=as_of,
        level=level,
        max_cutoffs=max_cutoffs,
        counting=counting,
    )
    given = ids.n_unique() if ids is not None else None
    return c.report(COMBINED, given=given)


# -- holdout planning ---------------------------------------------------------------------------
@dataclass(frozen=True)
class HoldoutPlanning:
    """What a holdout can tell: the smallest uplift it detects, and the share a chosen uplift needs."""

    list_size: int
    share: float
    baseline_rate: float
    detectable: DetectableUplift | None
    wanted_uplift: float
    needed: HoldoutPlan | None
    needed_note: str  # why ``needed`` is None, or ""
    alpha: float = 0.05
    power: float = 0.8

    def as_dict(self) -> dict[str, Any]:
        """The numbers, for JSON: the smallest detectable uplift (relative; null when none can
        be detected) and the holdout a wanted uplift would need (null when none suffices)."""
        d, n = self.detectable, self.needed

        def finite(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        return {
            "list_size": self.list_size,
            "share": self.share,
            "baseline_rate": self.baseline_rate,
            "alpha": self.alpha,
            "power": self.power,
            "detectable_relative_uplift": None if d is None else finite(d.relative),
            "detectable_treated_rate": None if d is None else finite(d.treated_rate),
            "held_out": None if d is None else int(round(d.n_holdout)),
            "wanted_relative_uplift": self.wanted_uplift,
            "share_needed": None if n is None else n.share,
            "held_out_needed": None if n is None else n.n_holdout,
            "not_possible": self.needed_note or None,
        }

    def lines(self) -> list[str]:
        out = []
        if self.detectable is not None:
            d = self.detectable
            out.append(
                f"With {d.n_holdout:,.0f} held out of {self.list_size:,} ({self.share:.0%}) and "
                f"take-up near {self.baseline_rate:.2%}, the smallest uplift the holdout can detect "
                f"is +{d.relative:.0%} (to {d.treated_rate:.2%}; two-proportion test, "
                f"alpha {self.alpha:g} two-sided, power {self.power:.0%})."
            )
        else:
            out.append(f"No uplift can be measured: {self.needed_note or 'no holdout'}.")
        if self.needed is not None:
            out.append(
                f"To detect +{self.wanted_uplift:.0%}, hold out {self.needed.share:.1%} "
                f"({self.needed.n_holdout:,} customers)."
            )
        elif self.needed_note:
            out.append(f"To detect +{self.wanted_uplift:.0%}: {self.needed_note}")
        return out


def holdout_planning(
    list_size: int,
    share: float,
    baseline_rate: float,
    *,
    wanted_uplift: float = 0.5,
    alpha: float = 0.05,
    power: float = 0.8,
) -> HoldoutPlanning:
    """Minimum detectable uplift at ``share`` and the share needed for ``wanted_uplift``.

    ``baseline_rate`` is the take-up expected without contact (the estimate's rate is the usual
    stand-in: the offer's effect is what the holdout is there to measure).
    """
    rate = min(max(baseline_rate, 1e-6), 1 - 1e-6)
    detectable = None
    note = ""
    if list_size >= 2 and 0 < share < 1 and list_size * share >= 1:
        try:
            detectable = minimum_detectable_uplift(list_size, share, rate, alpha=alpha, power=power)
        except ReachlistError as exc:
            note = exc.message
    else:
        note = "the list or the holdout is empty"
    needed = None
    if list_size >= 2:
        try:
            needed = holdout_share_needed(list_size, rate, wanted_uplift, alpha=alpha, power=power)
        except ReachlistError as exc:
            note = exc.message
    return HoldoutPlanning(
        list_size, share, rate, detectable, wanted_uplift, needed, note, alpha, power
    )


def _as_ids(customers: Iterable[object] | pl.Series) -> pl.Series:
    """Customer ids given by a caller, as an id series (Int64 or String)."""
    if isinstance(customers, pl.Series):
        return ids_.normalise(customers.rename("customer_id"))
    return ids_.series(customers)
