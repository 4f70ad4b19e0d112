"""Promotion overlap: which of the items planned for promotion together already sell together.

For every pair and triple S of the planned items, with N baskets in the window and n(.) the number
of baskets holding all of a set, each split of S into X + y is tested with a one-sided Fisher exact
test (are baskets holding X more likely to hold y than the others?). A set counts as bought
together more often than chance when its weakest split is significant after the Holm correction
over every set tested and its weakest lift n(S)*N / (n(X)*n(y)) is above 1. Discounting more
than one item of such a set gives away margin on purchases that would have happened anyway.

>>> report = promotion_overlap(wh, ["HM-2041", "HM-2042", "FL-1001"])     # doctest: +SKIP
>>> [s.items for s in report.overlapping]                                  # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime
from itertools import combinations

import numpy as np
import polars as pl

from reachlist.errors import EmptyResultError, InputError
from reachlist.measures import adjust_p_values, rule_measures
from reachlist.query import Query
from reachlist.targets import (
    BasketKind,
    Level,
    Window,
    check_basket,
    held_items_query,
    mining_window,
    parse_target,
    resolve_target,
)
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["ADVICE", "MAX_ITEMS", "OverlapReport", "OverlapSet", "promotion_overlap"]

MAX_ITEMS = 15
CORRECTION = "holm"
ADVICE = (
    "Items of a set marked here already sell together more often than chance: discounting more "
    "than one of them gives away margin on purchases that would have happened anyway. Discount "
    "one item of each such set, or bundle them under a single offer."
)


@dataclass(frozen=True)
class OverlapSet:
    items: tuple[str, ...]
    n_together: int  # baskets holding every item of the set
    expected: float  # baskets expected to hold them all if the items sold independently
    lift: float  # the smallest lift over the splits X + y of the set
    p_value: float  # the largest one-sided Fisher p-value over the splits
    p_adjusted: float
    significant: bool  # p_adjusted < alpha and lift > 1


@dataclass(frozen=True)
class OverlapReport:
    items: tuple[str, ...]
    level: Level
    basket: BasketKind
    window: Window
    n_baskets: int
    item_counts: dict[str, int]
    sets: tuple[OverlapSet, ...]  # overlapping sets first, then by p-value
    alpha: float
    correction: str = CORRECTION

    @property
    def overlapping(self) -> tuple[OverlapSet, ...]:
        return tuple(s for s in self.sets if s.significant)


def promotion_overlap(
    wh: Warehouse,
    items: list[str] | tuple[str, ...],
    *,
    basket: str = "order",
    since: date | datetime | str | None = None,
    until: date | datetime | str | None = None,
    days: int = 365,
    alpha: float = 0.05,
) -> OverlapReport:
    """Test every pair and triple of ``items`` (SKUs, or category:NAME / department:NAME, all of
    one level) for being bought together more often than chance."""
    kind = check_basket(basket)
    if not 0 < alpha < 1:
        raise InputError(
            f"Expected {option('alpha')} between 0 and 1, found {alpha}.", hint="pass 0.05"
        )
    targets = [resolve_target(wh, parse_target(i)) for i in items]
    names = list(dict.fromkeys(t.name for t in targets))
    levels = {t.level for t in targets}
    if len(levels) > 1:
        raise InputError(
            f"Expected items of one level, found {', '.join(sorted(levels))}.",
            hint="compare SKUs with SKUs, or categories (category:NAME) with categories",
        )
    if not 2 <= len(names) <= MAX_ITEMS:
        raise InputError(
            f"Expected 2 to {MAX_ITEMS} different items planned for promotion, found {len(names)}.",
            hint="name each item once, for example `reachlist overlap SKU1 SKU2 SKU3`",
        )
    level: Level = targets[0].level
    window = mining_window(wh, since, until, days=days)
    held = held_items_query(window, level=level, basket=kind, built=wh.built_window)
    n_baskets = int(
        wh.scalar(Query.from_template("basket_count", dict(held.params), held=held.sql.strip()))
        or 0
    )
    if n_baskets == 0:
        raise EmptyResultError(
            f"Expected baskets in {window}, found none.",
            hint=f"widen the window with {option('since')}",
        )
    pairs = wh.fetch(
        Query.from_template("basket_items", {**held.params, "items": names}, held=held.sql.strip())
    )
    counts = _set_counts(pairs, names)
    sets = _test_sets(names, counts, n_baskets, alpha)
    return OverlapReport(
        items=tuple(names),
        level=level,
        basket=kind,
        window=window,
        n_baskets=n_baskets,
        item_counts={n: counts.get((i,), 0) for i, n in enumerate(names)},
        sets=sets,
        alpha=alpha,
    )


def _set_counts(pairs: pl.DataFrame, names: list[str]) -> dict[tuple[int, ...], int]:
    """n(S) for every non-empty subset S (as sorted index tuples) of size <= 3."""
    bit = {n: 1 << i for i, n in enumerate(names)}
    masks = (
        pairs.with_columns(pl.col("item").replace_strict(bit, return_dtype=pl.Int64).alias("bit"))
        .group_by("basket")
        .agg(pl.col("bit").sum().alias("mask"))
        .group_by("mask")
        .len()
    )
    mask_values = masks["mask"].to_numpy()
    mask_counts = masks["len"].to_numpy()
    out: dict[tuple[int, ...], int] = {}
    for size in (1, 2, 3):
        for combo in combinations(range(len(names)), size):
            bits = sum(1 << i for i in combo)
            out[combo] = int(mask_counts[(mask_values & bits) == bits].sum())
    return out


def _test_sets(
    names: list[str], counts: dict[tuple[int, ...], int], n: int, alpha: float
) -> tuple[OverlapSet, ...]:
    rows = []
    for size in (2, 3):
        for combo in combinations(range(len(names)), size):
            n_s = counts[combo]
            # every split X + y of the set, as rules X -> y (the miner's measures and test)
            n_x = [counts[tuple(i for i in combo if i != y)] for y in combo]
            n_y = [counts[(y,)] for y in combo]
            m = rule_measures(n, n_x, n_y, n_s)
            lift = float(np.nan_to_num(m["lift"], nan=0.0, posinf=0.0).min())
            expected = n * float(np.prod([counts[(i,)] / n for i in combo]))
            rows.append((combo, n_s, expected, lift, float(m["p_value"].max())))
    adjusted = adjust_p_values([r[4] for r in rows], CORRECTION)
    sets = [
        OverlapSet(
            items=tuple(names[i] for i in combo),
            n_together=n_s,
            expected=expected,
            lift=lift,
            p_value=p,
            p_adjusted=float(p_adj),
            significant=bool(p_adj < alpha and lift > 1.0),
        )
        for (combo, n_s, expected, lift, p), p_adj in zip(rows, adjusted, strict=True)
    ]
    sets.sort(key=lambda s: (not s.significant, s.p_adjusted, -s.lift, s.items))
    return tuple(sets)
