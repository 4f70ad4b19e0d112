"""Rules toward a target, from the warehouse: planted associations, edge cases, CLI, PostgreSQL."""

from __future__ import annotations

import json
import math
import shutil
from itertools import combinations
from pathlib import Path

import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.check import check_warehouse
from reachlist.cli import main
from reachlist.errors import EmptyResultError, InputError
from reachlist.rules import mine_rules
from reachlist.sample import planted_rules
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse
from tests import handmade as hm


@pytest.fixture(scope="module")
def garden(pristine: Path) -> Path:
    return pristine


# Confidence of each planted rule over the 12 months ending 2026-09-30, as documented in
# sample_warehouse/README.md (measured there on the 1M-customer build).
DOCUMENTED_CONFIDENCE = {
    "heated-mat": 0.506,
    "patio-cleaner": 0.470,
    "frost-fleece": 0.427,
    "bird-feeders": 0.392,
    "butane-refill": 0.475,
}


@pytest.mark.parametrize("rule_id", sorted(DOCUMENTED_CONFIDENCE))
def test_planted_rules_are_recovered_with_their_documented_strength(
    garden: Path, rule_id: str
) -> None:
    planted = next(r for r in planted_rules() if r["rule_id"] == rule_id)
    target = (
        planted["target"] if planted["target_level"] == "sku" else f"category:{planted['target']}"
    )
    with Warehouse.open(garden, read_only=True) as wh:
        rs = mine_rules(wh, target, level=planted["antecedent_level"], keep_unproductive=True)
    hit = rs.frame.filter(pl.col("antecedent").list.sort() == sorted(planted["antecedent"]))
    assert hit.height == 1, f"planted rule {rule_id} not found"
    row = hit.row(0, named=True)
    expected = DOCUMENTED_CONFIDENCE[rule_id]
    se = math.sqrt(expected * (1 - expected) / row["n_antecedent"])
    assert abs(row["confidence"] - expected) < 4 * se, (row["confidence"], expected, se)
    assert row["significant"] and row["lift"] > 1.8
    assert row["productive"]


def test_two_item_rule_beats_each_single_item(garden: Path) -> None:
    with Warehouse.open(garden, read_only=True) as wh:
        rs = mine_rules(wh, "SG04-104", keep_unproductive=True, max_antecedent=2)
    conf = {tuple(sorted(r["antecedent"])): r["confidence"] for r in rs.frame.iter_rows(named=True)}
    pair = conf[("PC06-101", "SG04-101")]
    assert pair > conf[("SG04-101",)] + 0.1 and pair > conf[("PC06-101",)] + 0.1


def _independent_rules(
    path: Path, target: str, since: str, until: str
) -> dict[tuple[str, ...], tuple[int, int]]:
    """Customer baskets counted straight from the raw tables with polars: n(X), n(X+y)."""
    import duckdb

    con = duckdb.connect(str(path), read_only=True)
    lines = con.sql("SELECT * FROM order_lines").pl().unique()
    orders = con.sql("SELECT * FROM orders").pl()
    skus = set(con.sql("SELECT sku FROM products").pl()["sku"].to_list())
    con.close()
    held = (
        lines.join(orders, on="order_id")
        .filter(
            (pl.col("ordered_at") >= pl.lit(since).str.to_datetime())
            & (pl.col("ordered_at") < pl.lit(until).str.to_datetime())
        )
        .group_by("customer_id", "sku")
        .agg(pl.col("quantity").sum())
        .filter((pl.col("quantity") > 0) & pl.col("sku").is_in(list(skus)))
    )
    baskets = [set(s) for s in held.group_by("customer_id").agg("sku")["sku"].to_list()]
    items = sorted({i for b in baskets for i in b} - {target})
    out = {}
    for k in (1, 2):
        for x in combinations(items, k):
            n_x = sum(1 for b in baskets if set(x) <= b)
            n_xy = sum(1 for b in baskets if set(x) <= b and target in b)
            if n_xy:
                out[x] = (n_x, n_xy)
    return out


