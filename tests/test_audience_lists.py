"""Plans, previews and built lists: waterfall, holdout, clearance sizing, stand-ins, cautions."""

from __future__ import annotations

import dataclasses
import json
import shutil
from collections import Counter
from datetime import datetime, timedelta
from pathlib import Path

import duckdb
import polars as pl
import pytest

from reachlist.audience import Filters
from reachlist.campaigns import CampaignLog, CampaignRecord
from reachlist.errors import EmptyResultError, InputError, StateError
from reachlist.holdout import assign_holdout, bucket, in_holdout
from reachlist.lists import build_list, preview_list
from reachlist.planning import ListRequest, plan_list
from reachlist.targets import Target
from reachlist.warehouse import Warehouse
from tests import audience_cases as cases
from tests import audience_reference as ref

NOW = datetime(2026, 1, 5, 12, 0)
RULESET = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)


@pytest.fixture(scope="module")
def pristine(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return cases.build_world(tmp_path_factory.mktemp("lists") / "world.duckdb")


@pytest.fixture
def world(pristine: Path, tmp_path: Path) -> Path:
    path = tmp_path / "world.duckdb"
    shutil.copy(pristine, path)
    return path


def request(**kw: object) -> ListRequest:
    # the hand-worked counts below are per step; the global holdout (a hash, on by default) is
    # switched off here and tested on its own
    base: dict[str, object] = {"target": "T", "campaign_id": "c1", "global_holdout": 0.0}
    base.update(kw)
    return ListRequest(**base)  # type: ignore[arg-type]


def reference_outcome(
    world: Path,
    plan,
    in_use: set[str],
    contacted: set[int] = frozenset(),
    held_elsewhere: set[int] = frozenset(),
):
    tables = ref.load(world)
    aud = ref.audience(tables, plan.spec).with_columns(
        pl.col("customer_id").is_in(list(contacted)).alias("contacted_recently"),
        pl.col("customer_id").is_in(list(held_elsewhere)).alias("held_out_elsewhere"),
        ~pl.col("customer_id").is_in(list(ref.with_address(tables))).alias("no_address"),
        # the global holdout by hashlib directly (tests/audience_reference.py): seed, id, share
        pl.col("customer_id")
        .map_elements(
            lambda c: ref.in_holdout("reachlist-global", c, plan.request.global_holdout),
            return_dtype=pl.Boolean,
        )
        .alias("global_holdout"),
    )
    excluded = {r["customer_id"]: ref.first_exclusion(r, in_use) for r in aud.to_dicts()}
    return aud, excluded


def test_waterfall_holdout_and_per_rule_match_the_reference(world: Path) -> None:
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(holdout=0.3), rules=RULESET, now=NOW)
        out = preview_list(wh, plan, CampaignLog.open(wh))
    _, excluded = reference_outcome(
        world,
        plan,
        {"has_target", "returned_target", "no_consent", "suppressed", "contacted_recently"},
    )
    removed = Counter(v for v in excluded.values() if v)
    assert {s.key: s.removed for s in out.waterfall} == {k: removed.get(k, 0) for k in ref.ORDER}
    assert out.waterfall[-1].remaining == sum(1 for v in excluded.values() if v is None)
    kept = sorted(c for c, v in excluded.items() if v is None)
    holdout = {c for c in kept if ref.in_holdout("c1", c, 0.3)}
    assert set(out.holdout["customer_id"].to_list()) == holdout
    assert set(out.treatment["customer_id"].to_list()) == set(kept) - holdout
    # per rule: reached before exclusions, kept after, and overlap with rules above
    for rr in out.per_rule or []:
        reach = cases.EXPECTED_REACH[rr.rule.rank]
        kept_here = {c for c in reach if excluded[c] is None}
        above = set().union(*(cases.EXPECTED_REACH[k] for k in range(1, rr.rule.rank)))
        assert (rr.reached, rr.kept) == (len(reach), len(kept_here))
        assert rr.above == len(kept_here & above)
    assert sum(rr.adds for rr in out.per_rule or []) == len(kept)


def test_switching_consent_and_suppression_off_is_explicit(world: Path) -> None:
    with Warehouse.open(world) as wh:
        plan = plan_list(
            wh, request(ignore_consent=True, ignore_suppressions=True), rules=RULESET, now=NOW
        )
        out = preview_list(wh, plan)
    steps = {s.key: s for s in out.waterfall}
    assert not steps["no_consent"].in_use and steps["no_consent"].removed == 0
    assert steps["no_consent"].flagged == 2  # customers 11 and 14 would have gone
    assert "ignore_consent=True" in steps["no_consent"].note
    assert len(plan.overrides) == 2
    assert {11, 12, 14, 19} <= set(out.listed["customer_id"].to_list())


