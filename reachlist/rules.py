"""Rules toward a target, mined from the warehouse's order history.

The warehouse does the heavy, data-sized work (de-duplicating lines, netting returns, joining the
product hierarchy) and hands back basket -> item pairs; itemsets are counted in memory on
vertical bitmaps (``reachlist.mining``), which measured faster than counting candidate itemsets
in SQL (see the README's benchmark section). On a Spark cluster the pairs stay in the cluster
and only counts come back (``reachlist.engine_mining``, ``counting="engine"``): same rules.

>>> with Warehouse.open("garden.duckdb") as wh:                       # doctest: +SKIP
...     rs = mine_rules(wh, "PRP-HM-01")
>>> rs.frame.select("antecedent", "confidence", "lift")               # doctest: +SKIP
"""

from __future__ import annotations

import contextlib
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field, replace
from datetime import date, datetime

import numpy as np
import polars as pl

from reachlist import mining
from reachlist.baskets import Baskets
from reachlist.check import MINED_TABLES, require_contract
from reachlist.engine_mining import EngineCounts
from reachlist.errors import EmptyResultError, InputError, ReachlistError
from reachlist.measures import MEASURES
from reachlist.query import Query
from reachlist.stats import (
    assign_decile,
    breadth_deciles,
    mantel_haenszel_risk_ratio,
)
from reachlist.targets import (
    BasketKind,
    Level,
    Target,
    Window,
    check_basket,
    check_level,
    held_codes_queries,
    held_items_query,
    mining_window,
    parse_target,
    resolve_target,
)
from reachlist.warehouse import Warehouse
from reachlist.wording import option

DEFAULT_MIN_SUPPORT = 0.002
BREADTH_LIFT = "breadth_lift"
BREADTH_LIFT_HIGH = "breadth_lift_high"
"""Column of the upper end of the breadth-matched lift's 95% interval."""
BREADTH_ROWS = 500
"""Rules (best first) whose breadth-matched lift is computed; beyond them only significant ones."""
"""Column of a rule's added value over shopping breadth (see :func:`breadth_lifts`)."""
_RANK = {"sku": 0, "category": 1, "department": 2}

Progress = Callable[[str], None]
BreadthLifts = Callable[[list[list[str]]], list[tuple[float, float]]]
"""Breadth-matched lift and the upper end of its interval for each antecedent given."""


@dataclass(frozen=True)
class RuleSet:
    """Rules X -> target with every measure (columns: ``reachlist.mining.RULE_COLUMNS``)."""

    target: Target
    level: Level  # item level of the antecedents
    basket: BasketKind
    window: Window
    n_baskets: int
    correction: str
    frame: pl.DataFrame
    note: str = ""  # how the search narrowed to stay within its budget (empty: it did not)
    # works out breadth-matched lifts for antecedents while some are pending (see with_breadth)
    pending_breadth: BreadthLifts | None = field(default=None, compare=False, repr=False)

    def with_breadth(self, rows: Iterable[int]) -> RuleSet:
        """The same rules with the breadth-matched lift worked out for ``rows`` (positions in
        ``frame``) where it is still empty and would have been worked out with
        ``breadth="now"``; the rest stay as they are, so the values read are the same either
        way."""
        if self.pending_breadth is None or BREADTH_LIFT not in self.frame.columns:
            return self
        wanted = np.zeros(self.frame.height, dtype=bool)
        wanted[np.asarray(list(rows), dtype=np.int64)] = True
        wanted &= _breadth_eligible(self.frame) & self.frame[BREADTH_LIFT].is_null().to_numpy()
        todo = np.flatnonzero(wanted)
        if todo.size == 0:
            return self
        antecedents = self.frame["antecedent"].to_list()
        lifts = self.pending_breadth([antecedents[i] for i in todo])
        values = self.frame[BREADTH_LIFT].to_list()
        highs = self.frame[BREADTH_LIFT_HIGH].to_list()
        for i, (v, high) in zip(todo.tolist(), lifts, strict=True):
            values[i], highs[i] = v, high
        frame = self.frame.with_columns(
            pl.Series(BREADTH_LIFT, values, dtype=pl.Float64),
            pl.Series(BREADTH_LIFT_HIGH, highs, dtype=pl.Float64),
        )
        return replace(self, frame=frame)

    @property
    def target_label(self) -> str:
        """How the target is labelled in ``frame.consequent``."""
        return target_label(self.target, self.level)


