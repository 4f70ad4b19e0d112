"""The tails and quantiles of reachlist.stats.tails against scipy.stats (the reference library),
bit for bit over grids, and the commands that read them starting without scipy.stats."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from reachlist.stats import tails
from tests.fresh_imports import imported_after

LEVELS = [1e-12, 1e-6, 0.001, 0.025, 0.05, 0.1, 0.3, 0.5, 0.7, 0.9, 0.95, 0.975, 0.999, 1 - 1e-9]


@pytest.mark.parametrize("q", LEVELS)
def test_normal_matches_scipy_stats(q: float) -> None:
    # Source: scipy.stats.norm (ppf, isf, cdf, sf).
    assert tails.norm_ppf(q) == float(stats.norm.ppf(q))
    assert tails.norm_isf(q) == float(stats.norm.isf(q))
    x = float(stats.norm.ppf(q)) * 1.7
    assert tails.norm_cdf(x) == float(stats.norm.cdf(x))
    assert tails.norm_sf(x) == float(stats.norm.sf(x))


@pytest.mark.parametrize("df", [1, 2, 3, 4.5, 9, 30, 1000])
def test_t_and_chi2_quantiles_match_scipy_stats(df: float) -> None:
    # Source: scipy.stats.t.ppf and scipy.stats.chi2.ppf.
    for q in LEVELS:
        assert tails.t_ppf(q, df) == float(stats.t.ppf(q, df))
        assert tails.chi2_ppf(q, df) == float(stats.chi2.ppf(q, df))
    for q in (0.025, 0.975):  # the Garwood limits' arguments: 2k and 2k + 2 for small k
        for k in (1e-9, 0.3, 2.0, 17.5):
            assert tails.chi2_ppf(q, 2 * k) == float(stats.chi2.ppf(q, 2 * k))


def test_hypergeometric_tail_matches_scipy_stats_on_every_small_table() -> None:
    # Source: scipy.stats.hypergeom.sf, every k (outside the support too) for small populations.
    rows = [
        (k, total, good, draws)
        for total in range(1, 13)
        for good in range(total + 1)
        for draws in range(total + 1)
        for k in range(-2, min(good, draws) + 2)
    ]
    k, total, good, draws = (np.array(c) for c in zip(*rows, strict=True))
    got = tails.hypergeom_sf(k, total, good, draws)
    want = stats.hypergeom.sf(k, total, good, draws)
    np.testing.assert_array_equal(got, want)
    assert got.shape == (len(rows),)


def test_hypergeometric_tail_matches_scipy_stats_on_large_tables() -> None:
    # Source: scipy.stats.hypergeom.sf on tables the size of a million-customer history.
    rng = np.random.default_rng(7)
    total = rng.integers(1, 1_000_000, 4000)
    good = (total * rng.random(4000)).astype(np.int64)
    draws = (total * rng.random(4000) ** 3).astype(np.int64)
    low = np.maximum(draws - (total - good), 0)
    high = np.minimum(good, draws)
    mean = draws * good / total
    sd = np.sqrt(mean * (1 - good / total) * (total - draws) / np.maximum(total - 1, 1))
    k = np.clip(np.round(mean + sd * rng.normal(0, 3, 4000)), low - 1, high).astype(np.int64)
    got = tails.hypergeom_sf(k, total, good, draws)
    want = stats.hypergeom.sf(k, total, good, draws)
    np.testing.assert_array_equal(got, want)
    # most tails are neither 0 nor 1: the values themselves are compared
    assert ((got > 0) & (got < 1)).sum() > 2000


def test_hypergeometric_tail_of_impossible_arguments_is_nan() -> None:
    # Source: scipy.stats.hypergeom.sf gives NaN outside its parameter space.
    bad = [(0, 0, 0, 0), (1, 5, 6, 2), (1, 5, 2, 6), (0, 5, -1, 2)]
    for args in bad:
        assert np.isnan(tails.hypergeom_sf(*args)).all()
        assert np.isnan(stats.hypergeom.sf(*args)).all()


def test_scalars_broadcast_against_arrays() -> None:
    got = tails.hypergeom_sf(np.arange(-1, 5), 20, 8, 6)
    np.testing.assert_array_equal(got, stats.hypergeom.sf(np.arange(-1, 5), 20, 8, 6))


@pytest.mark.parametrize(
    "code",
    [
        pytest.param(
            "from reachlist.measures import rule_measures; rule_measures(100, [10, 20], 30, [5, 9])",
            marks=pytest.mark.skipif(
                tails._HYPERGEOM_SF is None,
                reason="this SciPy has no scipy.special._ufuncs._hypergeom_sf (1.14 on have it): "
                "the exact test falls back to scipy.stats",
            ),
        ),
        "from reachlist.stats import wilson_interval; wilson_interval([3], [40], 0.9)",
        "from reachlist.stats import holdout_power; holdout_power(10000, 0.25, 0.02, 0.1)",
    ],
)
def test_the_exact_test_and_intervals_start_without_scipy_stats(code: str) -> None:
    # scipy.stats costs about 0.45 s to import: the commands that mine and estimate must not need it.
    assert imported_after(code, ("scipy.stats",)) == []


def test_every_tail_reachlist_reads_comes_from_this_module() -> None:
    import reachlist

    root = __import__("pathlib").Path(reachlist.__file__).parent
    readers = sorted(
        str(p.relative_to(root))
        for p in root.rglob("*.py")
        if "from scipy.stats import" in p.read_text(encoding="utf-8")
        or "import scipy.stats" in p.read_text(encoding="utf-8")
    )
    assert readers == ["stats/tails.py"], readers


def test_a_scipy_without_the_tail_ufunc_falls_back_to_scipy_stats(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    # Source: scipy.stats.hypergeom.sf, which the fallback calls.
    monkeypatch.setattr(tails, "_HYPERGEOM_SF", None)
    k = np.arange(-2, 8)
    got = tails.hypergeom_sf(k, 20, 8, 6)
    assert got.dtype == np.float64
    np.testing.assert_array_equal(got, stats.hypergeom.sf(k, 20, 8, 6))
