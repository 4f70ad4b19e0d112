"""The same audiences, pairs and campaign log on PostgreSQL (skipped when no server answers)."""

from __future__ import annotations

import dataclasses
from datetime import date, datetime
from pathlib import Path

import polars as pl
import pytest

from reachlist.audience import AudienceSpec, Filters, audience_query, choose_rules, reach_query
from reachlist.campaigns import CampaignLog
from reachlist.lists import build_list, preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.schema import Mapping
from reachlist.transfer import copy_warehouse
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref

pytestmark = pytest.mark.postgres

SPECS = {
    "plain": {},
    "bought_within": {"bought_within_days": 365},
    "filters": {"filters": Filters(("north", "x'); DROP TABLE customers; --"), ("store",), 200)},
    "age": {"age_restricted": True, "adult_born_by": date(2008, 6, 1)},
}


@pytest.fixture
def pg_world(tmp_path: Path, pg_url: str, pg_schema: str) -> tuple[Path, Mapping]:
    world = cases.build_world(tmp_path / "world.duckdb")
    copy_warehouse(str(world), pg_url, schema=pg_schema)
    return world, Mapping.from_dict({"schema": pg_schema})


def test_postgres_gives_the_same_audiences(pg_world: tuple[Path, Mapping], pg_url: str) -> None:
    world, mapping = pg_world
    tables = ref.load(world)
    rules = choose_rules(ref.make_ruleset(cases.TARGET, cases.RULES))
    with Warehouse.open(pg_url, mapping) as pg, Warehouse.open(world, read_only=True) as dk:
        for changes in SPECS.values():
            spec = dataclasses.replace(
                AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW), **changes
            )
            rendered = pg.render(audience_query(spec))
            assert ":since" in rendered.sql and "$since" not in rendered.sql
            assert f'"{mapping.table("orders").physical[0]}"."orders"' in rendered.sql
            got = ref.normalise(pg.fetch(audience_query(spec)))
            assert got.equals(ref.audience(tables, spec))
            assert got.equals(ref.normalise(dk.fetch(audience_query(spec))))
            pairs = pg.fetch(reach_query(spec)).select(pl.all().cast(pl.Int64))
            assert pairs.sort("rule_rank", "customer_id").equals(ref.reach_pairs(tables, spec))
        assert pg.scalar(ref_count("orders")) == dk.scalar(ref_count("orders"))


def ref_count(table: str):
    from reachlist.query import Query

    return Query(f"SELECT count(*) AS n FROM {table}")


def test_postgres_preview_and_build_match_duckdb(
    pg_world: tuple[Path, Mapping], pg_url: str, tmp_path: Path
) -> None:
    world, mapping = pg_world
    ruleset = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
    now = datetime(2026, 1, 5, 12, 0)
    request = ListRequest("T", campaign_id="pg-check")
    results = {}
    for name, url, m in (("duckdb", str(world), None), ("postgresql", pg_url, mapping)):
        with Warehouse.open(url, m) as wh:
            plan = plan_list(wh, request, rules=ruleset, now=now)
            log = CampaignLog.open(wh)
            preview = preview_list(wh, plan, log)
            built = build_list(wh, plan, tmp_path / f"{name}.csv", log=log)
            logged = log.contacts("pg-check")
            results[name] = (
                [(s.key, s.removed, s.remaining) for s in preview.waterfall],
                [(r.reached, r.kept, r.above) for r in preview.per_rule or []],
                pl.read_csv(built.path),
                logged.select("customer_id", "contact_group").sort("customer_id").rows(),
                log.campaign("pg-check")["counts"],
            )
    assert results["duckdb"][0] == results["postgresql"][0]
    assert results["duckdb"][1] == results["postgresql"][1]
    assert results["duckdb"][2].equals(results["postgresql"][2])
    assert results["duckdb"][3] == results["postgresql"][3]
    assert results["duckdb"][4] == results["postgresql"][4]


def _join_filter_work(node: dict) -> int:
    """Rows a plan's joins read and threw away (``Rows Removed by Join Filter``), summed."""
    own = int(node.get("Rows Removed by Join Filter", 0)) * int(node.get("Actual Loops", 1))
    return own + sum(_join_filter_work(child) for child in node.get("Plans", []))


def test_the_list_query_does_work_in_proportion_to_the_list(
    pristine: Path, pg_url: str, pg_schema: str
) -> None:
    """Counted work, not time: PostgreSQL takes the rules' audience for one row, and a LEFT JOIN
    from it became a nested loop comparing every listed customer with every excluded one (the
    sample: 8,496 listed, 37M rows compared and thrown away, 12-18 s)."""
    import sqlalchemy as sa

    from reachlist.sample import KEY_SKUS

    copy_warehouse(str(pristine), pg_url, schema=pg_schema)
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        plan = plan_list(wh, ListRequest(KEY_SKUS["heated_mat"]))
        rendered = wh.render(plan.query())
    engine = sa.create_engine(pg_url)
    with engine.connect() as conn:
        explained = conn.execute(
            sa.text("EXPLAIN (ANALYZE, FORMAT JSON) " + rendered.sql), rendered.params
        ).scalar()
    engine.dispose()
    top = explained[0]["Plan"]
    listed = int(top["Actual Rows"])
    assert listed > 5_000
    assert _join_filter_work(top) <= 2 * listed


def test_reachlists_postgres_connection_compiles_no_queries(pg_url: str) -> None:
    # PostgreSQL's JIT compiled the take-up history for 1.9 s of its 3.3 s on the 20k sample
    # (EXPLAIN ANALYZE, PostgreSQL 15): reachlist turns it off for its own connection, and the
    # setting outlives a read's commit and a rollback; a URL that sets jit itself keeps its own
    with Warehouse.open(pg_url) as wh:
        assert wh.fetch_raw("SHOW jit")["jit"][0] == "off"
        wh.engine.rollback()
        assert wh.fetch_raw("SHOW jit")["jit"][0] == "off"
    with Warehouse.open(pg_url + "?options=-c%20jit%3Don") as wh:
        assert wh.fetch_raw("SHOW jit")["jit"][0] == "on"


def test_an_empty_table_copies_as_an_empty_table(
    tmp_path: Path, pg_url: str, pg_schema: str
) -> None:
    # a warehouse with no suppressions yet (or no customers table rows) copies: an empty table
    # used to reach SQLAlchemy as an empty parameter list, which it refuses
    world = cases.build_world(tmp_path / "world.duckdb")
    import duckdb

    con = duckdb.connect(str(world))
    con.execute("DELETE FROM suppressions")
    con.close()
    copy_warehouse(str(world), pg_url, schema=pg_schema)
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        assert wh.fetch_raw(f'SELECT count(*) AS n FROM "{pg_schema}".suppressions')["n"][0] == 0
        assert wh.fetch_raw(f'SELECT count(*) AS n FROM "{pg_schema}".orders')["n"][0] > 0
