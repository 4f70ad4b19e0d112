"""Where to count itemsets: in the warehouse (SQL) or in memory (bitmaps)? Measured, not assumed.

    .venv/bin/python bench/engine_choice.py bench/results/garden-1000000.duckdb

Both engines start from the same held-items table (sql/held_items.sql, materialised once and not
timed) and produce n(X) and n(X+y) for every antecedent X of 1 or 2 items toward the target:

  SQL:       self-joins of the held-items table inside DuckDB (pairs over all baskets for n(X));
  in memory: fetch the pairs, build bitmaps, reachlist.mining.target_rules (max_antecedent=2).

Prints medians of 3 runs and checks both give the same counts for the rules found.
"""

from __future__ import annotations

import statistics
import sys
import time

import duckdb
import polars as pl

from reachlist import mining
from reachlist.baskets import Baskets
from reachlist.query import DUCKDB as DIALECT
from reachlist.query import inline, render
from reachlist.schema import Mapping
from reachlist.targets import Window, held_items_query

TARGET = "SG04-104"
MIN_SUPPORT = 0.002


def main(path: str) -> None:
    con = duckdb.connect(path, read_only=True)
    last = con.execute("SELECT max(ordered_at) FROM orders").fetchall()[0][0]
    until = last.replace(hour=0, minute=0, second=0, microsecond=0) + __import__(
        "datetime"
    ).timedelta(days=1)
    window = Window(until - __import__("datetime").timedelta(days=365), until)
    held_sql = inline(render(held_items_query(window), DIALECT, Mapping.identity()), DIALECT)
    con.execute(f"CREATE TEMP TABLE held AS {held_sql}")
    n = con.execute("SELECT count(DISTINCT basket) FROM held").fetchall()[0][0]
    min_count = int(-(-MIN_SUPPORT * n // 1))
    sql_counts = f"""
    WITH t AS (SELECT basket FROM held WHERE item = '{TARGET}'),
    items AS (SELECT item FROM held GROUP BY item HAVING count(*) >= {min_count} AND item <> '{TARGET}'),
    h AS (SELECT basket, item FROM held WHERE item IN (SELECT item FROM items)),
    singles AS (
        SELECT h.item AS a, NULL AS b, count(*) AS n_x,
               count(*) FILTER (WHERE h.basket IN (SELECT basket FROM t)) AS n_xy
        FROM h GROUP BY h.item),
    pairs AS (
        SELECT h1.item AS a, h2.item AS b, count(*) AS n_x,
               count(*) FILTER (WHERE h1.basket IN (SELECT basket FROM t)) AS n_xy
        FROM h AS h1 JOIN h AS h2 ON h1.basket = h2.basket AND h1.item < h2.item
        GROUP BY 1, 2)
    SELECT * FROM singles WHERE n_xy >= {min_count}
    UNION ALL SELECT * FROM pairs WHERE n_xy >= {min_count}
    """
    sql_times, mem_times = [], []
    for _ in range(3):
        t0 = time.perf_counter()
        in_sql = con.sql(sql_counts).pl()
        sql_times.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        pairs = con.sql("SELECT basket, item FROM held").pl()
        labels = pairs["item"].unique().sort()
        codes = pairs["item"].cast(pl.Enum(labels.to_list())).to_physical().to_numpy()
        baskets = Baskets.from_arrays(
            pairs["basket"], codes.astype("int64"), labels=labels.to_list()
        )
        in_mem = mining.target_rules(
            baskets, TARGET, min_count=min_count, max_antecedent=2, keep_unproductive=True
        )
        mem_times.append(time.perf_counter() - t0)
    got_sql = {
        tuple(sorted(x for x in (a, b) if x)): (nx, nxy) for a, b, nx, nxy in in_sql.iter_rows()
    }
    got_mem = {
        tuple(sorted(r["antecedent"])): (r["n_antecedent"], r["n_both"])
        for r in in_mem.iter_rows(named=True)
    }
    same = got_sql == got_mem
    print(f"{path}: {n:,} baskets, {len(got_mem):,} antecedents of 1-2 items, counts agree: {same}")
    print(f"  SQL self-joins  median {statistics.median(sql_times):6.2f} s")
    print(
        f"  in memory       median {statistics.median(mem_times):6.2f} s (fetch + bitmaps + mining)"
    )


if __name__ == "__main__":
    main(sys.argv[1] if len(sys.argv) > 1 else "bench/results/garden-100000.duckdb")
