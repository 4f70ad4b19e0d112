"""Mining is bounded by design: a dense history (hundreds of items, every customer holding a
third of them) and a 90,000-item catalogue stay within the search budget, asserted on counted
work, not on time; when the budget forces a narrower search the best rules by leverage are still
exactly those of the exhaustive search (the optimistic bound of Webb 2000, "Efficient search for
association rules", KDD). The histories here are generated in the test (random, invented)."""

from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from reachlist.baskets import Baskets, project
from reachlist.mining import estimate_nodes, plan_search, target_rules


def dense(n_customers: int, n_items: int, share: float, seed: int) -> Baskets:
    rng = np.random.default_rng(seed)
    held = rng.random((n_customers, n_items)) < share
    # the target is bought more by holders of item 0 and 1, so real rules exist
    boost = held[:, 0] & held[:, 1]
    target = rng.random(n_customers) < np.where(boost, 0.6, 0.25)
    rows, cols = np.nonzero(np.column_stack([held, target]))
    labels = [f"I{i:03d}" for i in range(n_items)] + ["TARGET"]
    return Baskets.from_arrays(rows, cols, labels=labels, n_baskets=n_customers)


def long_tail(n_customers: int, n_items: int, seed: int) -> Baskets:
    """Baskets of 10-40 lines over items drawn from a Zipf law (a few items everywhere, most
    rare); a third of the customers hold the target."""
    rng = np.random.default_rng(seed)
    rows = np.repeat(np.arange(n_customers), rng.integers(10, 40, n_customers))
    cols = np.minimum(rng.zipf(1.2, rows.size) - 1, n_items - 1)
    target = np.flatnonzero(rng.random(n_customers) < 0.3)
    rows = np.concatenate([rows, target])
    cols = np.concatenate([cols, np.full(target.size, n_items)])
    labels = [f"I{i:03d}" for i in range(n_items)] + ["TARGET"]
    return Baskets.from_arrays(rows, cols, labels=labels, n_baskets=n_customers)


def test_a_dense_history_stays_within_the_budget() -> None:
    baskets = dense(2_000, 300, 1 / 3, seed=1)
    notes: list[str] = []
    budget = 200_000
    rules = target_rules(
        baskets,
        "TARGET",
        min_count=5,
        max_antecedent=3,
        rank_by="leverage",
        budget=budget,
        keep_top=100,
        notes=notes,
    )
    # the exhaustive search would count every pair and triple of 300 items: millions of nodes
    assert estimate_nodes(_cond_counts(baskets), _n_y(baskets), 5, 3) > 10 * budget
    assert rules.height > 0 and int(rules["n_tested"][0]) <= budget
    assert len(notes) == 1 and "narrowed to stay within 200,000 counted itemsets" in notes[0]
    assert "best by leverage" in notes[0]


def test_narrowing_keeps_the_exact_best_rules_by_leverage() -> None:
    """A budget small enough to force the raised floor: the best rules by leverage are those of
    the exhaustive search (which counts everything), rule for rule."""
    baskets = long_tail(2_000, 400, seed=4)
    full = target_rules(
        baskets, "TARGET", min_count=3, max_antecedent=3, rank_by="leverage", budget=None
    )
    notes: list[str] = []
    keep = 5
    bounded = target_rules(
        baskets,
        "TARGET",
        min_count=3,
        max_antecedent=3,
        rank_by="leverage",
        budget=10_000,
        keep_top=keep,
        notes=notes,
    )
    # only the sound raise of the floor was needed (no shallower search, no heuristic floor)
    assert notes and "best by leverage" in notes[0] and "at most" not in notes[0]
    assert int(bounded["n_tested"][0]) < int(full["n_tested"][0])

    def best(frame: pl.DataFrame) -> list[tuple]:
        return sorted(
            frame.sort(["leverage", "rule_id"], descending=[True, False])
            .head(keep)
            .select("rule_id", "n_antecedent", "n_both")
            .rows()
        )

    # unproductive rules are filtered out of both; compare the measures of the kept best ones
    assert best(bounded) == best(full)


def test_a_catalogue_of_90k_items_counts_only_what_can_pass() -> None:
    rng = np.random.default_rng(3)
    n_customers, n_items = 3_000, 90_000
    per = rng.integers(5, 60, n_customers)
    rows = np.repeat(np.arange(n_customers), per)
    # a long tail: most items are bought by one or two customers
    cols = np.minimum(rng.zipf(1.3, rows.size) - 1, n_items - 1)
    target_rows = rng.choice(n_customers, 400, replace=False)
    rows = np.concatenate([rows, target_rows])
    cols = np.concatenate([cols, np.full(target_rows.size, n_items)])
    labels = [f"S{i:05d}" for i in range(n_items)] + ["TARGET"]
    baskets = Baskets.from_arrays(rows, cols, labels=labels, n_baskets=n_customers)
    notes: list[str] = []
    rules = target_rules(
        baskets, "TARGET", min_count=5, max_antecedent=3, rank_by="leverage", notes=notes
    )
    plan = plan_search(
        baskets.n_baskets,
        baskets.item_counts,
        baskets.item_index("TARGET"),
        _cond_counts(baskets),
        _others(baskets),
        5,
        3,
        rank_by="leverage",
    )
    assert plan.estimated_nodes <= 4_000_000
    assert int(rules["n_tested"][0]) <= 4_000_000 if rules.height else True
    assert baskets.n_items == n_items + 1


@pytest.mark.parametrize("max_antecedent", [1, 2, 3])
def test_the_work_estimate_counts_nodes_as_the_search_visits_them(max_antecedent: int) -> None:
    """Counted by brute force over the ordered items: every pair of frequent items, and for each
    pair that survives (under independence) every item after it."""
    counts = np.array([1, 2, 3, 5, 8, 13, 21, 34], dtype=np.int64)
    n_y, floor = 10, 2
    c = sorted(int(x) for x in counts if x >= floor)
    k = len(c)
    pairs = [(i, j) for i in range(k) for j in range(i + 1, k)]
    want = k
    if max_antecedent >= 2:
        want += len(pairs)
    if max_antecedent >= 3:
        want += sum(k - 1 - j for i, j in pairs if c[i] * c[j] >= floor * n_y)
    assert estimate_nodes(counts, n_y, floor, max_antecedent) == want


def _n_y(b: Baskets) -> int:
    return int(b.item_counts[b.item_index("TARGET")])


def _others(b: Baskets) -> np.ndarray:
    y = b.item_index("TARGET")
    return np.flatnonzero(np.arange(b.n_items) != y)


def _cond_counts(b: Baskets) -> np.ndarray:
    """Each other item's count inside the target's baskets (as the search sees them)."""

    _, counts = project(b, b.baskets_holding(b.item_index("TARGET")), _others(b))
    return counts