def test_counts_follow_returns_duplicates_and_unknown_skus(tmp_path: Path) -> None:
    products = [hm.product(s) for s in ("A", "B", "T")]
    customers = [hm.customer(i) for i in range(1, 7)]
    purchases = [
        (1, "2025-03-01", "A", 1),
        (1, "2025-03-02", "T", 1),
        (2, "2025-03-01", "A", 1),
        (2, "2025-03-01", "A", 1),  # duplicate line: counts once
        (2, "2025-03-05", "A", -1),  # returns the single purchase
        (2, "2025-03-06", "T", 1),
        (3, "2025-03-01", "A", 2),
        (3, "2025-03-01", "B", 1),
        (3, "2025-03-02", "T", 1),
        (3, "2025-03-09", "T", -1),  # target bought once and returned
        (4, "2025-03-01", "B", 1),
        (4, "2025-03-01", "T", 1),
        (4, "2025-03-01", "ZZ", 1),
        (5, "2025-03-01", "A", 1),
        (5, "2025-03-01", "B", 0),  # zero quantity: not a purchase
        (6, "2024-01-01", "A", 1),
        (6, "2025-03-01", "T", 1),  # outside the window
    ]
    path = hm.build(
        tmp_path / "w.duckdb", customers=customers, products=products, purchases=purchases
    )
    with Warehouse.open(path) as wh:
        rs = mine_rules(
            wh,
            "T",
            since="2025-01-01",
            until="2025-12-31",
            min_support=1e-9,
            min_lift=0.0,
            keep_unproductive=True,
            max_antecedent=2,
        )
    got = {
        tuple(sorted(r["antecedent"])): (r["n_antecedent"], r["n_both"])
        for r in rs.frame.iter_rows(named=True)
    }
    expected = _independent_rules(path, "T", "2025-01-01", "2025-12-31")
    assert got == expected
    assert got[("A",)] == (3, 1)  # customers 1, 3, 5 hold A; only 1 also holds T
    assert rs.n_baskets == 6


def test_category_target_leaves_out_its_own_skus(garden: Path) -> None:
    with Warehouse.open(garden, read_only=True) as wh:
        rs = mine_rules(wh, "category:Bird Feeders & Tables", level="sku")
        inside = set(
            wh.fetch(
                __import__("reachlist.query", fromlist=["Query"]).Query(
                    "SELECT sku FROM products WHERE category = :c", {"c": "Bird Feeders & Tables"}
                )
            )["sku"]
        )
    used = {i for a in rs.frame["antecedent"].to_list() for i in a}
    assert used and not (used & inside)
    assert rs.target_label == "category:Bird Feeders & Tables"


def test_unknown_target_suggests_close_names(garden: Path) -> None:
    with Warehouse.open(garden, read_only=True) as wh:
        with pytest.raises(InputError, match=r"did you mean 'SG04-10\d'"):
            mine_rules(wh, "SG04-140")
        with pytest.raises(InputError, match="SG04-104"):
            mine_rules(wh, "heated seedling mats")  # close to a product name
        with pytest.raises(InputError, match="Bird Food"):
            mine_rules(wh, "category:Bird Fod", level="category")
        # nothing close: the hint points at the command that finds items by code or name
        with pytest.raises(InputError, match=r"not a sku.*reachlist items TEXT") as nothing:
            mine_rules(wh, "ZZ99-999-QQQ")
        assert "reachlist rules" not in str(nothing.value)


def test_no_rule_names_the_threshold_to_relax(garden: Path) -> None:
    with Warehouse.open(garden, read_only=True) as wh:
        with pytest.raises(EmptyResultError, match="min_confidence"):
            mine_rules(wh, "SG04-104", min_confidence=0.99)
        with pytest.raises(EmptyResultError, match="min_support"):
            mine_rules(wh, "SG04-104", min_support=0.5)
        with pytest.raises(EmptyResultError, match="stand_in"):
            mine_rules(wh, "OL23-106")  # the brand-new planter has no history


def test_cli_table_json_and_csv(garden: Path, tmp_path: Path) -> None:
    runner = CliRunner()
    table = runner.invoke(main, ["rules", "SG04-104", "-w", str(garden), "--top", "3"])
    assert table.exit_code == 0, table.output
    assert "Rules toward SG04-104" in table.output and "Fisher" in table.output
    assert max(len(line) for line in table.output.splitlines()) <= 100
    js = runner.invoke(main, ["rules", "SG04-104", "-w", str(garden), "--json"])
    doc = json.loads(js.output)
    assert doc["correction"] == "holm" and len(doc["rules"]) > 3
    assert {"n_antecedent", "n_both", "conviction", "p_adjusted"} <= set(doc["rules"][0])
    csv = tmp_path / "rules.csv"
    ok = runner.invoke(main, ["rules", "GP20-101", "-w", str(garden), "--csv", str(csv)])
    assert ok.exit_code == 0, ok.output
    assert pl.read_csv(csv).height > 0
    again = runner.invoke(main, ["rules", "GP20-101", "-w", str(garden), "--csv", str(csv)])
    assert again.exit_code == 2 and "--force" in again.output


