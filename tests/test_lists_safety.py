"""Lists that must not be wrong, on small hand-built warehouses: bought-and-returned customers,
orders dated in the future, orders without a customer, duplicate customer rows, filter values
checked against the warehouse, the contact cap over every campaign log, and CSV cells that a
spreadsheet would run as formulas."""

from __future__ import annotations

from datetime import date, datetime
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.audience import Filters
from reachlist.campaigns import CampaignLog
from reachlist.lists import preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.targets import Target, Window, last_order_day, mining_window, order_history
from reachlist.warehouse import Warehouse
from tests import audience_reference as ref
from tests import handmade as hm

NOW = datetime(2026, 1, 5, 12, 0)
TODAY = NOW.date()
WINDOW = Window(datetime(2025, 1, 1), datetime(2026, 1, 1))
RULES = ref.make_ruleset(Target("sku", "T"), [("R1", ("A",), 0.4)], window=WINDOW)

PRODUCTS = [hm.product("A"), hm.product("T", stock_on_hand=10), hm.product("T2", stock_on_hand=3)]


def world(path: Path, purchases: list[tuple], customers: list[tuple] | None = None) -> Path:
    ids = sorted({p[0] for p in purchases if p[0] is not None})
    return hm.build(
        path,
        customers=customers if customers is not None else [hm.customer(c) for c in ids],
        products=PRODUCTS,
        purchases=purchases,
    )


def request(**kw: object) -> ListRequest:
    base: dict[str, object] = {"target": "T", "campaign_id": "c1", "holdout": 0.0}
    base.update(kw)
    return ListRequest(**base)  # type: ignore[arg-type]


def excluded_by(outcome) -> dict[object, str | None]:
    return dict(outcome.customers.select("customer_id", "excluded_by").iter_rows())


# -- bought and returned ---------------------------------------------------------------------------
RETURNS = [
    *[(c, "2025-03-01", "A", 1) for c in (1, 2, 3, 4, 5, 6)],
    (1, "2025-04-01", "T", 1),
    (1, "2025-04-09", "T", -1),  # bought T and returned it all
    (2, "2025-04-01", "T", 2),
    (2, "2025-04-09", "T", -1),  # returned half: still holds T
    (3, "2025-04-01", "T", 1),
    (3, "2025-04-09", "T", -2),  # returned more than bought
    (4, "2025-04-09", "T", -1),  # a return with no purchase on record: not a buyer
    # 5 never touched T
    (6, "2025-04-01", "T", 1),
    (6, "2025-04-09", "T", -1),
    (6, "2025-05-01", "T2", 1),  # T2 is a different SKU: not the target
]


@pytest.mark.parametrize("purpose", ["introduce", "clear"])
def test_bought_and_returned_customers_are_their_own_step(tmp_path: Path, purpose: str) -> None:
    path = world(tmp_path / "w.duckdb", RETURNS)
    with Warehouse.open(path, read_only=True) as wh:
        plan = plan_list(wh, request(purpose=purpose, stock=100), rules=RULES, now=NOW)
        out = preview_list(wh, plan)
    by = excluded_by(out)
    assert by[1] == by[3] == by[6] == "returned_target"
    assert by[2] == "has_target"
    assert by[4] is None and by[5] is None
    keys = [s.key for s in out.waterfall]
    assert keys[:3] == ["has_target", "returned_target", "no_consent"]
    step = out.waterfall[1]
    assert (
        step.in_use and step.removed == 3 and step.label == "bought the target and returned it all"
    )
    assert out.waterfall[0].remaining - step.removed == step.remaining