def target_label(target: Target, level: Level) -> str:
    return target.name if target.level == level else str(target)


def _related_items(wh: Warehouse, target: Target, level: Level) -> set[str]:
    """Items at ``level`` that contain the target or lie inside it: holding one says nothing new."""
    if target.level == level:
        return set()
    hierarchy = wh.fetch(Query.from_template("item_hierarchy"))
    inside = hierarchy.filter(pl.col(target.level) == target.name)
    return {str(v) for v in inside[level].unique().to_list()}


def load_baskets(
    wh: Warehouse, target: Target | None, level: Level, basket: BasketKind, window: Window
) -> Baskets:
    """Basket -> item pairs from the warehouse, with the target added when it is at another level."""
    built = wh.built_window
    kept = held_codes_queries(window, built) if basket == "customer" and level == "sku" else None
    if kept is not None and (target is None or target.level == level):
        return _kept_baskets(wh, *kept)
    pairs = wh.fetch(held_items_query(window, level=level, basket=basket, built=built))
    if target is not None and target.level != level:
        related = _related_items(wh, target, level)
        held = wh.fetch(
            held_items_query(
                window, level=target.level, basket=basket, only=target.name, built=built
            )
        )
        pairs = pl.concat(
            [
                pairs.filter(~pl.col("item").is_in(list(related))),
                held.with_columns(pl.lit(str(target)).alias("item")),
            ]
        )
    # Item labels are few and repeated millions of times: an Enum cast encodes them much faster
    # than a generic string factorisation.
    labels = pairs["item"].cast(pl.String).unique().sort()
    codes = pairs["item"].cast(pl.String).cast(pl.Enum(labels.to_list())).to_physical()
    return Baskets.from_arrays(
        pairs["basket"], codes.to_numpy().astype("int64"), labels=labels.to_list()
    )


def _kept_baskets(
    wh: Warehouse, pairs_query: Query, items_query: Query, tids_query: Query
) -> Baskets:
    """SKU-level customer baskets from the pairs the holdings file keeps (SKUs as codes): the
    same baskets as from the text pairs, labelled in sorted order, without encoding 9.6M texts
    (at 1M customers the pairs came to baskets in 1.35-1.41 s, then about 0.7 s), nor sorting
    them item by item when the file keeps them so (``tids_query``)."""
    pairs = wh.fetch(pairs_query)
    items = wh.fetch(items_query)
    codes = pairs["code"].to_numpy()
    present = np.flatnonzero(np.bincount(codes, minlength=items.height))  # codes that occur
    names = [str(x) for x in items["item"].gather(present).to_list()]
    order = sorted(range(len(names)), key=names.__getitem__)  # labels in sorted order
    new_code = np.full(items.height, -1, dtype=np.int32)
    new_code[present[order]] = np.arange(len(order), dtype=np.int32)
    labels, recoded = [names[k] for k in order], new_code[codes]
    # kept in customer order with each customer's codes ascending: no sort or hash is needed
    # (checked; in any other order the general path builds the same baskets). The kept item-
    # major index is in code order: it serves when the labels kept that order (checked again
    # against the lines by from_sorted).
    item_major = None
    if order == sorted(order):
        kept = wh.fetch(tids_query)
        item_major = (new_code[kept["code"].to_numpy()], kept["basket_no"].to_numpy())
    fast = Baskets.from_sorted(pairs["basket"], recoded, labels, item_major)
    return fast or Baskets.from_arrays(pairs["basket"], recoded, labels=labels)


