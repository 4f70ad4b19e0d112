"""The as-of day: --send-date (or --until) drives the contact cap, the default campaign id and the
horizon results count from; `reachlist sent` records a send day after the build."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from pathlib import Path

from click.testing import CliRunner

from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse

MAT = KEY_SKUS["heated_mat"]


def run(*args: str):
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def cap_removed(output: str) -> str:
    line = next(ln for ln in output.splitlines() if "frequency cap" in ln)
    return line.split("│")[1].strip()


def test_the_send_date_is_when_contacts_are_logged_and_names_the_campaign(
    unlogged: Path, tmp_path: Path
) -> None:
    sample = unlogged  # no campaign history: the one built here is the only one listed
    built = run(
        "build",
        MAT,
        "-w",
        str(sample),
        "--no-estimate",
        "--out",
        str(tmp_path / "a.csv"),
        "--send-date",
        "2026-12-20",
    )
    assert built.exit_code == 0, built.output
    listed = json.loads(run("campaigns", "-w", str(sample), "--json").output)["campaigns"]
    (campaign_id,) = [r["campaign_id"] for r in listed]
    with Warehouse.open(sample, read_only=True) as wh:
        log = CampaignLog(wh)
        contacts = log.contacts(campaign_id)
        record = log.campaign(campaign_id)
    assert campaign_id.endswith("20261220")  # the default id carries the as-of day
    assert set(contacts["contacted_at"].to_list()) == {datetime(2026, 12, 20)}
    assert record is not None and record["parameters"]["send_date"] == "2026-12-20"
    # built when it ran (today), not on the send day
    assert abs((record["created_at"].date() - datetime.now(UTC).date()).days) <= 1
    assert listed[0]["sent"] == "2026-12-20"


def test_the_cap_counts_back_from_the_as_of_day(sample: Path, tmp_path: Path) -> None:
    common = ("-w", str(sample), "--no-estimate", "--cap-days", "14", "--min-audience", "0")
    first = run(
        "build",
        MAT,
        *common,
        "--out",
        str(tmp_path / "a.csv"),
        "--campaign",
        "june",
        "--send-date",
        "2026-06-01",
    )
    assert first.exit_code == 0, first.output
    with Warehouse.open(sample, read_only=True) as wh:
        june = CampaignLog(wh).contacts("june").height
    # as of 2026-06-10 (--until), June's contacts were 9 days ago: inside a 14-day cap
    within = run("sizes", MAT, *common, "--until", "2026-06-10", "--campaign", "x")
    assert within.exit_code == 0, within.output
    assert cap_removed(within.output) not in ("0", "-")
    # sent on 2026-07-01, they were 30 days ago: outside it
    later = run("sizes", MAT, *common, "--send-date", "2026-07-01", "--campaign", "y")
    assert later.exit_code == 0, later.output
    assert cap_removed(later.output) == "0"
    assert june > 0


def test_sent_moves_a_campaign_and_results_follow(sample: Path, tmp_path: Path) -> None:
    built = run(
        "build",
        MAT,
        "-w",
        str(sample),
        "--no-estimate",
        "--out",
        str(tmp_path / "a.csv"),
        "--campaign",
        "late",
    )
    assert built.exit_code == 0, built.output
    moved = run("sent", "late", "-w", str(sample), "--on", "2026-08-01")
    assert moved.exit_code == 0, moved.output
    with Warehouse.open(sample, read_only=True) as wh:
        log = CampaignLog(wh)
        contacts = log.contacts("late")
        record = log.campaign("late")
    assert f"{contacts.height:,} contacts now sent on 2026-08-01" in moved.output
    assert set(contacts["contacted_at"].to_list()) == {datetime(2026, 8, 1)}
    assert record is not None and record["parameters"]["send_date"] == "2026-08-01"
    listing = json.loads(run("campaigns", "-w", str(sample), "--json").output)["campaigns"]
    assert listing[0]["sent"] == "2026-08-01" and listing[0]["results_from"] == "2026-08-31"
    # the sample's orders run to 2026-09-30, so a send on 2026-08-01 has a complete horizon
    results = run("results", "late", "-w", str(sample), "--no-estimate", "--json")
    assert results.exit_code == 0, results.output
    assert json.loads(results.output)["complete"] is True


def test_a_bad_send_date_and_an_unknown_campaign_are_one_line(sample: Path) -> None:
    bad = run("sizes", MAT, "-w", str(sample), "--send-date", "soon", "--no-estimate")
    assert bad.exit_code == 2 and "--send-date" in bad.output and "'soon'" in bad.output
    unknown = run("sent", "nope", "-w", str(sample), "--on", "2026-08-01")
    assert unknown.exit_code == 2 and "no such campaign" in unknown.output
