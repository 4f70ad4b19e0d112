"""Audiences on the sample warehouse: planted associations, the polars reference, purposes."""

from __future__ import annotations

import dataclasses
import time
from datetime import datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.audience import AudienceSpec, Filters, audience_query, choose_rules
from reachlist.clearance import QUICK_CUTOFFS
from reachlist.errors import InputError
from reachlist.lists import preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.rules import mine_rules
from reachlist.sample import KEY_SKUS, PERIOD_START, planted_rules
from reachlist.targets import Target, Window, last_order_day
from reachlist.warehouse import Warehouse
from tests import audience_reference as ref

NOW = datetime(2026, 10, 1, 9, 0)


@pytest.fixture(scope="module")
def tables(pristine: Path) -> dict[str, pl.DataFrame]:
    return ref.load(pristine)


@pytest.fixture(scope="module")
def wh(pristine: Path) -> Warehouse:
    with Warehouse.open(pristine, read_only=True) as w:
        yield w


@pytest.mark.parametrize("planted", planted_rules(), ids=lambda r: r["rule_id"])
def test_planted_rule_audience_is_who_the_generator_planted(
    wh: Warehouse, pristine: Path, planted: dict
) -> None:
    """Over the whole history, "holds the antecedent and lacks the target" must pick out exactly
    the customers the generator made antecedent holders without the target (sample_planted).
    The README's tolerance for membership is exact: antecedents are never fully returned."""
    target = Target(planted["target_level"], planted["target"])
    window = Window(datetime.combine(PERIOD_START, datetime.min.time()), last_order_day(wh))
    rules = choose_rules(
        ref.make_ruleset(
            target,
            [("P", planted["antecedent"], 0.5)],
            level=planted["antecedent_level"],
            window=window,
        )
    )
    spec = AudienceSpec(target, rules, planted["antecedent_level"], window)
    got = wh.fetch(audience_query(spec))
    reached = set(got["customer_id"].to_list())
    lacking = set(got.filter(~pl.col("has_target"))["customer_id"].to_list())
    con = duckdb.connect(str(pristine), read_only=True)
    try:
        rows = con.execute(
            "SELECT customer_id, target_purchases - target_full_returns AS held "
            "FROM sample_planted WHERE rule_id = ? AND antecedent_held_at IS NOT NULL",
            [planted["rule_id"]],
        ).fetchall()
    finally:
        con.close()
    assert reached == {c for c, _ in rows}
    assert lacking == {c for c, held in rows if held <= 0}
    assert len(lacking) > 100


@pytest.fixture(scope="module")
def mat_rules(wh: Warehouse):
    return mine_rules(wh, KEY_SKUS["heated_mat"])


def test_mined_rules_audience_matches_the_reference(wh: Warehouse, tables: dict, mat_rules) -> None:
    rules = choose_rules(mat_rules, top=8)
    pair = tuple(sorted((KEY_SKUS["propagator"], KEY_SKUS["seed_compost"])))
    assert pair in {tuple(sorted(r.antecedent)) for r in rules}
    for filters in (Filters(), Filters(("North", "East"), ("online",), 90)):
        spec = AudienceSpec(
            Target("sku", KEY_SKUS["heated_mat"]),
            rules,
            "sku",
            mat_rules.window,
            filters=filters,
            bought_within_days=180,
        )
        got = wh.fetch(audience_query(spec))
        assert ref.normalise(got).equals(ref.audience(tables, spec))


def test_category_target_and_age_restriction_match_the_reference(
    wh: Warehouse, tables: dict
) -> None:
    for target, restricted in (
        (Target("category", "Bird Feeders & Tables"), False),
        (Target("sku", KEY_SKUS["butane_refill"]), True),
    ):
        rs = mine_rules(wh, target, level="category" if target.level == "category" else "sku")
        spec = AudienceSpec(
            target,
            choose_rules(rs),
            rs.level,
            rs.window,
            age_restricted=restricted,
            adult_born_by=NOW.date().replace(year=2008),
        )
        got = wh.fetch(audience_query(spec))
        assert ref.normalise(got).equals(ref.audience(tables, spec))
        assert got.height > 500