def mine_rules(
    wh: Warehouse,
    target: str | Target,
    *,
    level: str = "sku",
    basket: str = "customer",
    since: str | date | datetime | None = None,
    until: str | date | datetime | None = None,
    min_support: float = DEFAULT_MIN_SUPPORT,
    min_confidence: float = 0.0,
    min_lift: float = 1.0,
    max_antecedent: int = 3,
    keep_unproductive: bool = False,
    correction: str = "holm",
    rank_by: str = "leverage",
    progress: Progress | None = None,
    counting: str | None = None,
    breadth: str = "now",
) -> RuleSet:
    """Every rule X -> target (1..max_antecedent items at ``level``) meeting the thresholds.

    ``counting`` says where itemsets are counted (``COUNTING``; None: in the engine on Spark,
    in memory elsewhere); both give the same rules. ``breadth``: ``"now"`` works out the
    breadth-matched lift of every rule that can be shown or used; ``"later"`` leaves it pending
    for ``RuleSet.with_breadth`` to work out for the rules a caller reads (counting in memory,
    not ranking by it; otherwise it is worked out now).

    Raises ``InputError`` for an unknown target (with the closest names) and
    ``EmptyResultError`` naming the threshold to relax when no rule is found.
    """
    say = progress or (lambda _msg: None)
    if breadth not in ("now", "later"):
        raise InputError(
            f"Expected breadth to be now or later, found {breadth!r}.",
            hint="pass breadth='now' (every rule that can be shown) or breadth='later'",
        )
    require_contract(wh, MINED_TABLES)
    tgt = resolve_target(wh, parse_target(target) if isinstance(target, str) else target)
    lvl, kind = check_level(level), check_basket(basket)
    window = mining_window(wh, since, until)
    label = target_label(tgt, lvl)
    if rank_by == BREADTH_LIFT and kind != "customer":
        raise InputError(
            f"Expected {option('basket')} customer to rank by {BREADTH_LIFT}, found {option('basket')} {kind}: "
            "shopping breadth is a property of a customer, not of one order.",
            hint=f"pass {option('basket')} customer, or rank by lift",
        )
    in_engine = _counts_in_engine(wh, counting, kind)
    stack = contextlib.ExitStack()  # what the engine keeps while counting, dropped at the end
    options = dict(
        min_support=min_support,
        max_antecedent=max_antecedent,
        correction=correction,
        rank_by="lift" if rank_by == BREADTH_LIFT else rank_by,
    )
    with stack:
        rules_with: Callable[..., pl.DataFrame]
        tables_for: Callable[[list[list[str]]], list[np.ndarray]]
        if in_engine:
            say(f"Counting {kind} baskets for {window} in the engine ({wh.display_name})")
            counts = stack.enter_context(
                EngineCounts(wh, tgt, lvl, window, label, sorted(_related_items(wh, tgt, lvl)), say)
            )
            held = counts.held_by_target(min_support)
            n, n_y = held.n_baskets, held.held.n_baskets

            def rules_with(**kw: object) -> pl.DataFrame:
                return mining.conditional_rules(
                    held.held,
                    label,
                    n,
                    held.item_counts,
                    counts.itemset_counts,
                    **kw,  # type: ignore[arg-type]
                )

            def tables_for(antecedents: list[list[str]]) -> list[np.ndarray]:
                return counts.breadth_tables(antecedents)

        else:
            say(f"Reading {kind} baskets for {window}")
            baskets = load_baskets(wh, tgt, lvl, kind, window)
            n = baskets.n_baskets
            n_y = (
                int(baskets.item_counts[baskets.item_index(label)])
                if label in set(baskets.labels.tolist())
                else 0
            )

            def rules_with(**kw: object) -> pl.DataFrame:
                return mining.target_rules(baskets, label, **kw)  # type: ignore[arg-type]

            breadth_of: list[np.ndarray] = []  # each basket's breadth, read on first use

            def tables_for(antecedents: list[list[str]]) -> list[np.ndarray]:
                if not breadth_of:
                    breadth_of.append(basket_breadth(wh, baskets, tgt, lvl, window))
                return breadth_tables(baskets, breadth_of[0], label, antecedents)

        if n == 0 or n_y == 0:
            raise EmptyResultError(
                f"No {kind} basket in {window} holds the target {str(tgt)!r}, so no rule can point "
                "to it.",
                hint=f"widen the window with {option('since')}, or target a new item through {option('stand_in')}",
            )
        say(f"Counting itemsets toward the target in {n_y:,} of {n:,} baskets")
        notes: list[str] = []
        frame = rules_with(
            min_confidence=min_confidence,
            min_lift=min_lift,
            keep_unproductive=keep_unproductive,
            notes=notes,
            **options,
        )
        note = "The search " + notes[0] + "." if notes else ""
        if frame.height == 0:
            raise EmptyResultError(
                _why_empty(
                    n,
                    n_y,
                    label,
                    min_support,
                    min_confidence,
                    min_lift,
                    keep_unproductive,
                    rules_with,
                    options,
                ),
                hint="relax the threshold named, or widen the window",
            )
        frame = frame.with_columns(
            pl.lit(None, dtype=pl.Float64).alias(BREADTH_LIFT),
            pl.lit(None, dtype=pl.Float64).alias(BREADTH_LIFT_HIGH),
        )
        pending: BreadthLifts | None = None
        if kind == "customer":

            def pending(antecedents: list[list[str]]) -> list[tuple[float, float]]:
                return lift_intervals(tables_for(antecedents))

        rules = RuleSet(tgt, lvl, kind, window, n, correction, frame, note, pending)
        later = breadth == "later" and not in_engine and rank_by != BREADTH_LIFT
        if pending is not None and not later:
            # breadth-matched lift for every rule that can be shown or used, now (the engine's
            # tables go when counting ends)
            rows = np.flatnonzero(_breadth_eligible(frame))
            say(f"Matching {rows.size:,} rules on shopping breadth")
            rules = replace(rules.with_breadth(rows.tolist()), pending_breadth=None)
    if rank_by == BREADTH_LIFT:
        rules = replace(rules, frame=sort_by_breadth_lift(rules.frame))
    return rules


