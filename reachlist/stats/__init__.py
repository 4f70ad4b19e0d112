"""The statistics behind honest take-up estimates: pure functions over counts, no database.

Rule confidence is a stock (the share of antecedent holders who already hold the target); take-up
is a flow (the share of customers lacking the target who start buying it within the horizon).
Confidence overshoots take-up several times over, so reachlist predicts take-up from the flow:

- :mod:`~reachlist.stats.breadth`: breadth deciles and the breadth-matched expectation, the
  forward take-up of customers like the audience in how broadly they shop;
- :mod:`~reachlist.stats.lift`: Mantel-Haenszel ratios, what a rule adds over breadth;
- :mod:`~reachlist.stats.calibration`: factors and intervals learnt from past backtests, and how
  far a rule-specific adjustment has earned trust;
- :mod:`~reachlist.stats.intervals`: Wilson, Newcombe and log-ratio intervals for measured take-up;
- :mod:`~reachlist.stats.power`: what a holdout of a given size can detect;
- :mod:`~reachlist.stats.gains`: gains tables and chart points for a ranking.
"""

from __future__ import annotations

from reachlist.stats.breadth import (
    BreadthExpectation,
    assign_decile,
    breadth_deciles,
    breadth_deciles_counted,
    breadth_matched_expectation,
    decile_rates,
)
from reachlist.stats.calibration import (
    DEFAULT_DISPERSION,
    Calibration,
    RuleWeight,
    TakeUpEstimate,
    calibrate,
    rule_weight,
)
from reachlist.stats.gains import gains_chart_points, gains_table, score_groups
from reachlist.stats.intervals import (
    Interval,
    difference_interval,
    ratio_interval,
    wilson_interval,
)
from reachlist.stats.lift import (
    StratifiedRatio,
    mantel_haenszel_odds_ratio,
    mantel_haenszel_risk_ratio,
)
from reachlist.stats.power import (
    DetectableUplift,
    HoldoutPlan,
    cohens_h,
    holdout_power,
    holdout_share_needed,
    minimum_detectable_uplift,
)

__all__ = [
    "DEFAULT_DISPERSION",
    "BreadthExpectation",
    "Calibration",
    "DetectableUplift",
    "HoldoutPlan",
    "Interval",
    "RuleWeight",
    "StratifiedRatio",
    "TakeUpEstimate",
    "assign_decile",
    "breadth_deciles",
    "breadth_deciles_counted",
    "breadth_matched_expectation",
    "calibrate",
    "cohens_h",
    "decile_rates",
    "difference_interval",
    "gains_chart_points",
    "gains_table",
    "holdout_power",
    "holdout_share_needed",
    "mantel_haenszel_odds_ratio",
    "mantel_haenszel_risk_ratio",
    "minimum_detectable_uplift",
    "ratio_interval",
    "rule_weight",
    "score_groups",
    "wilson_interval",
]
