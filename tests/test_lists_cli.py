"""The list commands end to end on the sample warehouse: sql, sizes, build, overlap."""

from __future__ import annotations

import json
from pathlib import Path

import duckdb
import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.campaigns import CampaignLog
from reachlist.cli import main
from reachlist.render import CAUTION
from reachlist.sample import KEY_SKUS
from reachlist.sample.past_campaigns import PLANTED_CAMPAIGNS
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases

MAT = KEY_SKUS["heated_mat"]
CAUTION_START = CAUTION[:40]


PAST = {c["campaign_id"] for c in PLANTED_CAMPAIGNS}  # the sample's campaign history


def logged_ids(path: Path) -> set[str]:
    con = duckdb.connect(str(path), read_only=True)
    ids = {r[0] for r in con.execute("SELECT campaign_id FROM campaigns").fetchall()}
    con.close()
    return ids


def run(*args: str) -> object:
    result = CliRunner().invoke(main, list(args), catch_exceptions=False)
    return result


def one_error_line(result) -> str:
    assert result.exit_code in (2, 3), result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("Error:"), result.output
    return lines[0]


def test_sql_prints_what_runs_and_inline_sql_runs_elsewhere(sample: Path) -> None:
    plain = run("sql", MAT, "-w", str(sample), "--region", "North", "--campaign", "x")
    assert plain.exit_code == 0, plain.output
    assert plain.stdout.startswith("-- reachlist audience")
    assert "$antecedent_items_0" in plain.stdout and "-- bound values" in plain.stdout
    assert "--   $regions_0 = 'North'" in plain.stdout
    assert CAUTION_START in plain.stderr and CAUTION_START not in plain.stdout
    narrow = run("--width", "80", "sql", MAT, "-w", str(sample))
    assert "--min-audience" in narrow.stderr  # the notes on the screen fit 80 columns
    assert max(len(line) for line in narrow.stderr.splitlines()) <= 80, narrow.stderr
    inline = run("sql", MAT, "-w", str(sample), "--region", "North", "--inline")
    assert "$" not in inline.stdout.split("WITH", 1)[1]
    con = duckdb.connect(str(sample), read_only=True)
    rows = con.execute(inline.stdout).fetchall()  # as an analyst would run it elsewhere
    con.close()
    from reachlist.audience import Filters
    from reachlist.planning import ListRequest, plan_list

    with Warehouse.open(sample, read_only=True) as wh:
        plan = plan_list(wh, ListRequest(MAT, filters=Filters(regions=("North",))))
        expected = wh.fetch(plan.query())
    assert len(rows) == expected.height > 1000
    assert [r[0] for r in rows] == expected["customer_id"].to_list()


def test_sizes_shows_rules_waterfall_holdout_and_labels_the_rate(sample: Path) -> None:
    result = run("sizes", MAT, "-w", str(sample), "--campaign", "preview")
    assert result.exit_code == 0, result.output
    text = result.output
    for expected in (
        "Rules, best first",
        "Exclusions, in order",
        "already has the target",
        "no marketing consent",
        "held out",
        "Historical co-purchase rate",
        "not a take-up forecast",
        CAUTION_START,
    ):
        assert expected in text, expected
    # the rate is never presented as take-up (take-up is the estimate's, labelled as expected
    # buyers; see tests/test_takeup_wiring.py)
    assert all(
        "not a take-up forecast" in ln
        for ln in text.splitlines()
        if "co-purchase rate" in ln and "take-up" in ln
    )
    assert logged_ids(sample) == PAST  # a preview writes nothing


