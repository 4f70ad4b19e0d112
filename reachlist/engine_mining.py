"""Mining toward a target with the counting done by the warehouse engine.

For an engine that is a cluster (Spark), the customer -> item pairs stay where they are: the
engine computes them once (kept as ``reachlist_pairs``, with each customer's shopping breadth as
``reachlist_breadth``) and returns only counts: n(i) per item and the number of baskets, the
items of the customers who hold the target (the only baskets the search walks: every count found
there is n(X+target)), n(X) over all baskets for the antecedents the search found, and, for the
rules shown or used, per-decile tables of shopping breadth. The rules are those of the in-memory
path, row for row (``mining.conditional_rules``; the tests compare the two on DuckDB and on
Spark). SQL: sql/engine_counts.sql.

>>> with EngineCounts(wh, target, "sku", window, label, related=()) as counts:  # doctest: +SKIP
...     held = counts.held_by_target(min_support=0.002)
"""

from __future__ import annotations

import contextlib
import re
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from types import TracebackType

import numpy as np
import polars as pl

from reachlist.baskets import Baskets
from reachlist.mining import support_count
from reachlist.query import Query, template_parts, with_parts
from reachlist.stats import breadth_deciles_counted
from reachlist.targets import LEVEL_COLUMN, Level, Target, Window, day_of
from reachlist.warehouse import Warehouse

PAIRS = "reachlist_pairs"  # customer -> item pairs of the window, kept in the engine
BREADTH = "reachlist_breadth"  # each customer's breadth and whether they hold the target
ITEMSETS = "reachlist_itemsets"  # the itemsets to count: itemset, item, position, size
TABLE_ITEMSETS = 2_000
"""Up to this many itemsets, n(X) comes back as per-decile tables (one query for the counts and
the breadth-matched lift); beyond, one row per itemset, then the tables of the rules shown or
used (rules.BREADTH_ROWS best and the significant among the next: at most 4x that)."""
HOLDER_ROWS = 4_000_000
"""Holder rows (n of each itemset's rarest item times its size, summed) one counting query may
join: larger sets of itemsets are counted in batches. On the Complete Journey data, 100,000
itemsets in one query passed DuckDB's 1.5 GB working memory."""
_PARAM = re.compile(r"(?<![:\w]):([A-Za-z_]\w*)")


@dataclass(frozen=True)
class HeldByTarget:
    """What the search needs: the target holders' baskets, n(i) for their items, N."""

    held: Baskets
    n_baskets: int
    item_counts: np.ndarray  # n(i) over all baskets, by ``held``'s item index