def test_a_category_target_counts_a_returner_only_when_nothing_is_held(tmp_path: Path) -> None:
    # T and T2 share category "cat" with A in hm.product; give them a category of their own
    path = world(tmp_path / "w.duckdb", RETURNS)
    con = duckdb.connect(str(path))
    con.execute("UPDATE products SET category = 'mats' WHERE sku IN ('T', 'T2')")
    con.close()
    rules = ref.make_ruleset(Target("category", "mats"), [("R1", ("A",), 0.4)], window=WINDOW)
    with Warehouse.open(path, read_only=True) as wh:
        plan = plan_list(wh, request(target="category:mats"), rules=rules, now=NOW)
        by = excluded_by(preview_list(wh, plan))
    assert by[6] == "has_target"  # returned T but holds T2, another SKU of the category
    assert by[1] == by[3] == "returned_target" and by[2] == "has_target"


# -- the default window and orders dated in the future --------------------------------------------
def test_an_order_dated_in_the_future_does_not_move_the_window(tmp_path: Path) -> None:
    purchases = [
        (1, "2025-03-01", "A", 1),
        (2, "2025-12-20", "T", 1),
        (3, "2062-05-01", "A", 1),
        (3, "2061-02-01", "A", 1),
    ]
    path = world(tmp_path / "w.duckdb", purchases)
    with Warehouse.open(path, read_only=True) as wh:
        history = order_history(wh, TODAY)
        assert history.last_order == datetime(2025, 12, 20)
        assert (history.later_orders, history.latest_later) == (2, datetime(2062, 5, 1))
        assert last_order_day(wh, TODAY) == datetime(2025, 12, 21)
        assert mining_window(wh, today=TODAY) == Window(
            datetime(2024, 12, 21), datetime(2025, 12, 21)
        )
        # on a later "today" those orders are history like any other
        assert last_order_day(wh, date(2070, 1, 1)) == datetime(2062, 5, 2)
        plan = plan_list(wh, request(), now=NOW, rules=RULES)
        note = [n for n in history.notes() if "after today" in n]
    assert note and "2 order(s)" in note[0] and "2062-05-01" in note[0]
    # rules given with their own window: the note about the default window does not apply
    assert not any("after today" in n for n in plan.notes)


def test_every_order_in_the_future_is_one_clear_error(tmp_path: Path) -> None:
    from reachlist.errors import InputError

    path = world(tmp_path / "w.duckdb", [(1, "2062-05-01", "A", 1)])
    with Warehouse.open(path, read_only=True) as wh, pytest.raises(InputError, match="after today"):
        last_order_day(wh, TODAY)


# -- orders without a customer ---------------------------------------------------------------------
def test_orders_without_a_customer_are_ignored_and_counted(tmp_path: Path) -> None:
    purchases = [
        *[(c, "2025-03-01", "A", 1) for c in (1, 2, 3)],
        (3, "2025-05-01", "T", 1),
        (None, "2025-03-02", "A", 1),
        (None, "2025-03-02", "T", 1),
        (None, "2025-03-03", "A", 1),
    ]
    path = world(tmp_path / "w.duckdb", purchases)
    with Warehouse.open(path, read_only=True) as wh:
        assert order_history(wh, TODAY).without_customer == 2  # one order per (customer, day)
        plan = plan_list(wh, request(), now=NOW, rules=RULES)
        out = preview_list(wh, plan)
    assert sorted(excluded_by(out).items()) == [(1, None), (2, None), (3, "has_target")]
    assert any("2 order(s) have no customer id and were ignored" in n for n in plan.notes)