def test_strongest_rules_across_consequents(garden: Path) -> None:
    result = CliRunner().invoke(
        main, ["rules", "-w", str(garden), "--level", "category", "--top", "5"]
    )
    assert result.exit_code == 0, result.output
    assert "Strongest rules by leverage" in result.output
    assert "capped" not in result.output  # the option's default is not a request to narrow
    shown = " ".join(result.output.split())
    import re

    found = re.search(r"5 of ([\d,]+) rules shown", shown)
    assert found and int(found.group(1).replace(",", "")) > 5  # of all found, not of the five


def test_a_deeper_search_without_a_target_is_narrowed_visibly(garden: Path) -> None:
    from reachlist.rules import EXPLORE_MAX_ANTECEDENT, strongest_rules

    with Warehouse.open(garden, read_only=True) as wh:
        frame, _, _, note = strongest_rules(wh, level="category", max_antecedent=3, top=None)
        _, _, _, quiet = strongest_rules(wh, level="category", top=5)
    assert "capped at 2 items (asked for 3)" in note and quiet == ""
    assert EXPLORE_MAX_ANTECEDENT == 2
    assert frame["antecedent"].list.len().max() <= EXPLORE_MAX_ANTECEDENT
    result = CliRunner().invoke(
        main, ["rules", "-w", str(garden), "--level", "category", "--max-antecedent", "3"]
    )
    assert result.exit_code == 0, result.output
    assert "capped at 2 items" in " ".join(result.output.split())


@pytest.mark.postgres
def test_postgres_gives_the_same_rules_and_check_counts(
    garden: Path, pg_url: str, pg_schema: str
) -> None:
    from reachlist.transfer import copy_warehouse

    copy_warehouse(str(garden), pg_url, schema=pg_schema)
    cols = ["rule_id", "n_baskets", "n_antecedent", "n_consequent", "n_both"]
    with Warehouse.open(garden, read_only=True) as wh:
        duck = mine_rules(wh, "GP20-101").frame.select(cols).sort("rule_id")
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        pg = mine_rules(wh, "GP20-101").frame.select(cols).sort("rule_id")
    assert duck.equals(pg)
    # `reachlist check` counts the sample's rows and quirks identically on both warehouses.
    from reachlist.check import check_warehouse

    with Warehouse.open(garden, read_only=True) as wh:
        expected = check_warehouse(wh).counts
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        got = check_warehouse(wh).counts
    assert {k: v for k, v in got.items() if not k.endswith("_at")} == {
        k: v for k, v in expected.items() if not k.endswith("_at")
    }


@pytest.mark.parametrize("basket", ["customer", "order"])
def test_products_without_a_category_are_left_out_at_that_level(
    pristine: Path, tmp_path: Path, basket: str
) -> None:
    """A warehouse whose products table leaves some categories NULL: mining at category level
    crashed (polars refused a null label). Such a SKU names no category, so it is left out there
    exactly as a SKU missing from products is: the rules equal those of the warehouse without
    those products."""
    import duckdb

    nulled, dropped = tmp_path / "nulled.duckdb", tmp_path / "dropped.duckdb"
    for path, change in (
        (nulled, "UPDATE products SET category = NULL WHERE sku LIKE 'PC06%'"),
        (dropped, "DELETE FROM products WHERE sku LIKE 'PC06%'"),
    ):
        shutil.copy(pristine, path)
        con = duckdb.connect(str(path))
        con.execute("ALTER TABLE products ALTER category DROP NOT NULL")
        con.execute(change)
        con.close()
    options = dict(level="category", basket=basket, min_lift=0.0, keep_unproductive=True)
    with Warehouse.open(nulled, read_only=True) as a, Warehouse.open(dropped, read_only=True) as b:
        got = mine_rules(a, "category:Propagation", **options)  # type: ignore[arg-type]
        want = mine_rules(b, "category:Propagation", **options)  # type: ignore[arg-type]
        # counted in the engine (the Spark path, here on DuckDB; customer baskets): the same
        counted = (
            mine_rules(a, "category:Propagation", counting="engine", **options)  # type: ignore[arg-type]
            if basket == "customer"
            else got
        )
    with Warehouse.open(nulled, read_only=True) as a:  # and `check` counts them
        assert check_warehouse(a).counts["products_ungrouped"] == len(
            [s for s in a.fetch_raw("SELECT sku FROM products")["sku"] if s.startswith("PC06")]
        )
    assert got.frame.height > 0
    assert got.frame.equals(want.frame)
    assert all(None not in a for a in got.frame["antecedent"].to_list())
    cols = ["antecedent", "n_antecedent", "n_both"]
    assert counted.frame.select(cols).equals(got.frame.select(cols))
