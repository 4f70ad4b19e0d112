"""The estimate's history on DuckDB and Spark: one row per customer (the earlier form) against
the history counted where the data is (cells), timed in one run, with what each brings back.

Run by hand (not a test):

    .venv/bin/python bench/estimate_history.py                     # 200,000 customers, local[2]
    .venv/bin/python bench/estimate_history.py --customers 20000 --repeats 1

It builds the sample warehouse of the given size under bench/results/ when missing, exports its
contract tables to Parquet (bench/spark_sizes.py's lake) and, with the audience of ``sizes
TARGET`` (rules mined on DuckDB), fetches the history of the default estimate (13 cutoffs, 30
days) both ways on both engines, interleaved, counting the rows and bytes every query returns:

  per customer   takeup_history (one row per customer, 4 columns per cutoff), who the rules
                 reach at every cutoff (reach_at_cutoffs_query) and at as_of (reach_query): the
                 three queries the estimate ran before the cells;
  cells          takeup_cells: one query; the past cutoffs as (group, breadth, bought) counts,
                 and one by one only the customers the rules reach at as_of.

DuckDB derives the holdings inside each query here (no holdings file), as Spark does. Both ways
must count the same customers and buyers at every cutoff. Prints medians and ratios.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from datetime import timedelta
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from rules_speed import TARGET, warehouse  # noqa: E402
from spark_mining import Metered  # noqa: E402
from spark_sizes import export  # noqa: E402


def main() -> None:
    import polars as pl

    from reachlist.audience import reach_at_cutoffs_query, reach_query
    from reachlist.estimate import MAX_CUTOFFS, takeup_cells, takeup_history
    from reachlist.planning import ListRequest, plan_list
    from reachlist.schema import Mapping
    from reachlist.targets import parse_target
    from reachlist.warehouse import Warehouse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=200_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--master", default="local[2]")
    ap.add_argument("--target", default=TARGET)
    args = ap.parse_args()
    path = warehouse(args.customers)
    lake = export(path)
    target = parse_target(args.target)
    duck = Warehouse.open(path, read_only=True)
    spec = plan_list(duck, ListRequest(args.target)).spec
    duck.holdings_table = None  # derive the holdings from the order lines, as Spark does
    spark = Warehouse.open(f"spark://{args.master}", Mapping.from_dict({"lake": str(lake)}))
    as_of, horizon, last = spec.lookback.until, 30, MAX_CUTOFFS
    ats = [as_of - timedelta(days=horizon * k) for k in range(1, last + 1)]

    def per_customer(wh: Warehouse) -> list[tuple[int, int]]:
        frames = takeup_history(wh, target, as_of, horizon, last)
        wh.fetch(reach_at_cutoffs_query(spec, ats))
        wh.fetch(reach_query(spec))
        return [(f.height, int(f["bought"].sum())) for f in frames[1:]]

    def cells(wh: Warehouse) -> list[tuple[int, int]]:
        taken = takeup_cells(wh, target, as_of, horizon, last, spec)
        out = []
        for c in taken.cells:
            everyone = c.filter(pl.col("grp") == -1)
            out.append(
                (
                    int(everyone["customers"].sum()),
                    int((everyone["customers"] * everyone["bought"]).sum()),
                )
            )
        return out

    meters = {"duckdb": Metered(duck.engine), "spark": Metered(spark.engine)}
    cells(spark)  # warm the session
    runs: dict[tuple[str, str], list[float]] = {}
    sent: dict[tuple[str, str], tuple[int, int]] = {}
    found: dict[tuple[str, str], list[tuple[int, int]]] = {}
    ways = (("per customer", per_customer), ("cells", cells))
    step, total = 0, 4 * args.repeats
    for r in range(args.repeats):
        for engine, wh in (("duckdb", duck), ("spark", spark)):
            for way, run in ways:
                step += 1
                print(f"step {step} of {total}: {engine} {way} (run {r + 1})", file=sys.stderr)
                meter = meters[engine]
                meter.rows = meter.bytes = 0
                started = time.perf_counter()
                found[(engine, way)] = run(wh)
                runs.setdefault((engine, way), []).append(time.perf_counter() - started)
                sent[(engine, way)] = (meter.rows, meter.bytes)
    first = found[("duckdb", "per customer")]
    assert all(f == first for f in found.values()), "the ways disagree"
    print(
        f"{args.customers:,} customers; the default estimate's history for sizes {args.target} "
        f"({len(spec.rules)} rules, {last} cutoffs); medians of {args.repeats} runs; the same "
        f"customers and buyers at every cutoff all four ways"
    )
    for engine in ("duckdb", "spark"):
        base = statistics.median(runs[(engine, "per customer")])
        for way, _ in ways:
            seconds = statistics.median(runs[(engine, way)])
            rows, size = sent[(engine, way)]
            print(
                f"  {engine:<7}{way:<14}{seconds:8.2f} s {seconds / base:6.2f}x   "
                f"to the driver: {rows:,} rows, {size / 2**20:.1f} MiB"
            )
    spark.close()
    duck.close()


if __name__ == "__main__":
    main()
