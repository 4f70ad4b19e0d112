"""Breadth deciles and the breadth-matched expectation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import polars as pl
import pytest
from hypothesis import given
from hypothesis import strategies as st

from reachlist.errors import InputError
from reachlist.stats import (
    assign_decile,
    breadth_deciles,
    breadth_deciles_counted,
    breadth_matched_expectation,
    decile_rates,
)


def test_distinct_values_match_pandas_qcut() -> None:
    rng = np.random.default_rng(3)
    breadth = rng.permutation(1000).astype(float)
    ours = assign_decile(breadth, breadth_deciles(breadth))
    # Source: pandas.qcut(q=10, labels=False); with distinct values and a size divisible by ten
    # every convention for decile cut points gives the same groups of 100.
    ref = pd.qcut(breadth, 10, labels=False)
    np.testing.assert_array_equal(ours, ref)


def test_ties_and_few_values() -> None:
    breadth = [1, 1, 1, 1, 1, 1, 2, 2, 3, 9]
    edges = breadth_deciles(breadth)
    assert edges.tolist() == [1.0, 2.0, 3.0]
    assert assign_decile(breadth, edges).tolist() == [0, 0, 0, 0, 0, 0, 1, 1, 2, 3]
    assert breadth_deciles([4, 4, 4]).tolist() == []
    assert assign_decile([0, 4, 99], []).tolist() == [0, 0, 0]


def test_out_of_range_breadth_uses_the_end_deciles() -> None:
    edges = breadth_deciles(np.arange(1, 101))
    assert assign_decile([-5, 0, 1, 100, 500], edges).tolist() == [0, 0, 0, 9, 9]


@given(st.lists(st.integers(min_value=0, max_value=40), min_size=1, max_size=300))
def test_decile_properties(values: list[int]) -> None:
    b = np.array(values, dtype=float)
    edges = breadth_deciles(b)
    groups = assign_decile(b, edges)
    n_groups = len(edges) + 1
    assert n_groups <= min(10, len(set(values)))
    assert np.all(np.bincount(groups, minlength=n_groups) > 0)  # no empty decile
    order = np.argsort(b, kind="stable")
    assert np.all(np.diff(groups[order]) >= 0)  # monotone in breadth, so ties share a decile
    if len(set(values)) == len(values) and len(values) >= 10:
        sizes = np.bincount(groups)
        assert sizes.min() >= len(values) // 10 and sizes.max() <= -(-len(values) // 10)


def test_expectation_matches_a_per_customer_computation() -> None:
    rng = np.random.default_rng(11)
    calib = pl.DataFrame({"breadth": rng.poisson(4, 20_000)}).with_columns(
        bought=pl.Series(rng.random(20_000)) < 0.01 * pl.col("breadth")
    )
    audience_breadth = rng.poisson(7, 3_000)
    edges = breadth_deciles(calib["breadth"].to_numpy())
    calib = calib.with_columns(decile=pl.Series(assign_decile(calib["breadth"].to_numpy(), edges)))
    k = len(edges) + 1
    per = calib.group_by("decile").agg(n=pl.len(), buyers=pl.col("bought").sum()).sort("decile")
    audience_decile = assign_decile(audience_breadth, edges)
    got = breadth_matched_expectation(
        per["n"].to_numpy(),
        per["buyers"].to_numpy(),
        np.bincount(audience_decile, minlength=k),
        prior_weight=0,
    )
    # Independent path: give every audience customer the raw forward rate of their decile.
    rate_of = dict(zip(per["decile"].to_list(), (per["buyers"] / per["n"]).to_list(), strict=True))
    expected = sum(rate_of[d] for d in audience_decile.tolist())
    assert got.expected_buyers == pytest.approx(expected, rel=1e-12)
    assert got.rate == pytest.approx(expected / 3_000, rel=1e-12)
    # A broader audience than the calibration base expects more than the pooled rate.
    assert got.rate > calib["bought"].mean()


def test_empty_and_thin_deciles_lean_on_the_pooled_rate() -> None:
    n, buyers = [1000, 0, 2], [10, 0, 2]
    pooled = 12 / 1002
    raw = decile_rates(n, buyers, prior_weight=0)
    assert raw.tolist() == pytest.approx([0.01, pooled, 1.0])
    smooth = decile_rates(n, buyers, prior_weight=10)
    assert smooth[1] == pytest.approx(pooled)
    assert smooth[2] == pytest.approx((2 + 10 * pooled) / 12)
    assert smooth[0] == pytest.approx((10 + 10 * pooled) / 1010)
    exp = breadth_matched_expectation(n, buyers, [0, 50, 0])
    assert exp.rate == pytest.approx(pooled)


def test_zero_buyers_gives_zero() -> None:
    assert breadth_matched_expectation([100, 100], [0, 0], [5, 5]) == (0.0, 0.0)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        (([10, 10], [11, 0], [1, 1]), "at most calib_n buyers"),
        (([0, 0], [0, 0], [1, 1]), "at least one"),
        (([10, 10], [1, 1], [1, 1, 1]), "one count per calibration decile"),
        (([10, 10], [1, 1], [0, 0]), "at least one audience customer"),
        (([10, 10], [1], [1, 1]), "different lengths"),
        (([10, -1], [1, 0], [1, 1]), "zero or more"),
    ],
)
def test_bad_input(args: tuple[list[int], list[int], list[int]], match: str) -> None:
    with pytest.raises(InputError, match=match):
        breadth_matched_expectation(*args)


def test_bad_edges_and_breadth() -> None:
    with pytest.raises(InputError, match="strictly increasing"):
        assign_decile([1, 2], [3.0, 1.0])
    with pytest.raises(InputError, match="at least one value"):
        breadth_deciles([])
    with pytest.raises(InputError, match="finite"):
        breadth_deciles([1.0, float("nan")])


@given(
    st.lists(st.tuples(st.integers(0, 60), st.integers(0, 4000)), min_size=1, max_size=15),
    st.integers(1, 12),
)
def test_deciles_from_a_histogram_equal_numpy_on_the_expanded_data(pairs, groups) -> None:
    # reference: numpy's inverted-CDF quantile on the data the histogram stands for (what an
    # engine returns instead of one breadth per customer)
    values = np.array([v for v, _ in pairs])
    counts = np.array([c for _, c in pairs])
    if counts.sum() == 0:
        with pytest.raises(InputError, match="counts"):
            breadth_deciles_counted(values, counts, groups)
        return
    expanded = np.repeat(values, counts)
    want = np.unique(np.quantile(expanded, np.arange(1, groups) / groups, method="inverted_cdf"))
    want = want[want < expanded.max()]
    got = breadth_deciles_counted(values, counts, groups)
    assert got.tolist() == want.astype(float).tolist()
    assert got.tolist() == breadth_deciles(expanded, groups).tolist()
