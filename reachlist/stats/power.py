"""Can the holdout tell? Power and minimum detectable uplift of a treated-versus-holdout split.

The test is the two-proportion z-test on Cohen's arcsine scale, ``h = 2*asin(sqrt(p_treated)) -
2*asin(sqrt(p_holdout))``, whose standard error ``sqrt(1/n_treated + 1/n_holdout)`` does not
depend on the rates: the same model as statsmodels' ``NormalIndPower`` with
``proportion_effectsize`` (Cohen 1988, ch. 6). The baseline rate is what the holdout is expected to
do (for example the breadth-matched expectation); uplift is relative, ``p_treated / p_holdout - 1``.

A usual holdout is small, and so is take-up, which makes holdouts weak. A 10% holdout of a 400
customer list with 3% baseline take-up only detects a five-fold rise:

>>> m = minimum_detectable_uplift(400, 0.10, 0.03)
>>> round(m.relative, 2), round(m.treated_rate, 3)
(4.24, 0.157)
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Literal

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = [
    "DetectableUplift",
    "HoldoutPlan",
    "cohens_h",
    "holdout_power",
    "holdout_share_needed",
    "minimum_detectable_uplift",
]

Alternative = Literal["two-sided", "larger"]


def cohens_h(treated_rate: float, holdout_rate: float) -> float:
    """Cohen's effect size h for two proportions.

    >>> round(cohens_h(0.75, 0.5), 4)
    0.5236
    """
    _check.probability("treated_rate", treated_rate, open_low=False, open_high=False)
    _check.probability("holdout_rate", holdout_rate, open_low=False, open_high=False)
    return 2 * math.asin(math.sqrt(treated_rate)) - 2 * math.asin(math.sqrt(holdout_rate))


def _power(h: float, n_treated: float, n_holdout: float, alpha: float, alt: Alternative) -> float:
    from reachlist.stats.tails import norm_cdf, norm_isf, norm_sf  # here: help starts faster

    z = h / math.sqrt(1 / n_treated + 1 / n_holdout)
    if alt == "two-sided":
        crit = norm_isf(alpha / 2)
        return norm_sf(crit - z) + norm_cdf(-crit - z)
    if alt == "larger":
        return norm_sf(norm_isf(alpha) - z)
    raise InputError(f"alternative: expected 'two-sided' or 'larger', got {alt!r}.")


def _split(list_size: float, holdout_share: float) -> tuple[float, float]:
    if not (math.isfinite(list_size) and list_size >= 2):
        raise InputError(f"list_size: expected 2 or more customers, got {list_size!r}.")
    _check.probability("holdout_share", holdout_share)
    return list_size * (1 - holdout_share), list_size * holdout_share


def _treated_rate(baseline_rate: float, relative_uplift: float) -> float:
    _check.probability("baseline_rate", baseline_rate)
    treated = baseline_rate * (1 + relative_uplift)
    if not (relative_uplift > -1 and treated <= 1):
        raise InputError(
            f"relative_uplift: expected a value making the treated rate a share in (0, 1], "
            f"got {relative_uplift!r} on a baseline of {baseline_rate!r}."
        )
    return treated


def holdout_power(
    list_size: float,
    holdout_share: float,
    baseline_rate: float,
    relative_uplift: float,
    *,
    alpha: float = 0.05,
    alternative: Alternative = "two-sided",
) -> float:
    """Chance that the holdout comparison is significant when the true uplift is as given.

    >>> round(holdout_power(10_000, 0.5, 0.03, 0.25), 2)
    0.55
    """
    n_t, n_h = _split(list_size, holdout_share)
    _check.probability("alpha", alpha)
    h = cohens_h(_treated_rate(baseline_rate, relative_uplift), baseline_rate)
    return _power(h, n_t, n_h, alpha, alternative)


def _root(f: Callable[[float], float], lo: float, hi: float, xtol: float = 0.0) -> float:
    """A root of ``f`` in [lo, hi], where ``f`` changes sign, by bisection: to within ``xtol``,
    or (0) until no float lies between the ends. Here rather than scipy.optimize.brentq, whose
    import took 0.13-0.24 s of every command that plans a holdout; the power curves searched are
    monotone and cheap, so 60-100 halvings cost well under a millisecond."""
    f_lo = f(lo)
    if f_lo == 0:
        return lo
    if f(hi) == 0:
        return hi
    while True:
        mid = lo + (hi - lo) / 2
        if mid in (lo, hi) or hi - lo <= xtol:
            return mid
        f_mid = f(mid)
        if f_mid == 0:
            return mid
        if (f_mid < 0) == (f_lo < 0):
            lo, f_lo = mid, f_mid
        else:
            hi = mid


@dataclass(frozen=True)
class DetectableUplift:
    """Smallest uplift a split detects with the given power (``inf`` if none can)."""

    relative: float  # p_treated / p_holdout - 1
    absolute: float  # p_treated - p_holdout
    treated_rate: float
    baseline_rate: float
    n_treated: float
    n_holdout: float
    alpha: float
    power: float


def minimum_detectable_uplift(
    list_size: float,
    holdout_share: float,
    baseline_rate: float,
    *,
    alpha: float = 0.05,
    power: float = 0.8,
    alternative: Alternative = "two-sided",
) -> DetectableUplift:
    """Minimum detectable uplift (relative and absolute) of a treated/holdout split.

    >>> m = minimum_detectable_uplift(100_000, 0.10, 0.03)
    >>> round(m.relative, 3), round(m.absolute, 4)
    (0.175, 0.0052)
    """
    n_t, n_h = _split(list_size, holdout_share)
    _check.probability("baseline_rate", baseline_rate)
    _check.probability("alpha", alpha)
    _check.probability("power", power)
    if power <= alpha:
        raise InputError(f"power: expected more than alpha ({alpha}), got {power}.")
    phi0 = 2 * math.asin(math.sqrt(baseline_rate))
    h_max = math.pi - phi0  # the treated rate at 100%
    if _power(h_max, n_t, n_h, alpha, alternative) < power:
        inf = math.inf
        return DetectableUplift(inf, inf, inf, baseline_rate, n_t, n_h, alpha, power)
    h = _root(lambda x: _power(x, n_t, n_h, alpha, alternative) - power, 0.0, h_max)
    treated = math.sin((phi0 + h) / 2) ** 2
    return DetectableUplift(
        treated / baseline_rate - 1,
        treated - baseline_rate,
        treated,
        baseline_rate,
        n_t,
        n_h,
        alpha,
        power,
    )


@dataclass(frozen=True)
class HoldoutPlan:
    """The smallest holdout that detects the chosen uplift with the chosen power."""

    share: float
    n_holdout: int
    n_treated: int
    power: float  # achieved, at these whole-customer counts


def holdout_share_needed(
    list_size: int,
    baseline_rate: float,
    relative_uplift: float,
    *,
    alpha: float = 0.05,
    power: float = 0.8,
    alternative: Alternative = "two-sided",
) -> HoldoutPlan:
    """Smallest holdout share of ``list_size`` customers that detects ``relative_uplift``.

    On the arcsine scale the variance ``1/n_treated + 1/n_holdout`` is smallest at an even split,
    so no share above 50% helps; when even 50% falls short the answer is an InputError that names
    the list size that would do.

    >>> plan = holdout_share_needed(20_000, 0.03, 0.5)
    >>> round(plan.share, 4), plan.n_holdout, round(plan.power, 3)
    (0.0668, 1336, 0.8)
    """
    if not (math.isfinite(list_size) and list_size >= 2):
        raise InputError(f"list_size: expected 2 or more customers, got {list_size!r}.")
    _check.probability("alpha", alpha)
    _check.probability("power", power)
    n = int(list_size)
    h = cohens_h(_treated_rate(baseline_rate, relative_uplift), baseline_rate)
    if h == 0 or (alternative == "larger" and h < 0):
        raise InputError(
            f"relative_uplift: expected an uplift the test can detect, got {relative_uplift!r}"
            f"{' with a one-sided (larger) test' if h < 0 else ''}."
        )
    h = abs(h)

    def gap(n_holdout: float, total: float = n) -> float:
        return _power(h, total - n_holdout, n_holdout, alpha, alternative) - power

    best = n // 2  # the even split; an odd list's extra customer cannot help
    if gap(best) < 0:
        need = _root(lambda total: gap(total / 2, total), 2.0, 1e15)
        raise InputError(
            f"a {relative_uplift:.0%} uplift on {baseline_rate:.2%} take-up cannot be detected "
            f"with {power:.0%} power in a list of {n:,} customers, even with half held out.",
            hint=f"a list of at least {2 * math.ceil(need / 2):,} customers is needed at a 50% "
            "holdout, or plan to detect a larger uplift.",
        )
    n_holdout = min(math.ceil(_root(gap, 1e-9, best, xtol=1e-9)), best)
    while gap(n_holdout) < 0:  # the root is found to a tolerance; step to the next customer
        n_holdout += 1
    achieved = _power(h, n - n_holdout, n_holdout, alpha, alternative)
    return HoldoutPlan(n_holdout / n, n_holdout, n - n_holdout, achieved)
