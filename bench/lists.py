"""Wall time of `reachlist sizes` and `reachlist build` on a large sample warehouse.

Run by hand (not a test):

    .venv/bin/python bench/lists.py      # bench/results/garden-1000000.duckdb (bench/rules_speed.py builds it)
    .venv/bin/python bench/lists.py --warehouse bench/results/garden-20000.duckdb --repeats 3

Each run is the real command in a fresh process (imports, rule mining, the audience SQL, the
exclusions, the holdout and, for build, the file and the campaign log), so the figures are what
an analyst waits for. The warehouse is opened as given and never written: build keeps its
campaign log in a temporary state file (--state). Targets: sizes < 30 s, build < 60 s.

Then, in this process, the same work split into its phases: mining the rules, the audience query,
and everything after it.
"""

from __future__ import annotations

import argparse
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
REACHLIST = str(Path(sys.executable).with_name("reachlist"))
CASES = [
    ("introduce the heated mat", ["SG04-104"]),
    ("clear the frost fleece", ["GP20-101", "--purpose", "clear"]),
]
TARGETS = {"sizes": 30.0, "build": 60.0}


def timed(args: list[str]) -> tuple[float, float]:
    """Seconds and peak resident MiB of one command in a fresh process."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
    started = time.perf_counter()
    done = subprocess.run(args, check=False, capture_output=True, text=True)
    seconds = time.perf_counter() - started
    if done.returncode != 0:
        sys.exit(f"{' '.join(args)} failed:\n{done.stdout}\n{done.stderr}")
    peak = max(before, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss) / 1024
    return seconds, peak


def phases(warehouse: str, target_args: list[str]) -> str:
    from reachlist.lists import preview_list
    from reachlist.planning import ListRequest, plan_list
    from reachlist.warehouse import Warehouse

    purpose = "clear" if "clear" in target_args else "introduce"
    with Warehouse.open(warehouse, read_only=True) as wh:
        t0 = time.perf_counter()
        plan = plan_list(wh, ListRequest(target_args[0], purpose=purpose, campaign_id="bench"))
        t1 = time.perf_counter()
        frame = wh.fetch(plan.query())
        t2 = time.perf_counter()
        outcome = preview_list(wh, plan)
        t3 = time.perf_counter()
    return (
        f"mining {t1 - t0:.1f} s, audience query {t2 - t1:.1f} s ({frame.height:,} customers "
        f"reached), preview incl. per-rule reach {t3 - t2:.1f} s; list {outcome.listed.height:,}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--warehouse", default=str(HERE / "results" / "garden-1000000.duckdb"))
    parser.add_argument("--repeats", type=int, default=2)
    parser.add_argument(
        "--extra",
        default="",
        help="options added to sizes and build, e.g. '--cutoffs 2' or '--no-estimate'",
    )
    opts = parser.parse_args()
    if not Path(opts.warehouse).exists():
        sys.exit(
            f"{opts.warehouse} does not exist; build it with "
            f"`reachlist sample --customers 1000000 --out {opts.warehouse}`"
        )
    extra = opts.extra.split()
    print(
        f"warehouse {opts.warehouse}, {opts.repeats} repeat(s), median wall time, "
        f"options: {' '.join(extra) or '(defaults)'}"
    )
    failed = False
    with tempfile.TemporaryDirectory() as tmp:
        for label, target_args in CASES:
            for command in ("sizes", "build"):
                runs = []
                for i in range(opts.repeats):
                    args = [REACHLIST, command, *target_args, "-w", opts.warehouse, *extra]
                    if command == "build":
                        args += [
                            "--out",
                            f"{tmp}/list-{i}.parquet",
                            "--force",
                            "--state",
                            f"{tmp}/state.duckdb",
                            "--replace",
                            "--campaign",
                            "bench",
                        ]
                    runs.append(timed(args))
                seconds = statistics.median(r[0] for r in runs)
                peak = max(r[1] for r in runs)
                ok = seconds < TARGETS[command]
                failed |= not ok
                print(
                    f"  {command:<6} {label:<26} {seconds:6.1f} s  peak {peak:7,.0f} MiB  "
                    f"(target < {TARGETS[command]:.0f} s: {'met' if ok else 'MISSED'})"
                )
            print(f"         phases: {phases(opts.warehouse, target_args)}")
    sys.exit(1 if failed else 0)


if __name__ == "__main__":
    main()
