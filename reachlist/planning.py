"""Planning a list: the request, its checks against the warehouse, and the plan (the resolved
target, the chosen rules and the audience definition) that ``reachlist.lists`` previews and builds.

>>> plan = plan_list(wh, ListRequest("SG04-104"))            # doctest: +SKIP
"""

from __future__ import annotations

import difflib
import re
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from datetime import UTC, date, datetime
from typing import TYPE_CHECKING, Any

import polars as pl

from reachlist.audience import (
    EVER,
    AudienceSpec,
    ChosenRule,
    Filters,
    adult_born_by,
    audience_query,
    breadth_for_choice,
    choose_rules,
    skipped_below_breadth,
)
from reachlist.campaigns import check_campaign_id
from reachlist.check import require_contract
from reachlist.economics import check_offer_terms
from reachlist.errors import ContractError, InputError
from reachlist.estimate import (
    DEFAULT_HORIZON,
    MAX_CUTOFFS,
)
from reachlist.holdout import (
    DEFAULT_GLOBAL_SHARE,
    DEFAULT_SHARE,
    GLOBAL_SEED,
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
from reachlist.wording import option

if TYPE_CHECKING:
    from reachlist.rules import RuleSet

__all__ = [
    "DEFAULT_CAP_DAYS",
    "DEFAULT_MIN_AUDIENCE",
    "PURPOSES",
    "ListRequest",
    "Plan",
    "plan_list",
]

PURPOSES = ("introduce", "clear")
DEFAULT_CAP_DAYS = 14
DEFAULT_MIN_AUDIENCE = 50  # the CLI's default for --min-audience


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
    # The offer's economics (reachlist.economics), with the estimate: a discount and a gross
    # margin as percentages of the net price, and a price per unit (default: the target's net
    # price per unit over the year before the as-of day).
    discount: float | None = None
    margin: float | None = None
    price: float | None = None

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
            hint=f"pass {option('purpose')} introduce (new or under-adopted item) or {option('purpose')} clear "
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
    for value, name, low, high in (
        (request.cap_days, "cap_days", 0, MAX_CAP_DAYS),
        (request.horizon_days, "horizon_days", 1, MAX_HORIZON_DAYS),
        (request.bought_within_days, "bought_within_days", 1, MAX_DAYS_BACK),
        (request.filters.ordered_within_days, "ordered_within_days", 1, MAX_DAYS_BACK),
    ):
        if value is not None and not low <= value <= high:
            raise InputError(
                f"Expected {option(name)} from {low:,} to {high:,} days, found {value:,}.",
                hint=f"pass {option(name)} with a number of days in that range",
            )
    if request.cutoffs < 1:
        raise InputError(
            f"Expected {option('cutoffs')} of at least 1, found {request.cutoffs}.",
            hint=f"pass {option('cutoffs')} 3 for a quick estimate on a large warehouse, or {option('estimate=False')}",
        )
    if request.horizon_days < 1:
        raise InputError(
            f"Expected {option('horizon_days')} of at least 1 day, found {request.horizon_days}.",
            hint=f"pass {option('horizon_days')} 30",
        )
    if request.min_audience < 0:
        raise InputError(
            f"Expected {option('min_audience')} of at least 0, found {request.min_audience}.",
            hint=f"pass {option('min_audience')} {DEFAULT_MIN_AUDIENCE}, or 0 for no minimum",
        )
    if request.stock is not None and request.stock < 1:
        raise InputError(
            f"Expected {option('stock')} of at least 1 unit, found {request.stock}.",
            hint="leave it out to use products.stock_on_hand",
        )
    check_offer_terms(request.discount, request.margin, request.price)
    require_contract(wh)  # what `check` marks as stopping lists stops this one, before any query
    if request.offer_code is not None and not OFFER_CODE.fullmatch(request.offer_code):
        raise InputError(
            f"Expected {option('offer_code')} of 1 to 64 letters, digits or - _ . / (a coupon or promotion "
            f"code), found {request.offer_code!r}.",
            hint=f"pass the code as the CRM platform knows it, for example {option('offer_code')} MAT-WINTER-15",
        )
    built_at = now or datetime.now(UTC).replace(tzinfo=None)
    send_at = (
        _day_start(_as_datetime(request.send_date, option("send_date")))
        if request.send_date is not None
        else None
    )
    if send_at is not None:
        now = send_at
    elif request.until is not None and now is None:
        now = _day_start(_as_datetime(request.until, option("until")))
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
            f"({option('merge_duplicates=True')}): each is listed once and read by its strictest row."
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
            breadth="later",  # worked out below for the rules the choice reads, not all
            **request.mining,
        )
    rules = breadth_for_choice(
        rules, top=request.top, rank_by=request.rank_by, rule_ids=request.rule_ids
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
                f"shop as broadly. Pick one with {option('rule_ids')} ID to use it anyway."
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
            hint=f"check with your data-protection lead, then pass {option('allow_sensitive=True')}",
        )
    overrides = []
    if request.ignore_consent:
        overrides.append(
            f"marketing-consent exclusion switched off ({option('ignore_consent=True')})"
        )
    if request.ignore_suppressions:
        overrides.append(
            f"suppression-list exclusion switched off ({option('ignore_suppressions=True')})"
        )
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
            f"{option('merge_duplicates=True')} to read each such customer by its strictest row",
        )
    return ids


# Filter values are checked against these columns (fixed fragments, never user text).
_FILTER_COLUMNS = {
    "region": ("customers", "region", "regions"),
    "channel": ("orders", "channel", "channels"),
}


MAX_SUGGESTION_VALUES = 10_000  # distinct values read to suggest a near miss


def check_filter_values(wh: Warehouse, kind: str, values: tuple[str, ...]) -> tuple[str, ...]:
    """``values`` when each is present in the warehouse; else one InputError naming the first
    missing value and the closest present ones (``north`` -> ``North``)."""
    if not values:
        return values
    table, column, name = _FILTER_COLUMNS[kind]
    flag = option(name)
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
        hint = f"did you mean {flag} {close[0]!r}?" + (
            f" (or {', '.join(repr(c) for c in close[1:3])})" if close[1:] else ""
        )
    elif known:
        shown = ", ".join(repr(k) for k in known[:8]) + (", ..." if len(known) > 8 else "")
        hint = f"use one of the values in {table}.{column}: {shown}"
    else:
        hint = f"{table}.{column} holds no values; leave {flag} out"
    raise InputError(
        f"Expected {flag} values present in {table}.{column}, found {value!r}, which no "
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


def _stand_in_hint(wh: Warehouse, target: Target, until: datetime) -> str:
    """How to introduce an item nobody has bought: name its own category (or department)."""
    generic = (
        f"pass {option('stand_in')} with an existing sku or category:NAME whose buyers are like the ones "
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
                f"pass {option('stand_in')} {level}:{quote_option(str(name))} (its own {level}: "
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
    held = wh.fetch(item_buyers_query(item, EVER, until))
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
