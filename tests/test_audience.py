"""Audience SQL on a real DuckDB, compared with an independent polars implementation."""

from __future__ import annotations

import dataclasses
import os
from datetime import date
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.audience import (
    AudienceSpec,
    Filters,
    adult_born_by,
    audience_query,
    choose_rules,
    reach_query,
)
from reachlist.errors import EmptyResultError, InputError
from reachlist.query import DUCKDB, POSTGRES, Dialect, render
from reachlist.render.lists import sql_text
from reachlist.schema import Mapping
from reachlist.targets import Target
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref


@pytest.fixture(scope="module")
def world(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cases.build_world(tmp_path_factory.mktemp("aud") / "world.duckdb")


@pytest.fixture(scope="module")
def tables(world: Path) -> dict[str, pl.DataFrame]:
    return ref.load(world)


def base_spec(**changes: object) -> AudienceSpec:
    rules = choose_rules(ref.make_ruleset(cases.TARGET, cases.RULES))
    spec = AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW)
    return dataclasses.replace(spec, **changes)


SPECS = {
    "plain": {},
    "bought_within": {"bought_within_days": 365},
    "region": {"filters": Filters(regions=("south",))},
    "channel": {"filters": Filters(channels=("web",))},
    "active": {"filters": Filters(ordered_within_days=30)},
    "all_filters": {"filters": Filters(("north", "east"), ("store",), 200)},
    "age": {"age_restricted": True, "adult_born_by": date(2008, 6, 1)},
    "contact": {"contact": True},
}


@pytest.mark.parametrize("name", list(SPECS))
def test_sql_matches_the_polars_reference(world: Path, tables: dict, name: str) -> None:
    spec = base_spec(**SPECS[name])
    with Warehouse.open(world, read_only=True) as wh:
        got = wh.fetch(audience_query(spec))
    assert got.height == got["customer_id"].n_unique()  # each customer once
    assert ref.normalise(got).equals(ref.audience(tables, spec))
    if spec.contact:
        assert got.filter(pl.col("customer_id") == 1)["email"].item() == "c1@example.invalid"
    else:
        assert "email" not in got.columns


def test_reach_matches_the_hand_worked_cases(world: Path, tables: dict) -> None:
    spec = base_spec()
    with Warehouse.open(world, read_only=True) as wh:
        pairs = wh.fetch(reach_query(spec))
    got = {
        rank: set(pairs.filter(pl.col("rule_rank") == rank)["customer_id"].to_list())
        for rank in (1, 2, 3)
    }
    assert got == cases.EXPECTED_REACH
    expected = ref.reach_pairs(tables, spec)
    assert pairs.select(pl.all().cast(pl.Int64)).sort("rule_rank", "customer_id").equals(expected)


def test_edge_cases_by_hand(world: Path) -> None:
    with Warehouse.open(world, read_only=True) as wh:
        rows = {r["customer_id"]: r for r in wh.fetch(audience_query(base_spec())).to_dicts()}
    assert rows[4]["rule_id"] == "R1"  # reached by R1 and R2: listed once, best rule
    assert rows[6]["rule_id"] == "R2"  # duplicate line counted once, so the return cancels A
    assert 5 not in rows and 2 not in rows and 9 not in rows and 22 not in rows
    # bought the target and returned it: does not hold it, and is flagged for its own step
    assert rows[7]["has_target"] is False and rows[7]["returned_target"] is True
    assert not any(r["returned_target"] for c, r in rows.items() if c != 7)
    assert rows[8]["has_target"] is True
    assert rows[18]["has_target"] is True  # bought the target long ago: "ever" by default
    assert rows[23]["has_target"] is False  # a zero-quantity line holds nothing ...
    assert rows[23]["returned_target"] is False  # ... and is no purchase either
    assert rows[14]["no_consent"] is True  # not in customers: no consent known
    assert rows[11]["no_consent"] is True and rows[12]["suppressed"] is True
    assert rows[19]["suppressed"] is True
    assert rows[20]["rule_id"] == "R3"  # the SQL-looking item id is a plain value
    assert [r["score"] for r in rows.values()] == sorted(
        (r["score"] for r in rows.values()), reverse=True
    )


def test_the_reason_is_the_reaching_rule_with_the_best_score(world: Path, tables: dict) -> None:
    ruleset = ref.make_ruleset(cases.TARGET, [("K1", ("C",), 0.1, 5.0), ("K2", ("A",), 0.5, 1.2)])
    rules = choose_rules(ruleset, rank_by="lift")
    assert [r.rule_id for r in rules] == ["K1", "K2"]
    spec = AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW)
    with Warehouse.open(world, read_only=True) as wh:
        got = wh.fetch(audience_query(spec))
    assert got.filter(pl.col("customer_id") == 4)["rule_id"].item() == "K2"  # holds A and C
    assert ref.normalise(got).equals(ref.audience(tables, spec))


def test_an_antecedent_missing_from_products_reaches_nobody(world: Path, tables: dict) -> None:
    rules = choose_rules(ref.make_ruleset(cases.TARGET, [("U", ("ZZZ-UNKNOWN",), 0.5)]))
    spec = AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW)
    with Warehouse.open(world, read_only=True) as wh:
        got = wh.fetch(audience_query(spec))
    assert got.height == 0 and ref.audience(tables, spec).height == 0


def test_category_level_rules_and_target(world: Path, tables: dict) -> None:
    target = Target("category", "mats")
    rules = choose_rules(ref.make_ruleset(target, [("K1", ("garden",), 0.4)], level="category"))
    spec = AudienceSpec(target, rules, "category", cases.WINDOW)
    with Warehouse.open(world, read_only=True) as wh:
        got = wh.fetch(audience_query(spec))
    # "garden" holds A, B and the odd SKU; customer 5 returned A but still holds B
    assert set(got["customer_id"].to_list()) == {1, 2, 4, 5, 6, 7, 8, 18, 20, 21}
    assert ref.normalise(got).equals(ref.audience(tables, spec))


