"""Targets, item levels and mining windows: what a rule or an audience is about.

A target is a SKU (``HM-2041``), a category (``category:Heated mats``) or a department
(``department:Garden``). Items of rules live at one item level: sku, category or department.

>>> parse_target("category:Bird food")
Target(level='category', name='Bird food')
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from datetime import UTC, date, datetime, timedelta
from typing import Literal

from reachlist.errors import InputError
from reachlist.query import BuiltWindow, Query, template_parts, with_parts
from reachlist.warehouse import Warehouse
from reachlist.wording import option

Level = Literal["sku", "category", "department"]
BasketKind = Literal["customer", "order"]
LEVELS: tuple[Level, ...] = ("sku", "category", "department")
BASKET_KINDS: tuple[BasketKind, ...] = ("customer", "order")
# SQL fragments chosen from fixed lists, never from user text.
LEVEL_COLUMN = {"sku": "sku", "category": "category", "department": "department"}


@dataclass(frozen=True)
class Target:
    level: Level
    name: str

    def __str__(self) -> str:
        return self.name if self.level == "sku" else f"{self.level}:{self.name}"


def parse_target(text: str) -> Target:
    text = text.strip()
    if not text:
        raise InputError(
            "Expected a target (a SKU, category:NAME or department:NAME), found an empty string.",
            hint="find one by code or name with `reachlist items TEXT`, or run `reachlist rules` "
            "without a target to see the strongest rules and their items",
        )
    prefix, sep, rest = text.partition(":")
    if sep and prefix.lower() in ("category", "department", "sku"):
        if not rest.strip():
            raise InputError(
                f"Expected a name after {prefix}:, found nothing in {text!r}.",
                hint=f'write {prefix}:NAME, for example {prefix}:"Bird food"',
            )
        return Target(prefix.lower(), rest.strip())  # type: ignore[arg-type]
    return Target("sku", text)


def check_level(level: str) -> Level:
    if level not in LEVELS:
        raise InputError(
            f"Expected an item level of {', '.join(LEVELS)}, found {level!r}.",
            hint=f"pass {option('level')} sku, {option('level')} category or {option('level')} department",
        )
    return level


def check_basket(kind: str) -> BasketKind:
    if kind not in BASKET_KINDS:
        raise InputError(
            f"Expected a basket of customer or order, found {kind!r}.",
            hint=f"pass {option('basket')} customer (audiences) or {option('basket')} order (one checkout)",
        )
    return kind


def item_names(wh: Warehouse, level: Level) -> list[str]:
    col = LEVEL_COLUMN[level]
    df = wh.fetch(Query.from_template("level_items", level=col))
    return [str(v) for v in df["item"].to_list() if v is not None]


def resolve_target(wh: Warehouse, target: Target) -> Target:
    """Check that the target exists; suggest the closest names when it does not."""
    known = item_names(wh, target.level)
    if target.name in known:
        return target
    lowered = {k.lower(): k for k in known}
    if target.name.lower() in lowered:
        return Target(target.level, lowered[target.name.lower()])
    pool = known
    if target.level == "sku":
        names = wh.fetch(Query.from_template("all_product_names"))
        by_name = {str(n).lower(): str(s) for s, n in names.iter_rows()}
        if target.name.lower() in by_name:
            return Target("sku", by_name[target.name.lower()])
        close_names = difflib.get_close_matches(target.name.lower(), list(by_name), n=3, cutoff=0.5)
        close = [f"{by_name[n]} ({n})" for n in close_names]
    else:
        close = []
    close += difflib.get_close_matches(target.name, pool, n=3, cutoff=0.5)
    hint = (
        f"did you mean {', '.join(repr(c) for c in close[:3])}?"
        if close
        else "find it by code or name with `reachlist items TEXT`"
    )
    raise InputError(
        f"Target {str(target)!r} is not a {target.level} in products ({len(known)} known).",
        hint=hint,
    )


@dataclass(frozen=True)
class Window:
    """A half-open time window [since, until)."""

    since: datetime
    until: datetime

    def __str__(self) -> str:
        return f"{self.since:%Y-%m-%d} .. {(self.until - timedelta(days=1)):%Y-%m-%d}"


def _as_datetime(value: date | datetime | str, what: str) -> datetime:
    if isinstance(value, datetime):
        return value
    if isinstance(value, date):
        return datetime(value.year, value.month, value.day)
    try:
        return datetime.fromisoformat(value)
    except ValueError:
        raise InputError(
            f"Expected {what} as a date like 2026-01-31, found {value!r}.",
            hint=f"write {what} as YYYY-MM-DD",
        ) from None


def _as_day(value: date | datetime | str, what: str) -> datetime:
    """A window bound given by the user: a whole day (windows count whole days)."""
    moment = _as_datetime(value, what)
    if moment.time() != datetime.min.time():
        raise InputError(
            f"Expected {what} as a date like 2026-01-31, found {value!s} (a time of day): "
            "windows count whole days.",
            hint=f"write {what} as YYYY-MM-DD",
        )
    return moment


def _order_time(wh: Warehouse, aggregate: str) -> datetime:
    """The first (min) or last (max) order time; one clear error when there are no orders."""
    value = wh.scalar(Query.from_template("order_time_bound", aggregate=aggregate))
    if value is None:
        raise InputError(
            "Expected order history, found no orders in the warehouse.",
            hint="load orders first; `reachlist check` shows what the warehouse holds",
        )
    return _as_datetime(value, "an order time")


def first_order_time(wh: Warehouse) -> datetime:
    return _order_time(wh, "min")


@dataclass(frozen=True)
class OrderHistory:
    """What the default window depends on (sql/order_history.sql), read in one pass."""

    today: date
    last_order: datetime | None  # the last order time not later than today
    later_orders: int  # orders dated after today: left out of default windows, reported
    latest_later: datetime | None
    without_customer: int  # orders with no customer id: left out everywhere, reported

    @property
    def window_end(self) -> datetime | None:
        """The day after the last order not later than today (None: no such order)."""
        last = self.last_order
        return None if last is None else datetime(last.year, last.month, last.day) + timedelta(1)

    def notes(self, *, default_end: bool = True) -> list[str]:
        """One line per quirk the user should know about (empty when there is none).
        ``default_end``: the window ends where the history does (no --until given)."""
        out = []
        if self.later_orders and default_end:
            latest = f"{self.latest_later:%Y-%m-%d}" if self.latest_later else "?"
            out.append(
                f"{self.later_orders:,} order(s) are dated after today ({self.today:%Y-%m-%d}; "
                f"the latest {latest}): the default window ends at the last order up to today "
                f"and leaves them out. Fix their dates, or pass {option('until')} to choose the end."
            )
        if self.without_customer:
            out.append(
                f"{self.without_customer:,} order(s) have no customer id and were ignored "
                "(no customer can hold what they contain)."
            )
        return out


def utc_today() -> date:
    """Today in UTC: the one place the commands read the calendar for a default window."""
    return datetime.now(UTC).date()


def order_history(wh: Warehouse, today: date | None = None) -> OrderHistory:
    """The last order up to ``today`` (UTC today by default) and the orders a window leaves out."""
    today = today or utc_today()
    tomorrow = datetime(today.year, today.month, today.day) + timedelta(days=1)
    row = wh.fetch(Query.from_template("order_history", {"tomorrow": tomorrow})).row(0, named=True)
    last = row["last_order"]
    later = row["latest_later"]
    return OrderHistory(
        today=today,
        last_order=None if last is None else _as_datetime(last, "an order time"),
        later_orders=int(row["later_orders"] or 0),
        latest_later=None if later is None else _as_datetime(later, "an order time"),
        without_customer=int(row["without_customer"] or 0),
    )


def last_order_day(wh: Warehouse, today: date | None = None) -> datetime:
    """The day after the last order not later than ``today``: the default end of every window.

    An order dated in the future (a typo such as 2062) does not move it; ``order_history`` counts
    such orders so the commands can say so."""
    return _window_end(order_history(wh, today))


def _window_end(history: OrderHistory) -> datetime:
    if history.window_end is None:
        later = (
            f" ({history.later_orders:,} order(s) are all dated after today)"
            if history.later_orders
            else ""
        )
        raise InputError(
            f"Expected order history up to today, found no orders in the warehouse{later}.",
            hint="load orders first; `reachlist check` shows what the warehouse holds",
        )
    return history.window_end


def mining_window(
    wh: Warehouse,
    since: date | datetime | str | None = None,
    until: date | datetime | str | None = None,
    *,
    days: int = 365,
    today: date | None = None,
    history: OrderHistory | None = None,
) -> Window:
    """``until`` defaults to the day after the last order not later than ``today`` (UTC today);
    ``since`` to ``days`` before it. ``history`` (from ``order_history``) saves reading it again."""
    if until is not None:
        end = _as_day(until, option("until"))
    else:
        end = _window_end(history if history is not None else order_history(wh, today))
    start = _as_day(since, option("since")) if since is not None else end - timedelta(days=days)
    if start >= end:
        raise InputError(
            f"Expected {option('since')} before {option('until')}, found {start:%Y-%m-%d} >= {end:%Y-%m-%d}.",
            hint="widen the window",
        )
    return Window(start, end)


def held_items_query(
    window: Window,
    *,
    level: Level = "sku",
    basket: BasketKind = "customer",
    only: str | None = None,
    built: BuiltWindow | None = None,
) -> Query:
    """Basket -> item pairs in the window (see sql/held_items.sql for the rules applied).

    ``only`` keeps the pairs of one item (for example the target) and is bound as a value.
    ``built``: the pairs the holdings file keeps for one window (``Warehouse.built_window``),
    read instead of the holdings' days when the window is exactly that one."""
    params: dict[str, object]
    if basket == "customer":  # from the holdings, whose grain is the day
        params = {"since": day_of(window.since), "until": day_of(window.until)}
    else:
        params = {"since": window.since, "until": window.until}
    if only is not None:
        params["only_item"] = only
    if basket == "customer":
        parts = template_parts("held_items")
        held = parts["held_skus"]
        if built is not None and built.has_pairs(day_of(window.since), day_of(window.until)):
            held = parts["held_skus_built"].format(built_table=built.table, built_items=built.items)
            del params["since"], params["until"]
        if level == "sku":
            final = parts["held_sku_pairs"].format(
                only_sku="" if only is None else "\n  AND h.sku = :only_item"
            )
        else:
            final = parts["held_pairs"].format(
                level=LEVEL_COLUMN[level],
                only_item="" if only is None else f"\n  AND p.{LEVEL_COLUMN[level]} = :only_item",
            )
        return Query(with_parts([held], final), params, label="held_items")
    only_item = "" if only is None else f"\n  AND p.{LEVEL_COLUMN[level]} = :only_item"
    return Query.from_template(
        "held_order_items", params, level=LEVEL_COLUMN[level], only_item=only_item
    )


