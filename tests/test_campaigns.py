"""The campaign log: created when absent, one transaction per campaign, refusals, state files."""

from __future__ import annotations

from datetime import datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.campaigns import CampaignLog, CampaignRecord, check_campaign_id
from reachlist.errors import InputError, StateError
from reachlist.schema import Mapping
from reachlist.statements import create_log_table
from reachlist.warehouse import Warehouse

WHEN = datetime(2026, 3, 1, 9, 30)


def contacts(ids: list[int | None], group: str = "treatment") -> pl.DataFrame:
    return pl.DataFrame(
        {
            "customer_id": ids,
            "contact_group": [group] * len(ids),
            "score": [0.25] * len(ids),
            "rule_id": ["R1"] * len(ids),
        },
        schema={
            "customer_id": pl.Int64,
            "contact_group": pl.String,
            "score": pl.Float64,
            "rule_id": pl.String,
        },
    )


def record(cid: str = "spring", **kw: object) -> CampaignRecord:
    return CampaignRecord(
        cid, WHEN, "T", "introduce", {"top": 5}, [{"rule_id": "R1"}], {"listed": 3}, **kw
    )  # type: ignore[arg-type]


@pytest.fixture
def db(tmp_path: Path) -> Warehouse:
    path = tmp_path / "w.duckdb"
    duckdb.connect(str(path)).close()
    wh = Warehouse.open(path)
    yield wh
    wh.close()


def test_tables_are_created_and_the_campaign_reads_back(db: Warehouse) -> None:
    log = CampaignLog(db)
    assert not log.present() and not log.has_campaign("spring")
    log.record(record(overrides=("consent off",)), contacts([1, 2, 3]))
    assert log.present() and log.has_campaign("spring")
    row = log.campaign("spring")
    assert row is not None
    assert row["parameters"] == {"top": 5} and row["rules"] == [{"rule_id": "R1"}]
    assert row["overrides"] == "consent off" and row["created_at"] == WHEN
    got = log.contacts("spring")
    assert got["customer_id"].to_list() == [1, 2, 3]
    assert set(got["contacted_at"].to_list()) == {WHEN}


def test_one_transaction_writes_all_or_nothing(db: Warehouse) -> None:
    log = CampaignLog(db)
    with pytest.raises(StateError, match="nothing was written"):
        log.record(record(), contacts([1, None]))  # customer_id is NOT NULL
    assert not log.present()  # the tables created in that transaction are gone too
    log.record(record(), contacts([1]))
    with pytest.raises(StateError):
        log.record(record("autumn"), contacts([4, None]))
    assert not log.has_campaign("autumn")
    assert log.contacts("spring").height == 1


def test_same_campaign_is_refused_unless_replaced(db: Warehouse) -> None:
    log = CampaignLog(db)
    log.record(record(), contacts([1, 2]))
    with pytest.raises(StateError, match="replace=True"):
        log.record(record(), contacts([3]))
    log.record(record(), contacts([3]), replace=True)
    assert log.contacts("spring")["customer_id"].to_list() == [3]


def test_recent_contacts_count_treatment_of_other_campaigns(db: Warehouse) -> None:
    log = CampaignLog(db)
    assert log.recent_contacts(WHEN).len() == 0  # no log yet
    log.record(record("a"), pl.concat([contacts([1, 2]), contacts([3], "holdout")]))
    log.record(CampaignRecord("b", datetime(2026, 1, 1), "T", "clear"), contacts([4]))
    assert sorted(log.recent_contacts(datetime(2026, 2, 15)).to_list()) == [1, 2]
    assert sorted(log.recent_contacts(datetime(2025, 12, 1)).to_list()) == [1, 2, 4]
    assert log.recent_contacts(datetime(2026, 2, 15), other_than="a").len() == 0


def test_state_file_is_created_and_urls_refused(db: Warehouse, tmp_path: Path) -> None:
    state = tmp_path / "sub" / "state.duckdb"
    state.parent.mkdir()
    with CampaignLog.open(db, str(state)) as log:
        log.record(record(), contacts([1]))
        assert log.where == str(state)
    assert state.exists()
    assert not CampaignLog(db).present()
    with pytest.raises(InputError, match="local DuckDB file"):
        CampaignLog.open(db, "postgresql://x/y")


def test_mapped_log_tables_use_the_warehouse_names() -> None:
    mapping = Mapping.from_dict(
        {"campaigns": {"table": "crm.rl_campaign", "campaign_id": "code"}, "schema": "mart"}
    )
    ddl = create_log_table(mapping, "campaigns")
    assert ddl.startswith('CREATE TABLE IF NOT EXISTS "crm"."rl_campaign"')
    assert '"code" VARCHAR NOT NULL' in ddl
    assert '"mart"."campaign_contacts"' in create_log_table(mapping, "campaign_contacts")


@pytest.mark.parametrize("bad", ["", "a b", "x'; DROP TABLE campaigns; --", "-lead", "a" * 81])
def test_campaign_ids_are_checked(bad: str) -> None:
    with pytest.raises(InputError, match="campaign id"):
        check_campaign_id(bad)


@pytest.mark.postgres
def test_postgres_log_is_transactional(pg_url: str, pg_schema: str) -> None:
    mapping = Mapping.from_dict({"schema": pg_schema})
    with Warehouse.open(pg_url, mapping) as wh:
        wh.run_statement(f'CREATE SCHEMA "{pg_schema}"')
        log = CampaignLog(wh)
        with pytest.raises(StateError):
            log.record(record(), contacts([1, None]))
        assert not log.present()
        many = contacts(list(range(1, 2502)))  # large enough to go through COPY
        log.record(record(), many)
        assert log.contacts("spring").height == 2501
        with pytest.raises(StateError, match="replace=True"):
            log.record(record(), contacts([1]))
        log.record(record(), contacts([7]), replace=True)
        assert log.contacts("spring")["customer_id"].to_list() == [7]
        assert log.recent_contacts(datetime(2026, 1, 1)).to_list() == [7]


def test_a_log_with_the_older_column_name_is_read_through_the_mapping(tmp_path: Path) -> None:
    # Logs written before the contacts' rule column was named rule_id call it `reason`; a mapping
    # line keeps them usable without touching the table.
    path = tmp_path / "w.duckdb"
    with duckdb.connect(str(path)) as con:
        con.execute(
            "CREATE TABLE campaign_contacts (campaign_id VARCHAR NOT NULL, customer_id BIGINT "
            "NOT NULL, contact_group VARCHAR NOT NULL, score DOUBLE, reason VARCHAR, "
            "contacted_at TIMESTAMP NOT NULL)"
        )
    mapping = Mapping.from_dict({"campaign_contacts": {"rule_id": "reason"}})
    with Warehouse.open(path, mapping) as wh:
        CampaignLog(wh).record(record(), contacts([4, 5]))
        assert CampaignLog(wh).contacts("spring")["rule_id"].to_list() == ["R1", "R1"]
    with duckdb.connect(str(path)) as con:
        assert con.execute("SELECT DISTINCT reason FROM campaign_contacts").fetchall() == [("R1",)]
