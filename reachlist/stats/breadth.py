"""Shopping breadth: deciles of it, and the take-up an audience's breadth mix predicts.

Breadth is the number of distinct categories a customer buys. Broad shoppers start buying almost
anything sooner than narrow ones, so the fairest forecast of take-up ignores the rule that built
an audience and asks: at an earlier cutoff, what share of customers *lacking* the target, at each
breadth, went on to buy it within the horizon? Apply those shares to the audience's breadth mix and
you have the expected buyers (:func:`breadth_matched_expectation`).

Deciles. :func:`breadth_deciles` returns cut points; a customer's decile is the number of cut
points strictly below their breadth (:func:`assign_decile`), so a decile holds breadths in
``(edge[k-1], edge[k]]``. Breadth is a small integer with many ties: ties always land in the same
decile, and when there are fewer than ten distinct values there are fewer than ten deciles. Every
decile holds at least one of the customers the edges were built from; breadths beyond the range
seen fall in the first or last decile, so an audience never lands in a decile with no calibration.
In SQL: ``(breadth > e1) + (breadth > e2) + ...`` over the edges.

>>> edges = breadth_deciles([1, 1, 1, 2, 2, 3, 4, 5, 8, 13])
>>> edges.tolist()
[1.0, 2.0, 3.0, 4.0, 5.0, 8.0]
>>> assign_decile([0, 1, 2, 6, 40], edges).tolist()
[0, 0, 1, 5, 6]
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = [
    "BreadthExpectation",
    "assign_decile",
    "breadth_deciles",
    "breadth_deciles_counted",
    "breadth_matched_expectation",
    "decile_rates",
]

DEFAULT_PRIOR_WEIGHT = 10.0


def breadth_deciles(breadth: npt.ArrayLike, n_groups: int = 10) -> npt.NDArray[np.float64]:
    """Cut points splitting ``breadth`` into at most ``n_groups`` groups of about equal size.

    The cut points are the breadth values at the 10%, 20%, ... 90% positions of the sorted data
    (the inverted-CDF quantile: always a value that occurs), without repeats, and without the
    maximum (so the last group is never empty).

    >>> breadth_deciles([3, 3, 3, 3]).tolist()
    []
    """
    b = _check.values("breadth", breadth)
    if n_groups < 1:
        raise InputError(f"n_groups: expected 1 or more, got {n_groups}.")
    probs = np.arange(1, n_groups) / n_groups
    cuts = np.unique(np.quantile(b, probs, method="inverted_cdf"))
    edges: npt.NDArray[np.float64] = cuts[cuts < b.max()].astype(np.float64)
    return edges


def breadth_deciles_counted(
    values: npt.ArrayLike, counts: npt.ArrayLike, n_groups: int = 10
) -> npt.NDArray[np.float64]:
    """:func:`breadth_deciles` of the data holding ``counts[k]`` times ``values[k]`` (a
    histogram, as an engine returns it), without expanding it: the same cut points.

    >>> breadth_deciles_counted([1, 2, 3, 4, 5, 8, 13], [3, 2, 1, 1, 1, 1, 1]).tolist()
    [1.0, 2.0, 3.0, 4.0, 5.0, 8.0]
    """
    v = _check.values("values", values)
    c = np.asarray(counts, dtype=np.int64)
    if c.shape != v.shape or np.any(c < 0) or int(c.sum()) == 0:
        raise InputError(
            f"counts: expected one positive count per value, got {c.size} counts for "
            f"{v.size} values.",
            hint="pass the histogram an engine returned (value, count) unchanged",
        )
    if n_groups < 1:
        raise InputError(f"n_groups: expected 1 or more, got {n_groups}.")
    order = np.argsort(v, kind="stable")
    v, c = v[order], c[order]
    n = int(c.sum())
    probs = np.arange(1, n_groups) / n_groups
    # numpy's inverted-CDF position, in the same floating-point steps: n * p - 1 rounded up
    virtual = n * probs - 1
    below = np.floor(virtual)
    pos = np.where(virtual - below > 0, below + 1, below).astype(np.int64)
    pos = np.clip(pos, 0, n - 1)
    at = np.searchsorted(np.cumsum(c), pos, side="right")
    cuts = np.unique(v[at])
    edges: npt.NDArray[np.float64] = cuts[cuts < v[c > 0].max()].astype(np.float64)
    return edges


def assign_decile(breadth: npt.ArrayLike, edges: npt.ArrayLike) -> npt.NDArray[np.int64]:
    """Decile number (0 = narrowest) of each breadth: how many edges lie strictly below it.

    >>> assign_decile([1, 2, 3], [1.0, 2.0]).tolist()
    [0, 1, 2]
    """
    b = _check.values("breadth", breadth, allow_empty=True)
    e = _check.values("edges", edges, allow_empty=True)
    if np.any(np.diff(e) <= 0):
        raise InputError(
            "edges: expected strictly increasing cut points, got repeats or a decrease.",
            hint="pass the edges returned by breadth_deciles unchanged.",
        )
    return np.searchsorted(e, b, side="left").astype(np.int64)


def decile_rates(
    calib_n: npt.ArrayLike,
    calib_buyers: npt.ArrayLike,
    *,
    prior_weight: float = DEFAULT_PRIOR_WEIGHT,
) -> npt.NDArray[np.float64]:
    """Forward take-up rate per decile, each pulled toward the pooled rate.

    ``rate_k = (buyers_k + w * pooled) / (n_k + w)``, with ``w = prior_weight`` customers' worth
    of the pooled rate. A decile with no calibration customers gets exactly the pooled rate; one
    with thousands is barely moved. ``prior_weight=0`` gives the raw rates (empty deciles still
    fall back to the pooled rate).

    >>> decile_rates([100, 0, 100], [2, 0, 10], prior_weight=0).tolist()
    [0.02, 0.06, 0.1]
    """
    n = _check.counts("calib_n", calib_n)
    buyers = _check.counts("calib_buyers", calib_buyers)
    _check.same_length(calib_n=n, calib_buyers=buyers)
    if prior_weight < 0 or not np.isfinite(prior_weight):
        raise InputError(
            f"prior_weight: expected a number of customers >= 0, got {prior_weight!r}."
        )
    if np.any(buyers > n):
        k = int(np.argmax(buyers > n))
        raise InputError(
            f"calib_buyers: expected at most calib_n buyers in each decile, "
            f"got {buyers[k]:g} buyers of {n[k]:g} customers in decile {k}."
        )
    if n.sum() == 0:
        raise InputError(
            "calib_n: expected calibration customers in at least one decile, got none.",
            hint="move the calibration cutoff earlier or widen the lookback window.",
        )
    pooled = buyers.sum() / n.sum()
    with np.errstate(divide="ignore", invalid="ignore"):
        rates = (buyers + prior_weight * pooled) / (n + prior_weight)
    out: npt.NDArray[np.float64] = np.where(n + prior_weight > 0, rates, pooled)
    return out


class BreadthExpectation(NamedTuple):
    """Expected buyers in an audience, and the rate they imply."""

    expected_buyers: float
    rate: float


def breadth_matched_expectation(
    calib_n: npt.ArrayLike,
    calib_buyers: npt.ArrayLike,
    audience_n: npt.ArrayLike,
    *,
    prior_weight: float = DEFAULT_PRIOR_WEIGHT,
) -> BreadthExpectation:
    """Expected buyers in an audience from the forward take-up of its breadth deciles.

    ``calib_n[k]``: customers in decile k who lacked the target at the earlier cutoff;
    ``calib_buyers[k]``: how many of them bought it within the horizon; ``audience_n[k]``: the
    audience's customers in decile k (same edges). Rates per decile come from
    :func:`decile_rates` (empty or thin deciles lean on the pooled rate).

    >>> breadth_matched_expectation([1000, 1000], [10, 50], [100, 300], prior_weight=0)
    BreadthExpectation(expected_buyers=16.0, rate=0.04)
    """
    rates = decile_rates(calib_n, calib_buyers, prior_weight=prior_weight)
    audience = _check.counts("audience_n", audience_n)
    if audience.size != rates.size:
        raise InputError(
            f"audience_n: expected one count per calibration decile ({rates.size}), "
            f"got {audience.size}.",
            hint="bucket the audience with the same edges as the calibration customers.",
        )
    total = audience.sum()
    if total == 0:
        raise InputError("audience_n: expected at least one audience customer, got none.")
    expected = float(np.dot(rates, audience))
    return BreadthExpectation(expected, expected / float(total))
