"""The holdings table: the order history read once.

Every question reachlist asks of the order lines (which items a customer holds in a window, who
started buying the target after a cutoff, who bought after a send) is a sum over one row per
customer, SKU and day (``sql/holdings.sql``). Without a built table each query derives those rows
from the order lines itself; ``build`` writes them once into a DuckDB file beside the warehouse
(``garden.duckdb`` -> ``garden.holdings.duckdb``), sorted by day, with the watermark of the
history they came from, and beside them each customer's first order time (who was a customer
at any cutoff, ``sql/first_orders.sql``) and the customer x SKU pairs held in the default mining
window (the year up to the latest order: what ``rules`` and ``sizes`` read unless told
otherwise), so a default run reads its pairs instead of summing a year of days. ``prepare`` attaches that
file when its watermark still matches the warehouse and rebuilds it when the history has changed,
so the answers never differ from the derived ones (the tests compare the two).

Written whole, the rows take one grouping of the order lines (``sql/holdings_rows.sql``), then
the few days of more than one line are summed again from their distinct lines
(``sql/holdings_exact.sql``); a query deriving them uses ``sql/holdings.sql``, whose two
groupings its own filters reach into.

Only DuckDB file warehouses keep a holdings file; a server warehouse derives the rows inside
each query (its own engine does the work there), or, for a command that reads them several
times on PostgreSQL, keeps them once in the connection's temporary tables
(``Warehouse.keep_session_holdings``, the same two steps).

>>> built = build(wh)                     # doctest: +SKIP
>>> prepare(wh).state                     # doctest: +SKIP
'fresh'
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import os
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

from reachlist import statements
from reachlist.check import MINED_TABLES, require_contract
from reachlist.errors import InputError, ReachlistError, brief
from reachlist.estimate import BREADTH_DAYS, DEFAULT_HORIZON, MAX_CUTOFFS, breadth_query
from reachlist.query import FIRST_ORDERS, HOLDINGS, BuiltWindow, Query
from reachlist.targets import (
    Window,
    day_of,
    held_codes_rows_query,
    held_tids_rows_query,
    mining_window,
    window_items_query,
)
from reachlist.warehouse import Warehouse

__all__ = ["ALIAS", "Built", "Prepared", "Watermark", "build", "holdings_path", "prepare"]

ALIAS = "reachlist_holdings"  # the attached file's name inside the warehouse connection
WRITING = "reachlist_holdings_new"  # the file being built, attached while its rows are written
FORMAT = 5  # bumped when the table's layout or meaning changes: older files are rebuilt

Progress = Callable[[str], None]


@dataclass(frozen=True)
class Watermark:
    """What the holdings were built from: a change in any field means a rebuild."""

    order_lines: int
    quantity_sum: float
    orders: int
    last_order: str  # ISO text ("" for no orders), so files compare exactly
    source: str  # digest of the SQL that derives the rows (the mapping and its casts included)
    catalogue: str = ""  # digest of each SKU's category (the file keeps breadth in categories)
    format: int = FORMAT

    def differences(self, other: Watermark) -> list[str]:
        out = []
        for name, label in (
            ("order_lines", "order lines"),
            ("quantity_sum", "total quantity"),
            ("orders", "orders"),
            ("last_order", "last order"),
        ):
            a, b = getattr(self, name), getattr(other, name)
            if a != b:
                out.append(f"{label} {_fmt(a)} -> {_fmt(b)}")
        if self.source != other.source:
            out.append("the mapping or column types changed")
        if self.catalogue != other.catalogue:
            out.append("the products' categories changed")
        if self.format != other.format:
            out.append("a newer reachlist reads holdings differently")
        return out


def _fmt(value: object) -> str:
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        return f"{value:,.6g}"
    return str(value or "none")


@dataclass(frozen=True)
class Built:
    path: Path
    rows: int
    order_lines: int
    seconds: float


@dataclass(frozen=True)
class Prepared:
    """What ``prepare`` found and did; ``note`` is one line for the user (empty: nothing to say)."""

    state: Literal["fresh", "rebuilt", "stale", "absent", "session", "unsupported"]
    path: Path | None = None
    note: str = ""


def holdings_path(wh: Warehouse) -> Path | None:
    """Where a warehouse's holdings file lives (None: this warehouse keeps none)."""
    if not wh.is_duckdb or wh.target == ":memory:":
        return None
    p = Path(wh.target)
    stem = p.name[: -len(p.suffix)] if p.suffix else p.name
    return p.with_name(f"{stem}.holdings.duckdb")


