"""In-memory mining: baskets -> frequent itemsets -> rules X -> y with every measure.

Baskets (``reachlist.baskets``) come as a basket-major index, an item-major index and vertical
bitmaps; measures and the exact test are in ``reachlist.measures``.

Mining is Eclat (depth-first, vertical): every node of the search ANDs the prefix's row into the
rows of all candidate extensions at once (one numpy call per node) and keeps the extensions that
reach the minimum count. At the first level each node either ANDs full-width rows or cuts its
baskets out of the CSR index so the subtree runs on narrow rows, whichever is estimated cheaper.
``target_rules`` mines the antecedents X only inside the baskets that hold the target y (every
count found there is n(X+y)), then counts n(X) one numpy call per search node, on all baskets or,
when y is in most baskets, as n(X+y) + n(X) among the baskets that lack y.

A rule is *productive* when its confidence is strictly greater than the confidence of every rule
X' -> y with X' a proper subset of X, the empty antecedent included (whose confidence is n(y)/N);
so a one-item rule is productive iff its lift is > 1.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np
import polars as pl

from reachlist.baskets import Baskets, bit_positions, popcounts, project
from reachlist.errors import InputError
from reachlist.measures import (
    CORRECTIONS,
    MEASURES,
    adjust_p_values,
    check_choice,
    rule_id,
    rule_measures,
)

__all__ = [
    "ITEMSET_COLUMNS",
    "RULE_COLUMNS",
    "conditional_rules",
    "frequent_itemsets",
    "rules_from_counts",
    "rules_from_itemsets",
    "target_rules",
    "top_rules",
]

RULE_COLUMNS: dict[str, Any] = {
    "rule_id": pl.String,
    "antecedent": pl.List(pl.String),
    "consequent": pl.String,
    "n_baskets": pl.Int64,
    "n_antecedent": pl.Int64,
    "n_consequent": pl.Int64,
    "n_both": pl.Int64,
    "support": pl.Float64,
    "coverage": pl.Float64,
    "confidence": pl.Float64,
    "lift": pl.Float64,
    "leverage": pl.Float64,
    "conviction": pl.Float64,
    "p_value": pl.Float64,
    "p_adjusted": pl.Float64,
    "correction": pl.String,
    "n_tested": pl.Int64,
    "significant": pl.Boolean,
    "productive": pl.Boolean,
}
"""Schema of every rule table this module returns."""

ITEMSET_COLUMNS: dict[str, Any] = {
    "items": pl.List(pl.String),
    "size": pl.Int64,
    "count": pl.Int64,
    "support": pl.Float64,
}
"""Schema of ``frequent_itemsets``."""

_NO_LIMIT = 1 << 30
_LINE_COST = 10.0  # cost of cutting out one basket line, in AND+popcount word operations
_CUT_OVERHEAD = 20_000.0  # fixed cost of one cut, in the same unit
_PAIR_BLOCK = 1 << 18  # words of the AND buffer in _frequent_pairs


# --------------------------------------------------------------------------------------------
# Eclat
# --------------------------------------------------------------------------------------------


class _Found:
    """Itemsets found, grouped by search node: (prefix ids, extension rows (m, e), counts (m,))."""

    __slots__ = ("groups",)

    def __init__(self) -> None:
        self.groups: list[tuple[tuple[int, ...], np.ndarray, np.ndarray]] = []

    def add(self, prefix: tuple[int, ...], ids: np.ndarray, counts: np.ndarray) -> None:
        """Itemsets prefix + (ids[k],)."""
        if ids.size:
            self.groups.append((prefix, ids.reshape(-1, 1), counts))

    def add_block(self, prefix: tuple[int, ...], ext: np.ndarray, counts: np.ndarray) -> None:
        """Itemsets prefix + tuple(ext[k])."""
        if ext.shape[0]:
            self.groups.append((prefix, ext, counts))

    def size(self) -> int:
        return sum(int(c.size) for _, _, c in self.groups)

    def at_least(self, floor: int) -> None:
        """Keep only itemsets counted at least ``floor`` times (subsets of a kept itemset are
        counted at least as often, so they stay too)."""
        kept = []
        for prefix, ext, cnt in self.groups:
            keep = cnt >= floor
            if keep.any():
                kept.append((prefix, ext[keep], cnt[keep]))
        self.groups = kept

    def matrix(self, pad: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """(ids (m, k) sorted per row, padded with ``pad``; sizes (m,); counts (m,))."""
        if not self.groups:
            return np.zeros((0, 1), np.int64), np.zeros(0, np.int64), np.zeros(0, np.int64)
        k = max(len(p) + e.shape[1] for p, e, _ in self.groups)
        blocks, sizes, counts = [], [], []
        for prefix, ext, cnt in self.groups:
            m, size = ext.shape[0], len(prefix) + ext.shape[1]
            block = np.full((m, k), pad, dtype=np.int64)
            if prefix:
                block[:, : len(prefix)] = prefix
            block[:, len(prefix) : size] = ext
            blocks.append(block)
            sizes.append(np.full(m, size, dtype=np.int64))
            counts.append(cnt)
        mat = np.sort(np.concatenate(blocks), axis=1)
        return mat, np.concatenate(sizes), np.concatenate(counts)


def _frequent_pairs(bits: np.ndarray, min_count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """All row pairs i < j whose AND holds >= min_count bits: (i, j, count), in blocks of rows."""
    r, w = bits.shape
    out_i, out_j, out_c = [], [], []
    step = max(1, _PAIR_BLOCK // max(r * w, 1))
    for k0 in range(0, r - 1, step):
        k1 = min(r - 1, k0 + step)
        counts = popcounts(bits[k0:k1, None, :] & bits[None, k0 + 1 :, :])
        # column c stands for row k0 + 1 + c; keep it only when it is after the row (j > i)
        upper = np.arange(k0 + 1, r)[None, :] > np.arange(k0, k1)[:, None]
        ii, jj = np.nonzero(upper & (counts >= min_count))
        out_i.append(ii + k0)
        out_j.append(jj + k0 + 1)
        out_c.append(counts[ii, jj])
    if not out_i:
        z = np.zeros(0, np.int64)
        return z, z, z
    return np.concatenate(out_i), np.concatenate(out_j), np.concatenate(out_c)


def _eclat(
    bits: np.ndarray,
    ids: np.ndarray,
    counts: np.ndarray,
    min_count: int,
    max_size: int,
    prefix: tuple[int, ...],
    found: _Found,
    pair_leaves: bool = True,
) -> None:
    """Depth-first search below ``prefix``.

    ``bits`` holds the rows (restricted to the baskets holding ``prefix``) of the candidate items
    ``ids``, all frequent (``counts >= min_count``) and ordered by ascending count; item k is
    extended only by the items after it. With ``pair_leaves`` the last level is counted for all
    pairs of rows at once (found as blocks of two extension items) instead of row by row.
    """
    found.add(prefix, ids, counts)
    if len(prefix) + 1 >= max_size or ids.size < 2:
        return
    leaf = len(prefix) + 2 >= max_size
    if leaf and pair_leaves:
        i, j, c = _frequent_pairs(bits, min_count)
        found.add_block(prefix, np.stack([ids[i], ids[j]], axis=1), c)
        return
    for k in range(ids.size - 1):
        row, rest = bits[k], bits[k + 1 :]
        if 2 * counts[k] < row.size:  # sparse prefix: keep only the words it occupies
            nz = np.flatnonzero(row)
            row, rest = row[nz], rest[:, nz]
        child = rest & row
        cc = popcounts(child)
        keep = np.flatnonzero(cc >= min_count)
        if keep.size == 0:
            continue
        sub_prefix = prefix + (int(ids[k]),)
        if leaf:
            found.add(sub_prefix, ids[k + 1 :][keep], cc[keep])
            continue
        keep = keep[np.argsort(cc[keep], kind="stable")]
        _eclat(
            child[keep],
            ids[k + 1 :][keep],
            cc[keep],
            min_count,
            max_size,
            sub_prefix,
            found,
            pair_leaves,
        )


def _search(
    baskets: Baskets,
    rows: np.ndarray | None,
    bits: np.ndarray,
    ids: np.ndarray,
    counts: np.ndarray,
    min_count: int,
    max_size: int,
    found: _Found,
    pair_leaves: bool = True,
) -> None:
    """Every itemset of 1..max_size of the items ``ids`` held by >= min_count of the baskets
    ``rows`` (global basket codes; None = all), whose bitmaps over those baskets are ``bits``.

    ``ids`` must be frequent there and ordered by ascending count. Each first-level node either
    cuts its own baskets out of the CSR index (cost ~ lines in them; the child bitmaps are then
    compact) or ANDs the rows as they are (cost ~ rows x words), whichever is estimated cheaper.
    """
    found.add((), ids, counts)
    if max_size < 2 or ids.size < 2:
        return
    n_words = bits.shape[1]
    mean_len = baskets.indices.size / max(baskets.n_baskets, 1)

    def cut(k: int, items: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        local = bit_positions(bits[k])
        return project(baskets, local if rows is None else rows[local], items)

    n_rows = baskets.n_baskets if rows is None else rows.size
    for k in range(ids.size - 1):
        item, succ = int(ids[k]), ids[k + 1 :]
        # costs in AND+popcount word operations; the subtree's size is guessed from the
        # successors that would stay frequent if they were independent of the item
        cut_cost = counts[k] * (mean_len + 4) * _LINE_COST + _CUT_OVERHEAD
        guess = np.count_nonzero(counts[k + 1 :] * counts[k] >= min_count * n_rows)
        work: float = succ.size  # rows ANDed here, and (all guessed to survive) on the levels below
        if max_size >= 3:
            work += guess * guess / 2 * (1.0 + (guess / 3 if max_size >= 4 else 0.0))
        if cut_cost + work * counts[k] / 64 < work * n_words:
            sub, cc = cut(k, succ)
            keep = np.flatnonzero(cc >= min_count)
        else:
            sub = bits[k + 1 :] & bits[k]
            cc = popcounts(sub)
            keep = np.flatnonzero(cc >= min_count)
            # a big subtree below: cut the baskets out after all, so it runs on narrow rows
            below = keep.size * keep.size / 2
            if max_size >= 3 and cut_cost + below * counts[k] / 64 < below * n_words:
                succ = succ[keep]
                sub, cc = cut(k, succ)
                keep = np.arange(succ.size)
        if keep.size == 0:
            continue
        keep = keep[np.argsort(cc[keep], kind="stable")]
        _eclat(sub[keep], succ[keep], cc[keep], min_count, max_size, (item,), found, pair_leaves)


def _mine_all(baskets: Baskets, min_count: int, max_size: int) -> _Found:
    """Every itemset of 1..max_size items held by >= min_count baskets."""
    found = _Found()
    counts = baskets.item_counts
    freq = np.flatnonzero(counts >= min_count)
    freq = freq[np.argsort(counts[freq], kind="stable")]
    _search(baskets, None, baskets.bitmaps(freq), freq, counts[freq], min_count, max_size, found)
    return found


def _count_groups(baskets: Baskets, found: _Found, rows: np.ndarray | None) -> np.ndarray:
    """Number of the baskets ``rows`` (None = all) holding each itemset found (in the order of
    ``found.matrix``; one extension item per group).

    One AND + popcount per search node. The nodes below one first item either run on the rows
    as they are or, when cheaper, on rows cut down to the baskets holding that first item.
    """
    groups = [(p, e[:, 0]) for p, e, _ in found.groups]
    if not groups:
        return np.zeros(0, np.int64)
    needed = np.unique(
        np.concatenate([np.array(p, dtype=np.int64) for p, _ in groups] + [e for _, e in groups])
    )
    bits = baskets.bitmaps(needed) if rows is None else project(baskets, rows, needed)[0]
    slot = np.full(baskets.n_items, -1, dtype=np.int64)
    slot[needed] = np.arange(needed.size)
    n_words = bits.shape[1]
    mean_len = baskets.indices.size / max(baskets.n_baskets, 1)
    out: list[np.ndarray | None] = [None] * len(groups)
    by_first: dict[int, list[int]] = {}
    for g, (prefix, ext) in enumerate(groups):
        if prefix:
            by_first.setdefault(prefix[0], []).append(g)
        else:
            out[g] = popcounts(bits[slot[ext]])
    for first, members in by_first.items():
        n_first = int(popcounts(bits[slot[first]]))
        work = sum(groups[g][1].size + len(groups[g][0]) for g in members)
        cut_cost = n_first * (mean_len + 4) * _LINE_COST + _CUT_OVERHEAD
        if cut_cost + work * n_first / 64 < work * n_words:
            # every basket of the cut holds ``first``: drop it from the prefixes
            local = bit_positions(bits[slot[first]])
            items = np.unique(
                np.concatenate(
                    [np.array(groups[g][0][1:], dtype=np.int64) for g in members]
                    + [groups[g][1] for g in members]
                )
            )
            sub, _ = project(baskets, local if rows is None else rows[local], items)
            sub_slot = np.full(baskets.n_items, -1, dtype=np.int64)
            sub_slot[items] = np.arange(items.size)
            _count_under(
                sub, sub_slot, [(groups[g][0][1:], groups[g][1]) for g in members], members, out
            )
        else:
            _count_under(bits, slot, [groups[g] for g in members], members, out)
    return np.concatenate(out)  # type: ignore[arg-type]


def _count_under(
    bits: np.ndarray, slot: np.ndarray, groups: list[Any], where: list[int], out: list[Any]
) -> None:
    """Counts of prefix + (e,) for the groups (prefix, ext), put at ``out[where[k]]``."""
    prefix_rows: dict[tuple[int, ...], np.ndarray] = {}
    for (prefix, ext), g in zip(groups, where, strict=True):
        if not prefix:
            out[g] = popcounts(bits[slot[ext]])
            continue
        row = prefix_rows.get(prefix)
        if row is None:
            row = bits[slot[prefix[0]]]
            for k in prefix[1:]:
                row = row & bits[slot[k]]
            prefix_rows[prefix] = row
        out[g] = popcounts(bits[slot[ext]] & row)


# --------------------------------------------------------------------------------------------
# Row lookups (itemsets and rules as padded id rows)
# --------------------------------------------------------------------------------------------


def _lookup(ref: np.ndarray, query: np.ndarray, base: int) -> np.ndarray:
    """Row index in ``ref`` of each row of ``query`` (-1 when absent). Values lie in [0, base)."""
    if query.shape[0] == 0:
        return np.zeros(0, dtype=np.int64)
    if ref.shape[0] == 0:
        return np.full(query.shape[0], -1, dtype=np.int64)
    width = ref.shape[1]
    if width * math.log2(max(base, 2)) < 62:
        radix = base ** np.arange(width - 1, -1, -1, dtype=np.int64)
        rk, qk = ref @ radix, query @ radix
    else:  # keys would overflow int64: number the distinct rows instead
        _, inv = np.unique(np.concatenate([ref, query]), axis=0, return_inverse=True)
        inv = inv.ravel()
        rk, qk = inv[: ref.shape[0]], inv[ref.shape[0] :]
    order = np.argsort(rk, kind="stable")
    pos = np.searchsorted(rk, qk, sorter=order)
    pos = np.minimum(pos, rk.size - 1)
    hit = order[pos]
    return np.where(rk[hit] == qk, hit, -1)


def _productive(
    ante: np.ndarray,
    size: np.ndarray,
    cons: np.ndarray,
    n: int,
    n_x: np.ndarray,
    n_y: np.ndarray,
    n_xy: np.ndarray,
    pad: int,
) -> np.ndarray:
    """Confidence strictly above that of every rule X' -> y, X' a proper subset of X (empty
    included). Exact: fractions are compared by cross-multiplying integer counts."""
    m = ante.shape[0]
    # best (num, den) confidence among proper subsets; start from the empty antecedent: n_y / n
    best_num = n_y.astype(np.int64).copy()
    best_den = np.full(m, n, dtype=np.int64)
    keys = np.concatenate([ante, cons[:, None]], axis=1)
    for s in range(2, int(size.max(initial=0)) + 1):
        rows = np.flatnonzero(size == s)
        for drop in range(s):
            sub = np.delete(ante[rows], drop, axis=1)
            sub = np.concatenate([sub, np.full((rows.size, 1), pad, np.int64)], axis=1)
            hit = _lookup(keys, np.concatenate([sub, cons[rows, None]], axis=1), pad + 1)
            if np.any(hit < 0):
                raise InputError(
                    "rule counts are not closed under subsets: a rule X' -> y is missing for a "
                    "subset X' of some antecedent X.",
                    hint="give the counts of every subset (they meet min support whenever X does)",
                )
            # the subset's own confidence and the best of its own subsets (sizes done in order)
            for num, den in ((n_xy[hit], n_x[hit]), (best_num[hit], best_den[hit])):
                better = num * best_den[rows] > best_num[rows] * den
                best_num[rows] = np.where(better, num, best_num[rows])
                best_den[rows] = np.where(better, den, best_den[rows])
    return np.asarray(n_xy * best_den > best_num * n_x)


# --------------------------------------------------------------------------------------------
# Rule tables
# --------------------------------------------------------------------------------------------


def _list_column(ids: np.ndarray, labels: np.ndarray) -> pl.Series:
    """list[str] column from id rows padded with ``labels.size`` (the padding is dropped)."""
    m, k = ids.shape
    lookup = pl.Series([*labels.tolist(), None], dtype=pl.String)
    flat = lookup.gather(pl.Series(ids.ravel(), dtype=pl.Int64))
    if m == 0:
        return pl.Series([], dtype=pl.List(pl.String))
    return flat.reshape((m, k)).arr.to_list().list.drop_nulls()


def _empty_rules() -> pl.DataFrame:
    return pl.DataFrame(schema=RULE_COLUMNS)


def support_count(n: int, min_support: float) -> int:
    """The baskets (of ``n``) a share ``min_support`` of them means, rounded up, at least 1."""
    return _resolve_min_count(n, None, min_support)


def _resolve_min_count(n: int, min_count: int | None, min_support: float | None) -> int:
    if (min_count is None) == (min_support is None):
        raise InputError(
            "give exactly one of min_count and min_support.",
            hint="e.g. min_support=0.001 (0.1% of baskets) or min_count=50",
        )
    if min_count is not None:
        if int(min_count) < 1:
            raise InputError(f"min_count must be at least 1, got {min_count}.")
        return int(min_count)
    assert min_support is not None  # exactly one of the two is given (checked above)
    if not 0.0 < float(min_support) <= 1.0:
        raise InputError(f"min_support must be in (0, 1], got {min_support}.")
    # exact decimal arithmetic: min_support=0.1 with N=30 means 3 baskets, not 4
    return max(1, math.ceil(Fraction(repr(float(min_support))) * n))


def _rank_rules(df: pl.DataFrame, rank_by: str) -> pl.DataFrame:
    check_choice("rank_by", rank_by, MEASURES)
    ascending = rank_by in ("p_value", "p_adjusted")
    key = pl.col(rank_by)
    if df.schema[rank_by] == pl.Float64:
        key = key.fill_nan(float("inf") if ascending else float("-inf"))
    return df.sort(
        [key, pl.col("n_both"), pl.col("rule_id")],
        descending=[not ascending, True, False],
        nulls_last=True,
    )


def _assemble(
    ante: np.ndarray,
    size: np.ndarray,
    cons: np.ndarray,
    n: int,
    n_x: np.ndarray,
    n_y: np.ndarray,
    n_xy: np.ndarray,
    labels: np.ndarray,
    *,
    min_confidence: float,
    min_lift: float,
    keep_unproductive: bool,
    correction: str,
    alpha: float,
    rank_by: str,
    top: int | None = None,
) -> pl.DataFrame:
    """Rule table from counts of every candidate rule (the correction's family)."""
    check_choice("correction", correction, CORRECTIONS)
    check_choice("rank_by", rank_by, MEASURES)
    m = ante.shape[0]
    if m == 0:
        return _empty_rules()
    pad = labels.size
    meas = rule_measures(n, n_x, n_y, n_xy)
    p_adj = adjust_p_values(meas["p_value"], correction)
    productive = _productive(ante, size, cons, n, n_x, n_y, n_xy, pad)
    keep = (meas["confidence"] >= min_confidence) & (meas["lift"] >= min_lift)
    if not keep_unproductive:
        keep &= productive
    rows = np.flatnonzero(keep)
    if rows.size == 0:
        return _empty_rules()
    ante_col = _list_column(ante[rows], labels)
    cons_labels = labels[cons[rows]]
    ids = [rule_id(a, c) for a, c in zip(ante_col.to_list(), cons_labels, strict=True)]
    df = pl.DataFrame(
        {
            "rule_id": pl.Series(ids, dtype=pl.String),
            "antecedent": ante_col,
            "consequent": pl.Series(cons_labels.tolist(), dtype=pl.String),
            "n_baskets": np.full(rows.size, n, dtype=np.int64),
            "n_antecedent": n_x[rows],
            "n_consequent": n_y[rows],
            "n_both": n_xy[rows],
            **{k: v[rows] for k, v in meas.items() if k != "p_value"},
            "p_value": meas["p_value"][rows],
            "p_adjusted": p_adj[rows],
            "correction": pl.Series([correction] * rows.size, dtype=pl.String),
            "n_tested": np.full(rows.size, m, dtype=np.int64),
            "significant": p_adj[rows] < alpha,
            "productive": productive[rows],
        },
        schema=RULE_COLUMNS,
    )
    df = _rank_rules(df, rank_by)
    return df if top is None else df.head(top)


def _check_common(min_confidence: float, min_lift: float, alpha: float, correction: str) -> None:
    if not 0.0 <= float(min_confidence) <= 1.0:
        raise InputError(f"min_confidence must be in [0, 1], got {min_confidence}.")
    if float(min_lift) < 0.0:
        raise InputError(f"min_lift must be >= 0, got {min_lift}.")
    if not 0.0 < float(alpha) < 1.0:
        raise InputError(f"alpha must be in (0, 1), got {alpha}.")
    check_choice("correction", correction, CORRECTIONS)


# --------------------------------------------------------------------------------------------
# Public mining functions
# --------------------------------------------------------------------------------------------


def frequent_itemsets(
    baskets: Baskets,
    min_count: int | None = None,
    max_size: int | None = None,
    *,
    min_support: float | None = None,
) -> pl.DataFrame:
    """Every itemset held by at least ``min_count`` baskets (inclusive), up to ``max_size`` items.

    Columns: items (list[str], sorted as the item labels), size, count, support. Rows sorted by
    size, then count descending, then items.
    """
    n = baskets.n_baskets
    min_count = _resolve_min_count(n, min_count, min_support)
    max_size = _NO_LIMIT if max_size is None else int(max_size)
    if max_size < 1:
        raise InputError(f"max_size must be at least 1, got {max_size}.")
    pad = baskets.n_items
    ids, sizes, counts = _mine_all(baskets, min_count, max_size).matrix(pad)
    if ids.shape[0] == 0:
        return pl.DataFrame(schema=ITEMSET_COLUMNS)
    # sort rows: size, count desc, then item ids
    order = np.lexsort(tuple(ids[:, j] for j in range(ids.shape[1] - 1, -1, -1)) + (-counts, sizes))
    ids, sizes, counts = ids[order], sizes[order], counts[order]
    return pl.DataFrame(
        {
            "items": _list_column(ids, baskets.labels),
            "size": sizes,
            "count": counts,
            "support": counts / n,
        },
        schema=ITEMSET_COLUMNS,
    )


SEARCH_BUDGET = 4_000_000
"""The most itemset nodes one search toward a target may count (each is an AND and a popcount
over the target's baskets). A search estimated to need more is narrowed first, and says how."""
KEEP_TOP = 1_000
"""When the floor is raised to stay in budget, the rules kept exact: the best this many by
leverage (every rule that can reach them is still searched)."""


@dataclass
class SearchPlan:
    """What a bounded search did: its floor, its depth, its items, and why it narrowed."""

    min_count: int
    max_antecedent: int
    items: int
    estimated_nodes: int
    notes: list[str] = field(default_factory=list)


def estimate_nodes(cond_counts: np.ndarray, n_y: int, min_count: int, max_antecedent: int) -> int:
    """Itemset nodes (one AND and popcount each) a search below the target would count.

    Items are searched in ascending order of their count inside the target's baskets, each
    extended by the items after it: every pair of frequent items is counted; a pair that stays
    at the floor (guessed as if the items were independent there: c_i * c_j / n_y >= floor) is
    extended by every item after its second one."""
    c = np.sort(cond_counts[cond_counts >= min_count].astype(np.float64))
    k = int(c.size)
    if max_antecedent < 2 or k < 2:
        return k
    nodes = k + k * (k - 1) // 2
    if max_antecedent < 3:
        return nodes
    first = np.searchsorted(c, float(min_count) * max(n_y, 1) / np.maximum(c, 1e-12), "left")
    start = np.maximum(first, np.arange(k) + 1)
    m = np.maximum(k - start, 0).astype(np.float64)
    # pairs (i, j >= start) survive; pair (i, j) has k - 1 - j successors: sum = m (m - 1) / 2
    return int(nodes + float((m * (m - 1) / 2).sum()))


RULE_BUDGET = 100_000
"""The most candidate rules one search may assemble (each gets every measure and an exact test):
more would not be read, and would cost memory and time in the table."""


def estimate_rules(cond_counts: np.ndarray, n_y: int, min_count: int, max_antecedent: int) -> int:
    """Candidate rules a search would keep (itemsets at the floor inside the target's baskets),
    guessed as if items were independent there; above ``_EXACT_ITEMS`` frequent items the
    depth-3 part is bounded by the nodes counted instead."""
    c = np.sort(cond_counts[cond_counts >= min_count].astype(np.float64))
    k = int(c.size)
    if max_antecedent < 2 or k < 2:
        return k
    floor = float(min_count)
    ny = float(max(n_y, 1))
    first = np.searchsorted(c, floor * ny / np.maximum(c, 1e-12), "left")
    start = np.maximum(first, np.arange(k) + 1)
    pairs = int(np.maximum(k - start, 0).sum())
    if max_antecedent < 3:
        return k + pairs
    if k > _EXACT_ITEMS:
        return estimate_nodes(cond_counts, n_y, min_count, max_antecedent)
    triples = 0
    for i in range(k - 2):
        js = np.arange(int(start[i]), k)
        if js.size == 0:
            continue
        need = floor * ny * ny / (c[i] * c[js])
        ls = np.maximum(np.searchsorted(c, need, "left"), js + 1)
        triples += int(np.maximum(k - ls, 0).sum())
    return k + pairs + triples


_EXACT_ITEMS = 3_000


def plan_search(
    n: int,
    item_counts: np.ndarray,
    y: int,
    cond_counts: np.ndarray,
    others: np.ndarray,
    min_count: int,
    max_antecedent: int,
    *,
    rank_by: str,
    budget: int = SEARCH_BUDGET,
    keep_top: int = KEEP_TOP,
    rule_budget: int = RULE_BUDGET,
) -> SearchPlan:
    """A floor and a depth that keep the search within ``budget`` nodes.

    With leverage ranking the floor is raised soundly first (Webb 2000, "Efficient search for
    association rules", KDD): leverage(X -> y) <= P(X, y) * (1 - P(y)), and adding items to X can
    only lower P(X, y); so once ``keep_top`` one-item rules reach a leverage tau, no rule with
    fewer than tau * n / (1 - P(y)) co-purchases can be among the best ``keep_top``, and the search
    skips them. If that is not enough (or another measure ranks), it narrows heuristically: a
    shallower antecedent, then a higher floor, and says so."""
    n_y = int(item_counts[y])
    p_y = n_y / max(n, 1)

    def over(floor: int, depth: int) -> bool:
        nodes = estimate_nodes(cond_counts, n_y, floor, depth)
        plan.estimated_nodes = nodes
        return nodes > budget or estimate_rules(cond_counts, n_y, floor, depth) > rule_budget

    plan = SearchPlan(
        min_count,
        max_antecedent,
        int((cond_counts >= min_count).sum()),
        estimate_nodes(cond_counts, n_y, min_count, max_antecedent),
    )
    first_rules = estimate_rules(cond_counts, n_y, min_count, max_antecedent)
    if not over(min_count, max_antecedent):
        return plan
    first = plan.estimated_nodes
    if rank_by == "leverage" and p_y < 1:
        eligible = cond_counts >= min_count
        n_xy = cond_counts[eligible].astype(np.float64)
        n_x = item_counts[others[eligible]].astype(np.float64)
        lev = n_xy / n - (n_x / n) * p_y
        if lev.size >= keep_top:
            tau = float(np.partition(lev, lev.size - keep_top)[lev.size - keep_top])
            if tau > 0:
                floor = max(min_count, int(np.ceil(tau * n / (1 - p_y) - 1e-9)))
                if floor > min_count:
                    plan.min_count = floor
                    plan.items = int((cond_counts >= floor).sum())
                    plan.notes.append(
                        f"searched rules with at least {floor:,} co-purchases (min support "
                        f"floor {min_count:,}): no rule below that can be among the "
                        f"{keep_top:,} best by leverage"
                    )
    while plan.max_antecedent > 2 and over(plan.min_count, plan.max_antecedent):
        plan.max_antecedent -= 1
        plan.notes.append(f"antecedents of at most {plan.max_antecedent} items")
    raised = plan.min_count
    while over(raised, plan.max_antecedent):
        raised = max(raised + 1, int(raised * 1.25))
    if raised > plan.min_count:
        plan.min_count = raised
        plan.notes.append(f"a floor of {raised:,} co-purchases per rule")
    plan.items = int((cond_counts >= plan.min_count).sum())
    plan.notes.insert(
        0,
        f"narrowed to stay within {budget:,} counted itemsets and "
        f"{rule_budget:,} rules (about {first:,} and {first_rules:,} estimated "
        "at the requested settings)",
    )
    return plan


def target_rules(
    baskets: Baskets,
    target: str,
    *,
    min_count: int | None = None,
    min_support: float | None = None,
    min_confidence: float = 0.0,
    min_lift: float = 0.0,
    max_antecedent: int = 3,
    keep_unproductive: bool = False,
    correction: str = "holm",
    alpha: float = 0.05,
    rank_by: str = "lift",
    budget: int | None = SEARCH_BUDGET,
    keep_top: int = KEEP_TOP,
    rule_budget: int = RULE_BUDGET,
    notes: list[str] | None = None,
) -> pl.DataFrame:
    """Rules X -> ``target`` with 1..max_antecedent antecedent items and n(X+target) >= min count.

    The p-value correction runs over every such rule examined (before the confidence, lift and
    productivity filters); ``n_tested`` says how many. Unproductive rules are dropped unless
    ``keep_unproductive``. Columns: ``RULE_COLUMNS``; sorted by ``rank_by`` descending.

    The search is bounded: when it is estimated to count more than ``budget`` itemsets it is
    narrowed (:func:`plan_search`) and one line saying how is appended to ``notes``.
    ``budget=None`` searches everything (tests comparing with exhaustive references).
    """
    n = baskets.n_baskets
    y = baskets.item_index(target)
    n_y = int(baskets.item_counts[y])
    holding = baskets.baskets_holding(y)

    def count_x(found: _Found, n_xy: np.ndarray) -> np.ndarray:
        # on all baskets, or as n(X+y) + n(X without y) when fewer baskets lack y than hold it
        if 2 * n_y <= n:
            return _count_groups(baskets, found, None)
        lacking_mask = np.ones(n, dtype=bool)
        lacking_mask[holding] = False
        return np.asarray(n_xy + _count_groups(baskets, found, np.flatnonzero(lacking_mask)))

    return _rules_toward(
        baskets,
        holding,
        y,
        n,
        baskets.item_counts,
        count_x,
        min_count=min_count,
        min_support=min_support,
        min_confidence=min_confidence,
        min_lift=min_lift,
        max_antecedent=max_antecedent,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=rank_by,
        budget=budget,
        keep_top=keep_top,
        rule_budget=rule_budget,
        notes=notes,
    )


ItemsetCounter = Callable[[list[list[str]]], Any]
"""n(X) over all baskets for each itemset X (a list of item labels), in the order given."""


def conditional_rules(
    held: Baskets,
    target: str,
    n_baskets: int,
    item_counts: np.ndarray,
    count_itemsets: ItemsetCounter,
    *,
    min_count: int | None = None,
    min_support: float | None = None,
    min_confidence: float = 0.0,
    min_lift: float = 0.0,
    max_antecedent: int = 3,
    keep_unproductive: bool = False,
    correction: str = "holm",
    alpha: float = 0.05,
    rank_by: str = "lift",
    budget: int | None = SEARCH_BUDGET,
    keep_top: int = KEEP_TOP,
    rule_budget: int = RULE_BUDGET,
    notes: list[str] | None = None,
) -> pl.DataFrame:
    """The rules of :func:`target_rules` from only the baskets that hold the target.

    ``held`` holds those baskets (every count found in them is n(X+target)); ``n_baskets`` and
    ``item_counts`` (n(i) by ``held``'s item index) describe all baskets (they steer the search
    and its budget), and ``count_itemsets`` counts n(X) over all baskets for every antecedent the
    search finds, for example in the warehouse engine where the order lines are. Same rules,
    same order."""
    y = held.item_index(target)
    counts = np.asarray(item_counts, dtype=np.int64)
    if counts.shape != (held.n_items,) or int(counts[y]) != held.n_baskets:
        raise InputError(
            f"Expected one count per item with the target's equal to the {held.n_baskets:,} "
            f"baskets given, found {counts.size:,} counts and {int(counts[y]):,} for the target.",
            hint="pass n(i) over all baskets for every item label of the held baskets",
        )

    def count_x(found: _Found, n_xy: np.ndarray) -> np.ndarray:
        ante, size, _ = found.matrix(held.n_items)
        labels = held.labels
        sets = [[str(labels[i]) for i in ante[r, : size[r]]] for r in range(size.size)]
        return np.asarray(count_itemsets(sets), dtype=np.int64).reshape(size.size)

    return _rules_toward(
        held,
        None,
        y,
        int(n_baskets),
        counts,
        count_x,
        min_count=min_count,
        min_support=min_support,
        min_confidence=min_confidence,
        min_lift=min_lift,
        max_antecedent=max_antecedent,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=rank_by,
        budget=budget,
        keep_top=keep_top,
        rule_budget=rule_budget,
        notes=notes,
    )


def _rules_toward(
    baskets: Baskets,
    holding: np.ndarray | None,
    y: int,
    n: int,
    item_counts: np.ndarray,
    count_x: Callable[[_Found, np.ndarray], np.ndarray],
    *,
    min_count: int | None,
    min_support: float | None,
    min_confidence: float,
    min_lift: float,
    max_antecedent: int,
    keep_unproductive: bool,
    correction: str,
    alpha: float,
    rank_by: str,
    budget: int | None,
    keep_top: int,
    rule_budget: int,
    notes: list[str] | None,
) -> pl.DataFrame:
    """The search below y inside ``baskets`` (``holding``: the rows that hold y; None: all of
    them do); ``n`` and ``item_counts`` describe all baskets, ``count_x`` counts n(X)."""
    _check_common(min_confidence, min_lift, alpha, correction)
    min_count = _resolve_min_count(n, min_count, min_support)
    if int(max_antecedent) < 1:
        raise InputError(f"max_antecedent must be at least 1, got {max_antecedent}.")
    n_y = int(item_counts[y])
    if n_y < min_count:
        return _empty_rules()
    others = np.flatnonzero(np.arange(baskets.n_items) != y)
    others = others[item_counts[others] >= min_count]
    rows = np.arange(baskets.n_baskets, dtype=np.int64) if holding is None else holding
    cond_bits, cond_counts = project(baskets, rows, others)
    depth = int(max_antecedent)
    if budget is not None:
        plan = plan_search(
            n,
            item_counts,
            y,
            cond_counts,
            others,
            min_count,
            depth,
            rank_by=rank_by,
            budget=budget,
            keep_top=keep_top,
            rule_budget=rule_budget,
        )
        if plan.notes and notes is not None:
            notes.append("; ".join(plan.notes) + "; the correction counts the rules examined")
        min_count, depth = plan.min_count, plan.max_antecedent
    keep = np.flatnonzero(cond_counts >= min_count)
    keep = keep[np.argsort(cond_counts[keep], kind="stable")]
    # every X with n(X+y) >= min_count: mined inside the baskets that hold y
    found = _Found()
    _search(
        baskets,
        holding,
        cond_bits[keep],
        others[keep],
        cond_counts[keep],
        min_count,
        depth,
        found,
        pair_leaves=False,
    )
    if budget is not None and found.size() > rule_budget:
        # the estimate assumed independence; real co-purchases cluster: keep the rule_budget
        # itemsets bought together most often, and say so
        counts = np.concatenate([c for _, _, c in found.groups])
        floor = int(np.partition(counts, counts.size - rule_budget)[counts.size - rule_budget])
        floor = max(floor + 1, min_count) if int((counts >= floor).sum()) > rule_budget else floor
        before = counts.size
        found.at_least(floor)
        if notes is not None:
            line = (
                f"kept the {found.size():,} of {before:,} candidate rules with at least "
                f"{floor:,} co-purchases (at most {rule_budget:,} rules)"
            )
            if notes:
                notes[-1] = notes[-1].replace(
                    "; the correction counts", f"; {line}; the correction counts"
                )
            else:
                notes.append(f"narrowed: {line}; the correction counts the rules examined")
    ante, size, n_xy = found.matrix(baskets.n_items)
    n_x = count_x(found, n_xy)
    m = ante.shape[0]
    return _assemble(
        ante,
        size,
        np.full(m, y, dtype=np.int64),
        n,
        n_x,
        np.full(m, n_y, dtype=np.int64),
        n_xy,
        baskets.labels,
        min_confidence=min_confidence,
        min_lift=min_lift,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=rank_by,
    )


def _rules_from_matrix(
    ids: np.ndarray,
    sizes: np.ndarray,
    counts: np.ndarray,
    n: int,
    labels: np.ndarray,
    consequents: np.ndarray | None,
    **options: Any,
) -> pl.DataFrame:
    """Every rule Z minus {y} -> y for y in Z from a subset-closed table of itemset counts."""
    pad = labels.size
    base = pad + 1
    singles = sizes == 1
    item_count = np.zeros(pad, dtype=np.int64)
    item_count[ids[singles, 0]] = counts[singles]
    antes, rsize, cons, n_xy = [], [], [], []
    for s in range(2, int(sizes.max(initial=0)) + 1):
        rows = np.flatnonzero(sizes == s)
        for j in range(s):
            y = ids[rows, j]
            if consequents is not None:
                sel = np.isin(y, consequents)
                rows_j, y = rows[sel], y[sel]
            else:
                rows_j = rows
            a = np.delete(ids[rows_j], j, axis=1)
            antes.append(np.concatenate([a, np.full((rows_j.size, 1), pad, np.int64)], axis=1))
            rsize.append(np.full(rows_j.size, s - 1, dtype=np.int64))
            cons.append(y)
            n_xy.append(counts[rows_j])
    if not antes:
        return _empty_rules()
    ante = np.concatenate(antes)
    width = ids.shape[1]
    ante = ante[:, :width]  # the padding column is at the end; keep the itemset width
    size = np.concatenate(rsize)
    cons_ids = np.concatenate(cons)
    n_both = np.concatenate(n_xy)
    hit = _lookup(ids, ante, base)
    if np.any(hit < 0):
        raise InputError(
            "itemset counts are not closed under subsets (an antecedent's count is missing).",
            hint="give the count of every subset of every itemset",
        )
    return _assemble(
        ante, size, cons_ids, n, counts[hit], item_count[cons_ids], n_both, labels, **options
    )


def rules_from_itemsets(
    itemsets: pl.DataFrame,
    n_baskets: int,
    *,
    consequents: Iterable[str] | None = None,
    min_confidence: float = 0.0,
    min_lift: float = 0.0,
    keep_unproductive: bool = False,
    correction: str = "holm",
    alpha: float = 0.05,
    rank_by: str = "lift",
    top: int | None = None,
) -> pl.DataFrame:
    """Rules with one consequent from itemset counts (columns items: list[str], count).

    The table must be closed under subsets (every subset of a listed itemset listed too), as
    ``frequent_itemsets`` returns and as a warehouse count of all itemsets up to k items gives.
    Every rule Z - {y} -> y is a candidate (the correction's family), optionally only for the
    ``consequents`` given.
    """
    _check_common(min_confidence, min_lift, alpha, correction)
    for col in ("items", "count"):
        if col not in itemsets.columns:
            raise InputError(f"itemsets frame lacks column {col!r}.")
    lists = itemsets["items"].to_list()
    labels = sorted({str(x) for row in lists for x in row})
    code = {x: k for k, x in enumerate(labels)}
    pad = len(labels)
    width = max((len(set(r)) for r in lists), default=1)
    ids = np.full((len(lists), max(width, 1)), pad, dtype=np.int64)
    sizes = np.zeros(len(lists), dtype=np.int64)
    for r, row in enumerate(lists):
        v = sorted({code[str(x)] for x in row})
        ids[r, : len(v)] = v
        sizes[r] = len(v)
    counts = itemsets["count"].cast(pl.Int64).to_numpy()
    nonempty = sizes > 0
    ids, sizes, counts = ids[nonempty], sizes[nonempty], counts[nonempty]
    lab = np.array(labels, dtype=object)
    cons = None
    if consequents is not None:
        cons = np.array([code[c] for c in map(str, consequents) if c in code], dtype=np.int64)
    return _rules_from_matrix(
        ids,
        sizes,
        counts,
        int(n_baskets),
        lab,
        cons,
        min_confidence=min_confidence,
        min_lift=min_lift,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=rank_by,
        top=top,
    )


def top_rules(
    baskets: Baskets,
    measure: str = "lift",
    top: int | None = 20,
    *,
    min_count: int | None = None,
    min_support: float | None = None,
    min_confidence: float = 0.0,
    min_lift: float = 0.0,
    max_size: int = 3,
    keep_unproductive: bool = False,
    correction: str = "holm",
    alpha: float = 0.05,
) -> pl.DataFrame:
    """Exploratory mode: the strongest rules toward any consequent, by ``measure`` descending.

    Mines every frequent itemset of up to ``max_size`` items (so antecedents of up to
    ``max_size - 1`` items) and forms every rule Z - {y} -> y; ``top=None`` returns all.
    """
    _check_common(min_confidence, min_lift, alpha, correction)
    n = baskets.n_baskets
    mc = _resolve_min_count(n, min_count, min_support)
    if int(max_size) < 2:
        raise InputError(f"max_size must be at least 2 for rules, got {max_size}.")
    ids, sizes, counts = _mine_all(baskets, mc, int(max_size)).matrix(baskets.n_items)
    return _rules_from_matrix(
        ids,
        sizes,
        counts,
        n,
        baskets.labels,
        None,
        min_confidence=min_confidence,
        min_lift=min_lift,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=measure,
        top=top,
    )


def rules_from_counts(
    counts: pl.DataFrame,
    n_baskets: int,
    *,
    min_confidence: float = 0.0,
    min_lift: float = 0.0,
    keep_unproductive: bool = False,
    correction: str = "holm",
    alpha: float = 0.05,
    rank_by: str = "lift",
) -> pl.DataFrame:
    """Rule table from counts computed elsewhere (e.g. SQL in the warehouse).

    ``counts`` has one row per candidate rule with columns antecedent (list[str]), consequent
    (str), n_antecedent, n_consequent, n_both; it must hold every candidate of the family (the
    correction runs over all rows) and be closed under antecedent subsets (for productivity).
    """
    _check_common(min_confidence, min_lift, alpha, correction)
    need = ("antecedent", "consequent", "n_antecedent", "n_consequent", "n_both")
    missing = [c for c in need if c not in counts.columns]
    if missing:
        raise InputError(f"counts frame lacks columns {', '.join(missing)}.")
    antes = counts["antecedent"].to_list()
    conss = [str(c) for c in counts["consequent"].to_list()]
    labels = sorted({str(x) for row in antes for x in row} | set(conss))
    code = {x: k for k, x in enumerate(labels)}
    pad = len(labels)
    width = max((len(r) for r in antes), default=1)
    ante = np.full((len(antes), max(width, 1)), pad, dtype=np.int64)
    size = np.zeros(len(antes), dtype=np.int64)
    for r, row in enumerate(antes):
        v = sorted({code[str(x)] for x in row})
        if not v:
            raise InputError("every rule needs a non-empty antecedent.")
        ante[r, : len(v)] = v
        size[r] = len(v)
    cons = np.array([code[c] for c in conss], dtype=np.int64)
    col = {c: counts[c].cast(pl.Int64).to_numpy() for c in need[2:]}
    return _assemble(
        ante,
        size,
        cons,
        int(n_baskets),
        col["n_antecedent"],
        col["n_consequent"],
        col["n_both"],
        np.array(labels, dtype=object),
        min_confidence=min_confidence,
        min_lift=min_lift,
        keep_unproductive=keep_unproductive,
        correction=correction,
        alpha=alpha,
        rank_by=rank_by,
    )