# -- duplicate customer rows -----------------------------------------------------------------------
def test_duplicate_customer_rows_are_refused_or_read_by_their_strictest_row(
    tmp_path: Path,
) -> None:
    from reachlist.errors import ContractError

    purchases = [*[(c, "2025-03-01", "A", 1) for c in (1, 2, 3, 4, 5)], (6, "2025-03-01", "T", 1)]
    customers = [
        hm.customer(6),
        hm.customer(1),
        hm.customer(1),  # the same row twice: harmless, still listed once
        hm.customer(2),
        hm.customer(2, consent=False),  # one row says no consent
        hm.customer(3),
        hm.customer(3, birth=None),  # one row does not know the age
        hm.customer(4),
        hm.customer(4, region="south"),  # one row in another region
        hm.customer(5),
    ]
    path = world(tmp_path / "w.duckdb", purchases, customers)
    with Warehouse.open(path, read_only=True) as wh:
        with pytest.raises(ContractError, match=r"found 4 id\(s\) on more than one row") as exc:
            plan_list(wh, request(), rules=RULES, now=NOW)
        assert "reachlist check" in str(exc.value) and "merge_duplicates=True" in str(exc.value)
        plan = plan_list(wh, request(merge_duplicates=True), rules=RULES, now=NOW)
        out = preview_list(wh, plan)
        assert any("4 customer id(s) are on more than one row" in n for n in plan.notes)
        assert out.customers["customer_id"].is_duplicated().sum() == 0  # never listed twice
        assert excluded_by(out) == {1: None, 2: "no_consent", 3: None, 4: None, 5: None}
        # strictest row for age (an age-restricted target) and for a region filter
        regional = preview_list(
            wh,
            plan_list(
                wh,
                request(merge_duplicates=True, filters=Filters(regions=("north",))),
                rules=RULES,
                now=NOW,
            ),
        )
        assert excluded_by(regional)[4] == "outside_region"
    con = duckdb.connect(str(path))
    con.execute("UPDATE products SET age_restricted = TRUE WHERE sku = 'T'")
    con.close()
    with Warehouse.open(path, read_only=True) as wh:
        adult = preview_list(
            wh, plan_list(wh, request(merge_duplicates=True), rules=RULES, now=NOW)
        )
    assert excluded_by(adult) == {1: None, 2: "no_consent", 3: "not_adult", 4: None, 5: None}
    assert adult.listed.height == 3


# -- region and channel values ---------------------------------------------------------------------
@pytest.mark.parametrize(
    ("filters", "match"),
    [
        (Filters(regions=("North",)), r"found 'North'.*did you mean regions 'north'\?"),
        (Filters(regions=("north", "sout")), r"found 'sout'.*did you mean regions 'south'\?"),
        (
            Filters(regions=("moon",)),
            r"found 'moon'.*use one of the values in "
            r"customers.region: 'north', 'south'",
        ),
        (
            Filters(channels=("Store",)),
            r"channels values present in orders.channel, found "
            r"'Store'.*did you mean channels 'store'\?",
        ),
    ],
)
def test_filter_values_are_checked_against_the_warehouse(
    tmp_path: Path, filters: Filters, match: str
) -> None:
    from reachlist.errors import InputError

    purchases = [(c, "2025-03-01", "A", 1) for c in (1, 2)] + [(3, "2025-03-01", "T", 1)]
    customers = [hm.customer(1), hm.customer(2, region="south"), hm.customer(3)]
    path = world(tmp_path / "w.duckdb", purchases, customers)
    with Warehouse.open(path, read_only=True) as wh:
        with pytest.raises(InputError, match=match):
            plan_list(wh, request(filters=filters), rules=RULES, now=NOW)
        ok = plan_list(wh, request(filters=Filters(("south",), ("store",))), rules=RULES, now=NOW)
        assert excluded_by(preview_list(wh, ok)) == {1: "outside_region", 2: None}


# -- CSV cells a spreadsheet would run -------------------------------------------------------------
# Source: OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection): cells beginning
# with = + - @, tab (0x09) or carriage return (0x0D) are read as formulas; prefix them with a single
# quote. Parquet is not opened by spreadsheets as text and is written unchanged.
HOSTILE = '=HYPERLINK("http://example.invalid/x","click")'


