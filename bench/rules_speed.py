"""Speed and memory of rules toward one target: reachlist against pyfim, from the warehouse.

Run by hand (not a test):

    .venv/bin/python bench/rules_speed.py                    # 20k, 100k and 1M customers
    .venv/bin/python bench/rules_speed.py --sizes 20000 --repeats 5

For each size it builds the sample warehouse (cached under bench/results/), then times, each run
in a fresh process so peak memory is that run's own:

  (a) reachlist: ``mine_rules(wh, TARGET)`` from the warehouse file to the rule table;
  (b) pyfim (C, the fastest reference library measured in planning): the same baskets extracted
      with the same SQL, handed to ``fim.fpgrowth`` for every itemset of up to k + 1 items at the
      same minimum support, then the rules toward the target kept.

It prints medians over the repeats, peak resident memory, and the ratio b/a (higher is better for
reachlist). Both sides include reading the warehouse (the same SQL, which dominates at every
size); "mining only" compares the in-memory part alone: from the extracted pairs to the rules for
reachlist, from the transaction lists to the rules for pyfim.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
TARGET = "SG04-104"
MIN_SUPPORT = 0.002
MAX_ANTECEDENT = 3

RUN_REACHLIST = """
import json, resource, time
t0 = time.perf_counter()
from reachlist.rules import mine_rules
from reachlist.warehouse import Warehouse
marks = {{}}
def progress(msg):
    marks.setdefault("counting" if msg.startswith("Counting") else "reading", time.perf_counter())
with Warehouse.open({path!r}, read_only=True) as wh:
    rs = mine_rules(wh, {target!r}, min_support={min_support}, min_lift=0.0,
                    max_antecedent={k}, keep_unproductive=True, progress=progress)
end = time.perf_counter()
print(json.dumps({{"seconds": end - t0, "rules": rs.frame.height,
                  "mine_seconds": end - marks["counting"],
                  "peak_mib": own_peak_mib()}}))
"""

RUN_PYFIM = """
import json, math, resource, time
t0 = time.perf_counter()
import fim
import polars as pl
from reachlist.targets import held_items_query, mining_window
from reachlist.warehouse import Warehouse
with Warehouse.open({path!r}, read_only=True) as wh:
    pairs = wh.fetch(held_items_query(mining_window(wh)))
tracts = pairs.group_by("basket").agg(pl.col("item")).get_column("item").to_list()
n = len(tracts)
min_count = math.ceil({min_support} * n - 1e-9)
t1 = time.perf_counter()
sets = fim.fpgrowth(tracts, target="s", supp=-min_count, zmin=1, zmax={k} + 1, report="a")
count = {{frozenset(s): c for s, c in sets}}
y = {target!r}
rules = [(s - {{y}}, c) for s, c in count.items() if y in s and len(s) > 1]
n_y = count[frozenset([y])]
out = [(x, c, count[x], c / count[x], c / count[x] / (n_y / n)) for x, c in rules]
end = time.perf_counter()
print(json.dumps({{"seconds": end - t0, "rules": len(out), "mine_seconds": end - t1,
                  "itemsets": len(count),
                  "peak_mib": own_peak_mib()}}))
"""


OWN_PEAK = """
import resource


def own_peak_mib():
    # VmHWM, this process's own high-water mark. Not ru_maxrss: on Linux a child's ru_maxrss
    # starts from its parent's peak (carried across fork and exec), so a bench parent that built
    # a warehouse would lend every step its own peak.
    try:
        with open("/proc/self/status") as status:
            return next(int(x.split()[1]) for x in status if x.startswith("VmHWM")) / 1024
    except (OSError, StopIteration):
        return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
"""
"""Prepended to every child's code: its peak resident memory in MiB."""


def run(code: str) -> dict[str, float]:
    code = OWN_PEAK + code
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    if done.returncode != 0:
        raise SystemExit(f"benchmark child failed:\n{done.stderr}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def warehouse(customers: int) -> Path:
    from reachlist.sample import build_sample

    path = HERE / "results" / f"garden-{customers}.duckdb"
    path.parent.mkdir(exist_ok=True)
    if not path.exists():
        t0 = time.perf_counter()
        s = build_sample(path, customers=customers)
        print(
            f"  built {path.name}: {s.order_lines:,} order lines, "
            f"{s.file_bytes / 2**20:.0f} MiB in {time.perf_counter() - t0:.1f} s",
            flush=True,
        )
    return path


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[20_000, 100_000, 1_000_000])
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument(
        "--skip-pyfim-above",
        type=int,
        default=10**9,
        help="skip pyfim for larger warehouses (it can take long)",
    )
    args = ap.parse_args()
    print(
        f"target {TARGET}, customer baskets, min support {MIN_SUPPORT}, antecedents up to "
        f"{MAX_ANTECEDENT} items (pyfim mines itemsets up to {MAX_ANTECEDENT + 1}); "
        f"medians of {args.repeats} runs"
    )
    rows = []
    for customers in args.sizes:
        path = warehouse(customers)
        opts = dict(path=str(path), target=TARGET, min_support=MIN_SUPPORT, k=MAX_ANTECEDENT)
        ours = [run(RUN_REACHLIST.format(**opts)) for _ in range(args.repeats)]
        a = statistics.median(r["seconds"] for r in ours)
        a_mine = statistics.median(r["mine_seconds"] for r in ours)
        a_mem = max(r["peak_mib"] for r in ours)
        line = (
            f"{customers:>9,} customers  reachlist {a:7.2f} s  peak {a_mem:6.0f} MiB  "
            f"rules {int(ours[0]['rules']):,}"
        )
        if customers <= args.skip_pyfim_above:
            ref = [run(RUN_PYFIM.format(**opts)) for _ in range(args.repeats)]
            b = statistics.median(r["seconds"] for r in ref)
            b_mine = statistics.median(r["mine_seconds"] for r in ref)
            b_mem = max(r["peak_mib"] for r in ref)
            line += (
                f" | pyfim {b:7.2f} s  peak {b_mem:6.0f} MiB  rules {int(ref[0]['rules']):,}"
                f"  itemsets {int(ref[0]['itemsets']):,} | b/a {b / a:5.1f}"
                f" | mining only: {a_mine:.2f} s vs {b_mine:.2f} s, b/a {b_mine / a_mine:5.1f}"
            )
            rows.append((customers, a, b, b / a))
        print(line, flush=True)


if __name__ == "__main__":
    main()
