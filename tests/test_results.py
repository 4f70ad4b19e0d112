"""Campaign results on a hand-made campaign in the sample warehouse."""

from __future__ import annotations

import json
from dataclasses import asdict
from datetime import datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.audience import ChosenRule
from reachlist.campaigns import CampaignLog, CampaignRecord
from reachlist.cli import main
from reachlist.errors import InputError
from reachlist.results import campaign_results
from reachlist.stats import difference_interval
from reachlist.warehouse import Warehouse

SENT = datetime(2026, 6, 1)


def _planted_lacking(pristine: Path, limit: int | None = None) -> pl.Series:
    """Heated-mat holders lacking the mat on 2026-06-01 (the sample's planted rule)."""
    con = duckdb.connect(str(pristine), read_only=True)
    ids = con.sql(
        "SELECT customer_id FROM sample_planted WHERE rule_id = 'heated-mat' "
        "AND antecedent_held_at < TIMESTAMP '2026-06-01' "
        "AND (target_bought_at IS NULL OR target_bought_at >= TIMESTAMP '2026-06-01') "
        "ORDER BY customer_id" + ("" if limit is None else f" LIMIT {int(limit)}")
    ).pl()["customer_id"]
    con.close()
    return ids


def _log_campaign(
    pristine: Path,
    path: Path,
    campaign_id: str,
    antecedent: tuple[str, ...],
    contacts: pl.DataFrame,
) -> None:
    """Log a hand-made SG04-104 campaign sent on SENT in the state file at ``path``. The record
    carries the rules and window, as build_list logs them, so the estimate can rebuild the
    audience at past cutoffs."""
    with (
        Warehouse.open(pristine, read_only=True) as wh,
        CampaignLog.open(wh, str(path)) as log,
    ):
        rule = ChosenRule(1, "hand", antecedent, "SG04-104", 0.5, 2.9, 100, 50, True)
        record = CampaignRecord(
            campaign_id,
            SENT,
            "SG04-104",
            "introduce",
            parameters={"window": [datetime(2025, 6, 1), SENT], "level": "sku"},
            rules=[asdict(rule)],
        )
        log.record(record, contacts)


@pytest.fixture(scope="module")
def state(pristine: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A campaign log in a local state file: heated-mat holders lacking the mat on 2026-06-01,
    every fourth one held out."""
    ids = _planted_lacking(pristine)
    contacts = pl.DataFrame(
        {
            "customer_id": ids,
            "contact_group": ["holdout" if i % 4 == 0 else "treatment" for i in range(ids.len())],
            "score": 0.5,
            "rule_id": "hand-made",
        }
    )
    path = tmp_path_factory.mktemp("state") / "state.duckdb"
    _log_campaign(pristine, path, "mats-hand", ("SG04-101", "PC06-101"), contacts)
    return path


def test_results_against_direct_count(pristine: Path, state: Path) -> None:
    with (
        Warehouse.open(pristine, read_only=True) as wh,
        CampaignLog.open(wh, str(state)) as log,
    ):
        r = campaign_results(wh, log, "mats-hand", horizon_days=30)
        contacts = log.contacts("mats-hand")
    # Independent count: first purchases of the mat recorded by the generator (sample_planted).
    con = duckdb.connect(str(pristine), read_only=True)
    truth = con.sql(
        "SELECT DISTINCT customer_id FROM sample_planted WHERE rule_id = 'heated-mat' "
        "AND target_bought_at >= TIMESTAMP '2026-06-01' "
        "AND target_bought_at < TIMESTAMP '2026-07-01'"
    ).pl()
    con.close()
    hit = contacts.join(truth, on="customer_id")
    for g in (r.treatment, r.holdout):
        expected = hit.filter(pl.col("contact_group") == g.group).height
        assert abs(g.buyers - expected) <= 3  # full returns inside the horizon do not count
        assert g.customers == contacts.filter(pl.col("contact_group") == g.group).height
    d = difference_interval(
        r.treatment.buyers, r.treatment.customers, r.holdout.buyers, r.holdout.customers
    )
    assert r.difference == d
    # The offer did nothing here (the log was made after the fact), so no uplift is detected.
    assert r.ratio is not None and r.ratio.low < 1 < r.ratio.high
    assert "too small to tell" in r.sentence()
    assert r.predicted is not None
    p = r.predicted.expected
    assert p.low <= r.treatment.buyers <= p.high
    assert r.complete


def test_results_unknown_campaign(pristine: Path, state: Path) -> None:
    with (
        Warehouse.open(pristine, read_only=True) as wh,
        CampaignLog.open(wh, str(state)) as log,
        pytest.raises(InputError, match="no such campaign"),
    ):
        campaign_results(wh, log, "nope")


def test_results_cli(pristine: Path, state: Path) -> None:
    args = ["results", "mats-hand", "-w", str(pristine), "--state", str(state)]
    res = CliRunner().invoke(main, [*args, "--no-estimate"])
    assert res.exit_code == 0, res.output
    assert "treatment" in res.output and "holdout" in res.output and "holdout" in res.output
    res = CliRunner().invoke(main, [*args, "--json", "--no-estimate"])
    data = json.loads(res.output)
    assert data["treatment"]["customers"] + data["holdout"]["customers"] > 100
    assert data["verdict"]


def test_results_without_a_holdout_say_so_at_80_columns(pristine: Path, tmp_path: Path) -> None:
    """A list too small to hold anyone out (seen on Complete Journey: 2 customers, 10%): the
    screen says no one was held out, where it printed the holdout's rate as "nan of 2"."""
    contacts = pl.DataFrame(
        {
            "customer_id": _planted_lacking(pristine, limit=30),
            "contact_group": "treatment",
            "score": 0.5,
            "rule_id": "x",
        }
    )
    path = tmp_path / "state.duckdb"
    _log_campaign(pristine, path, "mats-all-treated", ("SG04-101",), contacts)
    res = CliRunner().invoke(
        main,
        ["--width", "80", "results", "mats-all-treated", "-w", str(pristine), "--state", str(path)],
    )
    assert res.exit_code == 0, res.output
    screen = " ".join(res.output.split())
    assert "Predicted buyers" in screen and "no one was held out to compare" in screen
    assert "nan" not in screen.lower()
    assert max(len(line) for line in res.output.splitlines()) <= 80
