"""Plan, preview and build a campaign list.

rules toward the target -> audience (``reachlist.audience``) -> exclusions in their fixed order
(``reachlist.exclusions``) -> holdout (``reachlist.holdout``) -> for a clearance, a cut sized to
the stock -> file (``reachlist.export``) and campaign log (``reachlist.campaigns``).

>>> plan = plan_list(wh, ListRequest("HM-2041"))             # doctest: +SKIP
>>> preview = preview_list(wh, plan)                          # doctest: +SKIP
>>> built = build_list(wh, plan, "mats.csv", log=CampaignLog.open(wh))   # doctest: +SKIP
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import re
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import UTC, date, datetime, timedelta
from pathlib import Path
from typing import TYPE_CHECKING, Any

import polars as pl

from reachlist import ids
from reachlist.audience import (
    AudienceSpec,
    ChosenRule,
    Filters,
    adult_born_by,
    audience_query,
    choose_rules,
    reach_query,
    rule_rate_interval,
    skipped_below_breadth,
)
from reachlist.campaigns import CampaignLog, CampaignRecord, check_campaign_id
from reachlist.delivery import (
    PROVENANCE_KEY,
    delivery_frames,
    holdout_path,
    provenance_json,
    sidecar_path,
)
from reachlist.errors import ContractError, EmptyResultError, InputError, ReachlistError
from reachlist.estimate import (
    DEFAULT_HORIZON,
    MAX_CUTOFFS,
    Calibrated,
    HoldoutPlanning,
    TakeUpReport,
    calibrate_audience,
    holdout_planning,
)
from reachlist.exclusions import FROM_LOG_OR_LIST, STEPS, StepCount, apply_exclusions
from reachlist.export import (
    StagedFile,
    StagedSet,
    check_destination,
    clear_leftovers,
    list_format,
    stage_list,
    stage_text,
)
from reachlist.holdout import (
    DEFAULT_GLOBAL_SHARE,
    DEFAULT_SHARE,
    GLOBAL_SEED,
    assign_holdout,
    check_share,
    global_holdout,
)
from reachlist.query import Query, Rendered
from reachlist.targets import (
    LEVEL_COLUMN,
    Target,
    _as_datetime,
    check_level,
    item_buyers_query,
    mining_window,
    order_history,
    parse_target,
    resolve_target,
)
from reachlist.warehouse import Warehouse

if TYPE_CHECKING:
    from reachlist.rules import RuleSet

__all__ = [
    "PURPOSES",
    "BUILD_STAGES",
    "Built",
    "Clearance",
    "ListOutcome",
    "ListRequest",
    "Plan",
    "RuleReach",
    "build_list",
    "plan_list",
    "preview_list",
]

PURPOSES = ("introduce", "clear")
DEFAULT_CAP_DAYS = 14
DEFAULT_MIN_AUDIENCE = 50  # the CLI's default for --min-audience
SKIPPED = "skipped with --no-estimate"
NOT_NEEDED = "not_needed"  # excluded_by for customers a clearance list does not need


@dataclass(frozen=True)
class ListRequest:
    """What the user asked for; ``plan_list`` checks it against the warehouse."""

    target: str
    purpose: str = "introduce"
    stand_in: str | None = None  # an existing sku or category whose rules are used
    top: int = 5
    rank_by: str = "leverage"
    rule_ids: tuple[str, ...] = ()
    # The mining window is also the lookback window: antecedents must be held inside it, and its
    # end is the cutoff. Defaults: 12 months up to the day after the last order.
    since: str | date | None = None
    until: str | date | None = None
    mining: dict[str, Any] = field(default_factory=dict)  # more options for mine_rules
    bought_within_days: int | None = None  # None: exclude anyone who ever bought the target
    cap_days: int = DEFAULT_CAP_DAYS  # 0 switches the frequency cap off
    filters: Filters = field(default_factory=Filters)
    adult_age: int = 18
    holdout: float = DEFAULT_SHARE
    # A standing control group: this share of all customers (by a hash of the id and the seed)
    # is kept out of every campaign; 0 switches it off. Logged with each campaign.
    global_holdout: float = DEFAULT_GLOBAL_SHARE
    global_seed: str = GLOBAL_SEED
    campaign_id: str | None = None
    ignore_consent: bool = False
    ignore_suppressions: bool = False
    allow_sensitive: bool = False
    # A customer id on several rows of customers is refused; with this, each such customer is
    # read by its strictest row (no consent if any row says none, adult only if every row says
    # so) and listed once.
    merge_duplicates: bool = False
    stock: int | None = None  # clear: units to clear (default: products.stock_on_hand)
    contact: bool = False  # add contact fields (email, consent date) to the exported list
    offer_code: str | None = None  # the offer's code, written on every exported row
    # The day the list is sent. Horizons (results) count from it, and it is the as-of day: the
    # contact cap counts back from it and the default campaign id carries it. Without it the
    # as-of day is --until when given (a list as of a past day), else today.
    send_date: str | date | None = None
    campaign_file: str | None = None  # the campaign file's text, kept in the log for a rebuild
    # The honest take-up estimate (reachlist.estimate) costs a few seconds of backtests, so the
    # library computes it only when asked; the CLI asks by default (--no-estimate skips it).
    estimate: bool = False
    horizon_days: int = DEFAULT_HORIZON
    # Past cutoffs the estimate is calibrated on (each costs one pass over the order history;
    # on very large warehouses fewer cutoffs keep a preview quick, with a wider interval).
    cutoffs: int = MAX_CUTOFFS
    # Rules whose own audience after exclusions is smaller are not proposed (0: no minimum;
    # the CLI's --min-audience defaults to DEFAULT_MIN_AUDIENCE).
    min_audience: int = 0

    def parameters(self) -> dict[str, Any]:
        """The request as plain values, for the campaign log."""
        out = asdict(self)
        out["filters"] = asdict(self.filters)
        return out


@dataclass(frozen=True)
class Plan:
    """A checked request: the resolved target, the chosen rules and the audience definition."""

    request: ListRequest
    target: Target
    rules_target: Target  # the stand-in when one is used, else the target
    ruleset: RuleSet
    rules: tuple[ChosenRule, ...]
    spec: AudienceSpec
    campaign_id: str
    now: datetime  # naive UTC, the as-of time: the frequency cap counts back from it
    built_at: datetime | None = None  # when the plan was made (None: ``now``)
    send_at: datetime | None = None  # the day the list is sent (--send-date), when given
    sensitive: tuple[str, ...] = ()  # sensitive items among target, stand-in and antecedents
    notes: tuple[str, ...] = ()
    overrides: tuple[str, ...] = ()  # consent or suppression switched off

    @property
    def stand_in(self) -> Target | None:
        return None if self.rules_target == self.target else self.rules_target

    def query(self) -> Query:
        return audience_query(self.spec)

    def sql(self, wh: Warehouse) -> Rendered:
        """Exactly what runs on this warehouse to fetch the audience."""
        return wh.render(self.query())


@dataclass(frozen=True)
class RuleReach:
    """A rule's share of the audience (preview)."""

    rule: ChosenRule
    reached: int  # customers holding the antecedent (before exclusions)
    kept: int  # of those, customers left after the exclusions
    above: int  # of the kept, customers a higher-ranked rule also reaches
    interval: tuple[float, float]  # 95% Wilson interval of the co-purchase rate

    @property
    def adds(self) -> int:
        return self.kept - self.above


