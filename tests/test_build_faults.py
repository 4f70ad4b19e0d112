"""A build stopped at every stage leaves the list file and the campaign log in agreement: never
contacts logged for a list that does not exist. Stopped for real (SIGKILL of a subprocess at each
stage) and by an error at each stage; staging files of killed runs are cleaned by the next build;
the log's unique keys stop two concurrent builds of one campaign from logging it twice, on
PostgreSQL for real."""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import textwrap
import threading
from datetime import datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.campaigns import CampaignLog
from reachlist.errors import StateError
from reachlist.export import clear_leftovers
from reachlist.lists import BUILD_STAGES, build_list
from reachlist.planning import ListRequest, plan_list
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref

NOW = datetime(2026, 1, 5, 12, 0)
RULESET = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
ROOT = Path(__file__).resolve().parent.parent


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cases.build_world(tmp_path_factory.mktemp("faults") / "world.duckdb")


@pytest.fixture
def world(pristine: Path, tmp_path: Path) -> Path:
    path = tmp_path / "world.duckdb"
    shutil.copy(pristine, path)
    return path


def request(**kw: object) -> ListRequest:
    base: dict[str, object] = {"target": "T", "campaign_id": "c1", "holdout": 0.2}
    base.update(kw)
    return ListRequest(**base)  # type: ignore[arg-type]


def state(world: Path, out: Path, campaign: str = "c1") -> tuple[bool, int, list[str]]:
    """(list file present, contacts logged, hidden files beside the list)."""
    with Warehouse.open(world, read_only=True) as wh:
        log = CampaignLog(wh)
        logged = log.contacts(campaign).height if log.present() else 0
    hidden = sorted(p.name for p in out.parent.iterdir() if p.name.startswith("."))
    return out.exists(), logged, hidden


KILLER = textwrap.dedent(
    """
    import os, signal, sys
    from datetime import datetime
    from reachlist.campaigns import CampaignLog
    from reachlist.planning import ListRequest, plan_list
    from reachlist.lists import build_list
    from reachlist.warehouse import Warehouse
    from tests import audience_cases as cases, audience_reference as ref

    world, out, stop_at = sys.argv[1], sys.argv[2], int(sys.argv[3])

    def progress(label, n, total):
        print(n, label, flush=True)
        if n == stop_at:
            os.kill(os.getpid(), signal.SIGKILL)

    rules = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, ListRequest("T", campaign_id="c1", holdout=0.2), rules=rules,
                         now=datetime(2026, 1, 5, 12))
        build_list(wh, plan, out, log=CampaignLog.open(wh), force=True, progress=progress)
    """
)


@pytest.mark.parametrize("stop_at", range(1, len(BUILD_STAGES) + 1))
def test_a_build_killed_at_each_stage_never_logs_a_missing_list(
    world: Path, tmp_path: Path, stop_at: int
) -> None:
    out = tmp_path / "lists" / "mats.csv"
    out.parent.mkdir()
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    done = subprocess.run(
        [sys.executable, "-c", KILLER, str(world), str(out), str(stop_at)],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert done.returncode == -signal.SIGKILL, done.stderr
    assert done.stdout.splitlines()[-1] == f"{stop_at} {BUILD_STAGES[stop_at - 1]}"
    present, logged, hidden = state(world, out)
    # the invariant: contacts are logged only for a list that exists
    assert not (logged and not present)
    expected = {
        1: (False, 0),  # staged only: no list, a staging file left behind
        2: (False, 0),  # log written but not committed: the kill rolled it back; staging file
        3: (True, 0),  # file in place, log not committed: a rerun with --force logs it
        4: (True, True),  # both
    }[stop_at]
    assert present == expected[0] and bool(logged) == bool(expected[1])
    assert bool(hidden) == (stop_at <= 2)  # a kill before the move leaves the staging file
    # the next build to the same place removes the left-over and completes the campaign
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        built = build_list(
            wh, plan, out, log=CampaignLog.open(wh), force=True, replace=stop_at == 4
        )
    assert any("Removed 1 staging file" in n for n in built.notes) == (stop_at <= 2)
    present, logged, hidden = state(world, out)
    assert present and hidden == []
    assert logged == built.outcome.listed.height
    assert pl.read_csv(out).height == built.outcome.treatment.height


@pytest.mark.parametrize("stop_at", range(1, len(BUILD_STAGES)))
def test_an_error_at_each_stage_leaves_nothing_and_keeps_the_old_list(
    world: Path, tmp_path: Path, stop_at: int
) -> None:
    out = tmp_path / "mats.csv"
    out.write_text("the list sent last week\n")

    def fail(label: str, n: int, total: int) -> None:
        if n == stop_at:
            raise RuntimeError(f"stopped at {label}")

    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        with pytest.raises(RuntimeError, match="stopped at"):
            build_list(wh, plan, out, log=CampaignLog.open(wh), force=True, progress=fail)
        assert not CampaignLog(wh).has_campaign("c1")
    assert out.read_text() == "the list sent last week\n"  # the replaced file came back
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_a_list_that_cannot_be_moved_into_place_is_not_logged(world: Path, tmp_path: Path) -> None:
    out = tmp_path / "mats.csv"

    def block(label: str, n: int, total: int) -> None:
        if n == 1:  # something takes the destination while the list is staged
            out.mkdir()
            (out / "x").write_text("x")

    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        with pytest.raises(StateError, match="nothing was logged"):
            build_list(wh, plan, out, log=CampaignLog.open(wh), force=True, progress=block)
        assert not CampaignLog(wh).has_campaign("c1")
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []


def test_leftovers_of_live_or_unknown_processes_are_reported_not_removed(tmp_path: Path) -> None:
    out = tmp_path / "mats.csv"
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True
    ).stdout.strip()
    files = {
        "dead": tmp_path / f".mats.csv.{dead}-abc.tmp",
        "live": tmp_path / f".mats.csv.{os.getpid()}-abc.tmp",
        "old": tmp_path / ".mats.csv.k2j3h4.tmp",  # an older reachlist named them without a pid
        "other": tmp_path / f".other.csv.{dead}-abc.tmp",
    }
    for p in files.values():
        p.write_text("x")
    found = clear_leftovers(out)
    assert found.removed == (files["dead"],)
    assert set(found.kept) == {files["live"], files["old"]}
    assert files["other"].exists() and not files["dead"].exists()
    assert "Left alone 2 staging file(s)" in found.notes()[1]


