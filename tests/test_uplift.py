"""The uplift learnt from finished campaigns: pooled over the sample's planted campaign history,
shrunk toward no effect, and shown as response and incremental buyers."""

from __future__ import annotations

import json
import math
from datetime import datetime
from pathlib import Path

import duckdb
import numpy as np
import pytest
from click.testing import CliRunner
from scipy.stats import norm
from statsmodels.stats.contingency_tables import StratifiedTable

from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.sample import KEY_SKUS
from reachlist.uplift import PRIOR_SD, learn_uplift, shrink_log_ratio
from reachlist.warehouse import Warehouse

AS_OF = datetime(2026, 10, 1)


def planted(pristine: Path) -> dict[str, tuple[float, list[str]]]:
    """Planted ratio and campaign ids per purpose, from the sample's truth table."""
    con = duckdb.connect(str(pristine), read_only=True)
    rows = con.execute(
        "SELECT purpose, planted_ratio, campaign_id FROM sample_planted_campaigns ORDER BY 1, 3"
    ).fetchall()
    con.close()
    out: dict[str, tuple[float, list[str]]] = {}
    for purpose, ratio, cid in rows:
        out.setdefault(purpose, (ratio, []))[1].append(cid)
    return out


@pytest.mark.parametrize("purpose", ["introduce", "clear"])
def test_the_planted_uplift_is_recovered_within_its_interval(pristine: Path, purpose: str) -> None:
    ratio, ids = planted(pristine)[purpose]
    with Warehouse.open(pristine, read_only=True) as wh, CampaignLog.open(wh) as log:
        u = learn_uplift(wh, log, purpose, as_of=AS_OF)
    assert sorted(c.campaign_id for c in u.campaigns) == ids
    assert u.learnt and u.low <= ratio <= u.high
    # the pooled ratio, checked against statsmodels' Mantel-Haenszel pooled risk ratio
    # (statsmodels.stats.contingency_tables.StratifiedTable.riskratio_pooled)
    tables = np.array(
        [
            [
                [c.treated_buyers, c.treated - c.treated_buyers],
                [c.held_buyers, c.held - c.held_buyers],
            ]
            for c in u.campaigns
        ],
        dtype=float,
    ).transpose(1, 2, 0)
    assert u.measured is not None
    assert u.measured.estimate == pytest.approx(StratifiedTable(tables).riskratio_pooled)
    # shrunk toward 1, never past it
    assert abs(math.log(u.ratio)) <= abs(math.log(u.measured.estimate)) + 1e-12
    assert 0 < u.kept < 1


def test_no_finished_campaign_means_no_uplift(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh, CampaignLog.open(wh) as log:
        early = learn_uplift(wh, log, "introduce", as_of=datetime(2025, 6, 20))
    # the first introduction was sent on 2025-06-02: its 30-day horizon has not ended
    assert not early.learnt and early.campaigns == () and (early.low, early.high) == (1.0, 1.0)
    assert "no finished introduce campaign" in early.note


def test_shrinking_is_the_conjugate_normal_update() -> None:
    # Source: the normal prior / normal likelihood posterior (e.g. Gelman et al., Bayesian Data
    # Analysis, section 2.5; from memory): precision-weighted mean, variance 1/(1/t2 + 1/s2).
    x, se = math.log(1.8), 0.3
    post_var = 1 / (1 / PRIOR_SD**2 + 1 / se**2)
    post_mean = post_var * x / se**2
    z = norm.ppf(0.95)
    ratio, low, high, kept = shrink_log_ratio(x, se, 0.9)
    assert ratio == pytest.approx(math.exp(post_mean))
    assert (low, high) == pytest.approx(
        (
            math.exp(post_mean - z * math.sqrt(post_var)),
            math.exp(post_mean + z * math.sqrt(post_var)),
        )
    )
    assert kept == pytest.approx(post_mean / x)


def test_sizes_shows_response_and_incremental_buyers(sample: Path) -> None:
    mat = KEY_SKUS["heated_mat"]
    args = ["sizes", mat, "-w", str(sample), "--campaign", "u"]
    text = " ".join(CliRunner().invoke(main, args).output.split())
    assert "Response with the offer:" in text and "from 2 finished introduce campaigns" in text
    assert "Incremental buyers (the offer's own):" in text
    data = json.loads(CliRunner().invoke(main, [*args, "--json"]).output)
    u, b = data["uplift"], data["baseline_buyers"]
    assert u["response_buyers"] == pytest.approx(b["expected_buyers"] * u["ratio"])
    assert u["incremental_buyers"] == pytest.approx(b["expected_buyers"] * (u["ratio"] - 1))
    lo, hi = u["interval"]
    assert u["incremental_interval"] == pytest.approx(
        [b["expected_buyers"] * (lo - 1), b["expected_buyers"] * (hi - 1)]
    )


def test_without_finished_campaigns_the_response_is_not_learnt(unlogged: Path) -> None:
    args = ["sizes", KEY_SKUS["heated_mat"], "-w", str(unlogged), "--campaign", "u"]
    text = " ".join(CliRunner().invoke(main, args).output.split())
    assert "Response with the offer: not learnt (no finished introduce campaign" in text
    assert "Incremental buyers" not in text
    data = json.loads(CliRunner().invoke(main, [*args, "--json"]).output)
    assert data["uplift"]["measured_ratio"] is None and "response_buyers" not in data["uplift"]
