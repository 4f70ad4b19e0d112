"""Gains table and chart: how much better than random a ranking of customers finds buyers.

Customers are ranked by score, highest first, and cut into ``n_groups`` groups of about equal
size (deciles by default). Customers with the same score always share a group (the group of the
first of them), so the result does not depend on row order; with few distinct scores there are
fewer groups. ``outcomes`` are observed buyers (0/1, or counts) or expected probabilities, in
which case "buyers" are expected buyers.

Columns of :func:`gains_table`, one row per group, best first:

- ``group`` (1 = highest scores), ``customers``, ``score_min``, ``score_max``
- ``buyers``, ``rate`` (buyers / customers), ``lift`` (rate / overall rate)
- ``cum_customers``, ``cum_buyers``, ``cum_share_customers``, ``cum_share_buyers`` (the gain:
  share of all buyers found by contacting down to this group), ``cum_lift``

>>> table = gains_table([0.9, 0.8, 0.7, 0.2, 0.1], [1, 1, 0, 0, 0], n_groups=5)
>>> table["cum_share_buyers"].to_list()
[0.5, 1.0, 1.0, 1.0, 1.0]
>>> table["lift"].to_list()
[2.5, 2.5, 0.0, 0.0, 0.0]
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt
import polars as pl

from reachlist.errors import InputError
from reachlist.stats import _check

__all__ = ["gains_chart_points", "gains_table", "score_groups"]


def score_groups(scores: npt.ArrayLike, n_groups: int = 10) -> npt.NDArray[np.int64]:
    """Group number (1 = highest scores) of each customer; ties share the better group.

    >>> score_groups([0.1, 0.9, 0.5, 0.5], n_groups=4).tolist()
    [3, 1, 2, 2]
    """
    s = _check.values("scores", scores)
    if n_groups < 1:
        raise InputError(f"n_groups: expected 1 or more, got {n_groups}.")
    n = s.size
    order = np.argsort(-s, kind="stable")
    position_group = (np.arange(n) * n_groups) // n  # 0-based group of each ranked position
    ranked = s[order]
    # Each distinct score takes the group of its first (best-ranked) position.
    _, first, inverse = np.unique(-ranked, return_index=True, return_inverse=True)
    group_of_ranked = position_group[first][inverse]
    # Renumber 1..m without gaps (ties can swallow a whole group).
    _, dense = np.unique(group_of_ranked, return_inverse=True)
    groups = np.empty(n, dtype=np.int64)
    groups[order] = dense + 1
    return groups


def gains_table(scores: npt.ArrayLike, outcomes: npt.ArrayLike, n_groups: int = 10) -> pl.DataFrame:
    """Gains by score group: customers, buyers, rate, lift, cumulative share of buyers.

    >>> gains_table([3, 2, 1, 0], [1, 0, 1, 0], n_groups=2)["cum_share_buyers"].to_list()
    [0.5, 1.0]
    """
    s = _check.values("scores", scores)
    y = _check.counts("outcomes", outcomes)
    _check.same_length(scores=s, outcomes=y)
    total = float(y.sum())
    if total == 0:
        raise InputError(
            "outcomes: expected at least one buyer (or a positive expected probability), got none; "
            "gains and lift are undefined.",
            hint="widen the horizon, or check that outcomes are 1 for buyers.",
        )
    groups = score_groups(s, n_groups)
    m = int(groups.max())
    idx = groups - 1
    customers = np.bincount(idx, minlength=m).astype(np.float64)
    buyers = np.bincount(idx, weights=y, minlength=m)
    score_min = np.full(m, np.inf)
    score_max = np.full(m, -np.inf)
    np.minimum.at(score_min, idx, s)
    np.maximum.at(score_max, idx, s)
    overall = total / s.size
    cum_customers = np.cumsum(customers)
    cum_buyers = np.cumsum(buyers)
    rate = buyers / customers
    return pl.DataFrame(
        {
            "group": np.arange(1, m + 1, dtype=np.int64),
            "customers": customers.astype(np.int64),
            "score_min": score_min,
            "score_max": score_max,
            "buyers": buyers,
            "rate": rate,
            "lift": rate / overall,
            "cum_customers": cum_customers.astype(np.int64),
            "cum_buyers": cum_buyers,
            "cum_share_customers": cum_customers / s.size,
            "cum_share_buyers": cum_buyers / total,
            "cum_lift": (cum_buyers / cum_customers) / overall,
        }
    )


def gains_chart_points(table: pl.DataFrame) -> pl.DataFrame:
    """Points of the cumulative gains curve from a :func:`gains_table`, starting at (0, 0).

    ``share_customers`` (x), ``share_buyers`` (y, the model) and ``random`` (y of contacting at
    random, the diagonal).

    >>> gains_chart_points(gains_table([2, 1], [1, 0], n_groups=2))["share_buyers"].to_list()
    [0.0, 1.0, 1.0]
    """
    missing = {"cum_share_customers", "cum_share_buyers"} - set(table.columns)
    if missing:
        raise InputError(
            f"table: expected a gains table, got one without {sorted(missing)}.",
            hint="pass the result of gains_table unchanged.",
        )
    x = [0.0, *table["cum_share_customers"].to_list()]
    y = [0.0, *table["cum_share_buyers"].to_list()]
    return pl.DataFrame({"share_customers": x, "share_buyers": y, "random": x})