def test_build_writes_logs_and_refuses_to_overwrite(sample: Path, tmp_path: Path) -> None:
    out = tmp_path / "mats.csv"
    args = ("build", MAT, "-w", str(sample), "--out", str(out), "--campaign", "mats-1")
    first = run(*args)
    assert first.exit_code == 0, first.output
    assert "Wrote" in first.output and CAUTION_START in first.output
    listed = pl.read_csv(out)
    assert listed.columns == [
        "customer_id",
        "campaign_id",
        "offer_item",
        "offer_name",
        "score",
        "rule_id",
        "because_bought",
    ]
    con = duckdb.connect(str(sample), read_only=True)
    names = dict(con.execute("SELECT sku, name FROM products").fetchall())
    consent = dict(con.execute("SELECT customer_id, consent_date FROM customers").fetchall())
    con.close()
    assert set(listed["offer_name"]) == {names[MAT]}
    # each row's words name the products of its rule's antecedent, read from products directly
    with Warehouse.open(sample, read_only=True) as wh:
        rules = {r["rule_id"]: r for r in CampaignLog(wh).campaign("mats-1")["rules"]}
    for rule_id, words in set(zip(listed["rule_id"], listed["because_bought"], strict=True)):
        for sku in rules[rule_id]["antecedent"]:
            assert names[sku] in words
    assert all(len(str(s).split(".")[-1]) <= 4 for s in listed["score"])  # rounded
    with Warehouse.open(sample, read_only=True) as wh:
        log = CampaignLog(wh)
        record = log.campaign("mats-1")
        contacts = log.contacts("mats-1")
    assert record is not None and record["counts"]["treatment"] == listed.height
    assert set(contacts["contact_group"]) == {"treatment", "holdout"}
    assert "already exists" in one_error_line(run(*args))
    assert "--replace" in one_error_line(run(*args, "--force"))
    again = run(*args, "--force", "--replace", "--with-contact", "--offer-code", "MAT-15")
    assert again.exit_code == 0, again.output
    contact = pl.read_csv(out, try_parse_dates=True)
    assert {"email", "consent_date"} <= set(contact.columns)
    assert set(contact["offer_code"]) == {"MAT-15"}
    for cid, day in contact.select("customer_id", "consent_date").head(50).iter_rows():
        assert day == consent[cid]


def test_parquet_lists_carry_their_provenance(sample: Path, tmp_path: Path) -> None:
    out = tmp_path / "mats.parquet"
    result = run(
        "build", MAT, "-w", str(sample), "--out", str(out), "--campaign", "pq-1", "--no-estimate"
    )
    assert result.exit_code == 0, result.output
    meta = json.loads(pl.read_parquet_metadata(out)["reachlist"])
    listed, held = pl.read_parquet(out), pl.read_parquet(tmp_path / "mats.holdout.parquet")
    assert meta["campaign_id"] == "pq-1" and meta["target"] == MAT
    assert meta["contacts"] == listed.height and meta["holdout"] == held.height
    assert set(listed["customer_id"]).isdisjoint(held["customer_id"])
    assert not (tmp_path / "mats.parquet.json").exists()  # Parquet holds it inside


def test_an_offer_code_is_checked_before_any_work(sample: Path, tmp_path: Path) -> None:
    line = one_error_line(
        run(
            "build",
            MAT,
            "-w",
            str(sample),
            "--out",
            str(tmp_path / "a.csv"),
            "--offer-code",
            "=HYPERLINK(1)",
        )
    )
    assert "--offer-code" in line and "found '=HYPERLINK(1)'" in line
    assert [p.name for p in tmp_path.iterdir()] == [sample.name]  # nothing written


def test_files_follow_the_umask(sample: Path, tmp_path: Path) -> None:
    import os

    old = os.umask(0o022)
    try:
        result = run(
            "build",
            MAT,
            "-w",
            str(sample),
            "--out",
            str(tmp_path / "u.csv"),
            "--campaign",
            "u",
            "--no-estimate",
        )
    finally:
        os.umask(old)
    assert result.exit_code == 0, result.output
    for name in ("u.csv", "u.holdout.csv", "u.csv.json"):
        assert (tmp_path / name).stat().st_mode & 0o777 == 0o644, name


def test_switching_off_consent_is_printed_and_logged(sample: Path, tmp_path: Path) -> None:
    result = run(
        "build",
        MAT,
        "-w",
        str(sample),
        "--out",
        str(tmp_path / "a.parquet"),
        "--campaign",
        "loud",
        "--ignore-consent",
    )
    assert result.exit_code == 0, result.output
    assert "Override: marketing-consent exclusion switched off" in result.output
    with Warehouse.open(sample, read_only=True) as wh:
        record = CampaignLog(wh).campaign("loud")
    assert record is not None and "--ignore-consent" in record["overrides"]
    assert record["parameters"]["ignore_consent"] is True