def current_mark(wh: Warehouse) -> Watermark:
    row = wh.fetch(Query.from_template("history_mark")).row(0, named=True)
    last = row["last_order"]
    saved, wh.holdings_table = wh.holdings_table, None  # digest the derivation, not the file
    try:
        derived = wh.render(statements.holdings_rows_query())
    finally:
        wh.holdings_table = saved
    return Watermark(
        order_lines=int(row["order_lines"] or 0),
        quantity_sum=float(row["quantity_sum"] or 0),
        orders=int(row["orders"] or 0),
        last_order="" if last is None else str(last),
        source=hashlib.sha256(derived.sql.encode()).hexdigest()[:16],
        catalogue=str(row["catalogue"] or ""),
    )


def _attached_mark(wh: Warehouse, path: Path) -> Watermark | None:
    """Attach a holdings file and read the watermark it was built from (None, detached: no
    file, or not one reachlist can read)."""
    if not path.exists() or not wh.attach_read_only(path, ALIAS):
        return None
    try:
        row = wh.fetch(statements.attached_mark(ALIAS)).row(0, named=True)
        # a field an older layout lacks takes its default, so the file differs and is rebuilt
        known = {f.name for f in dataclasses.fields(Watermark)}
        return Watermark(**{k: v for k, v in row.items() if k in known})
    except Exception:  # a foreign file: treat as absent
        wh.detach(ALIAS)
        return None


def build(wh: Warehouse, *, progress: Progress | None = None) -> Built:
    """Read the order lines once into the holdings file beside the warehouse (replacing any
    older one atomically) and attach it."""
    path = holdings_path(wh)
    if path is None:
        raise InputError(
            f"Expected a DuckDB file warehouse to keep holdings beside, found {wh.display_name}.",
            hint="a server warehouse keeps no file: its queries derive the holdings (on "
            "PostgreSQL, once per command, into temporary tables); nothing to build",
        )
    require_contract(wh, MINED_TABLES)
    say = progress or (lambda _text: None)
    started = time.perf_counter()
    wh.derive_holdings()
    wh.detach(ALIAS)
    say("step 1 of 4: reading the order history's watermark")
    mark = current_mark(wh)
    window = _default_window(wh)
    tmp = path.with_name(f"{path.name}.part-{os.getpid()}")
    tmp.unlink(missing_ok=True)
    try:
        say(
            f"step 2 of 4: netting {mark.order_lines:,} order lines by customer, SKU and day, "
            "and each customer's first order"
        )
        days, exact = (
            (WRITING, "main", statements.HOLDING_DAYS),
            (WRITING, "main", statements.HOLDING_EXACT),
        )
        wh.write_beside(
            tmp,
            WRITING,
            [
                (days[-1], statements.holdings_rows_query(), statements.HOLDINGS_ORDER),
                (exact[-1], statements.holdings_exact_query(days), ""),
                (FIRST_ORDERS, Query.from_template("first_orders_rows"), ""),
            ],
            after=statements.holdings_finish(days, exact, HOLDINGS),
        )
        with Warehouse.open(tmp) as side:
            side.run_statement(statements.CREATE_WINDOW)
            if window is not None:
                say(
                    f"step 3 of 4: keeping who holds which SKU in the default window {window}, "
                    f"and breadth at the {MAX_CUTOFFS + 1} default cutoffs"
                )
                _keep_defaults(wh, side, window)
            say("step 4 of 4: writing the watermark")
            side.run_statement(statements.CREATE_MARK)
            side.executemany(statements.INSERT_MARK, [mark.__dict__])
            rows = int(side.fetch_raw(statements.row_count(HOLDINGS))["n"][0])
        os.replace(tmp, path)
    finally:
        with contextlib.suppress(OSError):
            tmp.unlink(missing_ok=True)
            Path(f"{tmp}.wal").unlink(missing_ok=True)
    _attach(wh, path)
    return Built(path, rows, mark.order_lines, time.perf_counter() - started)


