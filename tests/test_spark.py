"""The whole job on Apache Spark (local mode) gives what DuckDB gives on the same history.

The sample warehouse is exported to Parquet, one file per contract table, and read by a Spark
session in local mode through a mapping (``lake = FOLDER``); every result is compared with the
DuckDB sample it came from. One session serves the module (Spark starts slowly).
"""

from __future__ import annotations

import importlib.util
import shutil
from datetime import datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest
from polars.testing import assert_frame_equal

from reachlist.campaigns import CampaignLog
from reachlist.check import check_warehouse
from reachlist.errors import InputError
from reachlist.lists import build_list, preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.rules import mine_rules
from reachlist.sample import KEY_SKUS
from reachlist.schema import SOURCE_TABLES, Mapping
from reachlist.warehouse import Warehouse

pytestmark = [
    pytest.mark.skipif(
        importlib.util.find_spec("pyspark") is None,
        reason="needs pyspark (pip install -e '.[test]' or '.[spark]')",
    ),
    pytest.mark.skipif(shutil.which("java") is None, reason="Spark needs Java 17+ on the PATH"),
]

MASTER = "spark://local[2]"
MAT = KEY_SKUS["heated_mat"]
NOW = datetime(2026, 10, 1)


@pytest.fixture(scope="module")
def lake(pristine: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    folder = tmp_path_factory.mktemp("lake")
    with duckdb.connect(str(pristine), read_only=True) as con:
        for table in SOURCE_TABLES:
            con.execute(f"COPY {table} TO '{folder / table}.parquet' (FORMAT parquet)")
    return folder


@pytest.fixture(scope="module")
def spark(lake: Path) -> Warehouse:
    wh = Warehouse.open(MASTER, Mapping.from_dict({"lake": str(lake)}))
    yield wh
    wh.close()


@pytest.fixture(scope="module")
def duck(pristine: Path) -> Warehouse:
    wh = Warehouse.open(pristine, read_only=True)
    wh.derive_holdings()  # derive the holdings as Spark does
    yield wh
    wh.close()


def test_the_lake_passes_the_contract_check(spark: Warehouse, lake: Path) -> None:
    report = check_warehouse(spark)
    assert not report.errors, report.errors
    assert report.tables["orders"] == f"{lake}/orders.parquet"  # the file, not the session view


def test_rules_equal_duckdb(spark: Warehouse, duck: Warehouse) -> None:
    on_duck = mine_rules(duck, MAT).frame.sort("rule_id")
    # local mode counts the pairs in the driver's memory by default; a cluster counts in the
    # engine (only counts come back): both paths, one answer
    assert not spark.counts_in_engine
    for counting in ("memory", "engine"):
        on_spark = mine_rules(spark, MAT, counting=counting).frame.sort("rule_id")
        assert on_spark.height > 0
        assert_frame_equal(on_spark, on_duck, check_exact=False, rel_tol=1e-9)


def test_list_waterfall_and_estimate_equal_duckdb(spark: Warehouse, duck: Warehouse) -> None:
    request = ListRequest(MAT, campaign_id="spark-check", min_audience=50, estimate=True)
    outcomes = []
    for wh in (spark, duck):
        plan = plan_list(wh, request, now=NOW)
        outcomes.append(preview_list(wh, plan, CampaignLog(wh)))
    on_spark, on_duck = outcomes
    assert [(s.key, s.removed, s.remaining) for s in on_spark.waterfall] == [
        (s.key, s.removed, s.remaining) for s in on_duck.waterfall
    ]
    for group in ("treatment", "holdout"):
        ids = [getattr(o, group)["customer_id"].sort().to_list() for o in outcomes]
        assert ids[0] == ids[1] and len(ids[0]) > 0
    assert on_spark.takeup is not None and on_duck.takeup is not None
    assert on_spark.takeup.expected.expected == pytest.approx(on_duck.takeup.expected.expected)
    assert on_spark.takeup.expected.low == pytest.approx(on_duck.takeup.expected.low)
    assert on_spark.takeup.expected.high == pytest.approx(on_duck.takeup.expected.high)


def test_an_estimate_from_customer_ids_equals_duckdb(
    spark: Warehouse, duck: Warehouse, pristine: Path
) -> None:
    # counted in Spark (as on a cluster) without rules: everyone lacking the target comes one by
    # one at as-of and the latest cutoff (the ids stay in reachlist)
    from reachlist.estimate import estimate_takeup
    from reachlist.targets import Target

    with duckdb.connect(str(pristine), read_only=True) as con:
        ids = con.sql(
            "SELECT customer_id FROM sample_planted WHERE rule_id = 'heated-mat' ORDER BY 1"
        ).pl()["customer_id"]
    reports = [
        estimate_takeup(
            wh, Target("sku", MAT), customers=ids, as_of=NOW, max_cutoffs=3, counting=counting
        )
        for wh, counting in ((spark, "engine"), (duck, "memory"))
    ]
    on_spark, on_duck = (r.as_dict() for r in reports)
    assert on_spark.keys() == on_duck.keys()
    for key, value in on_duck.items():
        if isinstance(value, float | list):
            assert on_spark[key] == pytest.approx(value), key
        else:
            assert on_spark[key] == value, key
    assert_frame_equal(reports[0].backtests, reports[1].backtests)
    assert reports[0].audience > 0 and reports[0].expected.n_backtests > 0


def test_the_estimate_counted_in_spark_equals_duckdb(spark: Warehouse, duck: Warehouse) -> None:
    # the rules' audiences at every cutoff joined into the history in Spark (a cluster's default)
    from reachlist.estimate import calibrate_audience

    plan = plan_list(duck, ListRequest(MAT), now=NOW)
    both = [
        calibrate_audience(wh, plan.target, spec=plan.spec, max_cutoffs=3, counting=counting)
        for wh, counting in ((spark, "engine"), (duck, "memory"))
    ]
    for group in (0, *(r.rank for r in plan.spec.rules)):
        on_spark, on_duck = (c.report(group).as_dict() for c in both)
        assert on_spark["expected_buyers"] == pytest.approx(on_duck["expected_buyers"])
        assert on_spark["interval"] == pytest.approx(on_duck["interval"])
        assert on_spark["audience"] == on_duck["audience"] > 0
    assert_frame_equal(both[0].customer_rates(), both[1].customer_rates())


def test_the_exported_list_is_byte_identical(
    spark: Warehouse, duck: Warehouse, tmp_path: Path
) -> None:
    request = ListRequest(MAT, campaign_id="spark-export", min_audience=50)
    files = []
    for name, wh in (("spark", spark), ("duck", duck)):
        out = tmp_path / name / "list.csv"
        out.parent.mkdir()
        plan = plan_list(wh, request, now=NOW)
        with CampaignLog.open(wh, str(tmp_path / name / "state.duckdb")) as log:
            build_list(wh, plan, out, log=log)
        files.append(out.read_bytes())
    assert files[0] == files[1] and files[0].count(b"\n") > 10


def test_the_campaign_log_needs_a_state_file_on_spark(spark: Warehouse, tmp_path: Path) -> None:
    plan = plan_list(spark, ListRequest(MAT, campaign_id="no-state"), now=NOW)
    with pytest.raises(InputError, match="no transactions.*state"):
        build_list(spark, plan, tmp_path / "list.csv", log=CampaignLog.open(spark))
    assert not (tmp_path / "list.csv").exists()


def test_parquet_paths_with_the_lake_own_names(
    lake: Path, spark: Warehouse, tmp_path: Path
) -> None:
    # orders kept under other names: a file of its own, columns renamed, read through the mapping
    renamed = tmp_path / "sales.parquet"
    frame = pl.read_parquet(lake / "orders.parquet").rename(
        {"order_id": "order_no", "ordered_at": "placed_at"}
    )
    frame.write_parquet(renamed)
    mapping = Mapping.from_dict(
        {
            "lake": str(lake),
            "orders": {"path": str(renamed), "order_id": "order_no", "ordered_at": "placed_at"},
            "order_lines": {"order_id": "order_id"},
        }
    )
    mapped = Warehouse.open(MASTER, mapping)
    assert mapped.physical_columns("orders")[0].name == "order_no"  # type: ignore[index]
    on_mapped = mine_rules(mapped, MAT).frame.sort("rule_id")
    assert_frame_equal(on_mapped, mine_rules(spark, MAT).frame.sort("rule_id"))


def test_paths_are_read_on_spark_only(pristine: Path, lake: Path) -> None:
    with pytest.raises(InputError, match="files are read on Spark"):
        Warehouse.open(pristine, Mapping.from_dict({"lake": str(lake)}), read_only=True)


def test_the_command_line_builds_on_spark_with_a_state_file(lake: Path, tmp_path: Path) -> None:
    from click.testing import CliRunner

    from reachlist.cli import main

    mapping = tmp_path / "lake.toml"
    mapping.write_text(f'lake = "{lake}"\n')
    base = ["build", MAT, "-w", MASTER, "-m", str(mapping), "--no-estimate", "--until"]
    base += ["2026-10-01", "--campaign", "lake-mats"]
    refused = CliRunner().invoke(main, [*base, "--out", str(tmp_path / "a.csv")])
    assert refused.exit_code == 2, refused.output
    assert "no transactions" in refused.output and "--state" in refused.output
    assert not (tmp_path / "a.csv").exists()
    state = tmp_path / "state.duckdb"
    built = CliRunner().invoke(
        main, [*base, "--out", str(tmp_path / "b.csv"), "--state", str(state)]
    )
    assert built.exit_code == 0, built.output
    assert (tmp_path / "b.csv").exists() and state.exists()


def test_nanosecond_timestamps_get_a_fix_not_a_stack(lake: Path, tmp_path: Path) -> None:
    # pandas-made Parquet often holds nanosecond timestamps, which Spark does not read
    nanos = tmp_path / "orders_ns.parquet"
    orders = pl.read_parquet(lake / "orders.parquet")
    orders.with_columns(pl.col("ordered_at").dt.cast_time_unit("ns")).write_parquet(nanos)
    mapping = Mapping.from_dict({"lake": str(lake), "orders": {"path": str(nanos)}})
    with pytest.raises(InputError, match="no nanosecond timestamps.*cast_time_unit"):
        Warehouse.open(MASTER, mapping)