class EngineCounts:
    """Counting queries over one target's customer -> item pairs (window, level, target).

    A context manager: entering computes the pairs and the breadth once in the engine, leaving
    drops them."""

    def __init__(
        self,
        wh: Warehouse,
        target: Target,
        level: Level,
        window: Window,
        label: str,
        related: Sequence[str],
        progress: Callable[[str], None] | None = None,
    ) -> None:
        self.wh, self.target, self.level, self.window = wh, target, level, window
        self.label = label  # the target's label among the items
        self.related = tuple(related)  # items at ``level`` inside or containing the target
        self._stack = contextlib.ExitStack()
        self._say = progress or (lambda _msg: None)
        self._counts: dict[str, int] = {}
        self._cuts: np.ndarray | None = None
        self._totals = np.zeros((1, 2), dtype=np.int64)  # baskets per (decile, has_y)
        self._tables: dict[tuple[str, ...], np.ndarray] = {}  # holders per (decile, has_y)
        self._n: dict[tuple[str, ...], int] = {}  # n(X)

    def __enter__(self) -> EngineCounts:
        same = self.target.level == self.level
        pairs = (
            ["held_skus", "level_pairs"] if same else ["held_skus", "level_pairs", "target_pairs"]
        )
        self._stack.enter_context(
            self.wh.kept(PAIRS, self._query(pairs, "same_level" if same else "other_level"))
        )
        groups = ["held_skus", "groups_department"] if self.level == "department" else []
        self._stack.enter_context(
            self.wh.kept(BREADTH, self._query(groups, f"breadth_{self.level}"))
        )
        return self

    def __exit__(
        self,
        kind: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        self._stack.close()

    def _query(self, ctes: Sequence[str], final: str, decile: str = "0", **extra: object) -> Query:
        """sql/engine_counts.sql: the parts ``ctes`` as a WITH list, then the part ``final``."""
        parts = template_parts("engine_counts")
        parts["held_skus"] = template_parts("held_items")["held_skus"]  # one netting rule
        params: dict[str, object] = {
            "since": day_of(self.window.since),
            "until": day_of(self.window.until),
            "target_label": self.label,
            "target_name": self.target.name,
            "related": list(self.related),
            **extra,
        }
        without_related = " " + parts["without_related"] if self.related else ""
        without_target_category = ""
        if self.target.level == "category":
            without_target_category = "\n    " + parts["without_target_category"]
        text = with_parts([parts[c] for c in ctes], parts[final]).format(
            level=LEVEL_COLUMN[self.level],
            target_level=LEVEL_COLUMN[self.target.level],
            without_related=without_related,
            without_target_category=without_target_category,
            decile=decile,
        )
        used = set(_PARAM.findall(text))
        return Query(
            text, {k: v for k, v in params.items() if k in used}, label=f"engine_counts:{final}"
        )

    def held_by_target(self, min_support: float) -> HeldByTarget:
        """N, n(i) per item and the target holders' items (two queries). Items fewer than
        ``min_support`` of all baskets hold together with the target stay in the engine (no
        rule can use them)."""
        counts = self.wh.fetch(self._query([], "item_counts"))
        total = counts.filter(pl.col("total") == 1)["n"]
        n = int(total[0]) if total.len() and total[0] is not None else 0
        per_item = counts.filter(pl.col("total") == 0)
        self._counts = dict(
            zip(
                per_item["item"].cast(pl.String).to_list(),
                per_item["n"].cast(pl.Int64).to_list(),
                strict=True,
            )
        )
        floor = support_count(n, min_support) if n else 1
        pairs = self.wh.fetch(self._query(["held_by_target"], "held_items", min_count=floor))
        labels = pairs["item"].cast(pl.String).unique().sort()
        codes = pairs["item"].cast(pl.String).cast(pl.Enum(labels.to_list())).to_physical()
        held = Baskets.from_arrays(
            pairs["basket"], codes.to_numpy().astype("int64"), labels=labels.to_list()
        )
        item_counts = np.array([self._counts.get(x, 0) for x in labels.to_list()], dtype=np.int64)
        return HeldByTarget(held, n, item_counts)

    def _with_itemsets(
        self, itemsets: list[list[str]], run: Callable[[], pl.DataFrame]
    ) -> pl.DataFrame:
        """``run`` with the itemsets readable as ITEMSETS, each item at its position by
        ascending n(i) (position 0: the rarest, whose holders are checked for the others)."""
        rows = []
        for k, items in enumerate(itemsets):
            ordered = sorted(items, key=lambda x: (self._counts.get(x, 0), x))
            rows += [(k, item, pos, len(items)) for pos, item in enumerate(ordered)]
        frame = pl.DataFrame(
            rows,
            schema={"itemset": pl.Int64, "item": pl.String, "position": pl.Int64, "size": pl.Int64},
            orient="row",
        )
        with self.wh.temporary_table(ITEMSETS, frame):
            return run()

    def itemset_counts(self, itemsets: list[list[str]]) -> np.ndarray:
        """n(X) over all baskets for each itemset, in the order given. Up to TABLE_ITEMSETS
        itemsets, the same query counts each one's holders per breadth decile (kept for
        ``breadth_tables``); beyond, one count per itemset comes back and the tables are
        counted later for the rules shown or used only."""
        missing = [x for x in itemsets if self._key(x) not in self._n]
        self._count(missing, tables=len(itemsets) <= TABLE_ITEMSETS)
        return np.array([self._n[self._key(x)] for x in itemsets], dtype=np.int64)

    def breadth_tables(self, itemsets: list[list[str]]) -> list[np.ndarray]:
        """One ``(deciles, 2, 2)`` array per itemset, as ``rules.breadth_tables`` builds them
        in memory: within each breadth decile,
        ``[[holders with y, holders without], [others with y, others without]]``."""
        self._count([x for x in itemsets if self._key(x) not in self._tables], tables=True)
        total = self._totals
        out = []
        for items in itemsets:
            held = self._tables[self._key(items)]  # (deciles, has_y) holders
            a, n1 = held[:, 1], held.sum(axis=1)
            c = total[:, 1] - a
            rest = total.sum(axis=1) - n1 - c
            out.append(
                np.stack(
                    [np.stack([a, n1 - a], axis=1), np.stack([c, rest], axis=1)], axis=1
                ).astype(float)
            )
        return out

    @staticmethod
    def _key(items: Sequence[str]) -> tuple[str, ...]:
        return tuple(sorted(items))

    def _edges(self) -> np.ndarray:
        """The breadth deciles' cut points, from the engine's histogram of breadth."""
        if self._cuts is None:
            got = self.wh.fetch(self._query([], "breadth_histogram"))
            self._cuts = breadth_deciles_counted(
                got["breadth"].to_numpy().astype(np.int64), got["n"].to_numpy().astype(np.int64)
            )
        return self._cuts

    def _count(self, itemsets: list[list[str]], *, tables: bool) -> None:
        """Holders of each itemset (per breadth decile and target holding with ``tables``):
        one query per batch
        of itemsets whose rarest items' holders add up to at most ``HOLDER_ROWS`` (the rows
        the engine's join works through), so no query grows without bound; on Spark, which
        spills its joins to disk and pays a fixed cost per query, in one query."""
        batches: list[list[list[str]]] = []
        rows = 0
        limit = HOLDER_ROWS if self.wh.engine.batches_joins else None
        for items in itemsets:
            cost = min(self._counts.get(x, 0) for x in items) * len(items)
            if not batches or (limit is not None and rows + cost > limit and batches[-1]):
                batches.append([])
                rows = 0
            batches[-1].append(items)
            rows += cost
        for k, batch in enumerate(batches, start=1):
            if len(batches) > 1:
                self._say(
                    f"Counting holders in the engine: batch {k} of {len(batches)} "
                    f"({len(batch):,} itemsets)"
                )
            if tables:
                self._count_tables(batch)
            else:
                got = self._with_itemsets(
                    batch, lambda: self.wh.fetch(self._query(["hits"], "itemset_counts"))
                )
                n = np.zeros(len(batch), dtype=np.int64)
                n[got["itemset"].to_numpy().astype(np.int64)] = got["n"].to_numpy()
                self._n.update(zip(map(self._key, batch), n.tolist(), strict=True))

    def _count_tables(self, itemsets: list[list[str]]) -> None:
        edges = self._edges()
        k = len(edges) + 1
        term = template_parts("engine_counts")["decile_term"]
        terms = [term.format(i=i) for i in range(len(edges))]
        query = self._query(
            ["hits", "marked"],
            "breadth_tables",
            decile=" + ".join(terms) or "0",
            **{f"edge_{i}": float(e) for i, e in enumerate(edges)},
        )
        got = self._with_itemsets(itemsets, lambda: self.wh.fetch(query))
        cells = np.zeros((len(itemsets) + 1, k, 2), dtype=np.int64)
        at = (
            got["itemset"].to_numpy().astype(np.int64) + 1,
            got["decile"].to_numpy().astype(np.int64),
            got["has_y"].to_numpy().astype(np.int64),
        )
        cells[at] = got["n"].to_numpy().astype(np.int64)
        self._totals = cells[0]
        for items, held in zip(itemsets, cells[1:], strict=True):
            self._tables[self._key(items)] = held
            self._n[self._key(items)] = int(held.sum())
