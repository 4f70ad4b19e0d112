"""`reachlist campaigns`: the log as a user reads it, counted against the log's own rows."""

from __future__ import annotations

import io
import json
from datetime import date, timedelta
from pathlib import Path

import polars as pl
from click.testing import CliRunner
from rich.console import Console

from reachlist.campaign_list import list_campaigns
from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.render.campaigns import render_campaigns
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse

MAT = KEY_SKUS["heated_mat"]
FLEECE = KEY_SKUS["frost_fleece"]


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def _build(sample: Path, out: Path, target: str, campaign: str, *extra: str) -> None:
    result = run(
        "build",
        target,
        "-w",
        str(sample),
        "--no-estimate",
        "--out",
        str(out),
        "--campaign",
        campaign,
        *extra,
    )
    assert result.exit_code == 0, result.output


def test_the_listing_counts_what_the_log_holds(unlogged: Path, tmp_path: Path) -> None:
    _build(unlogged, tmp_path / "a.csv", MAT, "mat-dec")
    _build(unlogged, tmp_path / "b.csv", FLEECE, "fleece-dec", "--horizon", "10")
    with Warehouse.open(unlogged, read_only=True) as wh, CampaignLog.open(wh) as log:
        today = date.today()
        listing = list_campaigns(log, today=today)
        contacts = {c: log.contacts(c) for c in ("mat-dec", "fleece-dec")}
        later = list_campaigns(log, today=today + timedelta(days=31))
        first = list_campaigns(log, today=today, limit=1)
    rows = {r["campaign_id"]: r for r in listing.campaigns.iter_rows(named=True)}
    assert set(rows) == {"mat-dec", "fleece-dec"} and listing.total == 2
    for cid, frame in contacts.items():
        groups = frame.group_by("contact_group").len().to_dict(as_series=False)
        by_group = dict(zip(groups["contact_group"], groups["len"], strict=True))
        assert rows[cid]["treatment"] == by_group["treatment"]
        assert rows[cid]["holdout"] == by_group["holdout"]
        assert rows[cid]["listed"] == frame.height
    # the results date is the build day plus the horizon the campaign was built with
    assert rows["fleece-dec"]["horizon_days"] == 10 and rows["mat-dec"]["horizon_days"] == 30
    assert not any(rows[c]["results_ready"] for c in rows)
    assert all(later.campaigns["results_ready"].to_list())
    # newest first, and a narrowed listing says how many it left out
    assert first.campaigns["campaign_id"].to_list() == ["fleece-dec"]
    assert first.narrowed and first.total == 2


def test_the_screen_fits_80_columns_and_json_has_numbers(unlogged: Path, tmp_path: Path) -> None:
    long_id = "winter-heated-mat-reintroduction-north"
    _build(unlogged, tmp_path / "a.csv", MAT, long_id)
    with Warehouse.open(unlogged, read_only=True) as wh, CampaignLog.open(wh) as log:
        listing = list_campaigns(log, today=date.today())
    buf = io.StringIO()
    render_campaigns(Console(file=buf, width=80, highlight=False), listing)
    screen = buf.getvalue()
    assert max(len(line) for line in screen.splitlines()) <= 80
    first_cells = [ln.split("│")[1].strip() for ln in screen.splitlines() if ln.startswith("│")]
    assert long_id in "".join(first_cells)  # folded over lines, not cut
    treatment = listing.campaigns["treatment"][0]
    assert f"{treatment:,}" in screen
    payload = json.loads(run("campaigns", "-w", str(unlogged), "--json").output)
    assert payload["schema_version"] == 1
    (row,) = payload["campaigns"]
    assert row["campaign_id"] == long_id and row["treatment"] == treatment
    assert isinstance(row["holdout"], int) and isinstance(row["results_ready"], bool)


def test_state_file_and_warehouse_logs_are_both_listed(unlogged: Path, tmp_path: Path) -> None:
    state = tmp_path / "state.duckdb"
    _build(unlogged, tmp_path / "a.csv", MAT, "in-warehouse")
    _build(unlogged, tmp_path / "b.csv", FLEECE, "in-state", "--state", str(state))
    payload = json.loads(
        run("campaigns", "-w", str(unlogged), "--state", str(state), "--json").output
    )
    where = {r["campaign_id"]: r["log"] for r in payload["campaigns"]}
    assert Path(where["in-state"]).name == "state.duckdb"
    assert Path(where["in-warehouse"]).name == unlogged.name
    assert payload["total"] == 2


def test_no_log_yet_is_an_empty_listing_not_an_error(unlogged: Path) -> None:
    result = run("--width", "80", "campaigns", "-w", str(unlogged))
    assert result.exit_code == 0, result.output
    assert "0 campaign(s): no campaign log yet" in result.output
    assert " in ." not in result.output  # no empty list of logs
    assert max(len(line) for line in result.output.splitlines()) <= 80
    with Warehouse.open(unlogged, read_only=True) as wh, CampaignLog.open(wh) as log:
        assert list_campaigns(log, today=date.today()).campaigns.schema["built"] == pl.Datetime(
            "us"
        )


def test_a_limit_out_of_range_is_one_error_line(sample: Path) -> None:
    result = run("campaigns", "-w", str(sample), "--limit", "0")
    assert result.exit_code == 2 and "--limit" in result.output
