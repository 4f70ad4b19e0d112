"""All cutoffs of an estimate in one query (sql/takeup_history.sql) give, cutoff by cutoff, the
rows of the one-cutoff query (sql/forward_takeup.sql), and who the rules reach at every cutoff in
one query (sql/reach_at_cutoffs.sql) is who they reach one cutoff at a time: on the sample
warehouse, and on the same hand-made world in DuckDB and in PostgreSQL (skipped when no server
answers)."""

from __future__ import annotations

import dataclasses
from datetime import datetime, timedelta
from pathlib import Path

import polars as pl
import pytest

from reachlist import ids
from reachlist.audience import AudienceSpec, choose_rules, reach_at_cutoffs_query, reach_query
from reachlist.errors import InputError
from reachlist.estimate import forward_query, takeup_history, takeup_history_query
from reachlist.planning import ListRequest, plan_list
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


@pytest.mark.postgres
def test_postgres_gives_the_same_history(tmp_path: Path, pg_url: str, pg_schema: str) -> None:
    world = cases.build_world(tmp_path / "world.duckdb")
    copy_warehouse(str(world), pg_url, schema=pg_schema)
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


def _same_reach(got: list[pl.DataFrame], want: list[pl.DataFrame]) -> None:
    for c, (a, b) in enumerate(zip(got, want, strict=True), start=1):
        a, b = (f.select(pl.all().cast(pl.Int64)).sort(f.columns) for f in (a, b))
        assert a.equals(b), f"cutoff {c}: {a.height} rows against {b.height}"


def test_reach_at_every_cutoff_equals_one_query_per_cutoff(pristine: Path) -> None:
    with Warehouse.open(pristine, read_only=True) as wh:
        spec = plan_list(wh, ListRequest("SG04-104"), now=datetime(2026, 10, 1)).spec
        ats = [datetime(2026, 9, 1) - timedelta(days=30 * k) for k in range(13)]
        got, want = _reach_at_once(wh, spec, ats), _reach_one_by_one(wh, spec, ats)
    _same_reach(got, want)
    assert all(f.height > 0 for f in got) and len(spec.rules) > 1


@pytest.mark.postgres
def test_postgres_reaches_the_same_customers(tmp_path: Path, pg_url: str, pg_schema: str) -> None:
    world = cases.build_world(tmp_path / "world.duckdb")
    copy_warehouse(str(world), pg_url, schema=pg_schema)
    rules = choose_rules(ref.make_ruleset(cases.TARGET, cases.RULES))
    spec = AudienceSpec(cases.TARGET, rules, "sku", cases.WINDOW)
    ats = [cases.WINDOW.until - timedelta(days=d) for d in (0, 45, 120)]
    with (
        Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as pg,
        Warehouse.open(world, read_only=True) as dk,
    ):
        on_pg = _reach_at_once(pg, spec, ats)
        _same_reach(on_pg, _reach_one_by_one(pg, spec, ats))
        _same_reach(on_pg, _reach_at_once(dk, spec, ats))
    assert on_pg[0].height > 0
