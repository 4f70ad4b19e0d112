"""Micro-benchmark: reachlist's in-memory mining engine against pyfim (C) on the same baskets.

Run by hand:  .venv/bin/python bench/mining_engines.py [--baskets 1000000] [--runs 3]

Baskets are generated (invented data): ~250 items with skewed (Zipf-like) popularity, ~15 items
per basket on average, and 20 shopper segments that each favour a few items, so that items are
correlated the way real baskets are. Reports medians over --runs runs, and peak RSS.

Compared:
- target_rules (reachlist): rules X -> y, |X| <= 3, min support 0.1%, for one mid-popular y;
- frequent_itemsets (reachlist) vs fim.fpgrowth / fim.eclat: every itemset up to 4 items;
- the pyfim route to the same rules: mine every itemset up to 4 items, keep those holding y.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from reachlist.baskets import Baskets
from reachlist.mining import frequent_itemsets, target_rules


def generate(
    n_baskets: int, n_items: int = 250, mean_size: float = 15.0, n_segments: int = 20, seed: int = 7
) -> tuple[np.ndarray, np.ndarray]:
    """(basket, item) lines of invented baskets; items may repeat inside a basket."""
    rng = np.random.default_rng(seed)
    base = 1.0 / np.arange(1, n_items + 1) ** 0.8
    rng.shuffle(base)
    seg_of = rng.integers(0, n_segments, n_baskets)
    # draw a little more than mean_size lines: repeats inside a basket collapse
    sizes = np.maximum(1, rng.poisson(mean_size * 1.2, n_baskets))
    b_parts, i_parts = [], []
    for g in range(n_segments):
        w = base.copy()
        fav = rng.choice(n_items, 8, replace=False)
        w[fav] *= rng.uniform(4, 12, fav.size)
        w /= w.sum()
        rows = np.flatnonzero(seg_of == g)
        lens = sizes[rows]
        b_parts.append(np.repeat(rows, lens))
        i_parts.append(rng.choice(n_items, size=int(lens.sum()), p=w))
    return np.concatenate(b_parts), np.concatenate(i_parts)


def pick_target(baskets: Baskets, share: float = 0.05) -> str:
    """A mid-popular item: the one whose share of baskets is closest to ``share``."""
    shares = baskets.item_counts / baskets.n_baskets
    return str(baskets.labels[int(np.argmin(np.abs(shares - share)))])


def median_time(fn, runs: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(runs):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return statistics.median(times), out


def traced_peak_mib(fn) -> float:
    """Peak of memory allocated (numpy included) while ``fn`` runs, in MiB."""
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def peak_rss_mib() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baskets", type=int, default=1_000_000)
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--min-support", type=float, default=0.001)
    ap.add_argument("--target-share", type=float, default=0.05)
    ap.add_argument("--skip-pyfim", action="store_true")
    ap.add_argument("--skip-full", action="store_true", help="skip full frequent-itemset mining")
    ap.add_argument(
        "--sweep",
        action="store_true",
        help="also time target_rules for targets of several popularities",
    )
    args = ap.parse_args()

    b, i = generate(args.baskets)
    print(f"generated {args.baskets:,} baskets, {b.size:,} lines")
    t_build, baskets = median_time(lambda: Baskets.from_arrays(b, i), args.runs)
    build_mem = traced_peak_mib(lambda: Baskets.from_arrays(b, i))
    n = baskets.n_baskets
    min_count = int(np.ceil(args.min_support * n))
    print(f"{baskets!r}; mean basket size {baskets.indices.size / n:.2f}; min_count {min_count}")
    held = baskets.nbytes / 2**20
    print(
        f"Baskets.from_arrays           {t_build:8.3f} s   (holds {held:,.0f} MiB; "
        f"allocates at most {build_mem:,.0f} MiB)"
    )

    target = pick_target(baskets, args.target_share)
    y = baskets.item_index(target)
    print(
        f"target {target!r}: in {baskets.item_counts[y]:,} baskets "
        f"({baskets.item_counts[y] / n:.2%})"
    )
    t_rules, rules = median_time(
        lambda: target_rules(
            baskets, target, min_count=min_count, max_antecedent=3, keep_unproductive=True
        ),
        args.runs,
    )
    n_prod = int(rules["productive"].sum())
    mem = traced_peak_mib(lambda: target_rules(baskets, target, min_count=min_count))
    print(
        f"target_rules (|X|<=3)         {t_rules:8.3f} s   {rules.height:,} rules "
        f"({n_prod:,} productive; allocates at most {mem:,.0f} MiB)"
    )

    if args.sweep:
        for share in (0.005, 0.02, 0.1, 0.2, 0.4, 1.0):
            tg = pick_target(baskets, share)
            t_s, out = median_time(
                lambda tg=tg: target_rules(
                    baskets, tg, min_count=min_count, keep_unproductive=True
                ),
                args.runs,
            )
            k = baskets.item_index(tg)
            print(
                f"  target in {baskets.item_counts[k] / n:6.1%} of baskets: {t_s:7.3f} s, "
                f"{out.height:,} rules"
            )

    if not args.skip_full:
        t_fi, fi = median_time(lambda: frequent_itemsets(baskets, min_count, 4), args.runs)
        mem = traced_peak_mib(lambda: frequent_itemsets(baskets, min_count, 4))
        print(
            f"frequent_itemsets (<=4 items) {t_fi:8.3f} s   {fi.height:,} itemsets "
            f"(allocates at most {mem:,.0f} MiB)"
        )
        print(f"Baskets now holds {baskets.nbytes / 2**20:,.0f} MiB (indexes + bitmap rows built)")

    if args.skip_pyfim:
        return
    import fim

    t = time.perf_counter()
    starts = baskets.indptr
    labels = baskets.labels
    tracts = [labels[baskets.indices[starts[k] : starts[k + 1]]].tolist() for k in range(n)]
    print(f"(building pyfim's input lists took {time.perf_counter() - t:.1f} s; not timed below)")
    for name, algo in (("fpgrowth", fim.fpgrowth), ("eclat", fim.eclat)):
        t_fim, out = median_time(
            lambda algo=algo: algo(tracts, supp=-min_count, zmin=1, zmax=4, report="a"), args.runs
        )
        print(f"fim.{name} (<=4 items)      {t_fim:8.3f} s   {len(out):,} itemsets")

    def fim_route():
        out = fim.fpgrowth(tracts, supp=-min_count, zmin=2, zmax=4, report="a")
        return [(s, c) for s, c in out if target in s]

    t_route, route = median_time(fim_route, args.runs)
    print(
        f"pyfim route to the same rules  {t_route:8.3f} s   {len(route):,} itemsets holding "
        f"the target -> speed-up of target_rules: {t_route / t_rules:,.1f}x"
    )
    print(f"peak RSS {peak_rss_mib():,.0f} MiB")


if __name__ == "__main__":
    main()