def _breadth_eligible(frame: pl.DataFrame) -> np.ndarray:
    """Rules whose breadth-matched lift is worked out (when asked for, or all at once): the best
    BREADTH_ROWS by the ranking measure and the significant ones among the next (others stay
    empty), by their position in the mined order."""
    at = np.arange(frame.height)
    return np.asarray(
        (at < BREADTH_ROWS) | (frame["significant"].to_numpy() & (at < 4 * BREADTH_ROWS))
    )


COUNTING = ("memory", "engine")
"""Where mining counts: ``memory`` (the pairs come to reachlist; the default off Spark) or
``engine`` (only counts come back; the default on Spark)."""


def _counts_in_engine(wh: Warehouse, counting: str | None, kind: BasketKind) -> bool:
    if counting is None:
        return wh.counts_in_engine and kind == "customer"
    if counting not in COUNTING:
        raise InputError(
            f"Expected counting to be one of {', '.join(COUNTING)}, found {counting!r}.",
            hint="pass counting='memory' or counting='engine', or leave it out",
        )
    if counting == "engine" and kind != "customer":
        raise InputError(
            f"Expected customer baskets to count in the engine, found {option('basket')} {kind}.",
            hint="count order baskets in memory (counting='memory')",
        )
    return counting == "engine"


def sort_by_breadth_lift(frame: pl.DataFrame) -> pl.DataFrame:
    """Best added value over breadth first; ties to more co-purchases, then the id."""
    return frame.sort(
        [pl.col(BREADTH_LIFT).fill_nan(None), pl.col("n_both"), pl.col("rule_id")],
        descending=[True, True, False],
        nulls_last=True,
    )


_DENSE_BREADTH_LIMIT = 1 << 29  # bytes of the presence table in basket_breadth


