"""Confidence intervals for a take-up rate and for treated-versus-holdout comparisons.

All three work on counts (buyers out of customers), accept scalars or equal-shaped arrays, and
return an :class:`Interval`; scalars in, Python floats out.

- :func:`wilson_interval`: the Wilson score interval for one rate. Unlike the textbook
  ``p +- z*sqrt(p(1-p)/n)`` it stays inside [0, 1] and keeps its coverage when buyers are few,
  which is the usual case for a campaign.
- :func:`difference_interval`: Newcombe's hybrid score interval for ``p_treated - p_holdout``,
  built from the two Wilson intervals (Newcombe 1998, method 10).
- :func:`ratio_interval`: the relative uplift ``p_treated / p_holdout`` on the log scale
  (Katz et al. 1978).

>>> [round(v, 4) for v in wilson_interval(12, 400)]
[0.03, 0.0172, 0.0517]
>>> [round(v, 4) for v in difference_interval(45, 900, 3, 100)]
[0.02, -0.0359, 0.0456]
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = ["Interval", "difference_interval", "ratio_interval", "wilson_interval"]

FloatOrArray = float | npt.NDArray[np.float64]

# Added to every count of a group with no buyers, so the log-scale ratio has a finite bound
# on the side the data can speak to (the Haldane-Anscombe half, used the same way by Katz et al.).
_ZERO_CELL = 0.5


class Interval(NamedTuple):
    """A point estimate with the low and high ends of its confidence interval."""

    estimate: FloatOrArray
    low: FloatOrArray
    high: FloatOrArray


def _z(level: float) -> float:
    from reachlist.stats.tails import norm_ppf  # here: command help starts without scipy

    return norm_ppf(0.5 + _check.level(level) / 2.0)


def _pair(
    buyers: npt.ArrayLike, customers: npt.ArrayLike, who: str
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    x = np.asarray(buyers, dtype=np.float64)
    n = np.asarray(customers, dtype=np.float64)
    if x.shape != n.shape:
        raise InputError(
            f"{who}: expected buyers and customers of the same shape, got {x.shape} and {n.shape}."
        )
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(n))):
        raise InputError(f"{who}: expected finite counts, got NaN or infinity.")
    if np.any(n <= 0):
        raise InputError(
            f"{who}: expected at least one customer, got {n.min():g}.",
            hint="a rate needs customers; leave empty groups out.",
        )
    if np.any(x < 0) or np.any(x > n):
        raise InputError(
            f"{who}: expected buyers between 0 and the number of customers, "
            f"got {x.min():g}..{x.max():g} buyers for {n.min():g}..{n.max():g} customers."
        )
    return x, n


def _out(a: npt.NDArray[np.float64]) -> FloatOrArray:
    return float(a) if a.ndim == 0 else a


def _wilson(
    x: npt.NDArray[np.float64], n: npt.NDArray[np.float64], z: float
) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
    z2 = z * z
    centre = (x + z2 / 2.0) / (n + z2)
    half = z * np.sqrt(x * (n - x) / n + z2 / 4.0) / (n + z2)
    # Analytically the bounds are exactly 0 at x = 0 and exactly 1 at x = n; pin them there.
    low = np.where(x == 0, 0.0, np.clip(centre - half, 0.0, 1.0))
    high = np.where(x == n, 1.0, np.clip(centre + half, 0.0, 1.0))
    return low, high


def wilson_interval(
    buyers: npt.ArrayLike, customers: npt.ArrayLike, level: float = 0.95
) -> Interval:
    """Wilson score interval for the take-up rate ``buyers / customers``.

    >>> [round(v, 4) for v in wilson_interval(0, 20)]
    [0.0, 0.0, 0.1611]
    """
    x, n = _pair(buyers, customers, "wilson_interval")
    low, high = _wilson(x, n, _z(level))
    return Interval(_out(x / n), _out(low), _out(high))


def difference_interval(
    treated_buyers: npt.ArrayLike,
    treated: npt.ArrayLike,
    holdout_buyers: npt.ArrayLike,
    holdout: npt.ArrayLike,
    level: float = 0.95,
) -> Interval:
    """Newcombe hybrid score interval for the absolute uplift ``p_treated - p_holdout``.

    >>> [round(v, 4) for v in difference_interval(56, 70, 48, 80)]
    [0.2, 0.0524, 0.3339]
    """
    x1, n1 = _pair(treated_buyers, treated, "difference_interval (treated)")
    x2, n2 = _pair(holdout_buyers, holdout, "difference_interval (holdout)")
    z = _z(level)
    p1, p2 = x1 / n1, x2 / n2
    l1, u1 = _wilson(x1, n1, z)
    l2, u2 = _wilson(x2, n2, z)
    d = p1 - p2
    low = d - np.sqrt((p1 - l1) ** 2 + (u2 - p2) ** 2)
    high = d + np.sqrt((u1 - p1) ** 2 + (p2 - l2) ** 2)
    return Interval(_out(d), _out(low), _out(high))


def ratio_interval(
    treated_buyers: npt.ArrayLike,
    treated: npt.ArrayLike,
    holdout_buyers: npt.ArrayLike,
    holdout: npt.ArrayLike,
    level: float = 0.95,
) -> Interval:
    """Log-scale interval for the relative uplift ``p_treated / p_holdout`` (1.0 = no uplift).

    With ``se = sqrt(1/x1 - 1/n1 + 1/x2 - 1/n2)`` the limits are ``ratio * exp(+-z*se)``.
    A group with no buyers leaves one side unbounded by the data: the estimate is then 0 (no
    treated buyers) or infinity (no holdout buyers), that side's limit is 0 or infinity, and the
    other limit is computed after adding 0.5 to the buyers and 1 to the customers of both groups.
    With no buyers in either group the estimate is NaN and the interval is [0, inf].

    >>> [round(v, 3) for v in ratio_interval(30, 300, 10, 200)]
    [2.0, 1.0, 3.999]
    """
    x1, n1 = _pair(treated_buyers, treated, "ratio_interval (treated)")
    x2, n2 = _pair(holdout_buyers, holdout, "ratio_interval (holdout)")
    z = _z(level)
    zero = (x1 == 0) | (x2 == 0)
    c1 = np.where(zero, x1 + _ZERO_CELL, x1)
    c2 = np.where(zero, x2 + _ZERO_CELL, x2)
    m1 = np.where(zero, n1 + 2 * _ZERO_CELL, n1)
    m2 = np.where(zero, n2 + 2 * _ZERO_CELL, n2)
    log_ratio = np.log(c1 / m1) - np.log(c2 / m2)
    se = np.sqrt(np.maximum(1 / c1 - 1 / m1 + 1 / c2 - 1 / m2, 0.0))
    low = np.exp(log_ratio - z * se)
    high = np.exp(log_ratio + z * se)
    with np.errstate(divide="ignore", invalid="ignore"):
        estimate = (x1 / n1) / (x2 / n2)
    low = np.where(x1 == 0, 0.0, low)
    high = np.where(x2 == 0, np.inf, high)
    return Interval(_out(estimate), _out(low), _out(high))