def test_csv_cells_that_start_like_formulas_are_neutralised(tmp_path: Path) -> None:
    from reachlist.export import neutralise_formulas
    from reachlist.lists import build_list

    frame = pl.DataFrame(
        {
            "code": ["=1+1", "+1", "-1", "@SUM(A1)", "\tx", "\rx", "plain", "a=b", None],
            "score": [-1.5, 2.0, -3.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0],
            "n": [-1, 2, -3, 4, 5, 6, 7, 8, 9],
        }
    )
    out = neutralise_formulas(frame)
    assert out["code"].to_list() == [
        "'=1+1",
        "'+1",
        "'-1",
        "'@SUM(A1)",
        "'\tx",
        "'\rx",
        "plain",
        "a=b",
        None,
    ]
    assert out["score"].equals(frame["score"]) and out["n"].equals(frame["n"])  # numbers stay

    products = [hm.product(HOSTILE), hm.product("T", stock_on_hand=10)]
    path = hm.build(
        tmp_path / "w.duckdb",
        customers=[hm.customer(c) for c in (1, 2, 3)],
        products=products,
        purchases=[
            (1, "2025-03-01", HOSTILE, 1),
            (2, "2025-03-01", HOSTILE, 1),
            (3, "2025-03-01", "T", 1),
        ],
    )
    rules = ref.make_ruleset(Target("sku", "T"), [("-R1", (HOSTILE,), 0.4)], window=WINDOW)
    with Warehouse.open(path) as wh:
        plan = plan_list(wh, request(), rules=rules, now=NOW)
        build_list(wh, plan, tmp_path / "l.csv", log=CampaignLog.open(wh))
        build_list(wh, plan, tmp_path / "l.parquet", log=CampaignLog.open(wh), replace=True)
    csv = pl.read_csv(tmp_path / "l.csv")
    assert set(csv["because_bought"]) == {"'" + HOSTILE}  # the product is named as coded
    assert set(csv["rule_id"]) == {"'-R1"}
    assert csv["customer_id"].to_list() == [1, 2]  # integer ids are numbers, not text cells
    parquet = pl.read_parquet(tmp_path / "l.parquet")
    assert set(parquet["because_bought"]) == {HOSTILE} and set(parquet["rule_id"]) == {"-R1"}


# -- the contact cap reads every campaign log ------------------------------------------------------
def test_the_cap_reads_the_warehouse_log_and_the_state_file(tmp_path: Path) -> None:
    from reachlist.lists import build_list

    purchases = [*[(c, "2025-03-01", "A", 1) for c in range(1, 9)], (9, "2025-03-01", "T", 1)]
    path = world(tmp_path / "w.duckdb", purchases)
    state = tmp_path / "state.duckdb"
    with Warehouse.open(path) as wh:
        # an earlier campaign logged in the warehouse itself contacted everyone
        first = build_list(
            wh,
            plan_list(wh, request(campaign_id="in-warehouse"), rules=RULES, now=NOW),
            tmp_path / "a.csv",
            log=CampaignLog.open(wh),
        )
        contacted = set(first.outcome.treatment["customer_id"].to_list())
        assert contacted == set(range(1, 9))
        # a build that keeps its log in a state file still honours that campaign
        plan = plan_list(
            wh, request(campaign_id="next", cap_days=30), rules=RULES, now=datetime(2026, 1, 20)
        )
        with CampaignLog.open(wh, str(state)) as log:
            assert log.read_from == [str(state), str(path)]
            out = preview_list(wh, plan, log)
            cap = next(s for s in out.waterfall if s.key == "contacted_recently")
            assert cap.removed == 8 and out.listed.height == 0
            assert cap.note == f"read {state} and {path}"
        # and once the cap has passed, the state file's own campaigns count too
        later = plan_list(
            wh, request(campaign_id="later", cap_days=14), rules=RULES, now=datetime(2026, 2, 20)
        )
        with CampaignLog.open(wh, str(state)) as log:
            from reachlist.campaigns import CampaignRecord

            log.record(
                CampaignRecord("in-state", datetime(2026, 2, 15), "T", "introduce"),
                pl.DataFrame(
                    {
                        "customer_id": [1, 2],
                        "contact_group": ["treatment"] * 2,
                        "score": [0.4, 0.4],
                        "rule_id": ["R1", "R1"],
                    }
                ),
            )
            assert sorted(log.recent_contacts(datetime(2026, 2, 6)).to_list()) == [1, 2]
            out = preview_list(wh, later, log)
        assert excluded_by(out)[1] == "contacted_recently" and excluded_by(out)[3] is None