def test_filters_and_age_restriction(world: Path) -> None:
    with Warehouse.open(world) as wh:
        plan = plan_list(
            wh,
            request(
                target="R",
                stand_in="T",
                filters=Filters(regions=("north",), ordered_within_days=330),
            ),
            rules=RULESET,
            now=NOW,
        )
        out = preview_list(wh, plan)
    assert plan.spec.age_restricted
    steps = {s.key: s for s in out.waterfall}
    assert steps["not_adult"].removed == 2  # 13 (age unknown) and 17 (a minor)
    assert steps["outside_region"].removed == 1  # 15 lives in the south
    assert steps["no_recent_order"].removed == 1  # 16's last order is in January
    assert not steps["outside_channel"].in_use


def test_frequency_cap_reads_the_campaign_log(world: Path) -> None:
    with Warehouse.open(world) as wh:
        log = CampaignLog.open(wh)
        earlier = CampaignRecord("earlier", datetime(2026, 1, 1), "T", "introduce")
        contacts = pl.DataFrame(
            {
                "customer_id": [3, 4, 10],
                "contact_group": ["treatment", "treatment", "holdout"],
                "score": [0.2, 0.3, 0.2],
                "rule_id": ["R2", "R1", "R2"],
            }
        )
        log.record(earlier, contacts)
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        capped = preview_list(wh, plan, log)
        uncapped = preview_list(wh, plan_list(wh, request(cap_days=0), rules=RULESET, now=NOW), log)
        late = preview_list(
            wh, plan_list(wh, request(), rules=RULESET, now=datetime(2026, 2, 1)), log
        )
    step = {s.key: s for s in capped.waterfall}["contacted_recently"]
    assert step.removed == 2  # 3 and 4; 10 was only in a holdout
    assert {s.key: s for s in uncapped.waterfall}["contacted_recently"].removed == 0
    assert {s.key: s for s in late.waterfall}["contacted_recently"].removed == 0


def test_clearance_is_sized_by_calibrated_take_up_never_by_the_rules_scores(world: Path) -> None:
    with Warehouse.open(world) as wh:
        small = preview_list(
            wh,
            plan_list(wh, request(purpose="clear", stock=1, holdout=0.0), rules=RULESET, now=NOW),
        )
        far = preview_list(
            wh,
            plan_list(
                wh,
                request(purpose="clear", stock=1, holdout=0.0, horizon_days=1_825),
                rules=RULESET,
                now=NOW,
            ),
        )
        big = preview_list(
            wh, plan_list(wh, request(purpose="clear", holdout=0.0), rules=RULESET, now=NOW)
        )
    c = small.clearance
    assert c is not None and c.stock_from == "stock" and c.sized and c.cutoffs >= 1
    # By the rules' scores (co-purchase rates 0.3, 0.3, 0.3, 0.2 ...) four customers would
    # "clear" one unit. Nobody in this world became a new buyer of T within 30 days of a past
    # cutoff, so the calibrated take-up is 0: no unit is promised and nobody is cut.
    assert c.buyers_seen == 0 and c.expected_units == 0.0 and not c.clears
    assert c.customers == c.available == small.listed.height
    assert small.waterfall[-1].key == "not_needed" and small.waterfall[-1].removed == 0
    # a horizon no past cutoff of this short history can check: the stock is not sized at all
    f = far.clearance
    assert f is not None and not f.sized and f.expected_units is None
    assert f.basis.startswith("not sized:") and f.customers == far.listed.height
    b = big.clearance
    assert b is not None and b.stock == 5 and b.stock_from == "products.stock_on_hand"
    assert not b.clears and b.customers == b.available == big.listed.height


def test_introducing_an_item_without_history_needs_a_stand_in(world: Path) -> None:
    with Warehouse.open(world) as wh:
        with pytest.raises(InputError, match="stand_in"):
            plan_list(wh, request(target="NEW"), rules=RULESET, now=NOW)
        plan = plan_list(wh, request(target="NEW", stand_in="T"), rules=RULESET, now=NOW)
        out = preview_list(wh, plan)
    assert plan.stand_in == Target("sku", "T")
    assert any("borrowed from the stand-in T" in n for n in plan.notes)
    # nobody holds NEW, so owning the stand-in does not exclude anyone
    assert {s.key: s for s in out.waterfall}["has_target"].removed == 0