def _keep_defaults(wh: Warehouse, side: Warehouse, window: Window) -> None:
    """Into the file being built (``side``, its holdings written): the pairs held in the default
    mining window (SKUs as codes, and the same pairs item by item), and every customer's breadth
    at the default estimate's cutoffs (as_of the window's end). Both read products (which SKUs
    count, their categories), so its SKUs and categories are copied in while they are worked
    out."""
    side.holdings_table = f"main.{HOLDINGS}"
    categories = wh.fetch(Query.from_template("item_hierarchy")).to_arrow()
    side.create_from_arrow(statements.CATEGORIES, categories, statements.ALL_FROM_SRC)
    side.create_from_query(statements.WINDOW_ITEMS, window_items_query())
    side.create_from_query(
        statements.WINDOW_PAIRS, held_codes_rows_query(window, statements.WINDOW_ITEMS)
    )
    side.create_from_query(statements.WINDOW_TIDS, held_tids_rows_query(statements.WINDOW_PAIRS))
    side.create_from_query(
        statements.WINDOW_BREADTH, breadth_query(window.until, DEFAULT_HORIZON, MAX_CUTOFFS)
    )
    side.run_statement(statements.drop_table([statements.CATEGORIES]))
    kept = {
        "since": day_of(window.since),
        "until": day_of(window.until),
        "horizon": DEFAULT_HORIZON,
        "breadth_days": BREADTH_DAYS,
        "last_cutoff": MAX_CUTOFFS,
    }
    side.executemany(statements.INSERT_WINDOW, [kept])


def _default_window(wh: Warehouse) -> Window | None:
    """The window ``rules`` and ``sizes`` mine by default (None: no orders to hold)."""
    try:
        return mining_window(wh)
    except InputError:
        return None


def _attach(wh: Warehouse, path: Path) -> None:
    if wh.attach_read_only(path, ALIAS):
        _use(wh)


def _use(wh: Warehouse) -> None:
    """Read the attached file: its holdings, and the pairs it keeps for the default window."""
    wh.holdings_table = f"{ALIAS}.main.{HOLDINGS}"
    kept = wh.fetch(statements.attached_window(ALIAS))
    wh.built_window = None
    if kept.height:
        row = kept.row(0, named=True)
        wh.built_window = BuiltWindow(
            since=row["since"],
            until=row["until"],
            table=f"{ALIAS}.main.{statements.WINDOW_PAIRS}",
            items=f"{ALIAS}.main.{statements.WINDOW_ITEMS}",
            tids=f"{ALIAS}.main.{statements.WINDOW_TIDS}",
            breadth_table=f"{ALIAS}.main.{statements.WINDOW_BREADTH}",
            horizon=int(row["horizon"]),
            breadth_days=int(row["breadth_days"]),
            last=int(row["last_cutoff"]),
        )


def prepare(
    wh: Warehouse,
    *,
    refresh: bool = True,
    progress: Progress | None = None,
    session: bool = False,
) -> Prepared:
    """Use the holdings file when it matches the history; when the history changed, rebuild it
    (``refresh``) or say that the order lines are read instead. No file: nothing changes (the
    queries derive the rows; ``reachlist holdings`` builds the file).

    A server warehouse keeps no file. With ``session`` (a command about to read the holdings
    several times) one that can keep temporary tables (PostgreSQL) derives them once into this
    connection's own tables (``Warehouse.keep_session_holdings``) instead of once per query;
    when the server refuses, the note says so and the queries derive them as before."""
    path = holdings_path(wh)
    if path is None:
        if not session or wh.dialect.session_schema is None or wh.holdings_table is not None:
            return Prepared("unsupported")
        say = progress or (lambda _text: None)
        say("Holdings: netting the order lines once for this command (temporary tables)")
        try:
            wh.keep_session_holdings()
        except ReachlistError as exc:
            return Prepared(
                "unsupported",
                note=f"{exc.message} Each query reads the order lines instead (slower); to "
                f"avoid that, {exc.hint or 'report this'}.",
            )
        return Prepared("session")
    stored = _attached_mark(wh, path)
    if stored is None:
        return Prepared("absent", path)
    now = current_mark(wh)
    if stored == now:
        _use(wh)
        return Prepared("fresh", path)
    wh.detach(ALIAS)
    changed = "; ".join(stored.differences(now))
    if refresh:
        try:
            built = build(wh, progress=progress)
        except Exception as exc:  # a read-only folder, a second writer: fall back, say so
            return Prepared(
                "stale",
                path,
                f"Holdings out of date ({changed}) and not rebuilt ({brief(exc)}); reading the order "
                "lines instead (slower). `reachlist holdings` rebuilds them.",
            )
        return Prepared(
            "rebuilt",
            path,
            f"Holdings rebuilt ({changed}): {built.rows:,} rows in {built.seconds:.1f} s.",
        )
    return Prepared(
        "stale",
        path,
        f"Holdings out of date ({changed}); reading the order lines instead (slower). "
        "`reachlist holdings` rebuilds them.",
    )
