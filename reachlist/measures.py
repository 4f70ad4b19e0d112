"""Rule measures, the exact test and multiple-testing corrections, vectorised over rules.

With N baskets and n(.) the number of baskets holding all of a set: support = n(X+y)/N,
coverage = n(X)/N, confidence = n(X+y)/n(X), lift = confidence/(n(y)/N), leverage = support -
coverage*n(y)/N, conviction = (1 - n(y)/N)/(1 - confidence) (+inf when confidence is 1 and
n(y) < N; NaN when both are 1), p_value = one-sided Fisher exact test for positive association,
P(n(X+y) >= observed) under the hypergeometric null with all margins fixed. The miner
(``reachlist.mining``) and the promotion overlap (``reachlist.overlap``) both use these.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np

from reachlist.errors import InputError

CORRECTIONS = ("holm", "bonferroni", "none")
"""Multiple-testing corrections for ``p_adjusted`` (family: every rule that met min support)."""

MEASURES = (
    "support",
    "coverage",
    "confidence",
    "lift",
    "leverage",
    "conviction",
    "p_value",
    "p_adjusted",
    "n_both",
    "n_antecedent",
)
"""Columns a rule table can be sorted by (descending; p-values ascending)."""


# --------------------------------------------------------------------------------------------
# Measures, p-values, corrections
# --------------------------------------------------------------------------------------------


def rule_measures(n: Any, n_x: Any, n_y: Any, n_xy: Any) -> dict[str, np.ndarray]:
    """Every measure of rules X -> y from raw counts (broadcast over numpy arrays).

    ``n`` baskets, ``n_x`` = n(X), ``n_y`` = n(y), ``n_xy`` = n(X+y). Returns float arrays:
    support, coverage, confidence, lift, leverage, conviction, p_value (one-sided Fisher exact
    test for positive association). Undefined values are NaN (confidence with n(X) = 0,
    conviction 0/0 when confidence and P(y) are both 1); conviction is +inf when confidence is 1
    and P(y) < 1.
    """
    n, n_x, n_y, n_xy = np.broadcast_arrays(
        *(np.asarray(v, dtype=np.int64) for v in (n, n_x, n_y, n_xy))
    )
    if np.any(n_xy < 0) or np.any(n_xy > np.minimum(n_x, n_y)) or np.any(np.maximum(n_x, n_y) > n):
        raise InputError("inconsistent counts: need 0 <= n_xy <= min(n_x, n_y) and n_x, n_y <= n.")
    fn, fx, fy, fxy = (v.astype(np.float64) for v in (n, n_x, n_y, n_xy))
    with np.errstate(divide="ignore", invalid="ignore"):
        support = fxy / fn
        coverage = fx / fn
        confidence = fxy / fx
        lift = (fxy * fn) / (fx * fy)
        leverage = (fxy * fn - fx * fy) / (fn * fn)
        # (1 - n_y/N) / (1 - n_xy/n_x) = (N - n_y) n_x / (N (n_x - n_xy)), exact integers inside
        conviction = ((fn - fy) * fx) / (fn * (fx - fxy))
    p_value = fisher_greater(n, n_x, n_y, n_xy)
    return {
        "support": support,
        "coverage": coverage,
        "confidence": confidence,
        "lift": lift,
        "leverage": leverage,
        "conviction": conviction,
        "p_value": p_value,
    }


def fisher_greater(n: Any, n_x: Any, n_y: Any, n_xy: Any) -> np.ndarray:
    """One-sided Fisher exact p-value, H1 positive association: P(K >= n_xy), K hypergeometric
    (population n, n_y successes, n_x draws); equal to
    ``scipy.stats.fisher_exact([[n_xy, n_x-n_xy], [n_y-n_xy, n-n_x-n_y+n_xy]], "greater")``."""
    n, n_x, n_y, n_xy = (np.asarray(v, dtype=np.int64) for v in (n, n_x, n_y, n_xy))
    from reachlist.stats.tails import hypergeom_sf  # here: command help starts without scipy

    return np.clip(hypergeom_sf(n_xy - 1, n, n_y, n_x), 0.0, 1.0)


def adjust_p_values(p: Any, correction: str = "holm") -> np.ndarray:
    """Family-wise adjusted p-values: ``holm`` (step-down), ``bonferroni`` or ``none``."""
    check_choice("correction", correction, CORRECTIONS)
    p = np.asarray(p, dtype=np.float64)
    m = p.size
    if correction == "none" or m == 0:
        return np.asarray(p.copy())
    if correction == "bonferroni":
        return np.asarray(np.minimum(1.0, p * m))
    order = np.argsort(p, kind="stable")  # Holm: step down from the smallest p
    stepped = np.maximum.accumulate((m - np.arange(m)) * p[order])
    out = np.empty(m)
    out[order] = np.minimum(1.0, stepped)
    return out


def rule_id(antecedent: Iterable[str], consequent: str) -> str:
    """Stable short id of a rule: a hash of the sorted antecedent labels and the consequent."""
    text = "\x1f".join(sorted(str(a) for a in antecedent)) + "\x1e" + str(consequent)
    return "R" + hashlib.blake2b(text.encode("utf-8"), digest_size=6).hexdigest()


def check_choice(name: str, value: str, allowed: Sequence[str]) -> None:
    if value not in allowed:
        raise InputError(f"unknown {name} {value!r}.", hint=f"use one of {', '.join(allowed)}")
