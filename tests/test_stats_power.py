"""Holdout power against statsmodels' NormalIndPower and published sample sizes."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq
from statsmodels.stats.power import NormalIndPower
from statsmodels.stats.proportion import proportion_effectsize

from reachlist.errors import InputError
from reachlist.stats import (
    cohens_h,
    holdout_power,
    holdout_share_needed,
    minimum_detectable_uplift,
)
from tests.fresh_imports import imported_after

SM = NormalIndPower()
CASES = [
    (400, 0.10, 0.03, 1.0),
    (5_000, 0.10, 0.02, 0.3),
    (20_000, 0.05, 0.01, 0.5),
    (1_000, 0.5, 0.2, 0.2),
    (250_000, 0.02, 0.004, 0.25),
]


@pytest.mark.parametrize(("size", "share", "base", "uplift"), CASES)
@pytest.mark.parametrize("alternative", ["two-sided", "larger"])
def test_power_matches_statsmodels(
    size: int, share: float, base: float, uplift: float, alternative: str
) -> None:
    # Source: statsmodels NormalIndPower.power with proportion_effectsize (Cohen's h).
    h = proportion_effectsize(base * (1 + uplift), base)
    assert cohens_h(base * (1 + uplift), base) == pytest.approx(h, rel=1e-12)
    ref = SM.power(
        effect_size=h,
        nobs1=size * (1 - share),
        alpha=0.05,
        ratio=share / (1 - share),
        alternative=alternative,
    )
    got = holdout_power(size, share, base, uplift, alternative=alternative)  # type: ignore[arg-type]
    assert got == pytest.approx(ref, rel=1e-10)


@pytest.mark.parametrize(("size", "share", "base", "_"), CASES)
@pytest.mark.parametrize(("alpha", "power"), [(0.05, 0.8), (0.01, 0.9)])
def test_minimum_detectable_uplift_matches_statsmodels(
    size: int, share: float, base: float, _: float, alpha: float, power: float
) -> None:
    m = minimum_detectable_uplift(size, share, base, alpha=alpha, power=power)
    # Source: statsmodels NormalIndPower.solve_power for the effect size (Cohen's h).
    h = SM.solve_power(
        effect_size=None,
        nobs1=size * (1 - share),
        alpha=alpha,
        power=power,
        ratio=share / (1 - share),
    )
    # statsmodels' root finder stops earlier than ours; its power function settles the rest.
    assert proportion_effectsize(m.treated_rate, base) == pytest.approx(h, rel=1e-4)
    ref_power = SM.power(
        proportion_effectsize(m.treated_rate, base),
        nobs1=size * (1 - share),
        alpha=alpha,
        ratio=share / (1 - share),
    )
    assert ref_power == pytest.approx(power, abs=1e-9)
    assert m.absolute == pytest.approx(m.treated_rate - base)
    assert m.relative == pytest.approx(m.treated_rate / base - 1)


@pytest.mark.parametrize(("size", "base", "uplift"), [(20_000, 0.03, 0.5), (3_001, 0.1, 0.6)])
def test_holdout_share_is_the_smallest_that_reaches_the_power(
    size: int, base: float, uplift: float
) -> None:
    plan = holdout_share_needed(size, base, uplift)
    h = proportion_effectsize(base * (1 + uplift), base)

    def sm_power(n_holdout: int) -> float:
        # Source: statsmodels NormalIndPower.power
        return float(
            SM.power(h, nobs1=size - n_holdout, alpha=0.05, ratio=n_holdout / (size - n_holdout))
        )

    assert plan.n_holdout + plan.n_treated == size
    assert sm_power(plan.n_holdout) >= 0.8 > sm_power(plan.n_holdout - 1)
    assert plan.power == pytest.approx(sm_power(plan.n_holdout))
    assert plan.share == plan.n_holdout / size


@pytest.mark.parametrize(("h", "n_per_group"), [(0.2, 392), (0.5, 63), (0.8, 25)])
def test_cohen_sample_size_table(h: float, n_per_group: int) -> None:
    # Source: Cohen J., Statistical Power Analysis for the Behavioral Sciences, 2nd ed. (1988),
    # Table 6.4.1: n per group for h at two-sided alpha .05 and power .80 (from memory), rounded
    # to the nearest whole number.
    base = 0.5
    uplift = math.sin(math.asin(math.sqrt(base)) + h / 2) ** 2 / base - 1
    n = brentq(lambda k: holdout_power(2 * k, 0.5, base, uplift) - 0.8, 2, 10_000)
    assert round(n) == n_per_group


def test_r_power_prop_test_examples() -> None:
    # Source: R documentation for stats::power.prop.test, examples: n = 50 per group, p1 = .50,
    # p2 = .75 gives power 0.740; power .90 needs n = 76.7 per group. R uses the pooled-variance
    # normal approximation rather than the arcsine scale, hence the tolerance.
    assert holdout_power(100, 0.5, 0.5, 0.5) == pytest.approx(0.740, abs=0.01)
    assert holdout_power(2 * 76.7, 0.5, 0.5, 0.5) == pytest.approx(0.90, abs=0.005)


def test_textbook_example_with_fleiss_continuity_correction() -> None:
    # Source: Zar J.H., Biostatistical Analysis, 4th ed. (1999), Example 24.26, p. 561: p1 = 0.45,
    # p2 = 0.25, two-sided alpha .05, power .90, equal groups: n = 127.23 per group, as reproduced
    # in the UNISTAT manual, section 6.7.6.1 (unistat.com/guide/sample-size-and-power-two-
    # proportions). That n includes the continuity correction of Fleiss, Tytun & Ury (1980),
    # Biometrics 36:343-346, n_cc = n/4 * (1 + sqrt(1 + 4/(n*|p1-p2|)))^2, applied here by hand.
    # Our n is on the arcsine scale; the textbook's uncorrected n (pooled variance) is within 1%.
    n = brentq(lambda k: holdout_power(2 * k, 0.5, 0.25, 0.8, alpha=0.05) - 0.9, 2, 10_000)
    n_cc = n / 4 * (1 + math.sqrt(1 + 4 / (n * 0.20))) ** 2
    assert n_cc == pytest.approx(127.23, rel=0.01)


def test_a_small_holdout_cannot_see_a_doubling() -> None:
    # The finding: a 10% holdout of a few hundred customers cannot detect even a doubling.
    m = minimum_detectable_uplift(300, 0.10, 0.05)
    assert m.relative > 1.0
    assert holdout_power(300, 0.10, 0.05, 1.0) < 0.3


def test_infeasible_share_names_the_list_size_that_works() -> None:
    with pytest.raises(InputError, match="even with half held out") as info:
        holdout_share_needed(300, 0.05, 1.0)
    hint = info.value.hint or ""
    need = int(hint.split("at least ")[1].split(" customers")[0].replace(",", ""))
    assert holdout_power(need, 0.5, 0.05, 1.0) >= 0.8 > holdout_power(need - 2, 0.5, 0.05, 1.0)


def test_undetectable_at_any_rate_is_infinite() -> None:
    m = minimum_detectable_uplift(4, 0.5, 0.4)
    assert math.isinf(m.relative) and math.isinf(m.absolute)


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: holdout_power(1000, 1.0, 0.1, 0.2), "holdout_share"),
        (lambda: holdout_power(1000, 0.1, 0.0, 0.2), "baseline_rate"),
        (lambda: holdout_power(1000, 0.1, 0.6, 1.0), "treated rate"),
        (lambda: holdout_power(1, 0.1, 0.1, 1.0), "list_size"),
        (lambda: minimum_detectable_uplift(1000, 0.1, 0.1, power=0.01), "more than alpha"),
        (lambda: holdout_share_needed(1000, 0.1, 0.0), "detect"),
        (lambda: holdout_share_needed(1000, 0.1, -0.2, alternative="larger"), "one-sided"),
        (lambda: holdout_power(1000, 0.1, 0.1, 0.2, alternative="less"), "alternative"),  # type: ignore[arg-type]
    ],
)
def test_bad_input(call: object, match: str) -> None:
    with pytest.raises(InputError, match=match):
        call()  # type: ignore[operator]


sizes = st.integers(min_value=20, max_value=2_000_000)
shares = st.floats(min_value=0.01, max_value=0.5)
bases = st.floats(min_value=0.001, max_value=0.4)


@settings(max_examples=60, deadline=None)
@given(sizes, shares, bases, st.floats(min_value=0.05, max_value=1.0))
def test_power_grows_with_the_list_and_the_uplift(
    size: int, share: float, base: float, uplift: float
) -> None:
    p = holdout_power(size, share, base, uplift)
    assert 0.05 <= p <= 1.0
    assert holdout_power(size * 2, share, base, uplift) >= p
    assert holdout_power(size, share, base, uplift * 1.5) >= p
    assert holdout_power(size, min(share * 1.5, 0.5), base, uplift) >= p


@settings(max_examples=40, deadline=None)
@given(sizes, shares, bases)
def test_detectable_uplift_shrinks_with_the_list(size: int, share: float, base: float) -> None:
    m = minimum_detectable_uplift(size, share, base)
    bigger = minimum_detectable_uplift(size * 4, share, base)
    assert bigger.relative <= m.relative
    if math.isfinite(m.relative):
        assert holdout_power(size, share, base, m.relative) == pytest.approx(0.8, abs=1e-6)


@settings(max_examples=200, deadline=None)
@given(
    st.integers(20, 5_000_000),
    st.sampled_from([0.02, 0.05, 0.1, 0.3, 0.5]),
    st.floats(0.001, 0.6),
    st.sampled_from(["two-sided", "larger"]),
)
def test_the_detectable_uplift_is_brents_root(
    size: int, share: float, base: float, alternative: str
) -> None:
    # Reference: scipy.optimize.brentq on the same power curve (the library reachlist used
    # before; a test-only import now). reachlist halves the bracket to the last float, brentq
    # stops within 1e-12 of the root: they agree to that.
    m = minimum_detectable_uplift(size, share, base, alternative=alternative)  # type: ignore[arg-type]
    if not math.isfinite(m.relative):
        return
    phi0 = 2 * math.asin(math.sqrt(base))

    def gap(h: float) -> float:
        return (
            holdout_power(
                size, share, base, math.sin((phi0 + h) / 2) ** 2 / base - 1, alternative=alternative
            )
            - 0.8
        )  # type: ignore[arg-type]

    ref = brentq(gap, 0.0, math.pi - phi0, xtol=1e-12)
    assert cohens_h(m.treated_rate, base) == pytest.approx(ref, abs=5e-12)


@pytest.mark.parametrize(
    "code",
    [
        "from reachlist.stats import minimum_detectable_uplift as f; f(1000, 0.1, 0.03)",
        "from reachlist.stats import holdout_share_needed as f; f(20000, 0.03, 0.5)",
    ],
)
def test_planning_a_holdout_does_not_import_scipy_optimize(code: str) -> None:
    # scipy.optimize took 0.13-0.24 s to import in every command that plans a holdout
    assert imported_after(code, ("scipy.optimize",)) == []
