"""`reachlist items`: finding targets by name, category or code, with buyer counts.

Buyer counts are checked against an independent polars computation over the same tables."""

from __future__ import annotations

import io
import json
from pathlib import Path

import duckdb
import polars as pl
import pytest
from click.testing import CliRunner

from reachlist.catalog import find_items, like_pattern
from reachlist.cli import main
from reachlist.errors import EmptyResultError, InputError
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse


def _buyers_by_sku(path: Path, since: object, until: object) -> dict[str, tuple[int, float]]:
    """Customers with a positive net quantity per SKU inside [since, until), exact duplicate
    lines counted once: computed with polars, apart from reachlist's SQL."""
    con = duckdb.connect(str(path), read_only=True)
    lines = con.sql("SELECT * FROM order_lines").pl().unique()
    orders = con.sql("SELECT order_id, customer_id, ordered_at FROM orders").pl()
    con.close()
    held = (
        lines.join(orders, on="order_id")
        .filter((pl.col("ordered_at") >= since) & (pl.col("ordered_at") < until))
        .group_by("customer_id", "sku")
        .agg(pl.col("quantity").sum().alias("units"))
        .filter(pl.col("units") > 0)
        .group_by("sku")
        .agg(pl.len().alias("buyers"), pl.col("units").sum())
    )
    return {r["sku"]: (r["buyers"], float(r["units"])) for r in held.iter_rows(named=True)}


def test_search_counts_buyers_like_an_independent_computation(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        found = find_items(wh, "Propag", top=100)
    reference = _buyers_by_sku(pristine, found.window.since, found.window.until)
    skus = found.items.filter(pl.col("kind") == "sku")
    assert skus.height == found.matched["skus"] > 0
    for row in skus.iter_rows(named=True):
        assert (row["buyers"], row["units"]) == reference.get(row["target"], (0, 0.0))
    # a category row counts distinct customers over its SKUs, so at most the sum of its SKUs'
    category = found.items.filter(pl.col("kind") == "category").row(0, named=True)
    assert category["target"] == "category:Propagation"
    assert max(skus["buyers"]) <= category["buyers"] <= sum(skus["buyers"])
    assert found.items["kind"].to_list()[0] == "category"  # groups come before products


def test_search_text_is_literal_not_a_pattern(pristine: Path) -> None:
    assert like_pattern("100%_a!") == "%100!%!_a!!%"
    with Warehouse.open(pristine, read_only=True) as wh:
        with pytest.raises(EmptyResultError, match="none among"):
            find_items(wh, "%")  # a percent sign matches only a percent sign
        with pytest.raises(EmptyResultError):
            find_items(wh, "x'); DROP TABLE products; --")
        # the products table is still there
        assert find_items(wh, "mat").matched["skus"] > 0


def test_bad_search_text_is_one_clear_error(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        with pytest.raises(InputError, match="empty string"):
            find_items(wh, "   ")
        with pytest.raises(InputError, match="at most 200 characters"):
            find_items(wh, "a" * 201)


def test_top_keeps_the_most_bought_and_says_what_it_cut(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        everything = find_items(wh, "SG0", top=100)
        two = find_items(wh, "SG0", top=2)
    all_skus = everything.items.filter(pl.col("kind") == "sku")
    assert two.items.height == 2
    assert two.items["buyers"].to_list() == sorted(all_skus["buyers"].to_list(), reverse=True)[:2]
    assert any(f"2 of {all_skus.height} matching products shown" in n for n in two.notes)


def test_buyer_counting_is_bounded_and_says_so(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        found = find_items(wh, "-1", most_counted=3, top=100)
    assert found.matched["skus"] > 3
    assert found.items.filter(pl.col("kind") == "sku").height == 3
    assert any("counted for the first 3" in n for n in found.notes)


def test_items_command_at_80_columns_and_as_json(pristine: Path) -> None:
    from rich.console import Console

    from reachlist.render.items import render_items

    with Warehouse.open(pristine, read_only=True) as wh:
        found = find_items(wh, "seedling mat")
    screen = io.StringIO()
    render_items(Console(file=screen, width=80), found)
    lines = screen.getvalue().splitlines()
    assert all(len(line.rstrip()) <= 80 for line in lines)
    assert any("SG04-104" in line and "Heated seedling mat" in line for line in lines)
    runner = CliRunner()
    result = runner.invoke(main, ["items", "seedling mat", "-w", str(pristine)])
    assert result.exit_code == 0, result.output
    assert "SG04-104" in result.output
    result = runner.invoke(main, ["items", "fleece", "-w", str(pristine), "--json"])
    payload = json.loads(result.output)
    assert payload["schema_version"] == 1
    assert isinstance(payload["items"][0]["buyers"], int)
    none = runner.invoke(main, ["items", "no such thing", "-w", str(pristine)])
    assert none.exit_code == 3


@pytest.mark.postgres
def test_postgres_finds_the_same_items(pristine: Path, pg_url: str, pg_schema: str) -> None:
    from reachlist.transfer import copy_warehouse

    copy_warehouse(str(pristine), pg_url, schema=pg_schema)
    with Warehouse.open(pristine, read_only=True) as wh:
        here = find_items(wh, "Frost", top=100).items
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        there = find_items(wh, "Frost", top=100).items
    assert here.to_dicts() == there.to_dicts()