def test_item_ids_that_look_like_sql_are_bound(world: Path, tables: dict) -> None:
    evil = "x'); DROP TABLE customers; --"
    spec = base_spec(filters=Filters(regions=(evil, "north"), channels=(cases.INJECT, "store")))
    with Warehouse.open(world, read_only=True) as wh:
        rendered = wh.render(audience_query(spec))
        got = wh.fetch(audience_query(spec))
    assert cases.INJECT not in rendered.sql and evil not in rendered.sql
    assert cases.INJECT in rendered.params.values()
    assert ref.normalise(got).equals(ref.audience(tables, spec))
    con = duckdb.connect(str(world), read_only=True)
    assert con.execute("SELECT count(*) FROM orders").fetchone()[0] > 0
    assert con.execute("SELECT count(*) FROM customers").fetchone()[0] == len(cases.CUSTOMERS)
    con.close()


def test_mapped_warehouse_gives_the_same_audience(tmp_path: Path, tables: dict) -> None:
    path = hm_world_with_foreign_names(tmp_path)
    mapping = Mapping.from_dict(
        {
            "customers": {"table": "crm.shopper", "marketing_consent": "opt_in"},
            "order_lines": {"table": "receipt_row", "sku": "article"},
        }
    )
    spec = base_spec(filters=Filters(regions=("north",)))
    with Warehouse.open(path, mapping) as wh:
        got = wh.fetch(audience_query(spec))
    assert ref.normalise(got).equals(ref.audience(tables, spec))


def hm_world_with_foreign_names(tmp_path: Path) -> Path:
    path = cases.build_world(tmp_path / "foreign.duckdb")
    con = duckdb.connect(str(path))
    con.execute("CREATE SCHEMA crm")
    con.execute("ALTER TABLE customers RENAME COLUMN marketing_consent TO opt_in")
    con.execute("CREATE TABLE crm.shopper AS SELECT * FROM customers")
    con.execute("DROP TABLE customers")
    con.execute("ALTER TABLE order_lines RENAME COLUMN sku TO article")
    con.execute("ALTER TABLE order_lines RENAME TO receipt_row")
    con.close()
    return path


# -- choosing rules ------------------------------------------------------------------------------
RULESET = ref.make_ruleset(
    cases.TARGET,
    [
        ("Ra", ("A",), 0.10, 4.0),
        ("Rb", ("B",), 0.30, 1.2),
        ("Rc", ("C",), 0.20, 2.5),
        ("Rd", ("D",), 0.90, 9.0, False),  # strong but not significant
    ],
)


def test_top_rules_are_significant_and_ranked() -> None:
    assert [r.rule_id for r in choose_rules(RULESET, rank_by="confidence")] == ["Rb", "Rc", "Ra"]
    assert [r.rule_id for r in choose_rules(RULESET)] == ["Rb", "Rc", "Ra"]  # leverage
    assert [r.rule_id for r in choose_rules(RULESET, rank_by="lift", top=2)] == ["Ra", "Rc"]
    assert [r.rank for r in choose_rules(RULESET)] == [1, 2, 3]


def test_rules_picked_by_id_keep_insignificant_ones() -> None:
    picked = choose_rules(RULESET, rule_ids=["Ra", "Rd"])
    assert [(r.rule_id, r.significant) for r in picked] == [("Rd", False), ("Ra", True)]


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"rule_ids": ["Rzz"]}, InputError, "Rzz"),
        ({"rank_by": "vibes"}, InputError, "ranking measure"),
        ({"top": 0}, InputError, "Expected top of"),
    ],
)
def test_bad_rule_choices(kwargs: dict, error: type, match: str) -> None:
    with pytest.raises(error, match=match):
        choose_rules(RULESET, **kwargs)


def test_no_significant_rule_is_an_empty_result() -> None:
    weak = ref.make_ruleset(cases.TARGET, [("Rx", ("A",), 0.5, 2.0, False)])
    with pytest.raises(EmptyResultError, match="none significant"):
        choose_rules(weak)


def test_adult_cutoff_handles_leap_days() -> None:
    assert adult_born_by(date(2026, 10, 1)) == date(2008, 10, 1)
    assert adult_born_by(date(2028, 2, 29)) == date(2010, 2, 28)
    with pytest.raises(InputError):
        adult_born_by(date(2026, 1, 1), 0)


# -- golden SQL ----------------------------------------------------------------------------------
GOLDEN = Path(__file__).parent / "golden"


@pytest.mark.parametrize(
    ("name", "dialect", "mapping"),
    [
        ("audience_duckdb.sql", DUCKDB, Mapping.identity()),
        ("audience_postgresql.sql", POSTGRES, Mapping.from_dict({"schema": "retail"})),
    ],
)
def test_rendered_sql_matches_the_golden_file(
    name: str, dialect: Dialect, mapping: Mapping
) -> None:
    """The exact text `reachlist sql` prints; REACHLIST_GOLDEN=update rewrites the files."""
    spec = base_spec(
        filters=Filters(("north",), ("web",), 30),
        age_restricted=True,
        adult_born_by=date(2008, 6, 1),
        bought_within_days=90,
        contact=True,
    )
    text = sql_text(render(audience_query(spec), dialect, mapping), dialect)
    path = GOLDEN / name
    if os.environ.get("REACHLIST_GOLDEN") == "update":
        path.parent.mkdir(exist_ok=True)
        path.write_text(text)
    assert text == path.read_text()
