"""Wilson, Newcombe and log-ratio intervals against statsmodels and Newcombe's worked examples."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from statsmodels.stats.proportion import confint_proportions_2indep, proportion_confint

from reachlist.errors import InputError
from reachlist.stats import difference_interval, ratio_interval, wilson_interval

GRID = [(x, n) for n in (1, 2, 7, 20, 29, 148, 263, 1000) for x in sorted({0, 1, n // 3, n - 1, n})]


@pytest.mark.parametrize("level", [0.8, 0.9, 0.95, 0.99])
def test_wilson_matches_statsmodels(level: float) -> None:
    x = np.array([g[0] for g in GRID], dtype=float)
    n = np.array([g[1] for g in GRID], dtype=float)
    est, low, high = wilson_interval(x, n, level)
    # Source: statsmodels.stats.proportion.proportion_confint(method='wilson')
    ref_low, ref_high = proportion_confint(x, n, alpha=1 - level, method="wilson")
    np.testing.assert_allclose(low, ref_low, atol=1e-12)
    np.testing.assert_allclose(high, ref_high, atol=1e-12)
    np.testing.assert_allclose(est, x / n)


@pytest.mark.parametrize(
    ("x", "n", "low", "high"),
    [
        (81, 263, 0.2553, 0.3662),
        (15, 148, 0.0624, 0.1605),
        (0, 20, 0.0, 0.1611),
        (1, 29, 0.0061, 0.1718),
    ],
)
def test_wilson_newcombe_worked_examples(x: int, n: int, low: float, high: float) -> None:
    # Source: Newcombe RG (1998), "Two-sided confidence intervals for the single proportion:
    # comparison of seven methods", Statistics in Medicine 17:857-872, worked examples, Wilson
    # score method (from memory; the same values come out of statsmodels' proportion_confint).
    _, lo, hi = wilson_interval(x, n)
    assert round(lo, 4) == low
    assert round(hi, 4) == high


@pytest.mark.parametrize("level", [0.9, 0.95])
def test_newcombe_difference_matches_statsmodels(level: float) -> None:
    for x1, n1 in GRID:
        for x2, n2 in GRID[::3]:
            d, low, high = difference_interval(x1, n1, x2, n2, level)
            # Source: statsmodels.stats.proportion.confint_proportions_2indep(method='newcomb')
            ref = confint_proportions_2indep(x1, n1, x2, n2, method="newcomb", alpha=1 - level)
            assert low == pytest.approx(ref[0], abs=1e-12)
            assert high == pytest.approx(ref[1], abs=1e-12)
            assert d == pytest.approx(x1 / n1 - x2 / n2)


@pytest.mark.parametrize(
    ("x1", "n1", "x2", "n2", "low", "high"),
    [(56, 70, 48, 80, 0.0524, 0.3339), (9, 10, 3, 10, 0.1705, 0.8090)],
)
def test_newcombe_difference_worked_examples(
    x1: int, n1: int, x2: int, n2: int, low: float, high: float
) -> None:
    # Source: Newcombe RG (1998), "Interval estimation for the difference between independent
    # proportions: comparison of eleven methods", Statistics in Medicine 17:873-890, examples (a)
    # and (b), method 10 (from memory; statsmodels' method='newcomb' gives the same to 4 places).
    _, lo, hi = difference_interval(x1, n1, x2, n2)
    assert round(lo, 4) == low
    assert round(hi, 4) == high


def test_ratio_matches_statsmodels_log_method() -> None:
    for x1, n1 in GRID:
        for x2, n2 in GRID[::2]:
            if x1 == 0 or x2 == 0:
                continue  # statsmodels divides by zero there; our rule is tested below
            r, low, high = ratio_interval(x1, n1, x2, n2)
            # Source: statsmodels confint_proportions_2indep(compare='ratio', method='log')
            ref = confint_proportions_2indep(x1, n1, x2, n2, compare="ratio", method="log")
            assert low == pytest.approx(ref[0], rel=1e-12)
            assert high == pytest.approx(ref[1], rel=1e-12)
            assert r == pytest.approx((x1 / n1) / (x2 / n2))


def test_ratio_with_no_buyers_in_a_group() -> None:
    est, low, high = ratio_interval(0, 200, 5, 100)
    assert (est, low) == (0.0, 0.0)
    # The bounded side is the log interval after adding 0.5 buyers and 1 customer to each group.
    ref = confint_proportions_2indep(0.5, 201, 5.5, 101, compare="ratio", method="log")
    assert high == pytest.approx(ref[1], rel=1e-12)

    est, low, high = ratio_interval(5, 100, 0, 200)
    assert math.isinf(est) and math.isinf(high)
    ref = confint_proportions_2indep(5.5, 101, 0.5, 201, compare="ratio", method="log")
    assert low == pytest.approx(ref[0], rel=1e-12)

    est, low, high = ratio_interval(0, 100, 0, 100)
    assert math.isnan(est) and low == 0.0 and math.isinf(high)


def test_all_buyers() -> None:
    assert wilson_interval(50, 50)[1:] == (pytest.approx(0.9287, abs=1e-4), 1.0)
    assert ratio_interval(40, 40, 10, 10) == (1.0, 1.0, 1.0)
    d, low, high = difference_interval(40, 40, 10, 10)
    assert d == 0.0 and low < 0 < high


def test_vectorised_and_scalar_agree() -> None:
    x, n = np.array([3, 30, 300]), np.array([10, 100, 1000])
    vec = wilson_interval(x, n)
    for i in range(3):
        one = wilson_interval(int(x[i]), int(n[i]))
        assert isinstance(one.low, float)
        assert (vec.low[i], vec.high[i]) == (one.low, one.high)


@pytest.mark.parametrize(
    ("args", "match"),
    [
        ((5, 0), "at least one customer"),
        ((6, 5), "between 0 and the number of customers"),
        ((-1, 5), "between 0 and the number of customers"),
        ((float("nan"), 5), "finite"),
        (([1, 2], [3]), "same shape"),
    ],
)
def test_wilson_bad_input(args: tuple[object, object], match: str) -> None:
    with pytest.raises(InputError, match=match):
        wilson_interval(*args)  # type: ignore[arg-type]


def test_bad_level() -> None:
    with pytest.raises(InputError, match="confidence level"):
        wilson_interval(1, 10, level=95)
    with pytest.raises(InputError, match="holdout"):
        difference_interval(1, 10, 1, 0)


counts = st.integers(min_value=1, max_value=5000).flatmap(
    lambda n: st.tuples(st.integers(min_value=0, max_value=n), st.just(n))
)
levels = st.sampled_from([0.8, 0.9, 0.95, 0.99])


@given(counts, levels)
def test_wilson_contains_estimate_and_narrows_with_n(xn: tuple[int, int], level: float) -> None:
    x, n = xn
    est, low, high = wilson_interval(x, n, level)
    assert 0.0 <= low <= est <= high <= 1.0
    _, low2, high2 = wilson_interval(4 * x, 4 * n, level)
    assert high2 - low2 <= high - low + 1e-12
    _, low3, high3 = wilson_interval(x, n, min(level + 0.005, 0.995))
    assert low3 <= low + 1e-12 and high3 >= high - 1e-12


@given(counts, counts, levels)
def test_two_group_intervals_contain_estimate(
    a: tuple[int, int], b: tuple[int, int], level: float
) -> None:
    d, low, high = difference_interval(*a, *b, level)
    assert -1.0 <= low <= d <= high <= 1.0
    r, low, high = ratio_interval(*a, *b, level)
    if not math.isnan(r):
        assert low <= r * (1 + 1e-12) and r <= high * (1 + 1e-12)
