"""Tails and quantiles of the distributions reachlist reads, from ``scipy.special`` only.

``scipy.stats`` takes about 0.45 s to import (it rewrites hundreds of docstrings as it loads),
more than the rest of a `rules` run's imports together; ``scipy.special`` takes about 0.1 s. Each
function here is the special function that the matching ``scipy.stats`` method calls inside
(``norm.ppf`` is ``ndtri``, ``t.ppf`` is ``stdtrit``, ``chi2.ppf`` is ``2 gammaincinv(df/2, q)``,
``hypergeom.sf`` is Boost's hypergeometric tail), with that method's handling of the support's
edges, so the values are the same to the last bit; ``tests/test_stats_tails.py`` compares every
one with ``scipy.stats`` over grids.

The hypergeometric tail has no public name in ``scipy.special``; ``scipy.stats.hypergeom`` calls
the ufunc ``scipy.special._ufuncs._hypergeom_sf``. It is read when present and, in a SciPy that
no longer has it, ``scipy.stats.hypergeom.sf`` is used instead (slower to import, same values).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import special

_HYPERGEOM_SF: Callable[..., Any] | None = getattr(special._ufuncs, "_hypergeom_sf", None)


def norm_ppf(q: float) -> float:
    """The standard normal quantile (``scipy.stats.norm.ppf``)."""
    return float(special.ndtri(q))


def norm_isf(q: float) -> float:
    """The standard normal upper quantile (``scipy.stats.norm.isf``)."""
    return -float(special.ndtri(q))


def norm_cdf(x: float) -> float:
    """The standard normal distribution function (``scipy.stats.norm.cdf``)."""
    return float(special.ndtr(x))


def norm_sf(x: float) -> float:
    """The standard normal upper tail (``scipy.stats.norm.sf``)."""
    return float(special.ndtr(-x))


def t_ppf(q: float, df: float) -> float:
    """Student's t quantile with ``df`` degrees of freedom (``scipy.stats.t.ppf``)."""
    return float(special.stdtrit(df, q))


def chi2_ppf(q: float, df: float) -> float:
    """The chi-square quantile with ``df`` degrees of freedom (``scipy.stats.chi2.ppf``)."""
    return float(2.0 * special.gammaincinv(df / 2.0, q))


def hypergeom_sf(k: Any, total: Any, good: Any, draws: Any) -> npt.NDArray[np.float64]:
    """P(K > k) for K hypergeometric: ``total`` items, ``good`` of them marked, ``draws`` drawn
    (``scipy.stats.hypergeom.sf(k, total, good, draws)``, broadcast over integer arrays).

    As there: 1 below the support (k < max(0, draws + good - total)), 0 from its top
    (k >= min(good, draws)), NaN for impossible arguments (no items, or more marked or drawn
    than there are).
    """
    k, total, good, draws = np.broadcast_arrays(
        *(np.asarray(v, dtype=np.int64) for v in (k, total, good, draws))
    )
    if _HYPERGEOM_SF is None:  # a SciPy without the private ufunc (before 1.14)
        from scipy.stats import hypergeom

        return np.asarray(hypergeom.sf(k, total, good, draws), dtype=np.float64)
    valid = (total > 0) & (good >= 0) & (draws >= 0) & (good <= total) & (draws <= total)
    low = np.maximum(draws - (total - good), 0)
    high = np.minimum(good, draws)
    inside = valid & (k >= low) & (k < high)
    out = np.where(valid & (k < low), 1.0, 0.0)
    out[~valid] = np.nan
    if inside.any():
        tail = _HYPERGEOM_SF(
            k[inside].astype(np.float64),
            good[inside].astype(np.float64),
            draws[inside].astype(np.float64),
            total[inside].astype(np.float64),
        )
        out[inside] = np.clip(tail, 0.0, 1.0)
    return out