def basket_breadth(
    wh: Warehouse, baskets: Baskets, target: Target, level: Level, window: Window
) -> np.ndarray:
    """Shopping breadth of each customer basket: distinct categories held in the window.

    The target itself is left out (holding it must not make a customer look broader), so at
    sku level a customer holding only the target in its category does not count that category.
    One extra query: the sku -> category map at sku level, nothing at category level, and the
    category-level held items at department level."""
    n = baskets.n_baskets
    target_label_ = target_label(target, level)
    if level == "department":
        held = held_items_query(window, level="category", basket="customer", built=wh.built_window)
        pairs = wh.fetch(held)
        if target.level == "category":
            pairs = pairs.filter(pl.col("item") != target.name)
        ids = baskets.basket_ids
        if ids is None or pairs.height == 0:
            return np.zeros(n, dtype=np.int64)
        where = {v: k for k, v in enumerate(ids.tolist())}
        per = pairs.group_by("basket").agg(pl.col("item").n_unique().alias("n"))
        out = np.zeros(n, dtype=np.int64)
        for key, count in per.iter_rows():
            k = where.get(key)
            if k is not None:
                out[k] = count
        return out
    labels = [str(x) for x in baskets.labels.tolist()]
    if level == "sku":
        cats = wh.fetch(Query.from_template("item_hierarchy"))
        category = dict(zip(cats["sku"].to_list(), cats["category"].to_list(), strict=True))
        names = [None if x == target_label_ else category.get(x) for x in labels]
    else:
        names = [None if x == target_label_ else x for x in labels]
    known = sorted({x for x in names if x is not None})
    code = {x: k for k, x in enumerate(known)}
    item_cat = np.array([code[x] if x is not None else -1 for x in names], dtype=np.int64)
    if len(known) <= 64 and baskets.indices.size:
        # one bit per category: OR the bits of each basket's items (its lines are contiguous in
        # the CSR) and count them; 1M baskets: 0.17 s -> 0.06 s against the presence table
        one = np.left_shift(np.uint64(1), np.maximum(item_cat, 0).astype(np.uint64))
        bits = np.where(item_cat >= 0, one, np.uint64(0))
        mask = np.zeros(n, dtype=np.uint64)
        full = np.flatnonzero(np.diff(baskets.indptr) > 0)
        mask[full] = np.bitwise_or.reduceat(bits[baskets.indices], baskets.indptr[full])
        return np.asarray(np.bitwise_count(mask), dtype=np.int64)
    basket_of = np.repeat(np.arange(n, dtype=np.int64), np.diff(baskets.indptr))
    cat = item_cat[baskets.indices]
    keep = cat >= 0
    width = max(len(known), 1)
    keys = basket_of[keep] * width + cat[keep]
    if n * width <= _DENSE_BREADTH_LIMIT:
        # A presence table (one byte per basket and category) is several times faster than
        # hashing millions of keys, and small: 1M baskets x 35 categories is 35 MB.
        seen = np.zeros(n * width, dtype=bool)
        seen[keys] = True
        return np.asarray(seen.reshape(n, width).sum(axis=1, dtype=np.int64))
    return np.bincount(np.unique(keys) // width, minlength=n).astype(np.int64)


MASK_CACHE = 256  # presence masks kept at once while matching rules on breadth (1 MB each per 1M)


def breadth_tables(
    baskets: Baskets,
    breadth: np.ndarray,
    target: str,
    antecedents: list[list[str]],
) -> list[np.ndarray]:
    """One ``(deciles, 2, 2)`` array per rule: within each breadth decile,
    ``[[holders with y, holders without], [others with y, others without]]``."""
    n = baskets.n_baskets
    decile = assign_decile(breadth, breadth_deciles(breadth)) if n else np.zeros(0, np.int64)
    k = int(decile.max()) + 1 if n else 1
    has_y = np.zeros(n, dtype=bool)
    has_y[baskets.baskets_holding(baskets.item_index(target))] = True
    total = np.bincount(decile, minlength=k)
    total_y = np.bincount(decile[has_y], minlength=k)
    code = decile * 2 + has_y  # one small code per basket: its decile and whether it holds y
    masks: dict[int, np.ndarray] = {}  # item -> which baskets hold it (one byte per basket)
    out = []
    for items in antecedents:
        # holders: the baskets of the rarest item, kept where every other item is held too
        # (a gather through a presence mask: no sorting, no set intersection per rule)
        idx = sorted({baskets.item_index(i) for i in items}, key=lambda j: baskets.item_counts[j])
        holders = baskets.baskets_holding(idx[0])
        for item in idx[1:]:
            if item not in masks:
                if len(masks) >= MASK_CACHE:
                    masks.pop(next(iter(masks)))
                m = np.zeros(n, dtype=bool)
                m[baskets.baskets_holding(item)] = True
                masks[item] = m
            holders = holders[masks[item][holders]]
        counts = np.bincount(code[holders], minlength=2 * k).reshape(k, 2)
        a, n1 = counts[:, 1], counts.sum(axis=1)
        c = total_y - a
        out.append(
            np.stack(
                [np.stack([a, n1 - a], axis=1), np.stack([c, total - n1 - c], axis=1)], axis=1
            ).astype(float)
        )
    return out


def breadth_lift_intervals(
    baskets: Baskets,
    breadth: np.ndarray,
    target: str,
    antecedents: list[list[str]],
) -> list[tuple[float, float]]:
    """Each rule's breadth-matched lift and the upper end of its 95% interval (NaN where it
    cannot be measured): a rule whose interval lies below 1 is one whose holders buy the target
    less often than customers who shop as broadly."""
    return lift_intervals(breadth_tables(baskets, breadth, target, antecedents))


def lift_intervals(tables: list[np.ndarray]) -> list[tuple[float, float]]:
    """Breadth-matched lift and the upper end of its 95% interval from each rule's
    per-decile tables (NaN where it cannot be measured)."""
    out = []
    for table in tables:
        try:
            r = mantel_haenszel_risk_ratio(table)
            out.append((r.estimate, r.high))
        except ReachlistError:
            out.append((math.nan, math.nan))
    return out


def breadth_lifts(
    baskets: Baskets,
    breadth: np.ndarray,
    target: str,
    antecedents: list[list[str]],
) -> list[float]:
    """Each rule's added value over shopping breadth: the Mantel-Haenszel risk ratio of holding
    the target, antecedent holders over everyone else, within breadth deciles
    (:func:`reachlist.stats.mantel_haenszel_risk_ratio`). Lift compares holders with everyone;
    this compares them with customers who shop as broadly, so a rule whose lift is only breadth
    scores near 1. NaN where no decile has both holders and others with the target."""
    out = []
    for tables in breadth_tables(baskets, breadth, target, antecedents):
        try:
            out.append(mantel_haenszel_risk_ratio(tables).estimate)
        except ReachlistError:
            out.append(math.nan)
    return out


def _why_empty(
    n: int,
    n_y: int,
    label: str,
    min_support: float,
    min_confidence: float,
    min_lift: float,
    keep_unproductive: bool,
    rules_with: Callable[..., pl.DataFrame],
    options: dict[str, object],
) -> str:
    if n_y / n < min_support:
        return (
            f"No rule toward {label!r}: the target is held by {n_y:,} of {n:,} baskets "
            f"({n_y / n:.3%}), below {option('min_support')} {min_support:.3%}; lower {option('min_support')} below "
            f"{n_y / n:.3%}"
        )
    every = rules_with(
        min_confidence=0.0,
        min_lift=0.0,
        keep_unproductive=True,
        **options,
    )
    if every.height == 0:
        return (
            f"No rule toward {label!r}: no antecedent is held together with the target by "
            f"{option('min_support')} {min_support:.3%} of baskets; lower {option('min_support')}"
        )
    best_conf = float(every["confidence"].max())  # type: ignore[arg-type]
    best_lift = float(every["lift"].max())  # type: ignore[arg-type]
    if best_conf < min_confidence:
        return (
            f"No rule toward {label!r}: {every.height} rules meet support but the best "
            f"confidence is {best_conf:.3f}, below {option('min_confidence')} {min_confidence}"
        )
    if best_lift < min_lift:
        return (
            f"No rule toward {label!r}: {every.height} rules meet support but the best lift is "
            f"{best_lift:.3f}, below {option('min_lift')} {min_lift}"
        )
    return (
        f"No rule toward {label!r}: the {every.height} rules that meet the thresholds are all "
        f"unproductive (a shorter antecedent does as well); pass {option('keep_unproductive=True')}"
        if not keep_unproductive
        else f"No rule toward {label!r} meets all thresholds together"
    )


EXPLORE_MAX_ANTECEDENT = 2  # antecedent items when rules toward every consequent are searched
EXPLORE_BUDGET = 200_000  # itemsets one search toward every consequent may count (estimated)


def _pair_counts(baskets: Baskets, min_count: int) -> tuple[np.ndarray, np.ndarray] | None:
    """Item counts (ascending) of the items frequent at ``min_count`` and the baskets holding
    each pair of them (upper triangle), when that is cheap to count (None otherwise)."""
    counts = baskets.item_counts
    freq = np.argsort(counts, kind="stable")
    freq = freq[counts[freq] >= min_count]
    k = int(freq.size)
    if k < 3 or k > PAIR_ITEMS or k * k * baskets.n_words > PAIR_WORK:
        return None
    bits = baskets.bitmaps(freq)
    together = np.zeros((k, k), dtype=np.int64)
    for a in range(k - 1):
        together[a, a + 1 :] = np.bitwise_count(bits[a] & bits[a + 1 :]).sum(axis=1)
    return counts[freq], together


def _nodes_from_pairs(item_counts: np.ndarray, together: np.ndarray, min_count: int) -> int:
    """Itemsets of up to 3 items a search counts at ``min_count``: the frequent items, every pair
    of them, and every frequent pair extended by each item after it."""
    keep = np.flatnonzero(item_counts >= min_count)
    k = int(keep.size)
    sub = together[np.ix_(keep, keep)]
    a, b = np.nonzero(np.triu(sub >= min_count, 1))
    return int(k + k * (k - 1) // 2 + (k - 1 - b).sum())


PAIR_ITEMS = 3_000  # frequent items up to which pairs are counted to bound the search
PAIR_WORK = 2_000_000_000  # ... and item pairs x bitmap words


def _explore_floor(baskets: Baskets, min_count: int, depth: int) -> tuple[int, int]:
    """The support floor (in baskets) at which a search toward every consequent fits
    ``EXPLORE_BUDGET`` itemsets, and the itemsets estimated at ``min_count``. No target bounds
    this search, so the floor rises (the strongest rules by support survive it): first as if
    items were independent, then, where pairs are cheap to count, from the real pair counts
    (dense data such as categories held over a year is far from independent)."""
    n = baskets.n_baskets

    def guess(floor: int) -> int:
        return mining.estimate_nodes(baskets.item_counts, n, floor, depth)

    def higher(floor: int) -> int:
        return min(n, math.ceil(floor * 1.25))

    asked, floor = guess(min_count), min_count
    while guess(floor) > EXPLORE_BUDGET and floor < n:
        floor = higher(floor)
    pairs = _pair_counts(baskets, floor) if depth >= 3 else None
    if pairs is not None:
        asked = max(asked, _nodes_from_pairs(*pairs, floor))
        while _nodes_from_pairs(*pairs, floor) > EXPLORE_BUDGET and floor < n:
            floor = higher(floor)
    return floor, asked


def strongest_rules(
    wh: Warehouse,
    *,
    level: str = "sku",
    basket: str = "customer",
    since: str | date | datetime | None = None,
    until: str | date | datetime | None = None,
    measure: str = "leverage",
    top: int | None = 20,
    min_support: float = 0.01,
    min_confidence: float = 0.0,
    min_lift: float = 1.0,
    max_antecedent: int = EXPLORE_MAX_ANTECEDENT,
    keep_unproductive: bool = False,
    correction: str = "holm",
    progress: Progress | None = None,
) -> tuple[pl.DataFrame, Window, int, str]:
    """Exploratory mode: the ``top`` strongest rules toward any consequent, by ``measure``, the
    window, the number of baskets and a note (empty unless a request was narrowed: antecedents
    are capped at ``EXPLORE_MAX_ANTECEDENT`` items here, since every consequent is searched)."""
    say = progress or (lambda _msg: None)
    note = ""
    if max_antecedent > EXPLORE_MAX_ANTECEDENT:
        note = (
            f"Without a target antecedents are capped at {EXPLORE_MAX_ANTECEDENT} items "
            f"(asked for {max_antecedent}): every consequent is searched, so each further "
            "item multiplies the work. Name a target for deeper rules."
        )
        max_antecedent = EXPLORE_MAX_ANTECEDENT
    lvl, kind = check_level(level), check_basket(basket)
    if measure not in MEASURES:
        raise InputError(
            f"Expected a measure of {', '.join(MEASURES)}, found {measure!r}.",
            hint=f"pass {option('rank_by')} lift, {option('rank_by')} confidence, ...",
        )
    window = mining_window(wh, since, until)
    say(f"Reading {kind} baskets for {window}")
    baskets = load_baskets(wh, None, lvl, kind, window)
    if baskets.n_baskets == 0:
        raise EmptyResultError(
            f"No {kind} basket holds any item in {window}.", hint="widen the window"
        )
    n = baskets.n_baskets
    asked_count = max(1, math.ceil(min_support * n - 1e-9))
    min_count, asked = _explore_floor(baskets, asked_count, max_antecedent + 1)
    if min_count > asked_count:
        narrowed = (
            f"The search narrowed to stay within {EXPLORE_BUDGET:,} counted itemsets (about "
            f"{asked:,} estimated): min support raised from {min_support:.2%} to "
            f"{min_count / n:.2%} ({min_count:,} baskets)."
        )
        note = f"{note} {narrowed}".strip()
    say(f"Mining frequent itemsets in {n:,} baskets")
    frame = mining.top_rules(
        baskets,
        measure,
        top,
        min_count=min_count,
        min_confidence=min_confidence,
        min_lift=min_lift,
        max_size=max_antecedent + 1,
        keep_unproductive=keep_unproductive,
        correction=correction,
    )
    if frame.height == 0:
        raise EmptyResultError(
            f"No rule meets {option('min_support')} {min_support:.3%}, {option('min_confidence')} {min_confidence} "
            f"and {option('min_lift')} {min_lift} in {window}.",
            hint=f"lower {option('min_support')} first",
        )
    return frame, window, baskets.n_baskets, note
