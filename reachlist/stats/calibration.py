"""Honest take-up: calibrate predictions on past backtests and give intervals that cover.

A backtest builds an audience at an earlier cutoff, predicts its buyers (for example with
:func:`reachlist.stats.breadth_matched_expectation`) and then counts who actually bought within
the horizon. Given several, :func:`calibrate` learns

- a multiplicative factor, the ratio of sums ``sum(observed) / sum(predicted)``: it weighs
  backtests by size, so one tiny audience cannot swing it. It is then shrunk toward 1 on the log
  scale, ``factor ** w``, ``w = tau^2 / (tau^2 + s^2 / m)``: a normal prior on the log bias with
  standard deviation ``tau`` = ``FACTOR_PRIOR_SD`` around no bias, against the mean of ``m``
  cutoffs' log errors whose spread is ``s`` (measured from 3 cutoffs on, else
  ``DEFAULT_CUTOFF_SD``). One month's bias is weak evidence of next month's (``w`` = 0.5 from one
  cutoff); a dozen consistent months keep nearly all of it;
- the spread of the errors ``e = log((observed + 0.5) / (factor * predicted + 0.5))``: the half
  keeps audiences with no buyers in play.

Backtests at the same cutoff (a list and its rules' audiences share most customers and one
month's season) are not independent: the evidence is counted in cutoffs, ``m``, not in backtests.

:meth:`Calibration.predict` then turns a new raw prediction into expected buyers with an interval,
choosing the method by how many cutoffs there are (the ``method`` string says which):

1. ``empirical``: enough cutoffs for distribution-free order statistics. With n errors sorted,
   ``[e_(j), e_(k)]``, ``j = floor((n+1)(1-level)/2)``, ``k = n+1-j``, covers a new exchangeable
   error with probability at least ``level``. Needs ``m >= 2/(1-level) - 1`` (19 at 90%).
2. ``log-normal``: at least 5 cutoffs but too few for (1): the normal prediction interval
   ``mean(e) +- t(m-1) * sd(e) * sqrt(1 + 1/m)`` on the log scale (the estimate's own
   uncertainty, from ``m`` cutoffs, widens it).
3. ``overdispersed Poisson``: fewer than 5 cutoffs, where a spread cannot be estimated. Garwood's
   exact Poisson limits on the effective count ``expected / phi``, scaled back by ``phi``: a
   Poisson interval made ``sqrt(phi)`` times wider. ``phi`` is the larger of
   :data:`DEFAULT_DISPERSION` and the Pearson dispersion of the backtests (from 2 on). Binomial
   intervals proved too narrow on real backtests; this is deliberately wide.

Whatever the method, the interval is never narrower than plain Poisson noise around the expected
count (a new audience may be smaller, so noisier, than the backtested ones), and always contains
the expected count (the errors of a few large backtests can sit on one side of the factor).

>>> cal = calibrate(predicted=[40, 55, 30, 62, 48, 35], observed=[31, 50, 19, 47, 41, 22])
>>> est = cal.predict(50.0, level=0.9)
>>> round(est.expected, 1), round(est.low, 1), round(est.high, 1), est.n_backtests, est.method
(39.0, 27.1, 52.2, 6, 'log-normal from 6 backtests')
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = [
    "DEFAULT_DISPERSION",
    "DEFAULT_CUTOFF_SD",
    "FACTOR_PRIOR_SD",
    "FEW_CUTOFFS",
    "MIN_BACKTESTS_FOR_RULE",
    "MIN_BACKTESTS_FOR_SPREAD",
    "Calibration",
    "RuleWeight",
    "TakeUpEstimate",
    "calibrate",
    "rule_weight",
    "shrink_weight",
]

# Overdispersion assumed when backtests cannot measure it: Poisson intervals twice as wide.
# Campaign take-up varies with season and stock far more than coin-flip noise does.
DEFAULT_DISPERSION = 4.0
MIN_BACKTESTS_FOR_SPREAD = 5  # independent backtests (cutoffs) for a spread
# Shrinking the factor: a prior standard deviation of the log bias around none (a factor
# between 0.37 and 2.7 is within two of them), and the spread of one cutoff's log bias assumed
# when fewer than 3 cutoffs cannot measure it.
FACTOR_PRIOR_SD = 0.5
DEFAULT_CUTOFF_SD = 0.5
FEW_CUTOFFS = 5  # below this the estimate rests on few cutoffs, and the screen says so
MIN_BACKTESTS_FOR_RULE = 4
_HALF = 0.5  # continuity half-buyer in log errors: an audience with no buyers has a finite error


@dataclass(frozen=True)
class TakeUpEstimate:
    """Expected buyers in an audience with an interval for what will actually be observed."""

    expected: float
    low: float
    high: float
    level: float
    n_backtests: int
    method: str
    factor: float
    n_cutoffs: int = 0  # independent backtests: distinct cutoffs (0: not known)

    @property
    def rests_on_few(self) -> bool:
        return (self.n_cutoffs or self.n_backtests) < FEW_CUTOFFS


@dataclass(frozen=True)
class Calibration:
    """What past backtests say about a predictor: its bias (``factor``) and its error spread."""

    factor: float
    log_errors: tuple[float, ...]
    dispersion: float
    n_cutoffs: int | None = None  # distinct cutoffs among the backtests (None: each its own)
    raw_factor: float | None = None  # before shrinking toward 1

    @property
    def n_backtests(self) -> int:
        return len(self.log_errors)

    @property
    def n_independent(self) -> int:
        return self.n_backtests if self.n_cutoffs is None else self.n_cutoffs

    def _runs_on(self) -> str:
        n, m = self.n_backtests, self.n_independent
        if m == n:
            return f"{n} backtests"
        return f"{n} backtests at {m} cutoff{'s' if m != 1 else ''}"

    def predict(self, predicted: float, level: float = 0.9) -> TakeUpEstimate:
        """Calibrated expected buyers for a new raw prediction, with an interval.

        The default level is 90%: a planning range for stock and budget, not a significance test.

        >>> calibrate([], []).predict(20.0).method
        'overdispersed Poisson (phi 4.0, no backtests)'
        """
        _check.level(level)
        if not (math.isfinite(predicted) and predicted >= 0):
            raise InputError(f"predicted: expected buyers >= 0, got {predicted!r}.")
        expected = self.factor * predicted
        n, m = self.n_backtests, self.n_independent
        alpha = 1.0 - level
        e = np.sort(np.asarray(self.log_errors))
        if m >= _min_empirical(level):
            j = math.floor((n + 1) * alpha / 2 + 1e-9)  # 1 - 0.9 is a hair under 0.1 in binary
            lo_e, hi_e = float(e[j - 1]), float(e[n - j])
            method = f"empirical quantiles of {self._runs_on()}"
        elif m >= MIN_BACKTESTS_FOR_SPREAD and n >= 2:
            from reachlist.stats.tails import t_ppf  # here: command help starts without scipy

            half = t_ppf(1 - alpha / 2, m - 1) * float(e.std(ddof=1)) * math.sqrt(1 + 1 / m)
            lo_e, hi_e = float(e.mean()) - half, float(e.mean()) + half
            method = f"log-normal from {self._runs_on()}"
        else:
            low, high = _garwood(expected, self.dispersion, level)
            ran = self._runs_on() if n else "no backtests"
            if n == 1:
                ran = "1 backtest"
            method = f"overdispersed Poisson (phi {self.dispersion:.1f}, {ran})"
            return TakeUpEstimate(expected, low, high, level, n, method, self.factor, m)
        low = max((expected + _HALF) * math.exp(lo_e) - _HALF, 0.0)
        high = (expected + _HALF) * math.exp(hi_e) - _HALF
        p_low, p_high = _garwood(expected, 1.0, level)
        low, high = min(low, p_low, expected), max(high, p_high, expected)
        return TakeUpEstimate(expected, low, high, level, n, method, self.factor, m)


def _min_empirical(level: float) -> int:
    # Smallest n with floor((n+1)(1-level)/2) >= 1, with the same allowance for binary fractions.
    return max(math.ceil(2 / (1 - level) - 1 - 1e-9), 1)


def _garwood(expected: float, phi: float, level: float) -> tuple[float, float]:
    """Exact Poisson limits for an effective count ``expected / phi``, scaled back by ``phi``."""
    k = expected / phi
    alpha = 1 - level
    # (an effective count below 1e-9 buyers has a lower limit of 0: the quantile underflows)
    from reachlist.stats.tails import chi2_ppf  # here: command help starts without scipy

    low = chi2_ppf(alpha / 2, 2 * k) / 2 if k > 1e-9 else 0.0
    high = chi2_ppf(1 - alpha / 2, 2 * k + 2) / 2
    return phi * low, phi * high


def calibrate(
    predicted: npt.ArrayLike,
    observed: npt.ArrayLike,
    cutoffs: npt.ArrayLike | None = None,
) -> Calibration:
    """Learn the factor and error spread of a predictor from past backtests (one per audience).

    ``predicted``: expected buyers the method gave at each backtest cutoff; ``observed``: buyers
    seen within the horizon; ``cutoffs``: each backtest's cutoff (any labels), so that backtests
    sharing one count once; without it every backtest is its own cutoff. No backtests at all is
    allowed: factor 1, assumed dispersion.

    >>> cal = calibrate([100.0, 80.0], [25, 20], cutoffs=[1, 1])
    >>> round(cal.raw_factor, 3), round(cal.factor, 3), cal.n_backtests, cal.n_independent
    (0.25, 0.5, 2, 1)
    """
    pred = _check.counts("predicted", predicted, allow_empty=True)
    obs = _check.counts("observed", observed, allow_empty=True)
    _check.same_length(predicted=pred, observed=obs)
    m: int | None = None
    if cutoffs is not None:
        labels = np.asarray(cutoffs)
        if labels.shape != pred.shape:
            raise InputError(
                f"cutoffs: expected one label per backtest ({pred.size}), got {labels.size}."
            )
        m = len(set(labels.tolist()))
    if pred.size == 0:
        return Calibration(1.0, (), DEFAULT_DISPERSION, m, 1.0)
    if np.any(pred <= 0):
        raise InputError(
            "predicted: expected more than 0 buyers in every backtest, got 0.",
            hint="leave out backtests whose audience was empty.",
        )
    # At least half a buyer in total, so a run of backtests without buyers does not predict 0.
    raw = max(float(obs.sum()), _HALF) / float(pred.sum())
    labels = np.arange(pred.size) if cutoffs is None else np.asarray(cutoffs)
    factor = raw ** shrink_weight(np.log((obs + _HALF) / (raw * pred + _HALF)), labels)
    fitted = factor * pred
    # errors against the shrunk factor: their mean carries the bias the shrinking left, so the
    # log-normal interval is centred where the evidence is while the point estimate is cautious
    errors = np.log((obs + _HALF) / (fitted + _HALF))
    dispersion = DEFAULT_DISPERSION
    if pred.size >= 2:  # the scatter around the data's own fit
        pearson = float(np.sum((obs - raw * pred) ** 2 / (raw * pred))) / (pred.size - 1)
        dispersion = max(dispersion, pearson)
    return Calibration(factor, tuple(float(x) for x in errors), dispersion, m, raw)


def shrink_weight(log_errors: npt.ArrayLike, cutoffs: npt.ArrayLike) -> float:
    """How much of the learnt log bias to keep: ``tau^2 / (tau^2 + s^2 / m)`` over the ``m``
    cutoffs' mean log errors (see the module's docstring).

    >>> round(shrink_weight([0.4, 0.2, 0.6], ["a", "a", "a"]), 3)  # one cutoff
    0.5
    """
    e = np.asarray(log_errors, dtype=float)
    labels = np.asarray(cutoffs)
    _, which = np.unique(labels, return_inverse=True)
    m = int(which.max()) + 1 if e.size else 0
    if m == 0:
        return 0.0
    means = np.bincount(which, weights=e, minlength=m) / np.bincount(which, minlength=m)
    s2 = float(means.var(ddof=1)) if m >= 3 else DEFAULT_CUTOFF_SD**2
    tau2 = FACTOR_PRIOR_SD**2
    return tau2 / (tau2 + s2 / m)


@dataclass(frozen=True)
class RuleWeight:
    """How far to trust a rule-specific adjustment: ``base * (rule / base) ** weight``."""

    weight: float
    n_backtests: int
    reason: str

    def apply(self, base: float, rule: float) -> float:
        """The adjusted prediction.

        >>> RuleWeight(0.5, 8, "").apply(10.0, 40.0)
        20.0
        """
        if base <= 0 or rule <= 0:
            return base
        return float(base * (rule / base) ** self.weight)


def rule_weight(
    base_predicted: npt.ArrayLike, rule_predicted: npt.ArrayLike, observed: npt.ArrayLike
) -> RuleWeight:
    """How much of a rule-specific adjustment past backtests support, from 0 (none) to 1 (all).

    ``base_predicted``: breadth-matched predictions; ``rule_predicted``: the same adjusted by the
    rule (for example multiplied by its Mantel-Haenszel risk ratio); ``observed``: buyers. The
    weight is the slope of ``log(observed/base)`` on ``log(rule/base)`` (least squares with an
    intercept, since the calibration factor absorbs a common bias), clipped to [0, 1]. Fewer than
    4 backtests, or adjustments that never differ, give 0: breadth alone was the most accurate.

    >>> round(rule_weight([10, 10, 10, 10], [20, 10, 40, 5], [20, 10, 40, 5]).weight, 2)
    0.96
    """
    base = _check.counts("base_predicted", base_predicted, allow_empty=True)
    rule = _check.counts("rule_predicted", rule_predicted, allow_empty=True)
    obs = _check.counts("observed", observed, allow_empty=True)
    _check.same_length(base_predicted=base, rule_predicted=rule, observed=obs)
    n = base.size
    if n < MIN_BACKTESTS_FOR_RULE:
        return RuleWeight(0.0, n, f"{n} backtests; at least {MIN_BACKTESTS_FOR_RULE} needed")
    if np.any(base <= 0) or np.any(rule <= 0):
        raise InputError("base_predicted, rule_predicted: expected more than 0 in every backtest.")
    x = np.log(rule / base)
    y = np.log((obs + _HALF) / (base + _HALF))
    sxx = float(np.sum((x - x.mean()) ** 2))
    if sxx <= 1e-12:
        return RuleWeight(0.0, n, "the rule never changed the prediction")
    slope = float(np.sum((x - x.mean()) * (y - y.mean()))) / sxx
    weight = min(max(slope, 0.0), 1.0)
    return RuleWeight(weight, n, f"slope {slope:.2f} over {n} backtests, clipped to [0, 1]")
