"""The README's first command: `reachlist demo` runs the whole job on the sample warehouse."""

from __future__ import annotations

from pathlib import Path

import polars as pl
from click.testing import CliRunner

import reachlist
from reachlist.cli import main


def test_demo_runs_end_to_end_and_twice(tmp_path: Path) -> None:
    runner = CliRunner()
    for _ in range(2):  # a second run replaces its own list and campaign
        result = runner.invoke(main, ["demo", "--dir", str(tmp_path / "demo")])
        assert result.exit_code == 0, result.output
    assert "Caution: direct marketing is regulated" in result.output
    listed = pl.read_csv(tmp_path / "demo" / "heated-mat.csv")
    assert listed.height > 100
    assert set(listed.columns) >= {"customer_id", "score", "because_bought", "offer_name"}
    assert "email" not in listed.columns  # contact details only when asked for


def test_public_api_is_pinned() -> None:
    assert sorted(reachlist.__all__) == sorted(
        [
            "ContractError",
            "EmptyResultError",
            "InputError",
            "Mapping",
            "ReachlistError",
            "StateError",
            "Warehouse",
            "WarehouseError",
            "__version__",
            "CampaignLog",
            "ListRequest",
            "RuleSet",
            "backtest",
            "brief_data",
            "build_list",
            "build_sample",
            "calibrate_audience",
            "campaign_results",
            "check_warehouse",
            "estimate_takeup",
            "find_items",
            "list_campaigns",
            "mine_rules",
            "plan_list",
            "preview_list",
        ]
    )
    for name in reachlist.__all__:
        assert hasattr(reachlist, name)
