"""What a rule adds over shopping breadth: Mantel-Haenszel ratios across breadth deciles.

A rule's antecedent holders are usually broad shoppers, and broad shoppers take up anything more
often. Comparing holders with everyone else therefore credits the rule with breadth's effect. The
Mantel-Haenszel risk ratio compares holders with non-holders *within* each breadth decile and
pools the within-decile comparisons, so what remains is the rule's added value over breadth.

Each stratum is a forward-looking 2x2 table ``[[a, b], [c, d]]``: rows = holds the antecedent
(yes, no), columns = bought the target within the horizon (yes, no), all customers lacking the
target at the cutoff. Pass them as an array of shape ``(strata, 2, 2)``.

- Risk ratio: ``RR = sum(a*n0/n) / sum(c*n1/n)`` (n1 = a+b holders, n0 = c+d others, n = n1+n0),
  with the Greenland-Robins (1985) variance of ``log RR``, valid when strata are many and thin as
  well as few and large.
- Odds ratio: ``OR = sum(a*d/n) / sum(b*c/n)`` with the Robins-Breslow-Greenland (1986) variance.

Strata without both holders and non-holders carry no comparison and are skipped (the result says
how many were used).

>>> tables = [[[8, 98], [5, 115]], [[22, 76], [16, 69]]]
>>> r = mantel_haenszel_risk_ratio(tables)
>>> round(r.estimate, 3), round(r.crude, 3), r.strata_used
(1.326, 1.436, 2)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = ["StratifiedRatio", "mantel_haenszel_odds_ratio", "mantel_haenszel_risk_ratio"]


@dataclass(frozen=True)
class StratifiedRatio:
    """A Mantel-Haenszel pooled ratio with its confidence interval.

    ``crude`` is the same ratio from the collapsed table (ignoring strata); the gap between
    ``crude`` and ``estimate`` is how much of the rule's apparent lift was breadth.
    """

    measure: str  # "risk ratio" or "odds ratio"
    estimate: float
    low: float
    high: float
    level: float
    se_log: float
    crude: float
    strata: int
    strata_used: int


def _tables(tables: npt.ArrayLike) -> npt.NDArray[np.float64]:
    try:
        t = np.asarray(tables, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise InputError(f"tables: expected numbers, got {exc}.") from None
    if t.ndim == 2 and t.shape == (2, 2):
        t = t[np.newaxis]
    if t.ndim != 3 or t.shape[1:] != (2, 2) or t.shape[0] == 0:
        raise InputError(
            f"tables: expected shape (strata, 2, 2), got {t.shape}.",
            hint="one [[holders_bought, holders_not], [others_bought, others_not]] per stratum.",
        )
    if not np.all(np.isfinite(t)) or np.any(t < 0):
        raise InputError("tables: expected counts of zero or more in every cell.")
    return t


def _usable(t: npt.NDArray[np.float64], measure: str) -> npt.NDArray[np.float64]:
    holders = t[:, 0, :].sum(axis=1)
    others = t[:, 1, :].sum(axis=1)
    keep = (holders > 0) & (others > 0)
    if not keep.any():
        raise InputError(
            f"{measure}: every stratum is empty or lacks either antecedent holders or "
            f"non-holders ({t.shape[0]} strata), so there is nothing to compare.",
            hint="use fewer breadth groups or a longer calibration window.",
        )
    usable: npt.NDArray[np.float64] = t[keep]
    return usable


def _crude(t: npt.NDArray[np.float64], measure: str) -> float:
    """The ratio from the table collapsed over strata (infinite when its denominator is 0)."""
    (a, b), (c, d) = t.sum(axis=0)
    if measure == "risk ratio":
        return float((a / (a + b)) / (c / (c + d))) if c > 0 else float("inf")
    return float((a * d) / (b * c)) if b * c > 0 else float("inf")


def _interval(log_est: float, se: float, level: float) -> tuple[float, float]:
    from reachlist.stats.tails import norm_ppf  # here: command help starts without scipy

    z = norm_ppf(0.5 + level / 2.0)
    return float(np.exp(log_est - z * se)), float(np.exp(log_est + z * se))


def mantel_haenszel_risk_ratio(tables: npt.ArrayLike, level: float = 0.95) -> StratifiedRatio:
    """Mantel-Haenszel risk ratio of take-up, holders over non-holders, pooled over strata.

    >>> r = mantel_haenszel_risk_ratio([[[20, 80], [10, 90]]])
    >>> round(r.estimate, 2), round(r.low, 2), round(r.high, 2)
    (2.0, 0.99, 4.05)
    """
    _check.level(level)
    all_t = _tables(tables)
    t = _usable(all_t, "mantel_haenszel_risk_ratio")
    a, b, c, d = t[:, 0, 0], t[:, 0, 1], t[:, 1, 0], t[:, 1, 1]
    n1, n0 = a + b, c + d
    n = n1 + n0
    r = float(np.sum(a * n0 / n))
    s = float(np.sum(c * n1 / n))
    if r == 0 or s == 0:
        who = "antecedent holders" if r == 0 else "non-holders"
        raise InputError(
            f"mantel_haenszel_risk_ratio: no buyers among {who} in any usable stratum, so the "
            f"risk ratio is {'0' if r == 0 else 'infinite'} and has no log-scale interval.",
            hint="lengthen the horizon or calibration window so both groups have buyers.",
        )
    # Greenland & Robins (1985), Biometrics 41:55-68.
    var = float(np.sum(((a + c) * n1 * n0 - a * c * n) / n**2)) / (r * s)
    se = float(np.sqrt(max(var, 0.0)))
    est = r / s
    low, high = _interval(float(np.log(est)), se, level)
    crude = _crude(all_t, "risk ratio")
    return StratifiedRatio(
        "risk ratio", est, low, high, level, se, crude, all_t.shape[0], t.shape[0]
    )


def mantel_haenszel_odds_ratio(tables: npt.ArrayLike, level: float = 0.95) -> StratifiedRatio:
    """Mantel-Haenszel odds ratio pooled over strata, Robins-Breslow-Greenland interval.

    >>> r = mantel_haenszel_odds_ratio([[[20, 80], [10, 90]]])
    >>> round(r.estimate, 2)
    2.25
    """
    _check.level(level)
    all_t = _tables(tables)
    t = _usable(all_t, "mantel_haenszel_odds_ratio")
    a, b, c, d = t[:, 0, 0], t[:, 0, 1], t[:, 1, 0], t[:, 1, 1]
    n = a + b + c + d
    r_k, s_k = a * d / n, b * c / n
    p_k, q_k = (a + d) / n, (b + c) / n
    r, s = float(r_k.sum()), float(s_k.sum())
    if r == 0 or s == 0:
        raise InputError(
            "mantel_haenszel_odds_ratio: the pooled odds ratio is 0 or infinite "
            "(no stratum has both a holder-buyer and a non-holder non-buyer, or the reverse).",
            hint="use the risk ratio, or lengthen the calibration window.",
        )
    # Robins, Breslow & Greenland (1986), Biometrics 42:311-323.
    var = float(
        np.sum(p_k * r_k) / (2 * r**2)
        + np.sum(p_k * s_k + q_k * r_k) / (2 * r * s)
        + np.sum(q_k * s_k) / (2 * s**2)
    )
    se = float(np.sqrt(var))
    est = r / s
    low, high = _interval(float(np.log(est)), se, level)
    crude = _crude(all_t, "odds ratio")
    return StratifiedRatio(
        "odds ratio", est, low, high, level, se, crude, all_t.shape[0], t.shape[0]
    )
