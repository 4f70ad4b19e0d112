"""The statistics package: its public names, and the examples in its docstrings."""

from __future__ import annotations

import doctest
import importlib

import pytest

import reachlist.stats

MODULES = ["breadth", "calibration", "gains", "intervals", "lift", "power"]


def test_public_api_is_pinned() -> None:
    assert sorted(reachlist.stats.__all__) == [
        "BreadthExpectation",
        "Calibration",
        "DEFAULT_DISPERSION",
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
    for name in reachlist.stats.__all__:
        assert getattr(reachlist.stats, name) is not None


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name: str) -> None:
    module = importlib.import_module(f"reachlist.stats.{name}")
    result = doctest.testmod(module, optionflags=doctest.NORMALIZE_WHITESPACE)
    assert result.attempted > 0
    assert result.failed == 0


@pytest.mark.parametrize("name", MODULES)
def test_every_public_function_has_an_example(name: str) -> None:
    module = importlib.import_module(f"reachlist.stats.{name}")
    for attr in module.__all__:
        obj = getattr(module, attr)
        if callable(obj) and not isinstance(obj, type):
            assert ">>>" in (obj.__doc__ or ""), f"{name}.{attr} has no example"
