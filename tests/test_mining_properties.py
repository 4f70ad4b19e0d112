"""Property tests of reachlist.mining on random baskets (hypothesis; invented data).

Counts are compared with a brute-force count over all subsets; each engine path (projection or
AND at the top level, pair-block leaves, chunked bit packing) is forced in turn.
"""

from __future__ import annotations

import itertools
import math
from collections import Counter
from contextlib import contextmanager

import numpy as np
import polars as pl
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from reachlist import baskets, mining
from reachlist.baskets import Baskets
from reachlist.errors import InputError
from reachlist.measures import adjust_p_values, rule_id, rule_measures
from reachlist.mining import frequent_itemsets, rules_from_counts, target_rules, top_rules

ITEMS = [f"i{k}" for k in range(7)]
SETTINGS = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])

baskets_st = st.lists(st.lists(st.sampled_from(ITEMS), max_size=6), min_size=1, max_size=50)
# engine knobs: cost of cutting out a basket line (0: always cut, 1e9: never), pair block
# (words), bit-pack buffer (bytes)
knobs_st = st.tuples(
    st.sampled_from([0.0, 5.0, 1e9]),
    st.sampled_from([1, 64, 1 << 18]),
    st.sampled_from([64, 1 << 26]),
)


@contextmanager
def engine(knobs):
    saved = (mining._LINE_COST, mining._PAIR_BLOCK, baskets._PACK_BUFFER)
    mining._LINE_COST, mining._PAIR_BLOCK, baskets._PACK_BUFFER = knobs
    try:
        yield
    finally:
        mining._LINE_COST, mining._PAIR_BLOCK, baskets._PACK_BUFFER = saved


def brute_counts(transactions, max_size=99) -> Counter:
    c: Counter = Counter()
    for t in transactions:
        t = sorted(set(t))
        for s in range(1, min(max_size, len(t)) + 1):
            c.update(frozenset(x) for x in itertools.combinations(t, s))
    return c


def n_holding(transactions, items) -> int:
    return sum(1 for t in transactions if set(items) <= set(t))


@SETTINGS
@given(baskets_st, st.integers(1, 6), st.integers(1, 5), knobs_st, st.sampled_from([0, 2000]))
def test_itemset_counts_match_brute_force(transactions, min_count, max_size, knobs, empty) -> None:
    # extra empty baskets make the bitmaps wide and sparse (the sparse-row paths)
    n = len(transactions) + empty
    with engine(knobs):
        df = frequent_itemsets(
            Baskets.from_transactions(transactions, n_baskets=n), min_count, max_size
        )
    got = {frozenset(r["items"]): r["count"] for r in df.iter_rows(named=True)}
    want = {k: v for k, v in brute_counts(transactions, max_size).items() if v >= min_count}
    assert got == want
    assert df["support"].to_list() == [c / n for c in df["count"]]
    assert df["size"].to_list() == [len(x) for x in df["items"]]


@SETTINGS
@given(
    baskets_st,
    st.integers(1, 5),
    st.integers(1, 4),
    knobs_st,
    st.sampled_from([0, 2000]),
    st.data(),
)
def test_target_rules_counts_and_bounds(
    transactions, min_count, max_ante, knobs, empty, data
) -> None:
    b = Baskets.from_transactions(transactions, n_baskets=len(transactions) + empty)
    if b.n_items == 0:
        return
    target = data.draw(st.sampled_from(list(b.labels)))
    with engine(knobs):
        df = target_rules(
            b, target, min_count=min_count, max_antecedent=max_ante, keep_unproductive=True
        )
    want = {
        k - {target}
        for k, v in brute_counts(transactions).items()
        if target in k and 1 <= len(k) - 1 <= max_ante and v >= min_count
    }
    assert {frozenset(a) for a in df["antecedent"]} == want
    for r in df.iter_rows(named=True):
        x = r["antecedent"]
        assert target not in x and len(set(x)) == len(x)
        assert r["n_both"] == n_holding(transactions, x + [target])
        assert r["n_antecedent"] == n_holding(transactions, x)
        assert r["n_consequent"] == n_holding(transactions, [target])
        assert r["n_both"] <= min(r["n_antecedent"], r["n_consequent"])
        assert 0 <= r["support"] <= r["coverage"] <= 1
        assert r["support"] <= r["confidence"] <= 1
        assert r["n_tested"] == len(want)
        assert r["p_value"] <= r["p_adjusted"] <= 1
        assert r["rule_id"] == rule_id(reversed(x), target)


