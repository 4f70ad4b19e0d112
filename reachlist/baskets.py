"""Baskets for mining, held three ways, one per access pattern.

- a basket-major index (CSR: ``indptr``, ``indices``), used to cut out the baskets that hold an
  item or a set of items (a *projection*: cost proportional to the lines of those baskets);
- an item-major index (the baskets of each item), from which
- vertical bitmaps are built on first use and kept: one row of packed ``uint64`` words per item
  (bit ``b`` set when basket ``b`` holds the item); a count is an AND of rows plus a popcount
  (``np.bitwise_count``).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from typing import Any

import numpy as np
import polars as pl

from reachlist.errors import InputError

_U64 = np.dtype("<u8")
_PACK_BUFFER = 1 << 26  # bytes of the bit-scatter buffer in _pack_bits


# --------------------------------------------------------------------------------------------
# Baskets
# --------------------------------------------------------------------------------------------


class Baskets:
    """A set of baskets (each a set of items): basket-major and item-major indexes, and vertical
    bitmaps of the items that mining asks for (built on first use from the item-major index and
    kept, so a large catalogue only pays for the items that can be frequent).

    Build with ``from_arrays``, ``from_frame`` or ``from_transactions``. ``n_baskets`` is the
    number of distinct baskets given; a larger explicit ``n_baskets`` adds empty baskets (they
    count in N but hold nothing). An item repeated inside a basket counts once.

    Attributes: ``labels`` (item labels, by item index), ``item_counts`` (baskets holding each
    item), ``indptr``/``indices`` (basket-major CSR: the item indices of basket b are
    ``indices[indptr[b]:indptr[b + 1]]``, ascending), ``basket_ids`` (the basket key of each
    basket index, when built from keys).
    """

    __slots__ = (
        "_index",
        "_rows",
        "_tid_ptr",
        "_tids",
        "basket_ids",
        "indices",
        "indptr",
        "item_counts",
        "labels",
    )

    def __init__(
        self,
        basket_codes: np.ndarray,
        item_codes: np.ndarray,
        labels: Sequence[str],
        n_baskets: int,
        basket_ids: np.ndarray | None = None,
    ) -> None:
        """Low level: ``basket_codes`` in [0, n_baskets), ``item_codes`` in [0, len(labels))."""
        labels = [str(x) for x in labels]
        if len(set(labels)) != len(labels):
            raise InputError("item labels must be unique.", hint="pass each label once")
        n_items = len(labels)
        n = int(n_baskets)
        b = np.asarray(basket_codes, dtype=np.int64).ravel()
        i = np.asarray(item_codes, dtype=np.int64).ravel()
        if b.shape != i.shape:
            raise InputError(
                f"basket and item arrays differ in length ({b.size} vs {i.size}).",
                hint="pass one basket index per item index",
            )
        if b.size and (b.min() < 0 or b.max() >= n):
            raise InputError(f"basket codes must lie in [0, {n}).")
        if i.size and (i.min() < 0 or i.max() >= n_items):
            raise InputError(f"item codes must lie in [0, {n_items}).")
        # one key per (basket, item): sorted unique keys give the deduplicated CSR directly
        shift = max(n_items - 1, 1).bit_length()
        key = (b << shift) | i
        if key.size > 1 and not bool(np.all(key[1:] > key[:-1])):  # else sorted and distinct
            key.sort()
            fresh = np.empty(key.size, dtype=bool)
            fresh[0] = True
            np.not_equal(key[1:], key[:-1], out=fresh[1:])
            key = key[fresh]
        i = (key & ((1 << shift) - 1)).astype(np.int32)
        key >>= shift  # now the basket codes, ascending
        indptr = np.zeros(n + 1, dtype=np.int64)
        np.cumsum(np.bincount(key, minlength=n), out=indptr[1:])
        self._fill(key, indptr, i, labels, basket_ids)

    def _fill(
        self,
        line_baskets: np.ndarray,
        indptr: np.ndarray,
        items: np.ndarray,
        labels: list[str],
        basket_ids: np.ndarray | None,
        item_major: tuple[np.ndarray, np.ndarray] | None = None,
    ) -> None:
        """The indexes from deduplicated lines in basket order (``line_baskets`` ascending, the
        ``items`` of a basket ascending; ``indptr`` where each basket's lines start).
        ``item_major``: the same lines item by item when they are kept, as (item, basket)
        arrays in item order, each item's baskets ascending; used when they agree with the
        lines, else the index is worked out here by a sort."""
        n, n_items = indptr.size - 1, len(labels)
        self.indptr = indptr
        self.indices = items
        self.item_counts = np.bincount(items, minlength=n_items).astype(np.int64)
        self._tid_ptr = np.zeros(n_items + 1, dtype=np.int64)
        np.cumsum(self.item_counts, out=self._tid_ptr[1:])
        tid_type = np.int32 if n < 1 << 31 else np.int64
        tids = None
        if item_major is not None:
            tids = _agreeing_item_major(item_major, items, line_baskets, self._tid_ptr, n)
        if tids is None:
            # item-major index: the baskets of each item, ascending (a stable sort of the lines)
            wide = n_items > 1 << 16
            order = np.argsort(items if wide else items.astype(np.uint16), kind="stable")
            # narrowed before the gather: a random gather of 4-byte values moves half the
            # memory (9.6M lines: 0.19-0.44 s -> 0.11-0.13 s)
            tids = line_baskets.astype(tid_type)[order]
        self._tids = tids.astype(tid_type, copy=False)
        self._rows: dict[int, np.ndarray] = {}
        self.labels = np.array(labels, dtype=object)
        self.basket_ids = basket_ids
        self._index: dict[str, int] | None = None
        for arr in (self.indptr, self.indices, self.item_counts, self.labels, self._tids):
            arr.flags.writeable = False

    # -- constructors ---------------------------------------------------------------------

    @classmethod
    def from_arrays(
        cls,
        basket: Any,
        item: Any,
        *,
        labels: Sequence[str] | None = None,
        n_baskets: int | None = None,
    ) -> Baskets:
        """Baskets from two equal-length arrays (one row per basket line).

        ``basket`` holds any basket key (ints or strings). ``item`` holds item indices into
        ``labels`` when ``labels`` is given, else any item values (their ``str`` is the label).
        """
        basket_codes, basket_ids = _factorize(pl.Series("basket", basket))
        if labels is None:
            item_codes, uniques = _factorize(pl.Series("item", item))
            labels = [str(x) for x in uniques]
        else:
            item_codes = np.asarray(item, dtype=np.int64)
        return cls(
            basket_codes, item_codes, labels, _n_checked(basket_ids.size, n_baskets), basket_ids
        )

    @classmethod
    def from_sorted(
        cls,
        basket: pl.Series,
        item_codes: np.ndarray,
        labels: Sequence[str],
        item_major: tuple[np.ndarray, np.ndarray] | None = None,
    ) -> Baskets | None:
        """Baskets from lines already deduplicated and in order: ``basket`` ascending (any key
        type polars sorts), the ``item_codes`` (indices into ``labels``) of one basket strictly
        ascending; the same baskets as ``from_arrays`` gives, without sorting or hashing the
        keys (the pairs the holdings file keeps come so). None when the lines are not in that
        order (checked: the caller then uses ``from_arrays``). ``item_major``: the same lines
        item by item as (item code, basket) arrays, each basket as its place in ``basket``'s
        order (the holdings file keeps them so); checked against the lines, and worked out by
        a sort when they disagree."""
        labels = [str(x) for x in labels]
        items = np.asarray(item_codes).ravel()
        if (
            basket.len() != items.size
            or items.size == 0
            or basket.null_count()
            or not basket.is_sorted()
            or len(set(labels)) != len(labels)
            or not np.issubdtype(items.dtype, np.integer)
            or items.min() < 0
            or items.max() >= len(labels)
        ):
            return None
        line_baskets = basket.rle_id().to_numpy()  # 0, 0, 1, 2, 2, ...: the basket codes
        same = line_baskets[1:] == line_baskets[:-1]
        if bool(np.any(same & (items[1:] <= items[:-1]))):  # an item repeated or out of order
            return None
        starts = np.flatnonzero(~same) + 1
        indptr = np.concatenate(([0], starts, [items.size])).astype(np.int64)
        ids = basket.gather(np.concatenate(([0], starts))).to_numpy()
        out = cls.__new__(cls)
        out._fill(line_baskets, indptr, items.astype(np.int32, copy=False), labels, ids, item_major)
        return out

    @classmethod
    def from_frame(
        cls,
        frame: pl.DataFrame,
        *,
        basket: str = "basket",
        item: str = "item",
        n_baskets: int | None = None,
    ) -> Baskets:
        """Baskets from a polars DataFrame with one row per basket line (columns basket, item)."""
        for col in (basket, item):
            if col not in frame.columns:
                raise InputError(
                    f"column {col!r} not in the frame (columns: {', '.join(frame.columns)}).",
                    hint="name the basket and item columns",
                )
        return cls.from_arrays(frame[basket], frame[item], n_baskets=n_baskets)

    @classmethod
    def from_transactions(
        cls,
        transactions: Iterable[Iterable[Any]],
        *,
        counts: Iterable[int] | None = None,
        n_baskets: int | None = None,
    ) -> Baskets:
        """Baskets from lists of items; ``counts[k]`` repeats transaction k (weighted data)."""
        rows = [list(dict.fromkeys(str(x) for x in t)) for t in transactions]
        weights = [1] * len(rows) if counts is None else [int(c) for c in counts]
        if len(weights) != len(rows) or any(w < 0 for w in weights):
            raise InputError("counts must give one non-negative count per transaction.")
        labels = sorted({x for r in rows for x in r})
        code = {x: k for k, x in enumerate(labels)}
        b_parts, i_parts, start = [], [], 0
        for r, w in zip(rows, weights, strict=True):
            if r and w:
                ids = np.array([code[x] for x in r], dtype=np.int64)
                b_parts.append(np.repeat(np.arange(start, start + w, dtype=np.int64), ids.size))
                i_parts.append(np.tile(ids, w))
            start += w
        b = np.concatenate(b_parts) if b_parts else np.zeros(0, np.int64)
        i = np.concatenate(i_parts) if i_parts else np.zeros(0, np.int64)
        return cls(b, i, labels, _n_checked(start, n_baskets))

    # -- accessors ------------------------------------------------------------------------

    @property
    def n_baskets(self) -> int:
        return self.indptr.size - 1

    @property
    def n_items(self) -> int:
        return self.labels.size

    def __len__(self) -> int:
        return self.n_baskets

    def __repr__(self) -> str:
        return (
            f"Baskets(n_baskets={self.n_baskets}, n_items={self.n_items}, "
            f"lines={self.indices.size})"
        )

    def item_index(self, label: str) -> int:
        """Index of an item label; ``InputError`` when the item is in no basket's vocabulary."""
        if self._index is None:
            self._index = {x: k for k, x in enumerate(self.labels)}
        try:
            return self._index[str(label)]
        except KeyError:
            raise InputError(
                f"item {label!r} is not in the baskets ({self.n_items} items).",
                hint="check the item code and the item level",
            ) from None

    @property
    def n_words(self) -> int:
        """Width of a bitmap row in uint64 words."""
        return _n_words(self.n_baskets)

    def count(self, items: Iterable[str]) -> int:
        """Number of baskets holding every item of ``items`` (N for the empty set)."""
        ids = [self.item_index(x) for x in items]
        if not ids:
            return self.n_baskets
        rows = self.bitmaps(ids)
        return int(popcounts(np.bitwise_and.reduce(rows, axis=0)))

    def baskets_holding(self, item: int) -> np.ndarray:
        """Basket indices (ascending) of the baskets that hold item index ``item``."""
        return self._tids[self._tid_ptr[item] : self._tid_ptr[item + 1]]

    def bitmaps(self, items: Iterable[int]) -> np.ndarray:
        """Bitmap rows (len(items), n_words) of item indices ``items``: bit b of a row is set when
        basket b holds the item. Rows are built on first request and kept."""
        ids = np.asarray(
            list(items) if not isinstance(items, np.ndarray) else items, dtype=np.int64
        ).ravel()
        missing = np.unique(ids[[int(k) not in self._rows for k in ids]]) if ids.size else ids
        if missing.size:
            block = _pack_item_rows(self._tids, self._tid_ptr, missing, self.n_words)
            block.flags.writeable = False
            for k, item in enumerate(missing.tolist()):
                self._rows[item] = block[k]
        out = np.empty((ids.size, self.n_words), dtype=_U64)
        for k, item in enumerate(ids.tolist()):
            out[k] = self._rows[item]
        return out

    @property
    def nbytes(self) -> int:
        """Memory held: the two indexes and the bitmap rows built so far."""
        arrays = (self.indptr, self.indices, self.item_counts, self._tids, self._tid_ptr)
        return sum(a.nbytes for a in arrays) + len(self._rows) * self.n_words * 8


def _n_checked(seen: int, n_baskets: int | None) -> int:
    if n_baskets is None:
        return int(seen)
    if int(n_baskets) < seen:
        raise InputError(
            f"n_baskets={n_baskets} is below the {seen} distinct baskets given.",
            hint="leave n_baskets out, or give at least the number of baskets",
        )
    return int(n_baskets)


def _factorize(s: pl.Series) -> tuple[np.ndarray, np.ndarray]:
    """Dense codes (0..k-1, in sorted order of the values) and the sorted unique values."""
    if s.null_count():
        raise InputError(
            f"column {s.name!r} has {s.null_count()} missing values.",
            hint="drop or fill them first",
        )
    if s.len() == 0:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    if s.dtype.is_integer():
        v = s.to_numpy().astype(np.int64, copy=False)
        lo, hi = int(v.min()), int(v.max())
        if hi - lo <= 4 * v.size + 1024:  # dense keys: a presence table, no sort
            present = np.zeros(hi - lo + 1, dtype=bool)
            present[v - lo] = True
            if present.all():
                return v - lo, np.arange(lo, hi + 1, dtype=np.int64)
            rank = np.cumsum(present) - 1
            return rank[v - lo], np.flatnonzero(present) + lo
    if isinstance(s.dtype, (pl.Categorical, pl.Enum)):
        s = s.cast(pl.String)
    uniques = s.unique().sort()
    if s.dtype == pl.String:  # a hash lookup into the sorted labels beats a sort of all rows
        codes = s.cast(pl.Enum(uniques.to_list())).to_physical()
    else:
        codes = s.rank("dense") - 1
    return codes.cast(pl.Int64).to_numpy(), uniques.to_numpy()


# --------------------------------------------------------------------------------------------
# Bitmap primitives
# --------------------------------------------------------------------------------------------


def _agreeing_item_major(
    kept: tuple[np.ndarray, np.ndarray],
    items: np.ndarray,
    line_baskets: np.ndarray,
    tid_ptr: np.ndarray,
    n_baskets: int,
) -> np.ndarray | None:
    """The kept item-major index's baskets when it agrees with the lines (``items[k]`` held
    by basket ``line_baskets[k]``, item i's baskets to go at ``tid_ptr[i]:tid_ptr[i + 1]``),
    else None. ``kept``: (item, basket) rows. Checked: as many rows as lines, the items in
    order with each item's rows exactly where the lines put them, and each item's baskets
    strictly ascending and in range: rows read in any other order, or some missing, fail here.
    The baskets are numbered by the statement that wrote the lines' order (the same sort of
    the same column in one build); a cheap guard against another numbering is that the total
    of the basket numbers must be the lines' (a per-item sum would cost about as much as the
    sort it saves: 0.11 s at 9.6M lines)."""
    kept_items, tids = (np.asarray(a).ravel() for a in kept)
    if not (tids.size == kept_items.size == items.size) or tids.size == 0:
        return None
    if not (np.issubdtype(tids.dtype, np.integer) and np.issubdtype(kept_items.dtype, np.integer)):
        return None
    if tids.min() < 0 or tids.max() >= n_baskets:
        return None
    if int(tids.sum(dtype=np.int64)) != int(line_baskets.sum(dtype=np.int64)):
        return None
    step = np.diff(kept_items)
    if bool((step < 0).any()):
        return None
    held = np.flatnonzero(tid_ptr[1:] > tid_ptr[:-1])  # items with lines: their first and last
    if not (  # rows must carry the item (the rows between them then do too)
        np.array_equal(kept_items[tid_ptr[held]], held)
        and np.array_equal(kept_items[tid_ptr[held + 1] - 1], held)
    ):
        return None
    return tids if bool(((np.diff(tids) > 0) | (step > 0)).all()) else None


def _n_words(n_bits: int) -> int:
    return (int(n_bits) + 63) >> 6


def _pack_bits(rows: np.ndarray, cols: np.ndarray, n_rows: int, n_words: int) -> np.ndarray:
    """Bit matrix (n_rows, n_words) with bit ``cols[k]`` of row ``rows[k]`` set.

    ``cols`` must be ascending (basket-major order); repeats are fine. Bits are scattered into a
    byte-per-bit buffer over a band of columns at a time (below 64 MiB) and packed with
    ``np.packbits``.
    """
    n_bits = n_words * 64
    out = np.zeros((n_rows, n_words), dtype=_U64)
    if rows.size == 0 or n_bits == 0:
        return out
    band = min(n_bits, max(64, (_PACK_BUFFER // n_rows) // 64 * 64))
    buf = np.empty(n_rows * band, dtype=bool)
    rows = rows.astype(np.int64, copy=False)
    for c0 in range(0, n_bits, band):
        c1 = min(n_bits, c0 + band)
        width = c1 - c0
        lo, hi = np.searchsorted(cols, (c0, c1))
        if lo == hi:
            continue
        view = buf[: n_rows * width]
        view[:] = False
        view[rows[lo:hi] * width + (cols[lo:hi] - c0)] = True
        packed = np.packbits(view, bitorder="little").view(_U64)
        out[:, c0 >> 6 : c1 >> 6] = packed.reshape(n_rows, width >> 6)
    return out


def _pack_item_rows(
    tids: np.ndarray, ptr: np.ndarray, items: np.ndarray, n_words: int
) -> np.ndarray:
    """Bitmap rows of ``items`` from the item-major index (baskets of item k at
    ``tids[ptr[k]:ptr[k + 1]]``), a band of rows at a time through a byte-per-bit buffer."""
    n_bits = n_words * 64
    out = np.zeros((items.size, n_words), dtype=_U64)
    if n_bits == 0:
        return out
    band = max(1, _PACK_BUFFER // n_bits)
    buf = np.empty(min(band, items.size) * n_bits, dtype=bool)
    for r0 in range(0, items.size, band):
        chunk = items[r0 : r0 + band]
        starts, ends = ptr[chunk], ptr[chunk + 1]
        lens = ends - starts
        total = int(lens.sum())
        if total == 0:
            continue
        lines = np.repeat(starts - (np.cumsum(lens) - lens), lens)
        lines += np.arange(total, dtype=np.int64)
        flat = np.repeat(np.arange(chunk.size, dtype=np.int64) * n_bits, lens) + tids[lines]
        view = buf[: chunk.size * n_bits]
        view[:] = False
        view[flat] = True
        out[r0 : r0 + chunk.size] = (
            np.packbits(view, bitorder="little").view(_U64).reshape(chunk.size, n_words)
        )
    return out


def popcounts(m: np.ndarray) -> np.ndarray:
    """Number of set bits in each row of a (r, w) word matrix."""
    if m.shape[-1] == 0:
        return np.zeros(m.shape[:-1], dtype=np.int64)
    return np.asarray(np.bitwise_count(m).sum(axis=-1, dtype=np.int64))


def bit_positions(row: np.ndarray) -> np.ndarray:
    """Positions of the set bits of one packed row, ascending."""
    return np.flatnonzero(np.unpackbits(row.view(np.uint8), bitorder="little"))


def project(
    baskets: Baskets, rows: np.ndarray, keep_items: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Bitmaps of the items ``keep_items`` restricted to the baskets ``rows``.

    Returns (bits (len(keep_items), ceil(len(rows)/64)), counts per kept item). Cost is
    proportional to the number of lines in those baskets, not to the number of items.
    """
    n_keep = keep_items.size
    width = _n_words(rows.size)
    slot = np.full(baskets.n_items, -1, dtype=np.int64)
    slot[keep_items] = np.arange(n_keep)
    starts = baskets.indptr[rows]
    lens = baskets.indptr[rows + 1] - starts
    total = int(lens.sum())
    if total == 0 or n_keep == 0:
        return np.zeros((n_keep, width), dtype=_U64), np.zeros(n_keep, dtype=np.int64)
    lines = np.repeat(starts - (np.cumsum(lens) - lens), lens)
    lines += np.arange(total, dtype=np.int64)
    local = np.repeat(np.arange(rows.size, dtype=np.int64), lens)
    s = slot[baskets.indices[lines]]
    if 4 * n_keep >= 3 * baskets.n_items:  # most items kept: send the rest to a spare row
        s[s < 0] = n_keep
        bits = _pack_bits(s, local, n_keep + 1, width)[:n_keep]
        return bits, np.bincount(s, minlength=n_keep + 1)[:n_keep].astype(np.int64)
    sel = s >= 0
    s, local = s[sel], local[sel]
    return _pack_bits(s, local, n_keep, width), np.bincount(s, minlength=n_keep).astype(np.int64)
