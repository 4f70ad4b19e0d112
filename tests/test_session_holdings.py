"""A server warehouse keeps no holdings file: commands that read the holdings several times
keep them in the connection's temporary tables once (PostgreSQL), with the same answers as
deriving them inside each query. Skipped when no PostgreSQL server answers."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import pytest
import sqlalchemy as sa

from reachlist.campaigns import CampaignLog
from reachlist.estimate import takeup_history
from reachlist.holdings import prepare
from reachlist.lists import build_list, preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.query import Query, kept_beside
from reachlist.schema import Mapping
from reachlist.transfer import copy_warehouse
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref

NOW = datetime(2026, 1, 5, 12, 0)


def test_kept_tables_lie_beside_the_holdings_with_its_prefix() -> None:
    assert kept_beside("f.main.holdings", "first_orders") == "f.main.first_orders"
    assert kept_beside("pg_temp.reachlist_holdings", "first_orders") == (
        "pg_temp.reachlist_first_orders"
    )


def test_a_duckdb_warehouse_keeps_no_session_tables(tmp_path: Path) -> None:
    world = cases.build_world(tmp_path / "world.duckdb")
    with Warehouse.open(world, read_only=True) as wh:
        assert wh.keep_session_holdings() is False
        assert prepare(wh, session=True).state == "absent" and wh.holdings_table is None


@pytest.fixture
def pg_world(tmp_path: Path, pg_url: str, pg_schema: str) -> tuple[str, Mapping]:
    """The hand-made world copied to a fresh PostgreSQL schema, and the mapping that reads it."""
    world = cases.build_world(tmp_path / "world.duckdb")
    copy_warehouse(str(world), pg_url, schema=pg_schema)
    return pg_url, Mapping.from_dict({"schema": pg_schema})


def _preview(wh: Warehouse) -> tuple[object, ...]:
    """The list, its counts and estimate, and the take-up history the estimate reads (every
    customer of the history at each cutoff: the first orders too)."""
    ruleset = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
    plan = plan_list(wh, ListRequest("T", campaign_id="session-check"), rules=ruleset, now=NOW)
    out = preview_list(wh, plan, CampaignLog.open(wh))
    history = takeup_history(wh, cases.TARGET, cases.WINDOW.until, 30, 6)
    return (
        [frame.sort("customer_id").rows() for frame in history],
        out.counts(),
        out.estimate_counts(),
        [(r.reached, r.kept, r.above) for r in out.per_rule or []],
        out.listed.select("customer_id", "contact_group").sort("customer_id").rows(),
    )


@pytest.mark.postgres
def test_postgresql_session_holdings_give_the_same_list(
    pg_world: tuple[str, Mapping],
) -> None:
    pg_url, mapping = pg_world
    with Warehouse.open(pg_url, mapping) as wh:
        derived = _preview(wh)
        count = Query("SELECT count(*) AS n FROM holdings")
        assert "reachlist_holdings" not in wh.render(count).sql
        derived_rows = wh.scalar(count)
        prepared = prepare(wh, session=True)
        assert prepared.state == "session" and not prepared.note
        assert wh.holdings_table == "pg_temp.reachlist_holdings"
        both = wh.render(
            Query("SELECT h.sku FROM holdings AS h JOIN first_orders USING (customer_id)")
        )
        assert "pg_temp.reachlist_holdings" in both.sql
        assert "pg_temp.reachlist_first_orders" in both.sql
        kept = _preview(wh)
        kept_rows = wh.scalar(count)
    assert kept == derived
    assert kept_rows == derived_rows > 0
    # the tables are the connection's own: another connection does not see them
    engine = sa.create_engine(pg_url)
    with engine.connect() as other, pytest.raises(sa.exc.ProgrammingError):
        other.execute(sa.text("SELECT count(*) FROM pg_temp.reachlist_holdings"))
    engine.dispose()


@pytest.mark.postgres
def test_a_server_that_refuses_temporary_tables_gets_a_note_and_derived_rows(
    pg_world: tuple[str, Mapping],
) -> None:
    pg_url, mapping = pg_world
    with Warehouse.open(pg_url, mapping) as wh:
        derived = _preview(wh)
        wh.engine.run("SET default_transaction_read_only = on")  # as on a read-only standby
        wh.engine.end_read()
        prepared = prepare(wh, session=True)
        assert prepared.state == "unsupported" and wh.holdings_table is None
        assert "Could not keep the holdings in temporary tables" in prepared.note
        assert "read-only transaction" in prepared.note
        assert "reads the order lines instead" in prepared.note
        assert len(prepared.note.splitlines()) == 1
        assert _preview(wh) == derived


@pytest.mark.postgres
def test_the_log_keeps_sql_that_runs_after_the_session(
    pg_world: tuple[str, Mapping], tmp_path: Path
) -> None:
    pg_url, mapping = pg_world
    ruleset = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
    with Warehouse.open(pg_url, mapping) as wh:
        assert prepare(wh, session=True).state == "session"
        plan = plan_list(wh, ListRequest("T", campaign_id="session-log"), rules=ruleset, now=NOW)
        log = CampaignLog.open(wh)
        built = build_list(wh, plan, tmp_path / "list.csv", log=log)
        logged = log.campaign("session-log")
        ran_here = wh.fetch(plan.query()).height
    assert logged is not None and built.path.exists()
    sql = logged["parameters"]["audience_sql"]
    assert "pg_temp" not in sql["sql"] and "reachlist_holdings" not in sql["sql"]
    engine = sa.create_engine(pg_url)  # a new connection: the temporary tables are gone
    with engine.connect() as other:
        rows = other.execute(sa.text(sql["sql"]), sql["values"]).fetchall()
    engine.dispose()
    assert len(rows) == ran_here > 0