def test_sensitive_items_need_an_explicit_flag(world: Path) -> None:
    rules = ref.make_ruleset(cases.TARGET, [("Rs", ("S",), 0.4)])
    with Warehouse.open(world) as wh:
        with pytest.raises(InputError, match="sensitive"):
            plan_list(wh, request(), rules=rules, now=NOW)
        plan = plan_list(wh, request(allow_sensitive=True), rules=rules, now=NOW)
    assert plan.sensitive == ("S",)


def test_picked_insignificant_rules_are_flagged_in_notes(world: Path) -> None:
    rules = ref.make_ruleset(cases.TARGET, [("Rw", ("C",), 0.4, 2.0, False)])
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(rule_ids=("Rw",)), rules=rules, now=NOW)
    assert any("not significant" in n for n in plan.notes)


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"purpose": "sell"}, "purpose"),
        ({"holdout": 1.0}, "holdout share"),
        ({"cap_days": -1}, "cap_days"),
        ({"campaign_id": "bad id; --"}, "campaign id"),
        ({"target": "NOPE"}, "not a sku"),
        ({"stock": 0}, "stock"),
    ],
)
def test_bad_requests(world: Path, kw: dict, match: str) -> None:
    with Warehouse.open(world) as wh, pytest.raises(InputError, match=match):
        plan_list(wh, request(**kw), rules=RULESET, now=NOW)


# -- build -----------------------------------------------------------------------------------------
def test_build_writes_treatment_only_and_logs_both_groups(world: Path, tmp_path: Path) -> None:
    out = tmp_path / "list.csv"
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(holdout=0.3), rules=RULESET, now=NOW)
        log = CampaignLog.open(wh)
        built = build_list(wh, plan, out, log=log)
        record = log.campaign("c1")
        contacts = log.contacts("c1")
    written = pl.read_csv(out)
    assert written.columns == [
        "customer_id",
        "campaign_id",
        "offer_item",
        "offer_name",
        "score",
        "rule_id",
        "because_bought",
    ]
    assert set(written["customer_id"]) == set(built.outcome.treatment["customer_id"])
    assert written["because_bought"][0] == "A and B"  # the hand-made products are named as coded
    assert set(written["campaign_id"]) == {"c1"} and set(written["offer_item"]) == {"T"}
    # the holdout file holds exactly the logged holdout; the sidecar says where both came from
    held = pl.read_csv(tmp_path / "list.holdout.csv")
    assert set(held["customer_id"]) == set(built.outcome.holdout["customer_id"])
    assert held.height == built.outcome.holdout.height > 0
    sidecar = json.loads((tmp_path / "list.csv.json").read_text())
    assert sidecar["campaign_id"] == "c1" and sidecar["contacts"] == written.height
    assert sidecar["holdout"] == held.height and sidecar["columns"] == written.columns
    assert built.also_written == (tmp_path / "list.holdout.csv", tmp_path / "list.csv.json")
    groups = dict(contacts.group_by("contact_group").len().iter_rows())
    assert groups == {"treatment": written.height, "holdout": built.outcome.holdout.height}
    assert set(contacts.filter(pl.col("contact_group") == "holdout")["customer_id"]).isdisjoint(
        written["customer_id"]
    )
    assert record is not None and record["counts"]["treatment"] == written.height
    assert [r["rule_id"] for r in record["rules"]] == ["R1", "R2", "R3"]
    assert record["overrides"] is None
    assert record["parameters"]["audience_sql"]["sql"].startswith("-- reachlist audience")
    assert not list(tmp_path.glob(".list.csv.*"))  # no temporary file left


def test_build_refuses_existing_file_and_campaign(world: Path, tmp_path: Path) -> None:
    out = tmp_path / "list.parquet"
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        log = CampaignLog.open(wh)
        build_list(wh, plan, out, log=log)
        first = pl.read_parquet(out)
        with pytest.raises(StateError, match="force=True"):
            build_list(wh, plan, out, log=log)
        with pytest.raises(StateError, match="replace=True"):
            build_list(wh, plan, tmp_path / "other.parquet", log=log, force=True)
        assert not (tmp_path / "other.parquet").exists()
        built = build_list(wh, plan, out, log=log, force=True, replace=True)
        assert log.contacts("c1").height == built.outcome.listed.height  # replaced, not added
    assert pl.read_parquet(out).equals(first)


