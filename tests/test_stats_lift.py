"""Mantel-Haenszel ratios against statsmodels, a hand computation and a textbook example."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import norm
from statsmodels.stats.contingency_tables import StratifiedTable, Table2x2

from reachlist.errors import InputError
from reachlist.stats import mantel_haenszel_odds_ratio, mantel_haenszel_risk_ratio

# Deaths by treatment within age strata: rows tolbutamide, placebo; columns died, survived.
UGDP = [[[8, 98], [5, 115]], [[22, 76], [16, 69]]]


def _statsmodels(tables: np.ndarray) -> StratifiedTable:
    return StratifiedTable(np.transpose(np.asarray(tables, dtype=float), (1, 2, 0)))


def _gr_by_hand(tables: list[list[list[int]]], level: float) -> tuple[float, float, float]:
    """Greenland & Robins (1985), Biometrics 41:55-68: RR_MH = sum(a N0/n) / sum(c N1/n) and
    Var(ln RR_MH) = sum((M1 N1 N0 - a c n) / n^2) / (sum(a N0/n) * sum(c N1/n)), M1 = a + c.
    Written as a plain loop, independently of the vectorised code under test."""
    r = s = v = 0.0
    for (a, b), (c, d) in tables:
        n1, n0 = a + b, c + d
        n = n1 + n0
        r += a * n0 / n
        s += c * n1 / n
        v += ((a + c) * n1 * n0 - a * c * n) / n**2
    rr = r / s
    se = math.sqrt(v / (r * s))
    z = norm.ppf(0.5 + level / 2)
    return rr, rr * math.exp(-z * se), rr * math.exp(z * se)


def test_textbook_tolbutamide_example() -> None:
    # Source: Rothman, Greenland & Lash, Modern Epidemiology, 3rd ed. (2008), ch. 15, the
    # University Group Diabetes Program tolbutamide data by age: crude RR 1.44, Mantel-Haenszel
    # RR 1.33 (from memory).
    r = mantel_haenszel_risk_ratio(UGDP, level=0.9)
    assert round(r.crude, 2) == 1.44
    assert round(r.estimate, 2) == 1.33
    # Source: statsmodels StratifiedTable.riskratio_pooled (point estimate only)
    assert r.estimate == pytest.approx(_statsmodels(np.array(UGDP)).riskratio_pooled, rel=1e-12)
    rr, low, high = _gr_by_hand(UGDP, 0.9)
    assert (r.estimate, r.low, r.high) == pytest.approx((rr, low, high), rel=1e-12)


def test_one_stratum_reduces_to_the_single_table_risk_ratio() -> None:
    table = [[20, 80], [10, 90]]
    r = mantel_haenszel_risk_ratio([table])
    # Source: statsmodels Table2x2.riskratio, log_riskratio_se, riskratio_confint (Katz log method);
    # with one stratum the Greenland-Robins variance equals 1/a - 1/N1 + 1/c - 1/N0.
    ref = Table2x2(np.array(table, dtype=float))
    assert r.estimate == pytest.approx(ref.riskratio)
    assert r.se_log == pytest.approx(ref.log_riskratio_se, rel=1e-12)
    assert (r.low, r.high) == pytest.approx(ref.riskratio_confint(alpha=0.05), rel=1e-12)
    assert r.crude == pytest.approx(r.estimate)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(*[st.integers(min_value=1, max_value=400) for _ in range(4)]),
        min_size=1,
        max_size=10,
    ),
    st.sampled_from([0.9, 0.95]),
)
def test_random_strata_against_references(cells: list[tuple[int, ...]], level: float) -> None:
    tables = [[[a, b], [c, d]] for a, b, c, d in cells]
    ref = _statsmodels(np.array(tables))

    r = mantel_haenszel_risk_ratio(tables, level)
    # Source: statsmodels StratifiedTable.riskratio_pooled; interval: Greenland & Robins by hand.
    assert r.estimate == pytest.approx(ref.riskratio_pooled, rel=1e-10)
    assert (r.estimate, r.low, r.high) == pytest.approx(_gr_by_hand(tables, level), rel=1e-10)
    assert r.low <= r.estimate <= r.high

    o = mantel_haenszel_odds_ratio(tables, level)
    # Source: statsmodels StratifiedTable.oddsratio_pooled, logodds_pooled_se (Robins, Breslow
    # & Greenland 1986), oddsratio_pooled_confint.
    assert o.estimate == pytest.approx(ref.oddsratio_pooled, rel=1e-10)
    assert o.se_log == pytest.approx(ref.logodds_pooled_se, rel=1e-10)
    assert (o.low, o.high) == pytest.approx(
        ref.oddsratio_pooled_confint(alpha=1 - level), rel=1e-10
    )


def test_breadth_confounding_is_removed() -> None:
    # Breadth drives both holding the antecedent and buying the target; holding has no effect
    # of its own. The crude ratio credits the rule with breadth; the stratified one does not.
    rng = np.random.default_rng(7)
    tables = []
    for decile in range(10):
        n = 5000
        holds = rng.random(n) < 0.05 + 0.08 * decile
        buys = rng.random(n) < 0.005 + 0.006 * decile
        tables.append(
            [
                [int(np.sum(holds & buys)), int(np.sum(holds & ~buys))],
                [int(np.sum(~holds & buys)), int(np.sum(~holds & ~buys))],
            ]
        )
    r = mantel_haenszel_risk_ratio(tables)
    assert r.crude > 1.5
    assert r.low < 1.0 < r.high


def test_strata_lacking_a_group_are_skipped() -> None:
    r = mantel_haenszel_risk_ratio([*UGDP, [[0, 0], [3, 40]], [[0, 0], [0, 0]]])
    assert (r.strata, r.strata_used) == (4, 2)
    assert r.estimate == pytest.approx(mantel_haenszel_risk_ratio(UGDP).estimate)


def test_all_buyers_gives_ratio_one() -> None:
    r = mantel_haenszel_risk_ratio([[[10, 0], [20, 0]], [[5, 0], [7, 0]]])
    assert (r.estimate, r.low, r.high) == (1.0, 1.0, 1.0)
    with pytest.raises(InputError, match="odds ratio is 0 or infinite"):
        mantel_haenszel_odds_ratio([[[10, 0], [20, 0]]])


@pytest.mark.parametrize(
    ("tables", "match"),
    [
        ([[[0, 50], [4, 60]], [[0, 10], [2, 10]]], "no buyers among antecedent holders"),
        ([[[3, 50], [0, 60]]], "no buyers among non-holders"),
        ([[[0, 0], [0, 0]], [[0, 0], [5, 5]]], "every stratum is empty"),
        ([], "shape"),
        ([[1, 2, 3]], "shape"),
        ([[[1, -2], [3, 4]]], "zero or more"),
    ],
)
def test_bad_tables(tables: object, match: str) -> None:
    with pytest.raises(InputError, match=match):
        mantel_haenszel_risk_ratio(tables)  # type: ignore[arg-type]