@SETTINGS
@given(baskets_st, st.integers(1, 4), st.integers(1, 3), st.sampled_from([0, 50]), st.data())
def test_conditional_rules_equal_target_rules(transactions, min_count, max_ante, empty, data):
    # only the target's baskets in memory, n(i) and n(X) counted elsewhere (here by brute
    # force): the same rule table, row for row
    b = Baskets.from_transactions(transactions, n_baskets=len(transactions) + empty)
    if b.n_items == 0:
        return
    target = data.draw(st.sampled_from(list(b.labels)))
    held_lists = [t for t in transactions if target in t]
    held = Baskets.from_transactions(held_lists)
    counts = [n_holding(transactions, [x]) for x in held.labels]
    asked: list[list[str]] = []

    def count_itemsets(sets: list[list[str]]) -> list[int]:
        asked.extend(sets)
        return [n_holding(transactions, x) for x in sets]

    options = dict(min_count=min_count, max_antecedent=max_ante, keep_unproductive=True)
    want = target_rules(b, target, **options)
    got = mining.conditional_rules(held, target, b.n_baskets, counts, count_itemsets, **options)
    assert got.equals(want)
    assert all(target not in x for x in asked)


@SETTINGS
@given(baskets_st, st.integers(1, 4), knobs_st)
def test_lift_is_symmetric_for_single_items(transactions, min_count, knobs) -> None:
    with engine(knobs):
        df = top_rules(
            Baskets.from_transactions(transactions),
            top=None,
            min_count=min_count,
            max_size=2,
            keep_unproductive=True,
        )
    lift = {(r["antecedent"][0], r["consequent"]): r["lift"] for r in df.iter_rows(named=True)}
    for (a, c), v in lift.items():
        assert v == pytest.approx(lift[(c, a)], rel=1e-12)


@SETTINGS
@given(baskets_st, st.integers(1, 4), st.data())
def test_productive_means_beating_every_subset(transactions, min_count, data) -> None:
    b = Baskets.from_transactions(transactions)
    if b.n_items == 0:
        return
    target = data.draw(st.sampled_from(list(b.labels)))
    every = target_rules(b, target, min_count=min_count, keep_unproductive=True)
    n = len(transactions)

    def conf(x) -> float:  # the empty antecedent's confidence is P(y)
        n_x = n_holding(transactions, x) if x else n
        return n_holding(transactions, [*x, target]) / n_x

    for r in every.iter_rows(named=True):
        x = r["antecedent"]
        subsets = [s for k in range(len(x)) for s in itertools.combinations(x, k)]
        assert r["productive"] == all(r["confidence"] > conf(s) for s in subsets)
    kept = target_rules(b, target, min_count=min_count)
    assert kept.sort("rule_id").equals(every.filter("productive").sort("rule_id"))


@SETTINGS
@given(
    st.lists(
        st.tuples(st.integers(0, 60), st.integers(0, 60), st.integers(0, 60), st.integers(0, 60)),
        min_size=1,
        max_size=20,
    )
)
def test_rule_measures_formulas(tables) -> None:
    a, b_, c, d = (np.array(v) for v in zip(*tables, strict=True))
    n, n_x, n_y, n_xy = a + b_ + c + d, a + b_, a + c, a
    ok = (n > 0) & (n_x > 0)
    m = rule_measures(n[ok], n_x[ok], n_y[ok], n_xy[ok])
    for k, (nn, nx, ny, nxy) in enumerate(zip(n[ok], n_x[ok], n_y[ok], n_xy[ok], strict=True)):
        conf = nxy / nx
        assert m["support"][k] == pytest.approx(nxy / nn)
        assert m["coverage"][k] == pytest.approx(nx / nn)
        assert m["confidence"][k] == pytest.approx(conf)
        if ny:
            assert m["lift"][k] == pytest.approx(conf / (ny / nn))
        assert m["leverage"][k] == pytest.approx(nxy / nn - (nx / nn) * (ny / nn), abs=1e-12)
        conv = m["conviction"][k]
        if nxy == nx and ny < nn:
            assert conv == math.inf
        elif nxy == nx:
            assert math.isnan(conv)
        else:
            assert conv == pytest.approx((1 - ny / nn) / (1 - conf))
        assert 0.0 <= m["p_value"][k] <= 1.0


@SETTINGS
@given(st.lists(st.floats(0, 1), max_size=30), st.sampled_from(["holm", "bonferroni", "none"]))
def test_adjusted_p_values(p, correction) -> None:
    p = np.array(p)
    adj = adjust_p_values(p, correction)
    assert np.all(adj >= p) and np.all(adj <= 1)
    order = np.argsort(p, kind="stable")
    assert np.all(np.diff(adj[order]) >= 0)  # order of the raw p-values is kept


