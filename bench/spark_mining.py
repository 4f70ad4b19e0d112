"""Mining on Spark: the counting in the driver (the pairs come back) or in the engine (only
counts come back), timed in one run, with what each brings to the driver.

Run by hand (not a test):

    .venv/bin/python bench/spark_mining.py                         # 200,000 customers, local[2]
    .venv/bin/python bench/spark_mining.py --customers 20000 --repeats 1

It builds the sample warehouse of the given size under bench/results/ when missing, exports its
contract tables to Parquet (bench/spark_sizes.py's lake) and, in one Spark session (its start
is not timed), runs ``mine_rules(TARGET)`` both ways, interleaved, counting the rows and bytes
every query returns to the driver. The two rule tables must be equal. DuckDB's in-memory path on
the same data is timed too, as the reference.
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
from spark_sizes import export  # noqa: E402


class Metered:
    """Counts what an engine's queries return to the driver."""

    def __init__(self, engine: Any) -> None:
        self.rows = self.bytes = 0
        original = engine.fetch

        def fetch(sql: str, params: dict[str, Any]) -> Any:
            frame = original(sql, params)
            self.rows += frame.height
            self.bytes += int(frame.estimated_size())
            return frame

        engine.fetch = fetch


def main() -> None:
    from polars.testing import assert_frame_equal

    from reachlist.rules import mine_rules
    from reachlist.schema import Mapping
    from reachlist.warehouse import Warehouse

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=200_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--master", default="local[2]")
    ap.add_argument("--target", default=TARGET)
    args = ap.parse_args()
    path = warehouse(args.customers)
    lake = export(path)
    spark = Warehouse.open(f"spark://{args.master}", Mapping.from_dict({"lake": str(lake)}))
    duck = Warehouse.open(path, read_only=True)
    duck.derive_holdings()  # derive the holdings from the order lines, as Spark does
    meter = Metered(spark.engine)
    mine_rules(spark, args.target, counting="memory", max_antecedent=1)  # warm the session
    runs: dict[str, list[float]] = {"duckdb memory": [], "spark memory": [], "spark engine": []}
    sent: dict[str, tuple[int, int]] = {}
    frames: dict[str, Any] = {}
    step, total = 0, 3 * args.repeats
    for r in range(args.repeats):
        for name, wh, counting in (
            ("duckdb memory", duck, "memory"),
            ("spark memory", spark, "memory"),
            ("spark engine", spark, "engine"),
        ):
            step += 1
            print(f"step {step} of {total}: {name} (run {r + 1})", file=sys.stderr, flush=True)
            meter.rows = meter.bytes = 0
            started = time.perf_counter()
            rs = mine_rules(wh, args.target, counting=counting)
            runs[name].append(time.perf_counter() - started)
            sent[name] = (meter.rows, meter.bytes)
            frames[name] = rs.frame
    assert_frame_equal(frames["spark engine"], frames["spark memory"])
    assert_frame_equal(frames["spark engine"], frames["duckdb memory"])
    med = {k: statistics.median(v) for k, v in runs.items()}
    print(
        f"{args.customers:,} customers; rules {args.target} with every default; medians of "
        f"{args.repeats} runs; {frames['spark engine'].height:,} rules, equal all three ways"
    )
    base = med["spark memory"]
    for name, seconds in med.items():
        line = f"  {name:<14} {seconds:8.2f} s"
        if name.startswith("spark"):
            rows, size = sent[name]
            line += (
                f"   {seconds / base:5.2f}x   to the driver: {rows:,} rows, {size / 2**20:.1f} MiB"
            )
        print(line)
    spark.close()
    duck.close()


if __name__ == "__main__":
    main()