def test_preview_is_quick_and_adds_up(wh: Warehouse, tables: dict) -> None:
    started = time.perf_counter()
    plan = plan_list(wh, ListRequest(KEY_SKUS["heated_mat"], campaign_id="s1"), now=NOW)
    out = preview_list(wh, plan)
    elapsed = time.perf_counter() - started
    assert elapsed < 5, f"preview took {elapsed:.1f} s"  # about a second on this machine
    kept = out.waterfall[-1].remaining
    assert sum(r.adds for r in out.per_rule or []) == kept == out.listed.height
    assert out.holdout.height == pytest.approx(0.1 * kept, abs=4 * (0.09 * kept) ** 0.5)
    aud = ref.audience(tables, plan.spec).with_columns(
        pl.lit(False).alias("contacted_recently"),
        # the global holdout (2% by default) by hashlib directly
        pl.col("customer_id")
        .map_elements(
            lambda c: ref.in_holdout("reachlist-global", c, 0.02), return_dtype=pl.Boolean
        )
        .alias("global_holdout"),
    )
    in_use = {
        "has_target",
        "returned_target",
        "no_consent",
        "suppressed",
        "contacted_recently",
        "global_holdout",
    }
    expected = sum(1 for r in aud.to_dicts() if ref.first_exclusion(r, in_use) is None)
    assert kept == expected


def test_clearing_the_frost_fleece_stops_at_the_stock(wh: Warehouse) -> None:
    fleece = KEY_SKUS["frost_fleece"]
    plan = plan_list(wh, ListRequest(fleece, purpose="clear", stock=10, campaign_id="c"), now=NOW)
    out = preview_list(wh, plan)  # no estimate asked for: the quick calibration sizes the stock
    c = out.clearance
    assert c is not None and c.sized and c.cutoffs == QUICK_CUTOFFS
    assert c.clears and c.customers < c.available and c.expected_units >= 10
    # sized by the rules' co-purchase rates, the same customers would promise nearly twice
    # the units (the overstatement the calibration exists to remove)
    t = out.treatment
    assert t["score"].sum() * c.units_per_buyer > 1.5 * c.expected_units
    whole_request = ListRequest(fleece, purpose="clear", campaign_id="c")
    whole = preview_list(wh, plan_list(wh, whole_request, now=NOW))
    full = preview_list(
        wh, plan_list(wh, dataclasses.replace(whole_request, estimate=True), now=NOW)
    )
    assert whole.clearance is not None and whole.clearance.stock == 1200
    assert not whole.clearance.clears and whole.clearance.expected_units is not None
    # the quick figure lies inside the full estimate's 90% interval for the same customers
    assert full.takeup is not None and full.clearance is not None
    assert full.clearance.cutoffs > QUICK_CUTOFFS
    _, low, high = full.takeup.expected_units
    assert full.treatment.height == whole.treatment.height
    assert low <= whole.clearance.expected_units <= high


def test_the_new_planter_is_introduced_through_its_category(wh: Warehouse) -> None:
    new = KEY_SKUS["self_watering_planter"]
    with pytest.raises(InputError, match="stand_in") as refused:
        plan_list(wh, ListRequest(new), now=NOW)
    # the hint names the item's own category, with its buyers, as the stand-in to pass
    assert 'stand_in category:"Indoor Pots & Planters" (its own category: ' in str(
        refused.value.hint
    )
    plan = plan_list(
        wh,
        ListRequest(new, stand_in="category:Indoor Pots & Planters", campaign_id="n"),
        now=NOW,
    )
    assert plan.stand_in == Target("category", "Indoor Pots & Planters")
    assert any("borrowed" in n for n in plan.notes)
    assert KEY_SKUS["houseplant_feed"] in {a for r in plan.rules for a in r.antecedent}
    out = preview_list(wh, plan)
    assert {s.key: s for s in out.waterfall}["has_target"].removed == 0
    assert out.listed.height > 500


def test_a_sensitive_target_needs_the_flag(wh: Warehouse) -> None:
    with pytest.raises(InputError, match="allow_sensitive=True"):
        plan_list(wh, ListRequest("HH35-102"), now=NOW)
    plan = plan_list(wh, ListRequest("HH35-102", allow_sensitive=True), now=NOW)
    assert "HH35-102" in plan.sensitive