@SETTINGS
@given(baskets_st, st.integers(0, 5), st.lists(st.integers(0, 4), min_size=50, max_size=50))
def test_weighted_baskets_equal_repeated_rows(transactions, extra, weights) -> None:
    weights = weights[: len(transactions)]
    weighted = Baskets.from_transactions(transactions, counts=weights)
    repeated = Baskets.from_transactions(
        [t for t, w in zip(transactions, weights, strict=True) for _ in range(w)],
        n_baskets=sum(weights),
    )
    assert weighted.n_baskets == repeated.n_baskets == sum(weights)
    if weighted.n_baskets == 0 or weighted.n_items == 0:
        return
    a = frequent_itemsets(weighted, 1)
    assert a.equals(frequent_itemsets(repeated, 1))
    # empty baskets on top count in N only
    padded = Baskets.from_transactions(transactions, counts=weights, n_baskets=sum(weights) + extra)
    b = frequent_itemsets(padded, 1)
    assert b["count"].to_list() == a["count"].to_list()
    assert b["support"].to_list() == [c / (sum(weights) + extra) for c in a["count"]]


@SETTINGS
@given(baskets_st)
def test_constructors_agree_and_ignore_repeats(transactions) -> None:
    pairs = [(k, x) for k, t in enumerate(transactions) for x in t]
    if not pairs:
        return
    frame = pl.DataFrame({"basket": [k for k, _ in pairs], "item": [x for _, x in pairs]})
    from_frame = Baskets.from_frame(frame, n_baskets=len(transactions))
    from_tx = Baskets.from_transactions(transactions)
    doubled = Baskets.from_frame(pl.concat([frame, frame]), n_baskets=len(transactions))
    for b in (from_frame, doubled):
        assert b.n_baskets == from_tx.n_baskets
        assert frequent_itemsets(b, 1).equals(frequent_itemsets(from_tx, 1))


def _same_indexes(a: Baskets, b: Baskets) -> None:
    for name in ("indptr", "indices", "item_counts", "_tids", "_tid_ptr", "labels"):
        assert np.array_equal(getattr(a, name), getattr(b, name)), name
    assert a.basket_ids is not None and b.basket_ids is not None
    assert a.basket_ids.tolist() == b.basket_ids.tolist()


@SETTINGS
@given(baskets_st, st.booleans(), st.data())
def test_sorted_lines_give_the_same_baskets(transactions, text_keys, data) -> None:
    # the holdings file's pairs come in customer order, each customer's codes ascending:
    # Baskets.from_sorted must index them exactly as the general constructor does, and refuse
    # (None) any other order instead of building wrong baskets
    keys = [f"c{3 * k:03d}" if text_keys else 3 * k - 40 for k in range(len(transactions))]
    lines = sorted({(keys[k], ITEMS.index(x)) for k, t in enumerate(transactions) for x in t})
    if not lines:
        return
    basket = pl.Series("basket", [b for b, _ in lines])
    codes = np.array([i for _, i in lines], dtype=np.int64)
    fast = Baskets.from_sorted(basket, codes, ITEMS)
    assert fast is not None
    _same_indexes(fast, Baskets.from_arrays(basket, codes, labels=ITEMS))
    shuffled = data.draw(st.permutations(range(len(lines))))
    if shuffled != sorted(shuffled) and [lines[k] for k in shuffled] != lines:
        moved = Baskets.from_sorted(basket.gather(shuffled), codes[list(shuffled)], ITEMS)
        assert moved is None
    repeat = data.draw(st.integers(0, len(lines) - 1))
    doubled = np.insert(codes, repeat, codes[repeat])
    assert (
        Baskets.from_sorted(basket.gather(sorted([*range(len(lines)), repeat])), doubled, ITEMS)
        is None
    )