def test_contact_fields_only_when_asked(world: Path, tmp_path: Path) -> None:
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(contact=True), rules=RULESET, now=NOW)
        build_list(wh, plan, tmp_path / "l.csv", log=CampaignLog.open(wh))
    assert "email" in pl.read_csv(tmp_path / "l.csv").columns


def test_an_empty_list_writes_nothing(world: Path, tmp_path: Path) -> None:
    rules = ref.make_ruleset(cases.TARGET, [("Rn", ("B",), 0.5)])
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(filters=Filters(regions=("south",))), rules=rules, now=NOW)
        log = CampaignLog.open(wh)
        with pytest.raises(EmptyResultError, match="none after exclusions"):
            build_list(wh, plan, tmp_path / "l.csv", log=log)
        assert not log.has_campaign("c1")
    assert not (tmp_path / "l.csv").exists()


def test_build_with_a_state_file_leaves_a_read_only_warehouse_alone(
    world: Path, tmp_path: Path
) -> None:
    state = tmp_path / "state.duckdb"
    with Warehouse.open(world, read_only=True) as wh:
        plan = plan_list(wh, request(), rules=RULESET, now=NOW)
        with pytest.raises(StateError, match="with state PATH"):
            build_list(wh, plan, tmp_path / "a.csv", log=CampaignLog.open(wh))
        assert not (tmp_path / "a.csv").exists()
        with CampaignLog.open(wh, str(state)) as log:
            built = build_list(wh, plan, tmp_path / "b.csv", log=log)
            assert log.campaign("c1") is not None
    assert built.log_where == str(state)
    with Warehouse.open(world, read_only=True) as wh:
        assert not CampaignLog(wh).present()


# -- holdout ---------------------------------------------------------------------------------
def test_holdout_is_stable_and_close_to_its_share() -> None:
    ids = pl.Series("customer_id", range(1, 20_001))
    mask = assign_holdout("spring", ids, 0.1)
    assert abs(mask.mean() - 0.1) < 0.01  # 4 standard errors is 0.0085
    assert mask.to_list() == [ref.in_holdout("spring", i, 0.1) for i in range(1, 20_001)]
    # a customer's group depends on the campaign and the customer only, not on the audience
    part = assign_holdout("spring", ids.slice(5000, 100), 0.1)
    assert part.to_list() == mask.slice(5000, 100).to_list()
    assert assign_holdout("autumn", ids, 0.1).to_list() != mask.to_list()
    assert in_holdout("spring-mats", 1042, 0.10) is (bucket("spring-mats", 1042) < 0.1)
    # text ids hash as stored, narrower integer types as their decimal text
    codes = pl.Series("customer_id", [f"CRM-{i:05d}-ü" for i in range(3000)])
    assert assign_holdout("spring", codes, 0.2).to_list() == [
        bucket("spring", c) < 0.2 for c in codes.to_list()
    ]
    # a campaign id is bound as a value: quotes and non-ASCII hash as the text they are
    assert assign_holdout("it's-ü;--", codes, 0.2).to_list() == [
        bucket("it's-ü;--", c) < 0.2 for c in codes.to_list()
    ]
    small = pl.Series("customer_id", range(-50, 3000), dtype=pl.Int16)
    assert assign_holdout("spring", small, 0.3).to_list() == [
        bucket("spring", c) < 0.3 for c in range(-50, 3000)
    ]
    assert assign_holdout("spring", ids.slice(0, 0), 0.1).len() == 0


# -- holdouts of live campaigns and the email channel ---------------------------------------------
def test_live_holdouts_stay_out_of_other_treatment_groups(world: Path, tmp_path: Path) -> None:
    """Customers another campaign held out stay out of this one's treatment group until that
    campaign's horizon ends; checked against the log's own holdout rows and the reference."""
    with Warehouse.open(world) as wh:
        first = plan_list(
            wh,
            request(campaign_id="c0", holdout=0.5, cap_days=0, horizon_days=30),
            rules=RULESET,
            now=NOW,
        )
        build_list(wh, first, tmp_path / "c0.csv", log=CampaignLog.open(wh))
        held = set(
            CampaignLog.open(wh)
            .contacts("c0")
            .filter(pl.col("contact_group") == "holdout")["customer_id"]
            .to_list()
        )
        soon = plan_list(wh, request(cap_days=0), rules=RULESET, now=NOW + timedelta(days=10))
        during = preview_list(wh, soon, CampaignLog.open(wh))
        late = plan_list(wh, request(cap_days=0), rules=RULESET, now=NOW + timedelta(days=31))
        after = preview_list(wh, late, CampaignLog.open(wh))
    assert held  # the hand-made world has customers in c0's holdout
    in_use = {"has_target", "returned_target", "no_consent", "suppressed", "held_out_elsewhere"}
    _, excluded = reference_outcome(world, soon, in_use, held_elsewhere=held)
    steps = {s.key: s for s in during.waterfall}
    assert steps["held_out_elsewhere"].removed == sum(
        1 for v in excluded.values() if v == "held_out_elsewhere"
    )
    assert steps["held_out_elsewhere"].removed > 0 and "c0" in steps["held_out_elsewhere"].note
    assert held.isdisjoint(during.treatment["customer_id"].to_list())
    gone = {s.key: s for s in after.waterfall}["held_out_elsewhere"]
    assert gone.removed == 0 and gone.note == "no live holdouts"