def test_state_file_keeps_the_log_out_of_the_warehouse(sample: Path, tmp_path: Path) -> None:
    state = tmp_path / "state.duckdb"
    assert run("sizes", MAT, "-w", str(sample), "--state", str(state)).exit_code == 0
    assert not state.exists()  # a preview creates nothing
    result = run(
        "build",
        MAT,
        "-w",
        str(sample),
        "--out",
        str(tmp_path / "l.csv"),
        "--state",
        str(state),
        "--campaign",
        "st",
    )
    assert result.exit_code == 0, result.output
    assert logged_ids(sample) == PAST  # the warehouse's own log is untouched
    with Warehouse.open(state, read_only=True) as db:
        assert CampaignLog(db).has_campaign("st")
    # the frequency cap now reads that state file
    capped = run(
        "sizes",
        MAT,
        "-w",
        str(sample),
        "--state",
        str(state),
        "--campaign",
        "next",
        "--min-audience",
        "0",
    )  # st's treatment is capped and its holdout kept out
    assert capped.exit_code == 0
    line = next(ln for ln in capped.output.splitlines() if "frequency cap" in ln)
    assert line.split()[-2] != "0"


def test_sensitive_target_needs_the_flag_and_warns(sample: Path) -> None:
    assert "--allow-sensitive" in one_error_line(run("sizes", "HH35-102", "-w", str(sample)))
    ok = run("sizes", "HH35-102", "-w", str(sample), "--allow-sensitive")
    assert ok.exit_code == 0, ok.output
    assert "Warning: this list uses items of a sensitive category" in ok.output


def test_new_item_through_a_stand_in(sample: Path) -> None:
    new = KEY_SKUS["self_watering_planter"]
    assert "--stand-in" in one_error_line(run("sizes", new, "-w", str(sample)))
    ok = run("sizes", new, "-w", str(sample), "--stand-in", "category:Indoor Pots & Planters")
    assert ok.exit_code == 0, ok.output
    assert "borrowed from the stand-in category:Indoor Pots & Planters" in ok.output


def test_clear_reports_how_far_the_list_gets_and_what_to_try_next(sample: Path) -> None:
    fleece = KEY_SKUS["frost_fleece"]
    args = ("sizes", fleece, "-w", str(sample), "--purpose", "clear", "--no-estimate")
    result = run(*args)
    assert result.exit_code == 0, result.output
    assert "Clearance: stock 1,200 (products.stock_on_hand)" in result.output
    assert "of the stock" in result.output and "calibrated expected buyers" in result.output
    assert "co-purchase rate x" not in result.output
    assert "Next steps to clear more stock" in result.output
    report = json.loads(run(*args, "--json").output)
    steps = report["next_steps"]
    changes = [s["change"].split()[0] for s in steps]
    assert sorted(changes) == ["--bought-within", "--level", "--stand-in", "--top"]
    units = [s["expected_units"] for s in steps]
    assert all(u is not None for u in units) and units == sorted(units, reverse=True)
    # each proposal is what the changed request gives: --level category, run as sizes
    level = next(s for s in steps if s["change"] == "--level category")
    again = json.loads(run(*args, "--level", "category", "--json").output)
    assert again["clearance"]["expected_units"] == pytest.approx(level["expected_units"])
    assert again["listed"] == level["customers"] and again["treatment"] == level["to_contact"]
    # the list that clears its stock proposes nothing
    small = json.loads(run(*args, "--stock", "5", "--json").output)
    assert small["clearance"]["clears"] and small["next_steps"] == []


def test_bad_input_is_one_line(sample: Path, tmp_path: Path) -> None:
    assert "not a sku" in one_error_line(run("sizes", cases.INJECT, "-w", str(sample)))
    existing = tmp_path / "x.csv"
    existing.write_text("keep me\n")
    line = one_error_line(run("build", MAT, "-w", str(sample), "--out", str(existing)))
    assert "already exists" in line and existing.read_text() == "keep me\n"
    assert ".csv or .parquet" in one_error_line(
        run("build", MAT, "-w", str(sample), "--out", str(tmp_path / "x.xlsx"))
    )
    assert "Rnope" in one_error_line(run("sizes", MAT, "-w", str(sample), "--rule", "Rnope"))
    con = duckdb.connect(str(sample), read_only=True)
    assert con.execute("SELECT count(*) FROM orders").fetchone()[0] > 0
    con.close()