@SETTINGS
@given(baskets_st, st.data())
def test_a_kept_item_major_index_is_used_only_when_it_agrees(transactions, data) -> None:
    # the holdings file also keeps the pairs item by item, (item, basket) rows with each basket
    # as its place in the customer order: given to from_sorted they must give the indexes the
    # sort gives, and rows read out of order or numbered another way must be refused, not used
    lines = sorted({(3 * k, ITEMS.index(x)) for k, t in enumerate(transactions) for x in t})
    if not lines:
        return
    basket = pl.Series("basket", [b for b, _ in lines])
    codes = np.array([i for _, i in lines], dtype=np.int64)
    general = Baskets.from_arrays(basket, codes, labels=ITEMS)
    place = {b: n for n, b in enumerate(sorted({b for b, _ in lines}))}
    by_item = sorted(lines, key=lambda line: (line[1], line[0]))
    kept_items = np.array([i for _, i in by_item])
    kept = np.array([place[b] for b, _ in by_item])
    line_baskets = np.array([place[b] for b, _ in lines])

    def agrees(rows: tuple[np.ndarray, np.ndarray]) -> bool:
        got = baskets._agreeing_item_major(rows, codes, line_baskets, general._tid_ptr, len(place))
        fast = Baskets.from_sorted(basket, codes, ITEMS, rows)
        assert fast is not None
        _same_indexes(fast, general)  # used or refused, the indexes are the sort's
        return got is not None

    assert agrees((kept_items, kept))
    moved = list(data.draw(st.permutations(range(kept.size))))
    if [by_item[k] for k in moved] != by_item:  # rows read in another order
        assert not agrees((kept_items[moved], kept[moved]))
    assert not agrees((kept_items, kept + 1))  # numbered from 1
    if len(place) > 1 and len(set(kept.tolist())) > 1:  # baskets numbered in reverse order
        reverse = len(place) - 1 - kept
        if int(reverse.sum()) != int(kept.sum()):
            assert not agrees((kept_items, reverse))
    assert not agrees((kept_items[:-1], kept[:-1]))  # a row short
    assert not agrees((kept_items, kept.astype(np.float64)))


def test_sorted_lines_refuse_what_they_cannot_index() -> None:
    basket = pl.Series("basket", [1, 1, 2])
    assert Baskets.from_sorted(basket, np.array([0, 1, 7]), ["a", "b"]) is None  # code too big
    assert Baskets.from_sorted(basket, np.array([0, -1, 1]), ["a", "b"]) is None
    assert Baskets.from_sorted(basket, np.array([0, 1]), ["a", "b"]) is None  # lengths differ
    assert Baskets.from_sorted(pl.Series("basket", [1, None, 2]), np.zeros(3), ["a"]) is None
    assert Baskets.from_sorted(basket, np.array([0, 1, 0]), ["a", "a"]) is None  # labels repeat
    ok = Baskets.from_sorted(basket, np.array([0, 1, 0]), ["a", "b"])
    assert ok is not None and ok.count(["a", "b"]) == 1 and ok.count(["a"]) == 2


def test_min_support_is_exact_decimal() -> None:
    # 30 baskets, min_support 0.1 -> 3 baskets (0.1 * 30 is 3.0000000000000004 in floats)
    b = Baskets.from_transactions([["a"]] * 3 + [["b"]] * 27)
    assert frequent_itemsets(b, min_support=0.1)["items"].to_list() == [["b"], ["a"]]
    with pytest.raises(InputError):
        frequent_itemsets(b, min_count=2, min_support=0.1)


def test_unknown_target_and_bad_options() -> None:
    b = Baskets.from_transactions([["a", "b"], ["a"]])
    with pytest.raises(InputError):
        target_rules(b, "zzz", min_count=1)
    with pytest.raises(InputError):
        target_rules(b, "a", min_count=1, correction="fdr")
    with pytest.raises(InputError):
        target_rules(b, "a", min_count=1, rank_by="nonsense")
    with pytest.raises(InputError):
        Baskets.from_transactions([["a"]], n_baskets=0)


def test_empty_results_keep_the_schema() -> None:
    b = Baskets.from_transactions([["a", "b"], ["a"], ["c"]])
    df = target_rules(b, "c", min_count=1)
    assert df.height == 0 and df.schema == pl.Schema(mining.RULE_COLUMNS)
    assert frequent_itemsets(b, 5).schema == pl.Schema(mining.ITEMSET_COLUMNS)


def test_rules_from_counts_matches_target_rules() -> None:
    # invented baskets; the same rule table from counts computed elsewhere (e.g. SQL)
    tx = [["a", "b", "y"], ["a", "y"], ["b", "c"], ["a", "b", "c", "y"], ["c", "y"], ["a", "b"]]
    b = Baskets.from_transactions(tx)
    ours = target_rules(b, "y", min_count=1, keep_unproductive=True)
    counts = ours.select("antecedent", "consequent", "n_antecedent", "n_consequent", "n_both")
    again = rules_from_counts(counts, b.n_baskets, keep_unproductive=True)
    assert again.equals(ours)
    with pytest.raises(InputError):  # not closed under subsets: productivity is undefined
        rules_from_counts(counts.filter(pl.col("antecedent").list.len() > 1), b.n_baskets)
