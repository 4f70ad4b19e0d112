"""Gains table and chart points."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from reachlist.errors import InputError
from reachlist.stats import gains_chart_points, gains_table, score_groups


def test_hand_example() -> None:
    scores = [0.9, 0.8, 0.7, 0.6, 0.5, 0.4, 0.3, 0.2, 0.1, 0.0]
    bought = [1, 1, 0, 1, 0, 0, 0, 1, 0, 0]
    t = gains_table(scores, bought, n_groups=5)
    assert t["customers"].to_list() == [2, 2, 2, 2, 2]
    assert t["buyers"].to_list() == [2, 1, 0, 1, 0]
    assert t["rate"].to_list() == [1.0, 0.5, 0.0, 0.5, 0.0]
    assert t["lift"].to_list() == [2.5, 1.25, 0.0, 1.25, 0.0]  # overall rate 0.4
    assert t["cum_share_buyers"].to_list() == [0.5, 0.75, 0.75, 1.0, 1.0]
    assert t["cum_lift"].to_list() == pytest.approx([2.5, 1.875, 1.25, 1.25, 1.0])
    assert t["score_max"].to_list() == [0.9, 0.7, 0.5, 0.3, 0.1]
    points = gains_chart_points(t)
    assert points.row(0) == (0.0, 0.0, 0.0)
    assert points.row(-1) == (1.0, 1.0, 1.0)


def test_distinct_scores_match_pandas_qcut_on_rank() -> None:
    rng = np.random.default_rng(9)
    scores = rng.random(1000)
    ours = score_groups(scores)
    # Source: pandas.qcut(q=10) on the descending rank; with distinct scores and a size
    # divisible by ten both give ten groups of 100.
    rank = pd.Series(-scores).rank(method="first").to_numpy()
    ref = pd.qcut(rank, 10, labels=False) + 1
    np.testing.assert_array_equal(ours, ref)


def test_ties_share_a_group_and_order_does_not_matter() -> None:
    scores = np.array([5, 5, 5, 5, 5, 4, 3, 2, 1, 1], dtype=float)
    bought = np.array([1, 0, 0, 0, 1, 0, 1, 0, 0, 1], dtype=float)
    t = gains_table(scores, bought, n_groups=10)
    assert t["customers"].to_list() == [5, 1, 1, 1, 2]
    perm = np.random.default_rng(1).permutation(10)
    assert gains_table(scores[perm], bought[perm], n_groups=10).equals(t)


def test_expected_probabilities() -> None:
    t = gains_table([3, 2, 1, 0], [0.5, 0.3, 0.1, 0.1], n_groups=2)
    assert t["buyers"].to_list() == pytest.approx([0.8, 0.2])
    assert t["cum_share_buyers"].to_list() == pytest.approx([0.8, 1.0])


@given(
    st.lists(
        st.tuples(st.integers(min_value=0, max_value=20), st.integers(min_value=0, max_value=1)),
        min_size=1,
        max_size=200,
    ).filter(lambda rows: any(b for _, b in rows))
)
def test_gains_properties(rows: list[tuple[int, int]]) -> None:
    scores, bought = zip(*rows, strict=True)
    t = gains_table(list(scores), list(bought))
    assert t["customers"].sum() == len(rows)
    assert 1 <= t.height <= 10
    share = t["cum_share_buyers"].to_numpy()
    assert np.all(np.diff(share) >= -1e-12) and share[-1] == pytest.approx(1.0)
    # Lift averages to 1 over customers; groups run from high scores to low.
    assert float((t["lift"] * t["customers"]).sum()) / len(rows) == pytest.approx(1.0)
    assert np.all(t["score_min"].to_numpy()[:-1] > t["score_max"].to_numpy()[1:])


@pytest.mark.parametrize(
    ("scores", "outcomes", "match"),
    [
        ([1, 2, 3], [0, 0, 0], "at least one buyer"),
        ([1, 2, 3], [0, 1], "different lengths"),
        ([1, float("nan")], [0, 1], "finite"),
        ([1, 2], [0, -1], "zero or more"),
        ([], [], "at least one value"),
    ],
)
def test_bad_input(scores: list[float], outcomes: list[float], match: str) -> None:
    with pytest.raises(InputError, match=match):
        gains_table(scores, outcomes)


def test_chart_points_need_a_gains_table() -> None:
    import polars as pl

    with pytest.raises(InputError, match="gains table"):
        gains_chart_points(pl.DataFrame({"x": [1]}))