def test_the_email_channel_needs_an_address(world: Path, tmp_path: Path) -> None:
    con = duckdb.connect(str(world))
    con.execute("UPDATE customers SET email = NULL WHERE customer_id = 12")
    con.execute("UPDATE customers SET email = 'not an address' WHERE customer_id = 19")
    con.close()
    with Warehouse.open(world) as wh:
        plain = preview_list(wh, plan_list(wh, request(), rules=RULESET, now=NOW))
        asked = preview_list(wh, plan_list(wh, request(contact=True), rules=RULESET, now=NOW))
    in_use = {"has_target", "returned_target", "no_consent", "suppressed", "no_address"}
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(contact=True), rules=RULESET, now=NOW)
    _, excluded = reference_outcome(world, plan, in_use)
    step = {s.key: s for s in asked.waterfall}["no_address"]
    assert step.in_use and step.removed == sum(1 for v in excluded.values() if v == "no_address")
    assert not {s.key: s for s in plain.waterfall}["no_address"].in_use
    assert asked.treatment["email"].str.contains("@").all()


def test_a_rule_below_breadth_is_not_chosen_by_default(world: Path) -> None:
    """A rule whose breadth-matched lift interval lies below 1 is skipped (with a note) unless
    picked by id; the reference: the hand-built ruleset's own columns."""
    from reachlist.audience import choose_rules

    rules = ref.make_ruleset(cases.TARGET, cases.RULES, window=cases.WINDOW)
    frame = rules.frame.with_columns(
        pl.Series("breadth_lift", [0.7, 1.4, 1.2]),
        pl.Series("breadth_lift_high", [0.9, 1.8, 1.5]),  # R1's interval lies below 1
    )
    rules = dataclasses.replace(rules, frame=frame)
    chosen = [r.rule_id for r in choose_rules(rules, top=5, rank_by="lift")]
    assert "R1" not in chosen and chosen == ["R2", "R3"]
    picked = choose_rules(rules, top=5, rank_by="lift", rule_ids=("R1",))
    assert [r.rule_id for r in picked] == ["R1"]
    with Warehouse.open(world) as wh:
        plan = plan_list(wh, request(rank_by="lift"), rules=rules, now=NOW)
    assert any("Not chosen: rule(s) R1" in n for n in plan.notes)
    assert "R1" not in {r.rule_id for r in plan.rules}


def test_the_global_holdout_keeps_the_same_customers_out_of_every_campaign(world: Path) -> None:
    """Checked against hashlib directly (tests/audience_reference.py): the customers whose hash
    with the seed falls under the share are removed, whatever the campaign."""
    in_use = {"has_target", "returned_target", "no_consent", "suppressed", "global_holdout"}
    runs = []
    with Warehouse.open(world) as wh:
        for campaign in ("c1", "c2"):
            plan = plan_list(
                wh, request(campaign_id=campaign, global_holdout=0.3), rules=RULESET, now=NOW
            )
            runs.append((plan, preview_list(wh, plan)))
        off = preview_list(wh, plan_list(wh, request(global_holdout=0.0), rules=RULESET, now=NOW))
    removed = []
    for plan, out in runs:
        steps = {s.key: s for s in out.waterfall}
        _, excluded = reference_outcome(world, plan, in_use)
        want = sorted(c for c, v in excluded.items() if v == "global_holdout")
        assert steps["global_holdout"].removed == len(want) > 0
        assert set(want).isdisjoint(out.listed["customer_id"].to_list())
        removed.append(want)
    assert removed[0] == removed[1]  # the same customers for every campaign
    assert not {s.key: s for s in off.waterfall}["global_holdout"].in_use
