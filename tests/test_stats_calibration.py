"""Calibration from backtests: factor, interval methods by number of backtests, rule weight."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import t
from statsmodels.stats.rates import confint_poisson

from reachlist.errors import InputError
from reachlist.stats import DEFAULT_DISPERSION, calibrate, rule_weight


def _kept_share(pred: np.ndarray, obs: np.ndarray, labels: np.ndarray) -> float:
    """The shrinking weight worked out here step by step: per-cutoff mean log errors against
    the raw factor, their variance over the cutoffs (assumed 0.5^2 below 3), a N(0, 0.5^2) prior
    on the log bias (the conjugate normal update; from memory)."""
    raw = obs.sum() / pred.sum()
    e = np.log((obs + 0.5) / (raw * pred + 0.5))
    cuts = sorted(set(labels.tolist()))
    means = np.array([e[labels == c].mean() for c in cuts])
    s2 = means.var(ddof=1) if len(cuts) >= 3 else 0.25
    return 0.25 / (0.25 + s2 / len(cuts))


def test_factor_is_the_ratio_of_sums_shrunk_toward_one() -> None:
    pred, obs = np.array([40.0, 60, 100]), np.array([10, 20, 20])
    cal = calibrate(pred, obs)
    assert cal.raw_factor == pytest.approx(50 / 200)
    w = _kept_share(pred, obs, np.arange(3))
    assert 0.8 < w < 1 and cal.factor == pytest.approx((50 / 200) ** w)
    assert cal.n_backtests == 3 == cal.n_independent
    # the same three backtests at one cutoff are one piece of evidence: half the log bias kept
    one = calibrate(pred, obs, cutoffs=["m", "m", "m"])
    assert one.n_independent == 1
    assert one.factor == pytest.approx((50 / 200) ** 0.5)
    assert one.raw_factor == cal.raw_factor and cal.factor < one.factor < 1
    # a dozen cutoffs with the same bias keep it whole
    steady = calibrate(np.full(12, 100.0), np.full(12, 20), cutoffs=np.arange(12))
    assert steady.factor == pytest.approx(0.2)


def test_backtests_sharing_a_cutoff_count_once() -> None:
    # 60 backtests, five audiences at each of 12 cutoffs: the interval is the 12-cutoff one
    rng = np.random.default_rng(3)
    pred = rng.uniform(30, 300, 60)
    obs = rng.poisson(pred * 0.3 * rng.lognormal(0, 0.3, 60))
    labels = np.repeat(np.arange(12), 5)
    clustered = calibrate(pred, obs, cutoffs=labels)
    assert (clustered.n_backtests, clustered.n_independent) == (60, 12)
    est = clustered.predict(20_000.0, level=0.9)  # large, so the Poisson floor does not bind
    assert est.method == "log-normal from 60 backtests at 12 cutoffs"
    assert (est.n_backtests, est.n_cutoffs) == (60, 12) and not est.rests_on_few
    e = np.asarray(clustered.log_errors)
    # Source: the normal prediction interval for one new observation (Hahn & Meeker, 1991,
    # section 4.7; from memory), with the degrees of freedom of 12 independent cutoffs
    half = t.ppf(0.95, 11) * e.std(ddof=1) * math.sqrt(1 + 1 / 12)
    x = 20_000.0 * clustered.factor
    assert est.low == pytest.approx((x + 0.5) * math.exp(e.mean() - half) - 0.5)
    assert est.high == pytest.approx((x + 0.5) * math.exp(e.mean() + half) - 0.5)
    # counted as 60 independent backtests they would give the narrower empirical interval
    naive = calibrate(pred, obs).predict(20_000.0, level=0.9)
    assert naive.method == "empirical quantiles of 60 backtests"
    # few cutoffs: the wide overdispersed Poisson interval, and the estimate says so
    few = calibrate(pred[:15], obs[:15], cutoffs=labels[:15]).predict(100.0)
    assert few.method.startswith("overdispersed Poisson") and "at 3 cutoffs" in few.method
    assert few.rests_on_few
    with pytest.raises(InputError, match="one label per backtest"):
        calibrate(pred, obs, cutoffs=labels[:5])


def test_no_backtests_is_uncalibrated_and_wide() -> None:
    est = calibrate([], []).predict(20.0, level=0.95)
    assert (est.expected, est.factor, est.n_backtests) == (20.0, 1.0, 0)
    assert est.method == "overdispersed Poisson (phi 4.0, no backtests)"
    # Source: statsmodels.stats.rates.confint_poisson(method='exact-c') (Garwood's exact limits),
    # applied to the effective count 20/phi and scaled back by phi.
    lo, hi = confint_poisson(20 / DEFAULT_DISPERSION, 1, method="exact-c", alpha=0.05)
    assert (est.low, est.high) == pytest.approx((lo * DEFAULT_DISPERSION, hi * DEFAULT_DISPERSION))
    plain = confint_poisson(20, 1, method="exact-c", alpha=0.05)
    assert est.high - est.low > 1.9 * (plain[1] - plain[0])


def test_few_backtests_measure_their_own_dispersion() -> None:
    cal = calibrate([50, 50, 50], [10, 60, 110])  # wildly overdispersed
    fitted = 60.0
    pearson = sum((o - fitted) ** 2 / fitted for o in (10, 60, 110)) / 2
    assert cal.dispersion == pytest.approx(pearson)
    assert calibrate([50, 50, 50], [40, 39, 41]).dispersion == DEFAULT_DISPERSION
    assert "3 backtests" in cal.predict(30.0).method


def test_log_normal_interval_between_5_and_18_backtests() -> None:
    pred = np.array([40.0, 55, 30, 62, 48, 35, 70, 51])
    obs = np.array([31, 50, 19, 47, 41, 22, 52, 40])
    cal = calibrate(pred, obs)
    est = cal.predict(5000.0, level=0.9)  # large, so the Poisson floor does not bind
    assert est.method == "log-normal from 8 backtests"
    f = (obs.sum() / pred.sum()) ** _kept_share(pred, obs, np.arange(8))
    e = np.log((obs + 0.5) / (f * pred + 0.5))
    # Source: the normal prediction interval for one new observation, mean +- t * s * sqrt(1+1/n)
    # (e.g. Hahn & Meeker, Statistical Intervals, 1991, section 4.7; from memory), t from scipy.
    half = t.ppf(0.95, 7) * e.std(ddof=1) * math.sqrt(1 + 1 / 8)
    x = 5000 * f
    assert est.expected == pytest.approx(x)
    assert est.low == pytest.approx((x + 0.5) * math.exp(e.mean() - half) - 0.5)
    assert est.high == pytest.approx((x + 0.5) * math.exp(e.mean() + half) - 0.5)


def test_empirical_interval_uses_order_statistics() -> None:
    rng = np.random.default_rng(5)
    pred = rng.uniform(50, 500, 39)
    obs = rng.poisson(pred * 0.3 * rng.lognormal(0, 0.3, 39))
    cal = calibrate(pred, obs)
    e = np.sort(cal.log_errors)
    est90 = cal.predict(20_000.0, level=0.9)  # large, so the Poisson floor does not bind
    assert est90.method == "empirical quantiles of 39 backtests"
    x = 20_000.0 * cal.factor
    # j = floor(40 * 0.05) = 2: the 2nd smallest and 2nd largest errors.
    assert est90.low == pytest.approx((x + 0.5) * math.exp(e[1]) - 0.5)
    assert est90.high == pytest.approx((x + 0.5) * math.exp(e[-2]) - 0.5)
    assert cal.predict(100.0, level=0.95).method == "empirical quantiles of 39 backtests"
    assert calibrate(pred[:18], obs[:18]).predict(100.0, 0.9).method.startswith("log-normal")
    assert calibrate(pred[:19], obs[:19]).predict(100.0, 0.9).method.startswith("empirical")


def test_empirical_intervals_cover_what_they_claim() -> None:
    # Backtests and new audiences from one process: a biased predictor with overdispersed errors.
    rng = np.random.default_rng(12)
    hits = 0
    reps = 400
    for _ in range(reps):
        pred = rng.uniform(30, 300, 40)
        truth = pred * 0.25 * rng.lognormal(0, 0.35, 40)
        obs = rng.poisson(truth)
        cal = calibrate(pred[:39], obs[:39])
        est = cal.predict(float(pred[39]), level=0.9)
        hits += est.low <= obs[39] <= est.high
    assert hits / reps >= 0.85


def test_interval_never_narrower_than_poisson_noise() -> None:
    # Backtests on huge audiences have tiny relative errors; a tiny new audience is noisier.
    pred = np.full(30, 10_000.0)
    obs = np.full(30, 2_000)
    est = calibrate(pred, obs).predict(10.0, level=0.9)
    lo, hi = confint_poisson(2.0, 1, method="exact-c", alpha=0.1)  # Source: statsmodels
    assert est.low <= lo + 1e-9 and est.high >= hi - 1e-9


def test_zero_observed_buyers() -> None:
    cal = calibrate([20, 30, 25, 10, 15], [0, 0, 0, 0, 0])
    assert cal.raw_factor == pytest.approx(0.5 / 100)
    est = cal.predict(40.0)
    assert est.low < 1e-3 and est.high >= est.expected > 0


@pytest.mark.parametrize(
    ("pred", "obs", "match"),
    [
        ([10, 0], [1, 1], "more than 0 buyers"),
        ([10, 5], [1], "different lengths"),
        ([10, 5], [1, -1], "zero or more"),
        ([10, float("inf")], [1, 1], "finite"),
    ],
)
def test_bad_backtests(pred: list[float], obs: list[float], match: str) -> None:
    with pytest.raises(InputError, match=match):
        calibrate(pred, obs)


def test_bad_prediction() -> None:
    with pytest.raises(InputError, match="buyers >= 0"):
        calibrate([], []).predict(-1.0)
    with pytest.raises(InputError, match="confidence level"):
        calibrate([], []).predict(1.0, level=1.0)


backtests = st.integers(min_value=0, max_value=45).flatmap(
    lambda n: st.tuples(
        st.lists(st.floats(min_value=0.5, max_value=5000), min_size=n, max_size=n),
        st.lists(st.integers(min_value=0, max_value=3000), min_size=n, max_size=n),
    )
)


@settings(max_examples=80, deadline=None)
@given(backtests, st.floats(min_value=0, max_value=1e5), st.sampled_from([0.8, 0.9, 0.95]))
def test_interval_contains_expected(
    bt: tuple[list[float], list[int]], predicted: float, level: float
) -> None:
    est = calibrate(*bt).predict(predicted, level)
    assert 0.0 <= est.low <= est.expected <= est.high
    assert est.n_backtests == len(bt[0])


def test_rule_weight() -> None:
    base = np.array([20.0, 20, 20, 20, 20, 20])
    rule = np.array([10.0, 40, 20, 80, 15, 30])
    helps = rule_weight(base, rule, rule)
    assert helps.weight > 0.9
    ignored = rule_weight(base, rule, [20, 21, 19, 20, 22, 18])
    assert ignored.weight == 0.0
    misleads = rule_weight(base, rule, 400 / rule)
    assert misleads.weight == 0.0
    assert rule_weight(base[:3], rule[:3], rule[:3]).weight == 0.0
    assert rule_weight(base, base, base).reason == "the rule never changed the prediction"
    half = rule_weight(base, rule, np.sqrt(base * rule))
    assert 0.3 < half.weight < 0.7
    assert half.apply(20.0, 80.0) == pytest.approx(20.0 * 4**half.weight)
