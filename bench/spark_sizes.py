"""The same `sizes` on DuckDB and on Spark in local mode, timed in one run, as a ratio.

Run by hand (not a test):

    .venv/bin/python bench/spark_sizes.py                        # 200,000 customers, local[2]
    .venv/bin/python bench/spark_sizes.py --customers 20000 --repeats 1 --master 'local[4]'

It builds the sample warehouse of the given size under bench/results/ when missing, exports its
five contract tables to Parquet (one file per table, as a data lake would hold them) and times,
each in a fresh process, ``reachlist sizes SG04-104`` with the default estimate:

  duckdb    on the DuckDB file, deriving the holdings inside each query (no holdings file), so
            both engines do the same work from the order lines;
  spark     on ``spark://MASTER`` with a mapping ``lake = FOLDER`` (JVM start included);

checks that both print the same list and estimate, and prints medians and the ratio.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
from rules_speed import TARGET, warehouse  # noqa: E402

REACHLIST = str(Path(sys.executable).with_name("reachlist"))
TABLES = ("customers", "products", "orders", "order_lines", "suppressions")
SAME = ("reached", "waterfall", "listed", "treatment", "holdout", "rules")


def export(path: Path) -> Path:
    import duckdb

    lake = path.with_name(path.name.removesuffix(".duckdb") + "-lake")
    lake.mkdir(exist_ok=True)
    with duckdb.connect(str(path), read_only=True) as con:
        for table in TABLES:
            if not (lake / f"{table}.parquet").exists():
                con.execute(f"COPY {table} TO '{lake / table}.parquet' (FORMAT parquet)")
    (lake / "mapping.toml").write_text(f'lake = "{lake}"\n')
    return lake


def sizes(args: list[str]) -> tuple[float, dict[str, object]]:
    started = time.perf_counter()
    done = subprocess.run(
        [REACHLIST, "sizes", TARGET, "--json", "--until", "2026-10-01", *args],
        capture_output=True,
        text=True,
        check=False,
    )
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        raise SystemExit(f"reachlist sizes {' '.join(args)} failed:\n{done.stdout}\n{done.stderr}")
    return seconds, json.loads(done.stdout)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--customers", type=int, default=200_000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--master", default="local[2]")
    args = ap.parse_args()
    path = warehouse(args.customers)
    lake = export(path)
    side = path.with_name(path.name.removesuffix(".duckdb") + ".holdings.duckdb")
    moved = side.with_name(side.name + ".away")
    if side.exists():
        os.replace(side, moved)
    runs: dict[str, list[float]] = {"duckdb": [], "spark": []}
    answers: dict[str, dict[str, object]] = {}
    try:
        step, total = 0, 2 * args.repeats
        for r in range(args.repeats):  # interleaved: a noisy minute hits both alike
            for name, where in (
                ("duckdb", ["-w", str(path)]),
                ("spark", ["-w", f"spark://{args.master}", "-m", str(lake / "mapping.toml")]),
            ):
                step += 1
                print(f"step {step} of {total}: {name} (run {r + 1})", file=sys.stderr, flush=True)
                seconds, answer = sizes(where)
                runs[name].append(seconds)
                answers[name] = answer
    finally:
        if moved.exists():
            os.replace(moved, side)
    for key in SAME:
        if answers["duckdb"][key] != answers["spark"][key]:
            raise SystemExit(f"DuckDB and Spark disagree on {key}")
    d, s = (answers[n]["baseline_buyers"] for n in ("duckdb", "spark"))
    assert isinstance(d, dict) and isinstance(s, dict)
    if abs(float(d["expected_buyers"]) - float(s["expected_buyers"])) > 1e-6:
        raise SystemExit("DuckDB and Spark disagree on the estimate")
    med = {k: statistics.median(v) for k, v in runs.items()}
    print(
        f"{args.customers:,} customers; sizes {TARGET} with the default estimate; medians of "
        f"{args.repeats} runs; same list, waterfall and estimate on both"
    )
    print(f"  duckdb (no holdings file)   {med['duckdb']:8.1f} s")
    print(f"  spark {args.master:<20} {med['spark']:8.1f} s   {med['spark'] / med['duckdb']:.1f}x")


if __name__ == "__main__":
    main()