def test_overlap_flags_items_that_sell_together(sample: Path) -> None:
    result = run(
        "overlap",
        KEY_SKUS["pressure_washer"],
        KEY_SKUS["patio_cleaner"],
        KEY_SKUS["houseplant_feed"],
        "-w",
        str(sample),
        "--basket",
        "customer",
    )
    assert result.exit_code == 0, result.output
    assert f"{KEY_SKUS['pressure_washer']} + {KEY_SKUS['patio_cleaner']}" in result.output
    assert "Advice:" in result.output and "holm-corrected" in result.output
    assert "2 to 15" in one_error_line(run("overlap", MAT, "-w", str(sample)))


def test_orders_without_customer_or_from_the_future_do_not_break_sizes(sample: Path) -> None:
    con = duckdb.connect(str(sample))
    # the sample declares orders.customer_id NOT NULL; a real warehouse may not
    con.execute("CREATE TABLE orders_copy AS SELECT * FROM orders")
    con.execute("DROP TABLE orders")
    con.execute("ALTER TABLE orders_copy RENAME TO orders")
    con.execute("UPDATE orders SET customer_id = NULL WHERE order_id % 50 = 0")
    nulls = con.execute("SELECT count(*) FROM orders WHERE customer_id IS NULL").fetchone()[0]
    last = con.execute("SELECT max(ordered_at) FROM orders").fetchone()[0]
    con.execute(
        "UPDATE orders SET ordered_at = TIMESTAMP '2062-05-01 10:00' "
        "WHERE order_id = (SELECT min(order_id) FROM orders)"
    )
    con.close()
    result = run("sizes", MAT, "-w", str(sample), "--no-estimate", "--campaign", "n")
    assert result.exit_code == 0, result.output
    text = " ".join(result.output.split())
    assert f"{nulls:,} order(s) have no customer id and were ignored" in text
    assert "1 order(s) are dated after today" in text and "the latest 2062-05-01" in text
    assert f".. {last:%Y-%m-%d} (sku items" in text  # the window still ends at the last order


def test_a_misspelt_region_is_an_input_error_with_a_suggestion(sample: Path) -> None:
    line = one_error_line(
        run("sizes", MAT, "-w", str(sample), "--region", "north", "--min-audience", "0")
    )
    assert "found 'north'" in line and "did you mean --region 'North'?" in line


def test_build_with_state_caps_on_campaigns_logged_in_the_warehouse(
    sample: Path, tmp_path: Path
) -> None:
    common = ("-w", str(sample), "--no-estimate")
    # the first campaign uses two rules, so the second (five rules) reaches customers it did not
    first = run(
        "build", MAT, *common, "--out", str(tmp_path / "a.csv"), "--campaign", "wh-1", "--top", "2"
    )
    assert first.exit_code == 0, first.output
    contacted = set(pl.read_csv(tmp_path / "a.csv")["customer_id"])
    state = tmp_path / "state.duckdb"
    # a preview with a state file that does not exist yet still reads the warehouse's log
    preview = run(
        "sizes", MAT, *common, "--state", str(state), "--campaign", "st-1", "--min-audience", "0"
    )
    line = next(ln for ln in preview.output.splitlines() if "frequency cap" in ln)
    assert f"{len(contacted):,}" in line
    second = run(
        "build",
        MAT,
        *common,
        "--out",
        str(tmp_path / "b.csv"),
        "--state",
        str(state),
        "--campaign",
        "st-1",
        "--min-audience",
        "0",
    )
    assert second.exit_code == 0, second.output
    line = next(ln for ln in second.output.splitlines() if "frequency cap" in ln)
    assert line.split("│")[1].strip() == f"{len(contacted):,}"  # every earlier contact removed
    assert contacted.isdisjoint(pl.read_csv(tmp_path / "b.csv")["customer_id"])
    with Warehouse.open(state, read_only=True) as db:
        record = CampaignLog(db).campaign("st-1")
    assert record is not None and record["parameters"]["cap_read"] == [str(state), str(sample)]