def window_items_query() -> Query:
    """Every SKU in products with a small integer code (in SKU order): how the holdings file
    writes the SKUs of the pairs it keeps."""
    return Query(template_parts("held_items")["window_items_rows"], label="window_items")


def held_codes_rows_query(window: Window, items: str) -> Query:
    """Every customer x SKU pair held in the window, the SKU as its code in ``items``, ordered by
    customer: the rows the holdings file keeps for the default mining window."""
    parts = template_parts("held_items")
    return Query(
        with_parts([parts["held_skus"]], parts["held_codes_rows"].format(built_items=items)),
        {"since": day_of(window.since), "until": day_of(window.until)},
        label="held_codes",
    )


def held_tids_rows_query(pairs: str) -> Query:
    """The kept pairs (``pairs``) item by item: each code's customers as their position in the
    pairs' customer order, ascending (the item-major index mining reads)."""
    return Query(
        template_parts("held_items")["held_tids_rows"].format(built_table=pairs),
        label="held_tids",
    )


def held_codes_queries(
    window: Window, built: BuiltWindow | None
) -> tuple[Query, Query, Query] | None:
    """The pairs the holdings file keeps for exactly this window, as (customer, code) rows, the
    code -> SKU rows, and the same pairs item by item (``held_tids_rows_query``): SKU-level
    customer baskets without encoding text or sorting (None: not kept)."""
    if built is None or not built.has_pairs(day_of(window.since), day_of(window.until)):
        return None
    parts = template_parts("held_items")
    return (
        Query(parts["held_codes_built"].format(built_table=built.table), label="held_codes"),
        Query(parts["held_items_built"].format(built_items=built.items), label="held_codes_items"),
        Query(parts["held_tids_built"].format(built_tids=built.tids), label="held_tids"),
    )


def day_of(moment: datetime) -> date:
    """The day a window bound falls on. Windows are whole days (the holdings' grain): a bound
    with a time of day is refused where the user gives it (``mining_window``)."""
    if moment.time() != datetime.min.time():
        raise InputError(
            f"Expected a window bound at the start of a day, found {moment:%Y-%m-%d %H:%M}.",
            hint=f"give {option('since')} and {option('until')} as dates like 2026-01-31",
        )
    return moment.date()


def item_buyers_query(item: Target, since: datetime, until: datetime) -> Query:
    """Customers who bought ``item`` in ``[since, until)`` (whole days) and their net units
    (sql/item_buyers.sql)."""
    return Query.from_template(
        "item_buyers",
        {"item": item.name, "since": day_of(since), "until": day_of(until)},
        level=LEVEL_COLUMN[item.level],
    )
