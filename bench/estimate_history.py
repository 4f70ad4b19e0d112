"""The estimate's history on DuckDB and Spark, counted in reachlist from one row per customer
(memory) or in the warehouse (engine), timed in one run, with what each brings back.

Run by hand (not a test):

    .venv/bin/python bench/estimate_history.py                     # 200,000 customers, local[2]
    .venv/bin/python bench/estimate_history.py --customers 20000 --repeats 1

It builds the sample warehouse of the given size under bench/results/ when missing, exports its
contract tables to Parquet (bench/spark_sizes.py's lake) and, with the audience of ``sizes
TARGET`` (rules mined on DuckDB), fetches the history of the default estimate (13 cutoffs, 30
days) both ways on both engines, interleaved, counting the rows and bytes every query returns:

  memory   takeup_cells(counting="memory"): one row per customer (takeup_history, 4 columns per
           cutoff) and who the rules reach at every cutoff (reach_at_cutoffs_query), counted
           in reachlist; the default on one machine;
  engine   takeup_cells(counting="engine"): one query; the past cutoffs come back as (group,
           breadth, bought) counts, and one by one only the customers the rules reach at as_of;
           the default on a Spark cluster.

DuckDB derives the holdings inside each query (as Spark does) unless --holdings-file. Every way
must give the same cells. Prints medians and ratios. --no-spark times DuckDB alone.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from rules_speed import TARGET, warehouse  # noqa: E402
from spark_mining import Metered  # noqa: E402
from spark_sizes import export  # noqa: E402


def main() -> None:

    from reachlist.estimate import MAX_CUTOFFS, takeup_cells
    from reachlist.holdings import prepare
    from reachlist.planning import ListRequest, plan_list
    from reachlist.schema import Mapping
    from reachlist.targets import parse_target
    from reachlist.warehouse import Warehouse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=200_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--master", default="local[2]")
    ap.add_argument("--target", default=TARGET)
    ap.add_argument("--holdings-file", action="store_true", help="DuckDB reads the holdings file")
    ap.add_argument("--no-spark", action="store_true", help="DuckDB only")
    args = ap.parse_args()
    path = warehouse(args.customers)
    target = parse_target(args.target)
    duck = Warehouse.open(path, read_only=True)
    spec = plan_list(duck, ListRequest(args.target)).spec
    holdings = "deriving the holdings from the order lines, as Spark does"
    if args.holdings_file:
        holdings = f"reading the holdings file ({prepare(duck, refresh=False).state})"
    else:
        duck.derive_holdings()
    engines = {"duckdb": duck}
    if not args.no_spark:
        lake = export(path)
        engines["spark"] = Warehouse.open(
            f"spark://{args.master}", Mapping.from_dict({"lake": str(lake)})
        )
    as_of, horizon, last = spec.lookback.until, 30, MAX_CUTOFFS

    def counted(counting: str) -> Any:
        def run(wh: Warehouse) -> list[Any]:
            return takeup_cells(wh, target, as_of, horizon, last, spec, counting=counting).cells

        return run

    meters = {name: Metered(wh.engine) for name, wh in engines.items()}
    if "spark" in engines:
        counted("engine")(engines["spark"])  # warm the session
    runs: dict[tuple[str, str], list[float]] = {}
    sent: dict[tuple[str, str], tuple[int, int]] = {}
    found: dict[tuple[str, str], list[Any]] = {}
    ways = (("memory", counted("memory")), ("engine", counted("engine")))
    step, total = 0, 2 * len(engines) * args.repeats
    for r in range(args.repeats):
        for engine, wh in engines.items():
            for way, run in ways:
                step += 1
                print(f"step {step} of {total}: {engine} {way} (run {r + 1})", file=sys.stderr)
                meter = meters[engine]
                meter.rows = meter.bytes = 0
                started = time.perf_counter()
                found[(engine, way)] = run(wh)
                runs.setdefault((engine, way), []).append(time.perf_counter() - started)
                sent[(engine, way)] = (meter.rows, meter.bytes)
    first = found[("duckdb", "memory")]
    for got in found.values():
        for a, b in zip(got, first, strict=True):
            assert a.equals(b), "the ways disagree"
    print(
        f"{args.customers:,} customers; the default estimate's history for sizes {args.target} "
        f"({len(spec.rules)} rules, {last} cutoffs); DuckDB {holdings}; medians of "
        f"{args.repeats} runs; the same cells every way"
    )
    for engine in engines:
        base = statistics.median(runs[(engine, "memory")])
        for way, _ in ways:
            seconds = statistics.median(runs[(engine, way)])
            rows, size = sent[(engine, way)]
            print(
                f"  {engine:<7}{way:<14}{seconds:8.2f} s {seconds / base:6.2f}x   "
                f"to the driver: {rows:,} rows, {size / 2**20:.1f} MiB"
            )
    for wh in engines.values():
        wh.close()


if __name__ == "__main__":
    main()