# -- the log's unique keys -------------------------------------------------------------------------
def test_log_tables_get_unique_keys_and_old_keyless_tables_keep_working(
    world: Path, tmp_path: Path
) -> None:
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        first = build_list(wh, plan, tmp_path / "a.csv", log=CampaignLog.open(wh))
        assert CampaignLog(wh).unkeyed() == [] and first.notes == ()
    con = duckdb.connect(str(world))
    keys = con.execute(
        "SELECT table_name, constraint_type FROM information_schema."
        "table_constraints WHERE constraint_type = 'PRIMARY KEY' "
        "ORDER BY 1"
    ).fetchall()
    assert keys == [("campaign_contacts", "PRIMARY KEY"), ("campaigns", "PRIMARY KEY")]
    with pytest.raises(duckdb.ConstraintException):
        con.execute("INSERT INTO campaigns SELECT * FROM campaigns")
    # a log created by an earlier reachlist, without keys: used as it is
    for t in ("campaigns", "campaign_contacts"):
        con.execute(f"CREATE TABLE {t}_old AS SELECT * FROM {t}")
        con.execute(f"DROP TABLE {t}")
        con.execute(f"ALTER TABLE {t}_old RENAME TO {t}")
    con.close()
    with Warehouse.open(world) as wh:
        assert CampaignLog(wh).unkeyed() == ["campaigns", "campaign_contacts"]
        built = build_list(wh, plan, tmp_path / "b.csv", log=CampaignLog.open(wh), replace=True)
        assert CampaignLog(wh).contacts("c1").height == built.outcome.listed.height
    assert any("have no unique key" in n for n in built.notes)


@pytest.mark.postgres
@pytest.mark.parametrize("log", ["keys", "fresh", "keyless"])
def test_concurrent_replace_builds_on_postgres_log_a_campaign_once(
    world: Path, tmp_path: Path, pg_url: str, pg_schema: str, log: str
) -> None:
    """Two threads, each with its own connection, build the same campaign with replace=True at
    the same moment (a barrier releases both once their lists are staged, and each waits a moment
    for the other before committing). With the keys
    reachlist creates (log tables present: "keys"; created by the racing builds: "fresh"), one
    wins and the other is refused; without them (an old log: "keyless") both succeed and the
    campaign is logged twice, which is why the keys exist."""
    keys = log != "keyless"
    from reachlist.statements import create_log_table
    from reachlist.transfer import copy_warehouse

    copy_warehouse(str(world), pg_url, schema=pg_schema)
    mapping = Mapping.from_dict({"schema": pg_schema})
    with Warehouse.open(pg_url, mapping) as pg:
        plan = plan_list(pg, request(), rules=RULESET, now=NOW)
        if log != "fresh":
            with pg.transaction():
                for t in ("campaigns", "campaign_contacts"):
                    ddl = create_log_table(pg.mapping, t)
                    if not keys:  # what an earlier reachlist created: same columns, no keys
                        ddl = ddl.split(",\n    PRIMARY KEY")[0] + "\n)"
                    pg.run_statement(ddl)
    barrier = threading.Barrier(2, timeout=60)
    written = {1: threading.Event(), 2: threading.Event()}
    results: dict[int, object] = {}

    def one(i: int) -> None:
        def wait(label: str, n: int, total: int) -> None:
            if n == 1:  # both lists staged: start writing the log together
                barrier.wait()
            if n == 2:  # log rows written, not committed: give the other build time to write
                written[i].set()  # (with keys it is blocked on our rows and never gets here)
                written[3 - i].wait(3)

        try:
            with Warehouse.open(pg_url, mapping) as wh:
                results[i] = build_list(
                    wh,
                    plan,
                    tmp_path / f"l{i}.csv",
                    log=CampaignLog.open(wh),
                    replace=True,
                    progress=wait,
                )
        except Exception as exc:
            results[i] = exc

    threads = [threading.Thread(target=one, args=(i,)) for i in (1, 2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(120)
    with Warehouse.open(pg_url, mapping) as wh:
        assert CampaignLog(wh).unkeyed() == (
            [] if keys else [f"{pg_schema}.campaigns", f"{pg_schema}.campaign_contacts"]
        )
        logged = CampaignLog(wh).contacts("c1").height
        records = wh.scalar(ref_count_query())
    listed = next(r.outcome.listed.height for r in results.values() if not isinstance(r, Exception))
    wins = [i for i, r in results.items() if not isinstance(r, Exception)]
    if keys:
        assert len(wins) == 1, results
        loser = next(r for r in results.values() if isinstance(r, Exception))
        assert isinstance(loser, StateError) and "nother build" in str(loser)
        assert "this build wrote nothing" in str(loser)
        assert (logged, records) == (listed, 1)
        assert [(tmp_path / f"l{i}.csv").exists() for i in (1, 2)] == [i in wins for i in (1, 2)]
    else:
        assert len(wins) == 2 and (logged, records) == (2 * listed, 2)


def ref_count_query():
    from reachlist.query import Query

    return Query("SELECT count(*) AS n FROM campaigns WHERE campaign_id = 'c1'")
