"""Backtests on the sample warehouse: the estimator recovers planted take-up, naive confidence
overshoots, and nothing after the cutoff leaks into the audience or the estimate."""

from __future__ import annotations

import json
import math
import shutil
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from reachlist.backtest import Backtest, backtest
from reachlist.cli import main
from reachlist.render.takeup import gains_chart_text, gains_svg
from reachlist.warehouse import Warehouse

CUTOFF = "2026-07-01"
CUTS = 8  # calibration cutoffs: 7 monthly backtests per audience, enough and fast


@pytest.fixture(scope="module")
def mat_backtest(pristine: Path) -> Backtest:
    with Warehouse.open(pristine, read_only=True) as wh:
        return backtest(wh, "SG04-104", cutoff=CUTOFF, max_cutoffs=CUTS)


def test_planted_rule_take_up_within_interval(mat_backtest: Backtest) -> None:
    # Source: sample_warehouse/README.md, planted rule heated-mat: propagator + seed compost ->
    # heated mat, 30-day take-up of holders lacking the mat exactly 0.25 (hazard_30d).
    pair = next(
        r
        for r in mat_backtest.rows
        if r.rule is not None and set(r.rule.antecedent) == {"SG04-101", "PC06-101"}
    )
    planted = 0.25 * pair.customers
    e = pair.estimate.expected
    assert e.low <= planted <= e.high
    assert e.low <= pair.observed <= e.high
    # Confidence (a co-purchase stock of about 0.5) overshoots the planted flow.
    assert pair.naive > 1.5 * planted


def test_combined_list_estimate_and_naive(mat_backtest: Backtest) -> None:
    c = mat_backtest.combined
    e = c.estimate.expected
    assert e.low <= c.observed <= e.high
    assert 0.7 < c.predicted / c.observed < 1.4
    assert c.naive / c.observed > 4  # confidence as take-up: several times too many buyers
    assert e.n_backtests == 6 * (CUTS - 1)  # 5 rules and the combined list at 7 cutoffs
    # The audience beats the base rate outside it, and the ranking beats a random list.
    assert c.observed / c.customers > mat_backtest.base_rate
    assert mat_backtest.gains["cum_share_buyers"][0] > mat_backtest.gains["cum_share_customers"][0]


def test_no_leakage_after_cutoff(pristine: Path, tmp_path: Path, mat_backtest: Backtest) -> None:
    changed = tmp_path / "changed.duckdb"
    shutil.copy(pristine, changed)
    con = duckdb.connect(str(changed))
    # Every audience customer buys the target right after the cutoff, and later orders vanish.
    ids = mat_backtest.calibration.members(0)["customer_id"].head(300).to_list()
    con.execute(
        "DELETE FROM order_lines WHERE order_id IN "
        "(SELECT order_id FROM orders WHERE ordered_at >= TIMESTAMP '2026-08-15')"
    )
    con.execute("DELETE FROM orders WHERE ordered_at >= TIMESTAMP '2026-08-15'")
    for i, cid in enumerate(ids):
        con.execute(
            "INSERT INTO orders VALUES (?, ?, TIMESTAMP '2026-07-02 10:00:00', 'online')",
            [90_000_000 + i, cid],
        )
        con.execute("INSERT INTO order_lines VALUES (?, 'SG04-104', 3, 30.00)", [90_000_000 + i])
    con.close()
    with Warehouse.open(changed, read_only=True) as wh:
        after = backtest(wh, "SG04-104", cutoff=CUTOFF, max_cutoffs=CUTS)
    before = mat_backtest
    assert [r.label for r in after.rows] == [r.label for r in before.rows]
    for a, b in zip(after.rows, before.rows, strict=True):
        assert a.customers == b.customers
        assert a.estimate.expected == b.estimate.expected
        assert a.naive == b.naive
    assert after.calibration.members(0)["customer_id"].equals(
        before.calibration.members(0)["customer_id"]
    )
    assert after.combined.observed > before.combined.observed  # only the observation moved


def test_gains_chart_text_and_svg(mat_backtest: Backtest) -> None:
    pts = mat_backtest.chart_points()
    text = gains_chart_text(pts, width=40, height=10)
    assert text.count("\n") == 13 and "*" in text and "." in text
    svg = gains_svg(pts, "Gains <mat>")
    assert svg.startswith("<svg") and "Gains &lt;mat&gt;" in svg and svg.count("<polyline") == 2


def test_backtest_cli_json(pristine: Path, tmp_path: Path) -> None:
    chart = tmp_path / "gains.svg"
    res = CliRunner().invoke(
        main,
        [
            "backtest",
            "TW18-101",
            "--cutoff",
            CUTOFF,
            "-w",
            str(pristine),
            "--json",
            "--chart",
            str(chart),
            "--top",
            "2",
        ],
    )
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    assert data["audiences"][-1]["audience"] == "combined"
    assert all(math.isfinite(a["predicted"]) for a in data["audiences"])
    assert chart.read_text().startswith("<svg")


def test_backtest_cli_bad_cutoff(pristine: Path) -> None:
    res = CliRunner().invoke(
        main, ["backtest", "SG04-104", "--cutoff", "2026-07-01x", "-w", str(pristine)]
    )
    assert res.exit_code != 0 and "Expected --cutoff as a date" in res.output


def test_backtest_too_early_names_its_own_option(pristine: Path) -> None:
    """A cutoff with too little history before it: the hint names --cutoff, the option this
    command has (it named --until, which backtest does not take)."""
    res = CliRunner().invoke(
        main,
        ["--width", "200", "backtest", "SG04-104", "--cutoff", "2025-06-15", "-w", str(pristine)],
    )
    assert res.exit_code != 0
    line = res.output.strip()
    assert "order history before 2025-06-15" in line and "choose a later --cutoff" in line
    assert "--until" not in line


def test_backtest_takes_the_options_that_shape_a_list(pristine: Path) -> None:
    """--max-antecedent, --min-support, --basket and --cutoffs reach the rebuilt audiences, so
    a backtest can rebuild the lists `build` made."""
    res = CliRunner().invoke(
        main,
        [
            "backtest",
            "TW18-101",
            "--cutoff",
            CUTOFF,
            "-w",
            str(pristine),
            "--json",
            "--top",
            "3",
            "--max-antecedent",
            "1",
            "--cutoffs",
            "3",
            "--min-support",
            "0.004",
        ],
    )
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    rules = [a for a in data["audiences"] if a["audience"] != "combined"]
    assert rules and all(len(a["antecedent"]) == 1 for a in rules)
    assert data["n_backtests"] <= 3 * (len(rules) + 1)
