"""sizes and build lead with expected buyers (an interval from past backtests), never with
confidence as take-up; build logs the estimate; a clearance is sized by calibrated buyers."""

from __future__ import annotations

from pathlib import Path

import polars as pl
from click.testing import CliRunner

from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.lists import preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse

MAT = KEY_SKUS["heated_mat"]
FLEECE = KEY_SKUS["frost_fleece"]


def run(*args: str):  # type: ignore[no-untyped-def]
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def confidence_never_called_take_up(text: str) -> None:
    """Sentence by sentence (prose wraps at the screen's width): a co-purchase rate is never
    called take-up unless the sentence says it is not one."""
    import re

    for sentence in re.split(r"(?<=[.;])\s", " ".join(text.split())):
        if "co-purchase" in sentence.lower() and "take-up" in sentence:
            assert "not take-up" in sentence or "not a take-up forecast" in sentence, sentence


def test_sizes_leads_with_expected_buyers_and_an_interval(sample: Path) -> None:
    result = run("sizes", MAT, "-w", str(sample), "--campaign", "p", "--horizon", "30")
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())  # prose wraps at the screen's width
    start = text.index("Baseline buyers within 30 days (expected without the offer):")
    head = text[start : text.index(".", text.index("backtests", start))]
    assert "interval" in head and "backtests" in head
    for expected in (
        "base rate outside the audience",
        "Breadth-matched rate",
        "Added value over breadth",
        "Holdout:",
        "smallest uplift",
        "Historical co-purchase rate",
        "b.lift",
    ):
        assert expected in text, expected
    # the estimate comes before the co-purchase rate, which is labelled as that
    assert text.index("Baseline buyers within") < text.index("Historical co-purchase rate")
    confidence_never_called_take_up(text)


def test_no_estimate_says_it_was_skipped(sample: Path) -> None:
    result = run("sizes", MAT, "-w", str(sample), "--no-estimate")
    assert result.exit_code == 0, result.output
    assert "Baseline buyers: not estimated (skipped with --no-estimate)" in result.output
    assert "Baseline buyers within" not in result.output
    confidence_never_called_take_up(result.output)


def test_build_logs_the_estimate(sample: Path, tmp_path: Path) -> None:
    out = tmp_path / "mats.csv"
    result = run(
        "build", MAT, "-w", str(sample), "--out", str(out), "--campaign", "mats", "--horizon", "21"
    )
    assert result.exit_code == 0, result.output
    assert "Baseline buyers within 21 days" in result.output
    confidence_never_called_take_up(result.output)
    with Warehouse.open(sample, read_only=True) as wh:
        record = CampaignLog(wh).campaign("mats")
    assert record is not None
    est = record["counts"]["estimate"]
    assert est["low"] <= est["expected"] <= est["high"]
    assert est["n_backtests"] >= 5 and est["horizon_days"] == 21 and est["method"]
    assert est["audience"] == record["counts"]["treatment"]
    assert record["parameters"]["horizon_days"] == 21
    skipped = run(
        "build",
        MAT,
        "-w",
        str(sample),
        "--out",
        str(tmp_path / "quick.csv"),
        "--campaign",
        "quick",
        "--no-estimate",
        "--cap-days",
        "0",
    )  # mats' own
    # treatment would be capped and its holdout is held out while mats runs: the cap is off here
    assert skipped.exit_code == 0, skipped.output
    with Warehouse.open(sample, read_only=True) as wh:
        quick = CampaignLog(wh).campaign("quick")
    assert quick is not None
    assert quick["counts"]["estimate"] == {"skipped": "skipped with --no-estimate"}


