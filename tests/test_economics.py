"""The offer's economics on screen and in --json: the arithmetic from the list's own figures, the
price counted directly on the contract tables, and the discount given away when no uplift is
learnt."""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner

from reachlist.cli import main
from reachlist.sample import KEY_SKUS

MAT = KEY_SKUS["heated_mat"]
DAY = "2026-10-01"


def sizes(path: Path, *extra: str) -> dict:
    args = ["sizes", MAT, "-w", str(path), "--until", DAY, "--campaign", "e", *extra]
    result = CliRunner().invoke(main, [*args, "--json"])
    assert result.exit_code == 0, result.output
    return json.loads(result.output)


def direct_price(path: Path) -> float:
    """Net amount per unit of the mat's purchase lines in the year before the as-of day, in
    plain SQL on the contract tables."""
    con = duckdb.connect(str(path), read_only=True)
    (price,) = con.execute(
        """
        SELECT sum(l.net_amount) / sum(l.quantity)
        FROM (SELECT DISTINCT order_id, sku, quantity, net_amount FROM order_lines) l
        JOIN orders o USING (order_id)
        WHERE l.sku = ? AND l.quantity > 0
          AND o.ordered_at >= DATE '2025-10-01' AND o.ordered_at < DATE '2026-10-01'
        """,
        [MAT],
    ).fetchone()
    con.close()
    return float(price)


def test_economics_follow_from_baseline_uplift_and_price(sample: Path) -> None:
    data = sizes(sample, "--discount", "15", "--margin", "40")
    x, b, u = data["economics"], data["baseline_buyers"], data["uplift"]
    assert x["price"] == pytest.approx(direct_price(sample))
    assert x["learnt"] and x["ratio"] == [u["ratio"], *u["interval"]]
    base, per, p, d, m = b["expected_buyers"], b["units_per_buyer"], x["price"], 0.15, 0.40
    r = u["ratio"]
    assert x["incremental_units"][0] == pytest.approx(base * (r - 1) * per)
    assert x["incremental_revenue"][0] == pytest.approx(base * (r - 1) * per * p * (1 - d))
    assert x["coupon_cost"][0] == pytest.approx(base * r * per * p * d)
    assert x["coupon_cost_to_buyers_anyway"] == pytest.approx(base * per * p * d)
    assert x["net_margin"][0] == pytest.approx(base * per * p * ((r - 1) * (m - d) - d))
    for key in ("incremental_units", "coupon_cost", "net_margin"):
        low, mid, high = x[key][1], x[key][0], x[key][2]
        assert low <= mid <= high
    screen = " ".join(
        CliRunner()
        .invoke(main, ["sizes", MAT, "-w", str(sample), "--until", DAY, "--discount", "15"])
        .output.split()
    )
    assert "Offer economics at 15% off" in screen and "pass --margin PCT" in screen


def test_without_a_learnt_uplift_the_offer_only_gives_the_discount_away(unlogged: Path) -> None:
    x = sizes(unlogged, "--discount", "20", "--margin", "35")["economics"]
    assert not x["learnt"] and x["incremental_units"] == [0.0, 0.0, 0.0]
    lost = -x["coupon_cost_to_buyers_anyway"]
    assert x["net_margin"] == pytest.approx([lost, lost, lost]) and lost < 0


@pytest.mark.parametrize(
    ("extra", "said"),
    [
        (("--discount", "0"), "--discount as a percentage above 0"),
        (("--margin", "30"), "Expected --discount with --margin or --price"),
        (("--discount", "10", "--price", "-2"), "--price above 0"),
    ],
)
def test_bad_offer_terms_are_one_line(pristine: Path, extra: tuple[str, ...], said: str) -> None:
    result = CliRunner().invoke(main, ["sizes", MAT, "-w", str(pristine), *extra])
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert result.exit_code != 0 and len(lines) == 1 and said in lines[0]


def test_a_new_item_needs_a_price(pristine: Path) -> None:
    new = KEY_SKUS["self_watering_planter"]
    args = ["sizes", new, "-w", str(pristine), "--stand-in", "category:Indoor Pots & Planters"]
    refused = CliRunner().invoke(main, [*args, "--until", "2026-06-01", "--discount", "10"])
    assert refused.exit_code != 0 and "pass --price" in refused.output
    priced = CliRunner().invoke(
        main, [*args, "--until", "2026-06-01", "--discount", "10", "--price", "19.99", "--json"]
    )
    assert priced.exit_code == 0, priced.output
    assert json.loads(priced.output)["economics"]["price"] == 19.99


def test_a_discount_without_the_estimate_says_why_there_are_no_economics(pristine: Path) -> None:
    args = ["sizes", MAT, "-w", str(pristine), "--discount", "15", "--no-estimate"]
    text = " ".join(CliRunner().invoke(main, args).output.split())
    assert "Offer economics: not computed (skipped with --no-estimate)" in text
