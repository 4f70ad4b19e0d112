"""Who must not be contacted: the exclusion steps, in their fixed order, and the waterfall.

The audience query returns one boolean column per step (the frequency cap is added from the
campaign log). A customer is removed by the first step, in the order of ``STEPS``, whose column is
true and which is in use; every step's count is kept, so the waterfall adds up.

>>> kept, waterfall = apply_exclusions(frame, in_use={"has_target", "no_consent"})  # doctest: +SKIP
"""

from __future__ import annotations

from dataclasses import dataclass

import polars as pl

__all__ = ["STEPS", "Step", "StepCount", "apply_exclusions"]


@dataclass(frozen=True)
class Step:
    key: str  # the boolean column that marks a customer for this step
    label: str


STEPS: tuple[Step, ...] = (
    Step("has_target", "already has the target"),
    Step("returned_target", "bought the target and returned it all"),
    Step("no_consent", "no marketing consent"),
    Step("suppressed", "on the suppression list"),
    Step("contacted_recently", "contacted within the frequency cap"),
    Step("held_out_elsewhere", "held out by another live campaign"),
    Step("global_holdout", "in the global holdout"),
    Step("not_adult", "age-restricted target, not known to be an adult"),
    Step("outside_region", "outside the chosen regions"),
    Step("outside_channel", "no order through the chosen channels"),
    Step("no_recent_order", "no order recently enough"),
    Step("no_address", "no email address (with contact fields)"),
)
"""The exclusion order (DESIGN.md). Consent and suppression can only be switched off explicitly."""

STEP_KEYS = tuple(s.key for s in STEPS)
FROM_LOG_OR_LIST = frozenset(
    {"contacted_recently", "held_out_elsewhere", "global_holdout", "no_address"}
)
"""Steps reachlist flags itself (from the campaign logs, or the listed email) rather than the
audience query."""


@dataclass(frozen=True)
class StepCount:
    """One line of the waterfall."""

    key: str
    label: str
    in_use: bool
    removed: int  # customers this step removed (0 when not in use)
    remaining: int  # customers left after it
    flagged: int  # customers the step's column marks, removed here or earlier (or not at all)
    note: str = ""  # why a step is not in use


def apply_exclusions(
    frame: pl.DataFrame, *, in_use: set[str], notes: dict[str, str] | None = None
) -> tuple[pl.DataFrame, list[StepCount]]:
    """Add ``excluded_by`` (the key of the first step in use that removes the customer, or null)
    and count every step. ``frame`` needs one boolean column per step key."""
    unknown = in_use - set(STEP_KEYS)
    if unknown:
        raise ValueError(f"unknown exclusion steps {sorted(unknown)}")
    expr = pl.lit(None, dtype=pl.String)
    for step in reversed(STEPS):
        if step.key in in_use:
            expr = pl.when(pl.col(step.key).fill_null(False)).then(pl.lit(step.key)).otherwise(expr)
    marked = frame.with_columns(expr.alias("excluded_by"))
    removed = dict(marked.group_by("excluded_by").len().iter_rows())
    flagged = marked.select(pl.col(k).fill_null(False).sum() for k in STEP_KEYS).row(0)
    remaining = frame.height
    waterfall = []
    for step, n_flagged in zip(STEPS, flagged, strict=True):
        n = int(removed.get(step.key, 0)) if step.key in in_use else 0
        remaining -= n
        waterfall.append(
            StepCount(
                step.key,
                step.label,
                step.key in in_use,
                n,
                remaining,
                int(n_flagged),
                (notes or {}).get(step.key, ""),
            )
        )
    return marked, waterfall
