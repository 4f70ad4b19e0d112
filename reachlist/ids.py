"""Customer ids as polars sees them: integers (Int64) or text (String), never anything else.

A warehouse may keep customer ids as integers, as text (alphanumeric CRM codes) or as UUIDs; the
mapping's views read UUIDs and mixed types as text (``reachlist.types``). In memory every id
column is normalised by :func:`normalise` so frames from different queries (and from a campaign
log kept in another database) join and compare.

>>> normalise(pl.Series("customer_id", [1, 2], dtype=pl.Int32)).dtype
Int64
>>> like(pl.Series("customer_id", [7]), pl.String).to_list()
['7']
"""

from __future__ import annotations

from collections.abc import Iterable

import polars as pl

ID = "customer_id"


def id_dtype(dtype: pl.DataType) -> pl.DataType:
    """Int64 for any integer type, String for everything else."""
    return pl.Int64() if dtype.is_integer() else pl.String()


def normalise(series: pl.Series) -> pl.Series:
    return series.cast(id_dtype(series.dtype))


def normalise_frame(frame: pl.DataFrame, column: str = ID) -> pl.DataFrame:
    if column not in frame.columns:
        return frame
    return frame.with_columns(pl.col(column).cast(id_dtype(frame.schema[column])))


def like(series: pl.Series, dtype: pl.DataType) -> pl.Series:
    """``series`` in the id type ``dtype`` (ids logged as text compared with integer ids, or the
    other way round); text that is not an integer cannot match an integer id and becomes null."""
    target = id_dtype(dtype)
    if series.dtype == target:
        return series
    return series.cast(target, strict=False)


def series(values: Iterable[object], name: str = ID) -> pl.Series:
    """Ids from Python values: Int64 when every value is an integer, else String."""
    values = list(values)
    if all(isinstance(v, int) and not isinstance(v, bool) for v in values):
        return pl.Series(name, values, dtype=pl.Int64)
    return pl.Series(name, [None if v is None else str(v) for v in values], dtype=pl.String)