@dataclass(frozen=True)
class Clearance:
    """How a clearance list was sized to the stock."""

    stock: int
    stock_from: str
    units_per_buyer: float
    buyers_seen: int
    units_from: str
    expected_units: float  # from the treatment group of the list
    customers: int  # customers on the list (treatment and holdout)
    available: int  # customers left after the exclusions
    clears: bool
    basis: str = "co-purchase rate"  # what expected buyers were taken from


@dataclass
class ListOutcome:
    """Every reached customer with its exclusion flags, ``excluded_by`` and ``contact_group``."""

    plan: Plan
    customers: pl.DataFrame
    waterfall: list[StepCount]
    clearance: Clearance | None = None
    per_rule: list[RuleReach] | None = None
    log_where: str | None = None
    takeup: TakeUpReport | None = None  # expected buyers of the treatment group
    holdout_plan: HoldoutPlanning | None = None
    estimate_note: str | None = None  # why there is no take-up estimate

    @property
    def reached(self) -> int:
        return self.customers.height

    @property
    def listed(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group").is_not_null())

    @property
    def treatment(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group") == "treatment")

    @property
    def holdout(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group") == "holdout")

    def co_purchase_rate(self) -> tuple[float, float, float] | None:
        """Mean historical co-purchase rate of the treatment group's reasons, with the mean of the
        rules' interval ends. Not a take-up forecast: customers who hold an antecedent today are
        not the customers the rate was measured on."""
        t = self.treatment
        if t.height == 0:
            return None
        by_rule = {r.rule_id: r for r in self.plan.rules}
        counts = t.group_by("rule_id").len().iter_rows()
        n = lo = hi = est = 0.0
        for rule_id, k in counts:
            rule = by_rule[rule_id]
            low, high = rule_rate_interval(rule)
            est += k * rule.score
            lo += k * low
            hi += k * high
            n += k
        return est / n, lo / n, hi / n

    def counts(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "reached": self.reached,
            "waterfall": [asdict(s) for s in self.waterfall],
            "listed": self.listed.height,
            "treatment": self.treatment.height,
            "holdout": self.holdout.height,
        }
        if self.clearance is not None:
            out["clearance"] = asdict(self.clearance)
        out["estimate"] = self.estimate_counts()
        return out

    def estimate_counts(self) -> dict[str, Any]:
        """The take-up estimate as plain values for the campaign log (or why there is none)."""
        r = self.takeup
        if r is None:
            return {"skipped": self.estimate_note or "not computed"}

        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        e = r.expected
        return {
            "expected": num(e.expected),
            "low": num(e.low),
            "high": num(e.high),
            "level": e.level,
            "n_backtests": e.n_backtests,
            "method": e.method,
            "horizon_days": r.horizon_days,
            "audience": r.audience,
            "for_target": str(r.target),
            "as_of": r.as_of.isoformat(),
            "base_rate": num(r.base_rate),
            "breadth_matched_rate": num(r.breadth_matched_rate),
            "added_value": None if r.added_value is None else num(r.added_value.estimate),
        }


@dataclass(frozen=True)
class Built:
    outcome: ListOutcome
    path: Path
    rows: int
    log_where: str
    notes: tuple[str, ...] = ()  # staging left-overs removed or found; a log without keys
    also_written: tuple[Path, ...] = ()  # the holdout file and (CSV) the provenance sidecar


BUILD_STAGES = (
    "list staged",  # the list is complete in a hidden file beside the destination
    "log written",  # the campaign and its contacts are written, not yet committed
    "list in place",  # the file is at its destination; the log has not committed
    "log committed",  # done: file and log agree
)
"""What ``build_list`` reports to ``progress`` (label, n done, of len(BUILD_STAGES)). A build
stopped at any point leaves either nothing, or the file without the log (stopped after the file
is in place and before the commit: rerun with --force to log it), or both; never a log without
its file."""


# -- planning ------------------------------------------------------------------------------------
def plan_list(
    wh: Warehouse,
    request: ListRequest,
    *,
    rules: RuleSet | None = None,
    now: datetime | None = None,
    progress: Callable[[str], None] | None = None,
) -> Plan:
    """Check a request against the warehouse, mine (or take) the rules and choose among them.

    ``rules`` given (mined earlier, or built by hand) are used as they are, with their window."""
    if request.purpose not in PURPOSES:
        raise InputError(
            f"Expected a purpose of {' or '.join(PURPOSES)}, found {request.purpose!r}.",
            hint="pass --purpose introduce (new or under-adopted item) or --purpose clear "
            "(surplus stock)",
        )
    check_share(request.holdout)
    global_holdout(
        pl.Series("customer_id", [], dtype=pl.Int64), request.global_holdout, request.global_seed
    )  # checks the share before any work
    if not 0 < len(request.global_seed) <= 80:
        raise InputError(
            f"Expected a global holdout seed of 1 to 80 characters, found {request.global_seed!r}.",
            hint=f"leave it at {GLOBAL_SEED!r} unless your organisation keeps its own",
        )
    for value, option, low, high in (
        (request.cap_days, "--cap-days", 0, MAX_CAP_DAYS),
        (request.horizon_days, "--horizon", 1, MAX_HORIZON_DAYS),
        (request.bought_within_days, "--bought-within", 1, MAX_DAYS_BACK),
        (request.filters.ordered_within_days, "--ordered-within", 1, MAX_DAYS_BACK),
    ):
        if value is not None and not low <= value <= high:
            raise InputError(
                f"Expected {option} from {low:,} to {high:,} days, found {value:,}.",
                hint=f"pass {option} with a number of days in that range",
            )
    if request.cutoffs < 1:
        raise InputError(
            f"Expected --cutoffs of at least 1, found {request.cutoffs}.",
            hint="pass --cutoffs 3 for a quick estimate on a large warehouse, or --no-estimate",
        )
    if request.horizon_days < 1:
        raise InputError(
            f"Expected --horizon of at least 1 day, found {request.horizon_days}.",
            hint="pass --horizon 30",
        )
    if request.min_audience < 0:
        raise InputError(
            f"Expected --min-audience of at least 0, found {request.min_audience}.",
            hint=f"pass --min-audience {DEFAULT_MIN_AUDIENCE}, or 0 for no minimum",
        )
    if request.stock is not None and request.stock < 1:
        raise InputError(
            f"Expected --stock of at least 1 unit, found {request.stock}.",
            hint="leave it out to use products.stock_on_hand",
        )
    if request.offer_code is not None and not OFFER_CODE.fullmatch(request.offer_code):
        raise InputError(
            f"Expected --offer-code of 1 to 64 letters, digits or - _ . / (a coupon or promotion "
            f"code), found {request.offer_code!r}.",
            hint="pass the code as the CRM platform knows it, for example --offer-code MAT-WINTER-15",
        )
    built_at = now or datetime.now(UTC).replace(tzinfo=None)
    send_at = (
        _day_start(_as_datetime(request.send_date, "--send-date"))
        if request.send_date is not None
        else None
    )
    if send_at is not None:
        now = send_at
    elif request.until is not None and now is None:
        now = _day_start(_as_datetime(request.until, "--until"))
    else:
        now = built_at
    merged = check_duplicate_customers(wh, merge=request.merge_duplicates)
    filters = check_filters(wh, request.filters)
    target = resolve_target(wh, parse_target(request.target))
    rules_target = (
        resolve_target(wh, parse_target(request.stand_in)) if request.stand_in else target
    )
    history = order_history(wh, min(now, built_at).date())
    if rules is not None:
        window = rules.window
    else:
        window = mining_window(wh, request.since, request.until, history=history)
    notes: list[str] = history.notes(default_end=rules is None and request.until is None)
    if merged:
        notes.append(
            f"{merged:,} customer id(s) are on more than one row of customers "
            "(--merge-duplicates): each is listed once and read by its strictest row."
        )
    if rules_target != target:
        notes.append(
            f"Rules and scores are borrowed from the stand-in {rules_target}: {target} is "
            "offered, but every estimate describes buyers of the stand-in."
        )
    elif item_buyers(wh, target, window.until)[0] == 0:
        raise InputError(
            f"Expected purchase history for {target}, found no customer who bought it before "
            f"{window.until:%Y-%m-%d}, so no rule can point at it.",
            hint=_stand_in_hint(wh, target, window.until),
        )
    if rules is None:
        from reachlist.rules import mine_rules

        rules = mine_rules(
            wh,
            rules_target,
            since=window.since,
            until=window.until,
            progress=progress,
            **request.mining,
        )
    level = check_level(rules.level)
    chosen = choose_rules(
        rules, top=request.top, rank_by=request.rank_by, rule_ids=request.rule_ids
    )
    if not request.rule_ids:
        below = skipped_below_breadth(rules, top=request.top, rank_by=request.rank_by)
        if below:
            notes.append(
                f"Not chosen: rule(s) {', '.join(below)}, whose breadth-matched lift lies below 1 "
                "(95% interval): their holders buy the target less often than customers who "
                "shop as broadly. Pick one with --rule ID to use it anyway."
            )
    weak = [r.rule_id for r in chosen if not r.significant]
    if weak:
        notes.append(
            f"Rule(s) {', '.join(weak)} are not significant after correction: their audiences "
            "may be no likelier to buy than anyone else."
        )
    facts = item_facts(wh, target)
    sensitive = sensitive_items(wh, target, rules_target, level, chosen)
    if sensitive and not request.allow_sensitive:
        raise InputError(
            f"Expected no sensitive items, found {', '.join(sensitive)} (products.sensitive): "
            "lists inferred from such purchases can be unlawful or harmful.",
            hint="check with your data-protection lead, then pass --allow-sensitive",
        )
    overrides = []
    if request.ignore_consent:
        overrides.append("marketing-consent exclusion switched off (--ignore-consent)")
    if request.ignore_suppressions:
        overrides.append("suppression-list exclusion switched off (--ignore-suppressions)")
    campaign_id = check_campaign_id(
        request.campaign_id or default_campaign_id(target, request.purpose, now.date())
    )
    spec = AudienceSpec(
        target=target,
        rules=chosen,
        level=level,
        lookback=rules.window,
        bought_within_days=request.bought_within_days,
        age_restricted=bool(facts["age_restricted"]),
        adult_born_by=adult_born_by(now.date(), request.adult_age),
        filters=filters,
        contact=request.contact,
    )
    return Plan(
        request=request,
        target=target,
        rules_target=rules_target,
        ruleset=rules,
        rules=chosen,
        spec=spec,
        campaign_id=campaign_id,
        now=now,
        built_at=built_at,
        send_at=send_at,
        sensitive=sensitive,
        notes=tuple(notes),
        overrides=tuple(overrides),
    )


def _day_start(moment: datetime) -> datetime:
    return datetime(moment.year, moment.month, moment.day)


def check_duplicate_customers(wh: Warehouse, *, merge: bool = False) -> int:
    """How many customer ids are on more than one row of customers; refused unless ``merge``.

    A list built on such rows could contact a customer whose other row says no consent, and
    would list them twice: the audience SQL reads each id by its strictest row either way, but
    only when the user has said that is what they want."""
    row = wh.fetch(Query.from_template("duplicate_customers")).row(0, named=True)
    ids, rows = int(row["duplicated_ids"] or 0), int(row["duplicate_rows"] or 0)
    if ids and not merge:
        raise ContractError(
            f"Expected one row per customer id in customers, found {ids:,} id(s) on more than "
            f"one row ({rows:,} rows); rows that disagree on consent or age make the list "
            "unsafe.",
            hint="run `reachlist check` to see them and fix the table, or pass "
            "--merge-duplicates to read each such customer by its strictest row",
        )
    return ids


# Filter values are checked against these columns (fixed fragments, never user text).
_FILTER_COLUMNS = {
    "region": ("customers", "region", "--region"),
    "channel": ("orders", "channel", "--channel"),
}
MAX_SUGGESTION_VALUES = 10_000  # distinct values read to suggest a near miss


def check_filter_values(wh: Warehouse, kind: str, values: tuple[str, ...]) -> tuple[str, ...]:
    """``values`` when each is present in the warehouse; else one InputError naming the first
    missing value and the closest present ones (``north`` -> ``North``)."""
    if not values:
        return values
    table, column, option = _FILTER_COLUMNS[kind]
    present = wh.fetch(
        Query.from_template(
            "filter_values_present", {"values": list(values)}, table=table, column=column
        )
    )
    found = {str(v) for v in present["value"].to_list()}
    missing = [v for v in values if v not in found]
    if not missing:
        return values
    known = [
        str(v)
        for v in wh.fetch(
            Query.from_template(
                "filter_values_known", {"most": MAX_SUGGESTION_VALUES}, table=table, column=column
            )
        )["value"].to_list()
    ]
    value = missing[0]
    lowered = {k.lower(): k for k in known}
    close = ([lowered[value.lower()]] if value.lower() in lowered else []) + [
        c
        for c in difflib.get_close_matches(value, known, n=3, cutoff=0.6)
        if c.lower() != value.lower()
    ]
    if close:
        hint = f"did you mean {option} {close[0]!r}?" + (
            f" (or {', '.join(repr(c) for c in close[1:3])})" if close[1:] else ""
        )
    elif known:
        shown = ", ".join(repr(k) for k in known[:8]) + (", ..." if len(known) > 8 else "")
        hint = f"use one of the values in {table}.{column}: {shown}"
    else:
        hint = f"{table}.{column} holds no values; leave {option} out"
    raise InputError(
        f"Expected {option} values present in {table}.{column}, found {value!r}, which no "
        f"{'customer' if table == 'customers' else 'order'} has (values are case-sensitive).",
        hint=hint,
    )


def check_filters(wh: Warehouse, filters: Filters) -> Filters:
    """Region and channel filters checked against the warehouse (see ``check_filter_values``)."""
    check_filter_values(wh, "region", filters.regions)
    check_filter_values(wh, "channel", filters.channels)
    return filters


def default_campaign_id(target: Target, purpose: str, day: date) -> str:
    slug = re.sub(r"[^A-Za-z0-9]+", "-", str(target)).strip("-").lower()[:50] or "target"
    return f"{purpose}-{slug}-{day:%Y%m%d}"


def item_facts(wh: Warehouse, item: Target) -> dict[str, Any]:
    q = Query.from_template("item_facts", {"item": item.name}, level=LEVEL_COLUMN[item.level])
    return wh.fetch(q).row(0, named=True)


MAX_CAP_DAYS = 3_650  # ten years of contact history is the most a cap may read
MAX_HORIZON_DAYS = 1_825  # five years: the longest take-up horizon
MAX_DAYS_BACK = 36_500  # a hundred years back: --bought-within, --ordered-within
OFFER_CODE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_./-]{0,63}")
HISTORY_START = datetime(1900, 1, 1)  # before any order a warehouse holds


def _stand_in_hint(wh: Warehouse, target: Target, until: datetime) -> str:
    """How to introduce an item nobody has bought: name its own category (or department)."""
    generic = (
        "pass --stand-in with an existing sku or category:NAME whose buyers are like the ones "
        "you want"
    )
    if target.level != "sku":
        return generic
    groups = wh.fetch(Query.from_template("item_groups", {"sku": target.name}))
    if groups.height == 0:
        return generic
    for level in ("category", "department"):
        name = groups[level][0]
        if name is None:
            continue
        group = Target(level, str(name))
        buyers = item_buyers(wh, group, until)[0]
        if buyers:
            return (
                f"pass --stand-in {level}:{quote_option(str(name))} (its own {level}: "
                f"{buyers:,} buyers), or another item whose buyers are like the ones you want"
            )
    return generic


def quote_option(value: str) -> str:
    """A value as a user would type it in a shell: quoted when it holds spaces or symbols."""
    if value and all(ch.isalnum() or ch in "-_." for ch in value):
        return value
    return '"' + value.replace('"', '\\"') + '"'


def item_buyers(wh: Warehouse, item: Target, until: datetime) -> tuple[int, float]:
    """Customers holding ``item`` before ``until`` and the net units they hold."""
    held = wh.fetch(item_buyers_query(item, HISTORY_START, until))
    return held.height, float(held["units"].sum() or 0) if held.height else 0.0


def sensitive_items(
    wh: Warehouse, target: Target, rules_target: Target, level: str, rules: tuple[ChosenRule, ...]
) -> tuple[str, ...]:
    """Target, stand-in and antecedent items of which some SKU is marked sensitive."""
    found: list[str] = []
    wanted: dict[str, set[str]] = {}
    for item in (target, rules_target):
        wanted.setdefault(item.level, set()).add(item.name)
    for rule in rules:
        wanted.setdefault(level, set()).update(rule.antecedent)
    for lvl, items in wanted.items():
        col = LEVEL_COLUMN[lvl]
        df = wh.fetch(Query.from_template("sensitive_items", {"items": sorted(items)}, level=col))
        prefix = "" if lvl == "sku" else f"{lvl}:"
        found += [f"{prefix}{v}" for v in df["item"].to_list()]
    return tuple(dict.fromkeys(found))


# -- computing -----------------------------------------------------------------------------------
def _outcome(wh: Warehouse, plan: Plan, log: CampaignLog | None) -> ListOutcome:
    frame, waterfall = _excluded(wh, plan, log)
    return _finish(wh, plan, frame, waterfall, log)


def _excluded(
    wh: Warehouse, plan: Plan, log: CampaignLog | None
) -> tuple[pl.DataFrame, list[StepCount]]:
    """Every reached customer with the exclusions applied and the holdout assigned."""
    req = plan.request
    frame = wh.fetch(plan.query())
    if frame.height == 0:
        frame = _empty_audience(plan)
    frame = ids.normalise_frame(frame)
    if req.cap_days > 0 and log is not None:
        since = plan.now - timedelta(days=req.cap_days)
        recent = log.recent_contacts(since, other_than=plan.campaign_id)
        flag = pl.col("customer_id").is_in(ids.like(recent, frame.schema["customer_id"]).implode())
    else:
        flag = pl.lit(False)
    frame = frame.with_columns(flag.alias("contacted_recently"))
    notes: dict[str, str] = {}
    if log is not None:
        held, live = log.live_holdouts(plan.now, other_than=plan.campaign_id)
        frame = frame.with_columns(
            pl.col("customer_id")
            .is_in(ids.like(held, frame.schema["customer_id"]).implode())
            .alias("held_out_elsewhere")
        )
        if live:
            shown = ", ".join(live[:3]) + (f" and {len(live) - 3:,} more" if len(live) > 3 else "")
            notes["held_out_elsewhere"] = f"holdouts of {shown}"
        else:
            notes["held_out_elsewhere"] = "no live holdouts"
    else:
        frame = frame.with_columns(pl.lit(False).alias("held_out_elsewhere"))
        notes["held_out_elsewhere"] = "no campaign log to read"
    frame = frame.with_columns(
        global_holdout(frame["customer_id"], req.global_holdout, req.global_seed)
    )
    if req.global_holdout > 0:
        notes["global_holdout"] = f"{req.global_holdout:.0%} of all customers"
    else:
        notes["global_holdout"] = "switched off (--global-holdout 0)"
    if plan.spec.contact:
        frame = frame.with_columns(
            (~pl.col("email").cast(pl.String).str.contains("@").fill_null(False)).alias(
                "no_address"
            )
        )
    else:
        frame = frame.with_columns(pl.lit(False).alias("no_address"))
        notes["no_address"] = "no --with-contact"

    in_use = {"has_target", "returned_target"}
    if req.ignore_consent:
        notes["no_consent"] = "switched off (--ignore-consent)"
    else:
        in_use.add("no_consent")
    if req.ignore_suppressions:
        notes["suppressed"] = "switched off (--ignore-suppressions)"
    else:
        in_use.add("suppressed")
    if req.cap_days > 0:
        in_use.add("contacted_recently")
        if log is None:
            notes["contacted_recently"] = "no campaign log to read"
        elif log.also:
            notes["contacted_recently"] = "read " + " and ".join(log.read_from)
    else:
        notes["contacted_recently"] = "not used (--cap-days 0)"
    if log is not None:
        in_use.add("held_out_elsewhere")
    if req.global_holdout > 0:
        in_use.add("global_holdout")
    if plan.spec.contact:
        in_use.add("no_address")
    if plan.spec.age_restricted:
        in_use.add("not_adult")
    else:
        notes["not_adult"] = "target is not age-restricted"
    f = plan.spec.filters
    for key, used in (
        ("outside_region", bool(f.regions)),
        ("outside_channel", bool(f.channels)),
        ("no_recent_order", f.ordered_within_days is not None),
    ):
        if used:
            in_use.add(key)
        else:
            notes[key] = "no filter given"
    frame, waterfall = apply_exclusions(frame, in_use=in_use, notes=notes)

    kept = pl.col("excluded_by").is_null()
    holdout = assign_holdout(plan.campaign_id, frame["customer_id"], req.holdout)
    frame = frame.with_columns(
        pl.when(kept)
        .then(pl.when(holdout).then(pl.lit("holdout")).otherwise(pl.lit("treatment")))
        .otherwise(pl.lit(None, dtype=pl.String))
        .alias("contact_group")
    )
    return frame, waterfall


def _finish(
    wh: Warehouse,
    plan: Plan,
    frame: pl.DataFrame,
    waterfall: list[StepCount],
    log: CampaignLog | None,
) -> ListOutcome:
    """Clearance cut and take-up estimate on top of the exclusions."""
    req = plan.request
    cal: Calibrated | None = None
    note: str | None = None
    if not req.estimate:
        note = SKIPPED
    else:
        cal, note = _calibrate(wh, plan, frame.filter(pl.col("excluded_by").is_null()))
    clearance = None
    if req.purpose == "clear":
        frame, clearance = _size_to_stock(wh, plan, frame, cal)
        waterfall.append(
            StepCount(
                NOT_NEEDED,
                "not needed to clear the stock",
                True,
                clearance.available - clearance.customers,
                clearance.customers,
                0,
            )
        )
    outcome = ListOutcome(
        plan,
        frame,
        waterfall,
        clearance,
        log_where=log.where if log is not None else None,
        estimate_note=note,
    )
    treated = outcome.treatment["customer_id"]
    if cal is not None and treated.len():
        try:
            outcome.takeup = cal.for_customers(treated).report(given=treated.len())
        except ReachlistError as exc:
            outcome.estimate_note = f"unavailable: {exc.message}"
    elif cal is not None:
        outcome.estimate_note = "nobody left to contact"
    if outcome.takeup is not None:
        listed = outcome.listed.height
        outcome.holdout_plan = holdout_planning(
            listed,
            outcome.holdout.height / listed if listed else req.holdout,
            outcome.takeup.rate,
        )
    return outcome


def _calibrate(
    wh: Warehouse, plan: Plan, kept: pl.DataFrame
) -> tuple[Calibrated | None, str | None]:
    """Backtests for the audience definition, with the kept customers as the audience.

    With a stand-in, take-up is learnt from buyers of the stand-in (the offered item has no
    history). A warehouse too short or too small to backtest gives a note, not an error: the
    preview is still useful without the estimate."""
    if kept.height == 0:
        return None, "nobody left after the exclusions"
    try:
        cal = calibrate_audience(
            wh,
            plan.rules_target,
            spec=plan.spec,
            customers=kept["customer_id"],
            horizon_days=plan.request.horizon_days,
            max_cutoffs=plan.request.cutoffs,
        )
    except ReachlistError as exc:
        return None, f"unavailable: {exc.message}"
    return cal, None


def _empty_audience(plan: Plan) -> pl.DataFrame:
    schema: dict[str, Any] = {"customer_id": pl.Int64, "rule_id": pl.String, "score": pl.Float64}
    schema.update({s.key: pl.Boolean for s in STEPS if s.key not in FROM_LOG_OR_LIST})
    if plan.spec.contact:
        schema["email"] = pl.String
    return pl.DataFrame(schema=schema)


def _size_to_stock(
    wh: Warehouse, plan: Plan, frame: pl.DataFrame, cal: Calibrated | None = None
) -> tuple[pl.DataFrame, Clearance]:
    """Take kept customers, likeliest buyers first, until the treatment group's expected units
    reach the stock; the rest are marked ``not_needed``.

    With a calibration, a customer's expected buyers are their calibrated take-up probability
    within the horizon and units are those a new buyer took within the horizon in the past;
    without one (``--no-estimate``), the rule's co-purchase rate and the units past holders hold,
    and the clearance says so."""
    req = plan.request
    if req.stock is not None:
        stock, stock_from = req.stock, "--stock"
    else:
        on_hand = item_facts(wh, plan.target)["stock_on_hand"]
        if on_hand is None or on_hand <= 0:
            raise InputError(
                f"Expected a stock to clear for {plan.target}, found products.stock_on_hand "
                f"{on_hand!r}.",
                hint="pass --stock N with the units to clear",
            )
        stock, stock_from = int(on_hand), "products.stock_on_hand"
    kept = frame.filter(pl.col("excluded_by").is_null())
    if cal is not None:
        horizon = plan.request.horizon_days
        latest = cal.latest.people
        per_buyer = cal.units_per_buyer
        buyers = int(latest["bought"].sum())
        units_from = (
            f"new buyers of {plan.rules_target} within {horizon} days of {cal.latest.at:%Y-%m-%d}"
        )
        basis = f"calibrated expected buyers within {horizon} days"
        kept = kept.join(cal.customer_rates(), on="customer_id", how="left").with_columns(
            pl.col("rate").fill_null(0.0).alias("likely")
        )
    else:
        until = plan.spec.lookback.until
        buyers, units = item_buyers(wh, plan.target, until)
        units_from = str(plan.target)
        if buyers == 0 and plan.stand_in is not None:
            buyers, units = item_buyers(wh, plan.stand_in, until)
            units_from = f"{plan.stand_in} (stand-in)"
        if buyers == 0:
            per_buyer, units_from = 1.0, "no history: 1 unit assumed"
        else:
            per_buyer = units / buyers
        basis = "co-purchase rate (no take-up estimate)"
        kept = kept.with_columns(pl.col("score").alias("likely"))
    kept = kept.sort(["likely", "score", "customer_id"], descending=[True, True, False])
    expected = kept.select(
        pl.when(pl.col("contact_group") == "treatment")
        .then(pl.col("likely") * per_buyer)
        .otherwise(0.0)
        .cum_sum()
        .alias("units")
    )["units"]
    reach_at = expected.search_sorted(stock - 1e-9, side="left") if kept.height else 0
    clears = kept.height > 0 and float(expected[-1]) >= stock - 1e-9
    take = int(reach_at) + 1 if clears else kept.height
    chosen = kept.head(take)["customer_id"]
    frame = frame.with_columns(
        pl.when(pl.col("excluded_by").is_null() & ~pl.col("customer_id").is_in(chosen.implode()))
        .then(pl.lit(NOT_NEEDED))
        .otherwise(pl.col("excluded_by"))
        .alias("excluded_by"),
    ).with_columns(
        pl.when(pl.col("excluded_by") == NOT_NEEDED)
        .then(pl.lit(None, dtype=pl.String))
        .otherwise(pl.col("contact_group"))
        .alias("contact_group")
    )
    return frame, Clearance(
        stock=stock,
        stock_from=stock_from,
        units_per_buyer=per_buyer,
        buyers_seen=buyers,
        units_from=units_from,
        expected_units=float(expected[take - 1]) if take else 0.0,
        customers=take,
        available=kept.height,
        clears=clears,
        basis=basis,
    )


def preview_list(wh: Warehouse, plan: Plan, log: CampaignLog | None = None) -> ListOutcome:
    """The analyst's preview: the outcome plus each rule's reach and overlap with rules above.

    Rules whose audience is below ``request.min_audience`` are dropped first."""
    plan, frame, waterfall, pairs = _settle(wh, plan, log)
    outcome = _finish(wh, plan, frame, waterfall, log)
    first_rank = pairs.group_by("customer_id").agg(pl.col("rule_rank").min().alias("first_rank"))
    who = outcome.customers.select(
        "customer_id",
        (pl.col("excluded_by").is_null() | (pl.col("excluded_by") == NOT_NEEDED)).alias("kept"),
    ).join(first_rank, on="customer_id", how="left")
    joined = pairs.join(who, on="customer_id", how="left")
    stats = {
        row["rule_rank"]: row
        for row in joined.group_by("rule_rank")
        .agg(
            pl.len().alias("reached"),
            pl.col("kept").sum().alias("kept"),
            (pl.col("kept") & (pl.col("first_rank") < pl.col("rule_rank"))).sum().alias("above"),
        )
        .iter_rows(named=True)
    }
    outcome.per_rule = [
        RuleReach(
            rule,
            int(stats.get(rule.rank, {}).get("reached", 0)),
            int(stats.get(rule.rank, {}).get("kept", 0)),
            int(stats.get(rule.rank, {}).get("above", 0)),
            rule_rate_interval(rule),
        )
        for rule in plan.rules
    ]
    return outcome


def _reach_pairs(wh: Warehouse, plan: Plan) -> pl.DataFrame:
    return ids.normalise_frame(wh.fetch(reach_query(plan.spec))).with_columns(
        pl.col("rule_rank").cast(pl.Int64)
    )


def _settle(
    wh: Warehouse, plan: Plan, log: CampaignLog | None
) -> tuple[Plan, pl.DataFrame, list[StepCount], pl.DataFrame]:
    frame, waterfall = _excluded(wh, plan, log)
    pairs = _reach_pairs(wh, plan)
    minimum = plan.request.min_audience
    if minimum <= 0:
        return plan, frame, waterfall, pairs
    kept_ids = frame.filter(pl.col("excluded_by").is_null()).select("customer_id")
    own = dict(pairs.join(kept_ids, on="customer_id").group_by("rule_rank").len().iter_rows())
    small = [r for r in plan.rules if own.get(r.rank, 0) < minimum]
    if not small:
        return plan, frame, waterfall, pairs
    sizes = ", ".join(f"{r.rule_id} ({own.get(r.rank, 0):,})" for r in small)
    if plan.request.rule_ids:  # picked by hand: keep them, but say so
        note = (
            f"Rule(s) {sizes} reach fewer than --min-audience {minimum:,} customers after "
            "the exclusions; kept because they were picked by id."
        )
        return dataclasses.replace(plan, notes=(*plan.notes, note)), frame, waterfall, pairs
    rules = tuple(r for r in plan.rules if r not in small)
    if not rules:
        raise EmptyResultError(
            f"Expected a rule whose audience after exclusions has at least --min-audience "
            f"{minimum:,} customers, found none: {sizes}.",
            hint="lower --min-audience, widen the window, or raise --top",
        )
    note = (
        f"Not proposed: rule(s) {sizes} reach fewer than --min-audience {minimum:,} "
        "customers after the exclusions."
    )
    plan = dataclasses.replace(
        plan,
        rules=rules,
        spec=dataclasses.replace(plan.spec, rules=rules),
        notes=(*plan.notes, note),
    )
    frame, waterfall = _excluded(wh, plan, log)
    return plan, frame, waterfall, _reach_pairs(wh, plan)


def delivered_paths(out: str | Path) -> list[Path]:
    """Every file a build to ``out`` writes: the list, its holdout file and (CSV) the sidecar."""
    paths = [Path(out), holdout_path(out)]
    if list_format(out) == "csv":
        paths.append(sidecar_path(out))
    return paths


def _stage_delivery(wh: Warehouse, outcome: ListOutcome, out: str | Path, force: bool) -> StagedSet:
    from reachlist import __version__

    plan = outcome.plan
    delivery = delivery_frames(
        wh,
        outcome,
        built_at=plan.built_at or plan.now,
        version=__version__,
        offer_code=plan.request.offer_code,
    )
    provenance = provenance_json(delivery.provenance)
    meta = {PROVENANCE_KEY: provenance}
    files: list[StagedFile] = []
    try:
        files.append(stage_list(delivery.contacts, out, force=force, metadata=meta))
        files.append(stage_list(delivery.holdout, holdout_path(out), force=force, metadata=meta))
        if list_format(out) == "csv":
            files.append(stage_text(provenance, sidecar_path(out), force=force))
    except BaseException:
        for f in files:
            f.discard()
        raise
    return StagedSet(files)


def build_list(
    wh: Warehouse,
    plan: Plan,
    out: str | Path,
    *,
    log: CampaignLog,
    force: bool = False,
    replace: bool = False,
    progress: Callable[[str, int, int], None] | None = None,
) -> Built:
    """Write the treatment group to ``out`` and log the campaign (both or neither).

    The list is staged in a hidden file, the log is written in one transaction, the file is
    moved into place, and only then does the log commit. If the move fails the log rolls back;
    if the commit fails the file is taken back (a file it replaced returns). So contacts are
    never logged for a list that does not exist. Staging files that interrupted builds left
    beside ``out`` are removed first (or reported when their process may still run).
    """
    for i, path in enumerate(delivered_paths(out)):
        check_destination(path, force=force, list_file=i < 2)
    log.refuse_existing(plan.campaign_id, replace=replace)
    if plan.request.min_audience > 0:
        plan, frame, waterfall, _ = _settle(wh, plan, log)
        outcome = _finish(wh, plan, frame, waterfall, log)
    else:
        outcome = _outcome(wh, plan, log)
    if outcome.treatment.height == 0:
        biggest = max(outcome.waterfall, key=lambda s: s.removed, default=None)
        why = f"; the largest step, {biggest.label}, removed {biggest.removed:,}" if biggest else ""
        raise EmptyResultError(
            f"Expected customers to contact for {plan.target}, found none after exclusions "
            f"and holdout (rules reached {outcome.reached:,}{why}); nothing was written.",
            hint="run `reachlist sizes` with the same options to see the waterfall",
        )
    notes = [n for path in delivered_paths(out) for n in clear_leftovers(path).notes()]
    unkeyed = log.unkeyed()
    if unkeyed:
        notes.append(
            f"The campaign log table(s) {', '.join(unkeyed)} in {log.where} have no unique key "
            "(created by an earlier reachlist): two builds of one campaign at the same time "
            "could both log it. The README says how to recreate them with keys."
        )
    total = len(BUILD_STAGES)

    def stage(n: int) -> None:
        if progress is not None:
            progress(BUILD_STAGES[n - 1], n, total)

    staged = _stage_delivery(wh, outcome, out, force)
    try:
        stage(1)
        ran = plan.sql(wh)
        record = CampaignRecord(
            campaign_id=plan.campaign_id,
            created_at=plan.built_at or plan.now,
            sent_at=plan.send_at,
            target=str(plan.target),
            purpose=plan.request.purpose,
            parameters={
                **plan.request.parameters(),
                "resolved_target": str(plan.target),
                "rules_from": str(plan.rules_target),
                "window": [plan.spec.lookback.since, plan.spec.lookback.until],
                "as_of": plan.now,
                "level": plan.ruleset.level,
                "basket": plan.ruleset.basket,
                "output": str(Path(out).resolve()),
                "sensitive": list(plan.sensitive),
                "audience_sql": {"dialect": wh.dialect.name, "sql": ran.sql, "values": ran.params},
                "cap_read": log.read_from if plan.request.cap_days > 0 else [],
            },
            rules=[asdict(r) for r in plan.rules],
            counts=outcome.counts(),
            overrides=plan.overrides,
        )
        contacts = outcome.listed.select("customer_id", "contact_group", "score", "rule_id")
        with log.recording(record, contacts, replace=replace):
            stage(2)
            path = staged.publish()
            stage(3)
    except BaseException:
        staged.withdraw()
        raise
    staged.settle()
    stage(4)
    return Built(
        outcome,
        path,
        staged.rows,
        log.where,
        tuple(notes),
        tuple(f.final for f in staged.files[1:]),
    )