def test_clearance_is_sized_by_calibrated_buyers(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        plan = plan_list(
            wh, ListRequest(FLEECE, purpose="clear", stock=5, estimate=True, campaign_id="c")
        )
        out = preview_list(wh, plan)
        quick = preview_list(
            wh, plan_list(wh, ListRequest(FLEECE, purpose="clear", stock=5, campaign_id="c"))
        )
    c = out.clearance
    assert c is not None and c.clears and c.basis.startswith("calibrated expected buyers")
    assert out.takeup is not None and out.takeup.audience == out.treatment.height
    # without the estimate the stock is still sized by a calibration, a shorter one
    q = quick.clearance
    assert q is not None and q.clears and q.basis.endswith("(3 cutoffs)") and quick.takeup is None
    # confidence overstates take-up: by the rules' co-purchase rates both lists would promise
    # far more than the stock
    for outcome in (out, quick):
        assert outcome.treatment["score"].sum() > 1.5 * 5
    cli = run("sizes", FLEECE, "-w", str(pristine), "--purpose", "clear", "--stock", "5")
    assert "at calibrated expected buyers within 30 days" in cli.output


def test_cutoffs_option_limits_the_backtests(pristine: Path) -> None:
    path = pristine
    result = CliRunner().invoke(main, ["sizes", "GP20-101", "-w", str(path), "--cutoffs", "2"])
    assert result.exit_code == 0, result.output
    assert "2 cutoffs" in result.output
    bad = CliRunner().invoke(main, ["sizes", "GP20-101", "-w", str(path), "--cutoffs", "0"])
    assert bad.exit_code == 2


def test_a_stand_in_list_speaks_of_one_set_of_customers(sample: Path, tmp_path: Path) -> None:
    """The estimate covers only treated customers who lack the stand-in; the screen says how
    many that is of those contacted and names the rest, and results compares the prediction with
    buyers among the same customers, learnt from the stand-in as build did."""
    import json

    planter, pots = KEY_SKUS["self_watering_planter"], "category:Indoor Pots & Planters"
    common = ("-w", str(sample), "--stand-in", pots, "--until", "2026-07-01")
    preview = json.loads(run("sizes", planter, *common, "--json").output)
    b = preview["baseline_buyers"]
    assert b["audience"] + b["already_hold"] == preview["treatment"] and b["already_hold"] > 0
    screen = " ".join(run("sizes", planter, *common).output.split())
    assert (
        f"of the {b['audience']:,} of {preview['treatment']:,} contacted customers who lack "
        f"{pots}" in screen
    )
    assert f"Not estimated: the other {b['already_hold']:,} contacted customers" in screen
    state = str(tmp_path / "state.duckdb")
    out = str(tmp_path / "planter.csv")
    built = run(
        "build",
        planter,
        *common,
        "--send-date",
        "2026-07-01",
        "--campaign",
        "pl",
        "--out",
        out,
        "--state",
        state,
    )
    assert built.exit_code == 0, built.output
    res = json.loads(run("results", "pl", "-w", str(sample), "--state", state, "--json").output)
    promised = res["promised_at_build"]
    assert promised["for_target"] == pots and promised["n_backtests"] > 0
    # the same customers and the same model as at build: the same prediction
    assert res["predicted_for"] == promised["audience"]
    assert res["predicted_buyers"] == promised["expected"]
    assert "stand-in" in res["prediction_note"]
    assert 0 <= res["observed_among_predicted"] <= res["treatment"]["buyers"]
    assert res["observed_among_predicted"] == 0  # the planter is sold only later


def test_results_count_buyers_among_the_customers_the_prediction_covers(
    sample: Path, tmp_path: Path
) -> None:
    """With a repurchase window the list holds past buyers the estimate does not cover; results
    compares the prediction with buyers among the customers it covers, counted here directly on
    the contract tables (plain SQL, no reachlist code)."""
    import json

    import duckdb

    state = str(tmp_path / "state.duckdb")
    day = "2026-08-15"
    built = run(
        "build",
        FLEECE,
        "-w",
        str(sample),
        "--bought-within",
        "90",
        "--until",
        day,
        "--send-date",
        day,
        "--campaign",
        "fl",
        "--out",
        str(tmp_path / "fl.csv"),
        "--state",
        state,
    )
    assert built.exit_code == 0, built.output
    res = json.loads(run("results", "fl", "-w", str(sample), "--state", state, "--json").output)
    assert res["complete"] and res["predicted_for"] < res["treatment"]["customers"]
    with Warehouse.open(sample, read_only=True) as wh, CampaignLog.open(wh, state) as log:
        treated = log.contacts("fl").filter(pl.col("contact_group") == "treatment")
    con = duckdb.connect(str(sample), read_only=True)
    con.register("treated", treated.select("customer_id").to_arrow())
    covered, bought = con.execute(
        """
        WITH lines AS (
            SELECT o.customer_id, l.sku, l.quantity, CAST(o.ordered_at AS DATE) AS day
            FROM orders o JOIN order_lines l USING (order_id)
            WHERE l.sku = $sku
        ),
        held AS (  -- a positive net quantity of the target before the send day
            SELECT customer_id FROM lines WHERE day < CAST($day AS DATE)
            GROUP BY customer_id HAVING sum(quantity) > 0
        ),
        bought AS (  -- a positive net quantity within 30 days of it
            SELECT customer_id FROM lines
            WHERE day >= CAST($day AS DATE) AND day < CAST($day AS DATE) + 30
            GROUP BY customer_id HAVING sum(quantity) > 0
        )
        SELECT count(*), count(b.customer_id)
        FROM treated t LEFT JOIN bought b USING (customer_id)
        WHERE t.customer_id NOT IN (SELECT customer_id FROM held)
        """,
        {"sku": FLEECE, "day": day},
    ).fetchone()
    con.close()
    assert res["predicted_for"] == covered
    assert res["observed_among_predicted"] == bought > 0


def test_an_estimate_on_few_cutoffs_says_so(pristine: Path) -> None:
    few = " ".join(run("sizes", MAT, "-w", str(pristine), "--cutoffs", "3").output.split())
    assert "overdispersed Poisson" in few and "at 2 cutoffs" in few
    assert "Rests on few: 2 past cutoffs" in few
    many = " ".join(run("sizes", MAT, "-w", str(pristine)).output.split())
    assert "at 12 cutoffs" in many and "Rests on few" not in many
