"""Tests of the sample warehouse generator (reachlist.sample).

Planted rates are measured back from the generated tables with plain DuckDB SQL.
Tolerance: 4 binomial standard errors of the measured share, computed at the TRUE rate:
    holders lacking the target: SE = sqrt(h (1 - h) / n), h = the rule's hazard_30d;
    everyone else (base):       SE = sqrt(sum p_i (1 - p_i)) / n, p_i = the exact 30-day purchase
                                probability of customer i given its breadth and, for customers who
                                start to hold the antecedent inside the window, the switch time.
Pooled over monthly cutoffs the same bound holds (each customer-month is a Bernoulli trial with
probability p given the past, so the sum of outcomes minus p is a martingale with that variance).
With a fixed seed the outcome is deterministic; 4 SE keeps a reseeded build passing with
probability > 99.9% per check.
"""

from __future__ import annotations

import math
import os
import re
from datetime import date
from pathlib import Path

import duckdb
import pytest

from reachlist.errors import InputError, StateError
from reachlist.sample import KEY_SKUS, PLANTED_RULES, SampleSummary, build_sample, planted_rules

SMALL = 2_000
CUTOFF = "2026-07-01"  # history up to and including 2026-06-30; window 2026-07-01 .. 2026-07-30
TOL_SE = 4.0

CONTRACT = {
    "customers": [
        ("customer_id", "BIGINT"),
        ("email", "VARCHAR"),
        ("marketing_consent", "BOOLEAN"),
        ("consent_date", "DATE"),
        ("birth_date", "DATE"),
        ("region", "VARCHAR"),
    ],
    "products": [
        ("sku", "VARCHAR"),
        ("name", "VARCHAR"),
        ("category", "VARCHAR"),
        ("department", "VARCHAR"),
        ("age_restricted", "BOOLEAN"),
        ("sensitive", "BOOLEAN"),
        ("launch_date", "DATE"),
        ("stock_on_hand", "INTEGER"),
    ],
    "orders": [
        ("order_id", "BIGINT"),
        ("customer_id", "BIGINT"),
        ("ordered_at", "TIMESTAMP"),
        ("channel", "VARCHAR"),
    ],
    "order_lines": [
        ("order_id", "BIGINT"),
        ("sku", "VARCHAR"),
        ("quantity", "INTEGER"),
        ("net_amount", "DECIMAL(12,2)"),
    ],
    "suppressions": [("customer_id", "BIGINT"), ("reason", "VARCHAR"), ("suppressed_at", "DATE")],
}
ALL_TABLES = [
    *CONTRACT,
    "sample_meta",
    "sample_rules",
    "sample_customer_truth",
    "sample_planted",
    "sample_planted_campaigns",
]
# the sample's campaign history, in the tool's own log tables (reachlist.sample.past_campaigns)
LOG_TABLES = ["campaigns", "campaign_contacts"]


# ------------------------------------------------------------------------------------------
# fixtures: one default-size warehouse and three small ones per session
# ------------------------------------------------------------------------------------------


@pytest.fixture(scope="session")
def default_build(tmp_path_factory) -> tuple[Path, SampleSummary]:
    path = tmp_path_factory.mktemp("sample") / "default.duckdb"
    return path, build_sample(path)


@pytest.fixture(scope="session")
def con(default_build):
    c = duckdb.connect(str(default_build[0]), read_only=True)
    yield c
    c.close()


@pytest.fixture(scope="session")
def small_builds(tmp_path_factory) -> dict[str, Path]:
    d = tmp_path_factory.mktemp("small")
    out = {}
    for key, seed in (("a", 7), ("a2", 7), ("b", 8)):
        out[key] = d / f"{key}.duckdb"
        build_sample(out[key], customers=SMALL, seed=seed)
    return out


def one(con, sql: str, params=None):
    return con.execute(sql, params or []).fetchone()


# ------------------------------------------------------------------------------------------
# summary, contract, determinism, file handling
# ------------------------------------------------------------------------------------------


def test_summary_matches_file(default_build, con):
    path, s = default_build
    assert s.path == str(path) and s.customers == 20_000 and s.seed == 7
    assert s.file_bytes == path.stat().st_size > 0
    assert s.build_seconds > 0
    for table, n in (
        ("customers", s.customers),
        ("products", s.products),
        ("orders", s.orders),
        ("order_lines", s.order_lines),
        ("suppressions", s.suppressions),
    ):
        assert one(con, f"SELECT count(*) FROM {table}")[0] == n
    lo, hi = one(con, "SELECT min(ordered_at), max(ordered_at) FROM orders")
    assert (lo, hi) == (s.first_order_at, s.last_order_at)
    assert lo.date() >= date(2025, 1, 1) and hi.date() <= date(2026, 9, 30)
    assert (hi - lo).days >= 18 * 30
    assert s.order_lines > 15 * s.customers  # about 20 lines per customer
    assert sorted(os.listdir(path.parent)) == [path.name]  # no temp or WAL files left


def test_contract_tables_and_types(con):
    for table, columns in CONTRACT.items():
        got = [(r[0], r[1]) for r in con.execute(f"DESCRIBE {table}").fetchall()]
        assert got == columns, table
    names = {r[0] for r in con.execute("SHOW TABLES").fetchall()}
    assert names == set(ALL_TABLES) | set(LOG_TABLES)
    assert {r[0] for r in con.execute("SELECT DISTINCT channel FROM orders").fetchall()} == {
        "store",
        "online",
    }


def test_keys_and_references(con):
    assert one(con, "SELECT count(*) - count(DISTINCT customer_id) FROM customers")[0] == 0
    assert one(con, "SELECT count(*) - count(DISTINCT order_id) FROM orders")[0] == 0
    assert one(con, "SELECT count(*) - count(DISTINCT sku) FROM products")[0] == 0
    assert (
        one(
            con,
            """SELECT count(*) FROM orders o WHERE NOT EXISTS
                       (SELECT 1 FROM customers c WHERE c.customer_id = o.customer_id)""",
        )[0]
        == 0
    )
    assert (
        one(
            con,
            """SELECT count(*) FROM order_lines l WHERE NOT EXISTS
                       (SELECT 1 FROM orders o WHERE o.order_id = l.order_id)""",
        )[0]
        == 0
    )
    assert (
        one(
            con,
            """SELECT count(*) FROM suppressions s WHERE NOT EXISTS
                       (SELECT 1 FROM customers c WHERE c.customer_id = s.customer_id)""",
        )[0]
        == 0
    )
    # order ids increase with time
    assert (
        one(
            con,
            """SELECT count(*) FROM (SELECT ordered_at,
                       lag(ordered_at) OVER (ORDER BY order_id) AS prev FROM orders)
                       WHERE ordered_at < prev""",
        )[0]
        == 0
    )
    # store orders in opening hours (a few minutes' slack after a planted purchase)
    assert (
        one(
            con,
            """SELECT count(*) FROM orders WHERE channel = 'store'
                       AND (hour(ordered_at) < 8 OR hour(ordered_at) > 21)""",
        )[0]
        == 0
    )


def _dump(path: Path) -> dict[str, list]:
    c = duckdb.connect(str(path), read_only=True)
    try:
        return {
            t: c.execute(f"SELECT * FROM {t} ORDER BY ALL").fetchall()
            for t in [*ALL_TABLES, *LOG_TABLES]
        }
    finally:
        c.close()


def test_same_seed_gives_identical_tables(small_builds):
    a, a2 = _dump(small_builds["a"]), _dump(small_builds["a2"])
    for t in ALL_TABLES:
        assert a[t] == a2[t], t


def test_different_seed_differs(small_builds):
    a, b = _dump(small_builds["a"]), _dump(small_builds["b"])
    assert a["products"] == b["products"]  # the catalogue is fixed
    for t in ("customers", "orders", "order_lines", "sample_planted"):
        assert a[t] != b[t], t


def test_refuses_to_overwrite(small_builds, tmp_path):
    target = tmp_path / "w.duckdb"
    target.write_bytes(b"keep me")
    with pytest.raises(StateError) as err:
        build_sample(target, customers=600)
    assert "overwrite=True" in str(err.value) and "existing file" in str(err.value)
    assert target.read_bytes() == b"keep me"
    s = build_sample(target, customers=600, seed=3, overwrite=True)
    assert s.customers == 600
    c = duckdb.connect(str(target), read_only=True)
    try:
        assert one(c, "SELECT count(*) FROM customers")[0] == 600
    finally:
        c.close()
    assert sorted(os.listdir(tmp_path)) == ["w.duckdb"]


@pytest.mark.parametrize("kwargs", [{"customers": 10}, {"customers": 2.5}, {"seed": -1}])
def test_rejects_bad_input(tmp_path, kwargs):
    with pytest.raises(InputError):
        build_sample(tmp_path / "x.duckdb", **kwargs)
    assert not (tmp_path / "x.duckdb").exists()


def test_rejects_directory_and_missing_parent(tmp_path):
    with pytest.raises(StateError):
        build_sample(tmp_path)
    with pytest.raises(InputError):
        build_sample(tmp_path / "no" / "such" / "x.duckdb")


# ------------------------------------------------------------------------------------------
# catalogue
# ------------------------------------------------------------------------------------------


def test_catalogue_shape(con):
    n, cats, depts = one(
        con,
        """SELECT count(*), count(DISTINCT category),
                                 count(DISTINCT department) FROM products""",
    )
    assert 120 <= n <= 250 and 25 <= cats <= 40 and 6 <= depts <= 8
    skus = [r[0] for r in con.execute("SELECT sku FROM products").fetchall()]
    assert all(re.fullmatch(r"[A-Z]{2}\d{2}-\d{3}", s) for s in skus)
    assert set(KEY_SKUS.values()) <= set(skus)
    # every category belongs to one department
    assert (
        one(
            con,
            """SELECT max(n) FROM (SELECT count(DISTINCT department) n
                       FROM products GROUP BY category)""",
        )[0]
        == 1
    )


def test_sensitive_and_age_restricted(con):
    rows = con.execute("""SELECT category, bool_and(sensitive), bool_or(sensitive)
                          FROM products GROUP BY category""").fetchall()
    sensitive = [c for c, all_, any_ in rows if any_]
    assert len(sensitive) == 1 and all(all_ for c, all_, any_ in rows if any_)
    restricted = {
        r[0] for r in con.execute("SELECT sku FROM products WHERE age_restricted").fetchall()
    }
    assert 3 <= len(restricted) <= 12 and KEY_SKUS["butane_refill"] in restricted


def test_new_item_without_history_and_recent_launches(con):
    sku = KEY_SKUS["self_watering_planter"]
    cat, launch = one(con, "SELECT category, launch_date FROM products WHERE sku = ?", [sku])
    assert launch == date(2026, 9, 28)
    assert one(con, "SELECT count(*) FROM order_lines WHERE sku = ?", [sku])[0] == 0
    assert (
        one(
            con,
            """SELECT count(*) FROM order_lines l JOIN products p USING (sku)
                       WHERE p.category = ?""",
            [cat],
        )[0]
        > 1_000
    )  # the stand-in has history
    recent = one(con, "SELECT count(*) FROM products WHERE launch_date > DATE '2026-01-01'")[0]
    assert recent >= 3
    assert (
        one(
            con,
            """SELECT count(*) FROM order_lines l JOIN orders o USING (order_id)
                       JOIN products p USING (sku) WHERE o.ordered_at < p.launch_date""",
        )[0]
        == 0
    )


def test_stock(con):
    assert (
        one(con, "SELECT stock_on_hand FROM products WHERE sku = ?", [KEY_SKUS["frost_fleece"]])[0]
        == 1200
    )
    assert one(con, "SELECT min(stock_on_hand) FROM products")[0] >= 0


# ------------------------------------------------------------------------------------------
# quirks
# ------------------------------------------------------------------------------------------


def _meta(con) -> dict[str, str]:
    return dict(con.execute("SELECT key, value FROM sample_meta").fetchall())


def test_returns_follow_a_purchase(con):
    n_ret = one(con, "SELECT count(*) FROM order_lines WHERE quantity < 0")[0]
    assert n_ret > 1_000
    # every return line has an earlier purchase of that SKU by the same customer
    assert (
        one(
            con,
            """
        WITH l AS (SELECT o.customer_id, o.ordered_at, l.sku, l.quantity
                   FROM order_lines l JOIN orders o USING (order_id))
        SELECT count(*) FROM l AS r WHERE r.quantity < 0 AND NOT EXISTS (
            SELECT 1 FROM l AS b WHERE b.customer_id = r.customer_id AND b.sku = r.sku
              AND b.quantity > 0 AND b.ordered_at < r.ordered_at)""",
        )[0]
        == 0
    )
    # some returns cancel the whole purchase: bought, but the net quantity is zero
    cancelled = one(
        con,
        """
        SELECT count(*) FROM (SELECT o.customer_id, l.sku FROM order_lines l
            JOIN orders o USING (order_id) GROUP BY ALL
            HAVING sum(l.quantity) FILTER (WHERE l.quantity > 0) > 0
               AND sum(l.quantity) <= 0)""",
    )[0]
    assert cancelled > 500
    assert int(_meta(con)["quirk.return_lines"]) == n_ret


def test_line_quirks(con):
    meta = _meta(con)
    dup = one(
        con,
        """SELECT count(*) - (SELECT count(*) FROM (SELECT DISTINCT order_id, sku,
                      quantity, net_amount FROM order_lines)) FROM order_lines""",
    )[0]
    assert 10 <= dup == int(meta["quirk.duplicate_lines"])
    unknown = one(
        con,
        """SELECT count(*) FROM order_lines l WHERE NOT EXISTS
                          (SELECT 1 FROM products p WHERE p.sku = l.sku)""",
    )[0]
    assert 10 <= unknown == int(meta["quirk.unknown_sku_lines"])
    zero = one(con, "SELECT count(*) FROM order_lines WHERE quantity = 0")[0]
    assert 5 <= zero == int(meta["quirk.zero_quantity_lines"])
    # planted SKUs are never given unknown codes, zero quantities or full antecedent returns
    planted = [s for r in PLANTED_RULES for s in r["antecedent"]] + [
        r["target"] for r in PLANTED_RULES
    ]
    assert (
        one(
            con,
            """SELECT count(*) FROM order_lines l JOIN products p USING (sku)
                       WHERE l.quantity = 0 AND (p.sku IN (SELECT unnest(?))
                       OR p.category IN (SELECT unnest(?)))""",
            [planted, planted],
        )[0]
        == 0
    )


def test_customer_quirks(con):
    meta = _meta(con)
    no_consent, no_age, no_email, withdrawn, minors, n = one(
        con,
        """
        SELECT count(*) FILTER (WHERE NOT marketing_consent),
               count(*) FILTER (WHERE birth_date IS NULL),
               count(*) FILTER (WHERE email IS NULL),
               count(*) FILTER (WHERE NOT marketing_consent AND consent_date IS NOT NULL),
               count(*) FILTER (WHERE birth_date > DATE '2008-09-30'),
               count(*) FROM customers""",
    )
    assert 0.2 * n < no_consent == int(meta["quirk.customers_without_consent"]) < 0.4 * n
    assert 0.08 * n < no_age == int(meta["quirk.customers_age_unknown"]) < 0.2 * n
    assert 0.04 * n < no_email == int(meta["quirk.customers_without_email"]) < 0.12 * n
    assert withdrawn > 0 and minors > 0
    assert (
        one(
            con,
            """SELECT count(*) FROM customers WHERE marketing_consent
                       AND consent_date IS NULL""",
        )[0]
        == 0
    )
    supp, distinct, consenting = one(
        con,
        """
        SELECT count(*), count(DISTINCT s.customer_id),
               count(DISTINCT s.customer_id) FILTER (WHERE c.marketing_consent)
        FROM suppressions s JOIN customers c USING (customer_id)""",
    )
    assert 0.01 * n < distinct < 0.05 * n and supp > distinct and consenting > 0
    assert (
        one(
            con,
            """SELECT count(*) FROM customers c WHERE NOT EXISTS
                       (SELECT 1 FROM orders o WHERE o.customer_id = c.customer_id)""",
        )[0]
        > 0
    )


# ------------------------------------------------------------------------------------------
# planted rules
# ------------------------------------------------------------------------------------------


def test_planted_rules_description(con):
    rules = planted_rules()
    assert len(rules) >= 5
    rules[0]["hazard_30d"] = 0.99  # a copy: the module constant is untouched
    assert planted_rules()[0]["hazard_30d"] == PLANTED_RULES[0]["hazard_30d"] != 0.99
    table = con.execute("""SELECT rule_id, antecedent_level, antecedent, target_level, target,
                           hazard_30d, base_hazard_30d, purpose FROM sample_rules
                           ORDER BY rule_id""").fetchall()
    want = sorted(
        (
            r["rule_id"],
            r["antecedent_level"],
            list(r["antecedent"]),
            r["target_level"],
            r["target"],
            r["hazard_30d"],
            r["base_hazard_30d"],
            r["purpose"],
        )
        for r in planted_rules()
    )
    assert table == want
    skus = {r[0] for r in con.execute("SELECT sku FROM products").fetchall()}
    cats = {r[0] for r in con.execute("SELECT category FROM products").fetchall()}
    for r in planted_rules():
        assert set(r["antecedent"]) <= (skus if r["antecedent_level"] == "sku" else cats)
        assert r["target"] in (skus if r["target_level"] == "sku" else cats)
        assert r["hazard_30d"] > 3 * r["base_hazard_30d"]
    kinds = {(r["antecedent_level"], len(r["antecedent"]), r["target_level"]) for r in rules}
    assert ("sku", 2, "sku") in kinds and ("sku", 1, "sku") in kinds
    assert ("category", 1, "category") in kinds
    by_target = {r["target"]: r for r in rules}
    assert by_target[KEY_SKUS["frost_fleece"]]["purpose"] == "clear"
    assert KEY_SKUS["butane_refill"] in by_target


def _sets(rule) -> tuple[str, str, int]:
    acol = "p.sku" if rule["antecedent_level"] == "sku" else "p.category"
    tcol = "p.sku" if rule["target_level"] == "sku" else "p.category"
    return acol, tcol, len(rule["antecedent"])


def _rates(rule) -> tuple[float, float]:
    """Daily hazards (rule, base at breadth 1)."""
    return (-math.log(1 - rule["hazard_30d"]) / 30, -math.log(1 - rule["base_hazard_30d"]) / 30)


def _gross_first_times(con, rule) -> str:
    """SQL for (customer_id, held_at, first_target_at) from positive lines: the process's own
    view (first purchase; returns and duplicates do not matter)."""
    acol, tcol, k = _sets(rule)
    return f"""
        WITH pos AS (SELECT o.customer_id, o.ordered_at, p.sku, p.category
                     FROM order_lines l JOIN orders o USING (order_id) JOIN products p USING (sku)
                     WHERE l.quantity > 0),
        hold AS (SELECT customer_id, max(t) AS held_at FROM (
                   SELECT customer_id, {acol.replace("p.", "")} AS a, min(ordered_at) AS t
                   FROM pos WHERE {acol.replace("p.", "")} IN (SELECT unnest($ante))
                   GROUP BY ALL) GROUP BY customer_id HAVING count(*) = {k}),
        tgt AS (SELECT customer_id, min(ordered_at) AS first_t FROM pos
                WHERE {tcol.replace("p.", "")} = $target GROUP BY customer_id)
        SELECT c.customer_id, tr.breadth, h.held_at, t.first_t
        FROM customers c JOIN sample_customer_truth tr USING (customer_id)
        LEFT JOIN hold h USING (customer_id) LEFT JOIN tgt t USING (customer_id)"""


def _check(observed: float, expected: float, se: float, what: str) -> None:
    assert abs(observed - expected) <= TOL_SE * se, (
        f"{what}: measured {observed:.4f}, true {expected:.4f}, tolerance {TOL_SE} SE = "
        f"{TOL_SE * se:.4f}"
    )


def _take_up(con, rule, per_customer_sql: str, cutoffs: list[str]) -> dict[bool, tuple]:
    """Per group (holder True/False): n, events, expected events, variance."""
    lam1, lam0 = _rates(rule)
    h = rule["hazard_30d"]
    sql = f"""
        WITH cust AS ({per_customer_sql}),
        cuts AS (SELECT CAST(unnest($cutoffs) AS TIMESTAMP) AS c),
        risk AS (
            SELECT coalesce(held_at < c, false) AS holder,
                   coalesce(first_t < c + INTERVAL 30 DAY, false) AS event,
                   CASE WHEN held_at < c THEN {h}
                        WHEN held_at IS NULL OR held_at >= c + INTERVAL 30 DAY
                             THEN 1 - exp(-{lam0} * breadth * 30)
                        ELSE 1 - exp(-{lam0} * breadth * date_diff('second', c, held_at) / 86400.0
                                     - {lam1} * date_diff('second', held_at,
                                                          c + INTERVAL 30 DAY) / 86400.0)
                   END AS p
            FROM cust, cuts WHERE first_t IS NULL OR first_t >= c)
        SELECT holder, count(*), sum(event::INT), sum(p), sum(p * (1 - p))
        FROM risk GROUP BY holder"""
    rows = con.execute(
        sql, {"ante": list(rule["antecedent"]), "target": rule["target"], "cutoffs": cutoffs}
    ).fetchall()
    return {r[0]: r[1:] for r in rows}


@pytest.mark.parametrize("rule", planted_rules(), ids=lambda r: r["rule_id"])
def test_take_up_at_cutoff(con, rule):
    """(b): holders of the antecedent lacking the target at 2026-06-30 buy it within 30 days at
    the rule's hazard; everyone else at the (breadth-scaled) base rate."""
    res = _take_up(con, rule, _gross_first_times(con, rule), [CUTOFF])
    n, ev, exp_ev, var = res[True]
    assert n >= 150, f"too few holders lacking the target to test: {n}"
    _check(ev / n, exp_ev / n, math.sqrt(var) / n, f"{rule['rule_id']} holders")
    n0, ev0, exp0, var0 = res[False]
    _check(ev0 / n0, exp0 / n0, math.sqrt(var0) / n0, f"{rule['rule_id']} base")
    assert ev / n > 3 * ev0 / n0


@pytest.mark.parametrize("rule", planted_rules(), ids=lambda r: r["rule_id"])
def test_take_up_pooled_over_monthly_cutoffs(con, rule):
    cutoffs = [
        f"{y}-{m:02d}-01"
        for y, m in [(2025, m) for m in range(7, 13)] + [(2026, m) for m in range(1, 9)]
    ]
    res = _take_up(con, rule, _gross_first_times(con, rule), cutoffs)
    for holder, (n, ev, exp_ev, var) in res.items():
        _check(ev / n, exp_ev / n, math.sqrt(var) / n, f"{rule['rule_id']} holder={holder}")


@pytest.mark.parametrize("rule", planted_rules(), ids=lambda r: r["rule_id"])
def test_take_up_with_net_holdings(con, rule):
    """The same rate when 'holds' means what the tool means: net quantity > 0 before the
    cutoff (returns cancel purchases, duplicates count once). A customer who returned the
    target lacks it again and is back on the same hazard."""
    acol, tcol, k = _sets(rule)
    n, ev = one(
        con,
        f"""
        WITH clean AS (SELECT DISTINCT order_id, sku, quantity, net_amount FROM order_lines),
        held AS (SELECT o.customer_id, p.sku, p.category
                 FROM clean l JOIN orders o USING (order_id) JOIN products p USING (sku)
                 WHERE o.ordered_at < CAST($cut AS TIMESTAMP)
                 GROUP BY o.customer_id, p.sku, p.category HAVING sum(l.quantity) > 0),
        a AS (SELECT customer_id FROM held WHERE {acol.replace("p.", "")} IN (SELECT unnest($ante))
              GROUP BY customer_id HAVING count(DISTINCT {acol.replace("p.", "")}) = {k}),
        audience AS (SELECT customer_id FROM a EXCEPT
                     SELECT customer_id FROM held WHERE {tcol.replace("p.", "")} = $target),
        bought AS (SELECT DISTINCT o.customer_id FROM order_lines l JOIN orders o USING (order_id)
                   JOIN products p USING (sku)
                   WHERE l.quantity > 0 AND {tcol} = $target
                     AND o.ordered_at >= CAST($cut AS TIMESTAMP)
                     AND o.ordered_at < CAST($cut AS TIMESTAMP) + INTERVAL 30 DAY)
        SELECT count(*), count(b.customer_id) FROM audience LEFT JOIN bought b USING (customer_id)
        """,
        {"ante": list(rule["antecedent"]), "target": rule["target"], "cut": CUTOFF},
    )
    h = rule["hazard_30d"]
    _check(ev / n, h, math.sqrt(h * (1 - h) / n), f"{rule['rule_id']} net holders")


@pytest.mark.parametrize("rule", planted_rules(), ids=lambda r: r["rule_id"])
def test_ground_truth_matches_order_history(con, rule):
    """sample_planted agrees with the order lines, so later tests can trust it."""
    mismatches = one(
        con,
        f"""
        WITH f AS ({_gross_first_times(con, rule)}),
        n AS (SELECT o.customer_id, count(DISTINCT o.order_id) AS purchases
              FROM order_lines l JOIN orders o USING (order_id) JOIN products p USING (sku)
              WHERE l.quantity > 0 AND {_sets(rule)[1]} = $target GROUP BY o.customer_id)
        SELECT count(*) FROM f FULL JOIN (SELECT * FROM sample_planted WHERE rule_id = $rid) s
            USING (customer_id) LEFT JOIN n USING (customer_id)
        WHERE (f.held_at IS NOT NULL OR f.first_t IS NOT NULL OR s.customer_id IS NOT NULL)
          AND (f.held_at IS DISTINCT FROM s.antecedent_held_at
               OR f.first_t IS DISTINCT FROM s.target_bought_at
               OR coalesce(n.purchases, 0) <> coalesce(s.target_purchases, 0))
        """,
        {"ante": list(rule["antecedent"]), "target": rule["target"], "rid": rule["rule_id"]},
    )[0]
    assert mismatches == 0


def test_two_item_rule_beats_its_parts(con):
    """propagator + seed compost -> heated mat has higher confidence than either item alone."""

    def conf(ante: list[str]) -> float:
        return one(
            con,
            """
            WITH held AS (SELECT DISTINCT o.customer_id, l.sku FROM order_lines l
                          JOIN orders o USING (order_id) WHERE l.quantity > 0
                          AND o.ordered_at >= TIMESTAMP '2025-10-01'),
            a AS (SELECT customer_id FROM held WHERE sku IN (SELECT unnest($a))
                  GROUP BY 1 HAVING count(*) = len($a))
            SELECT avg(CASE WHEN customer_id IN (SELECT customer_id FROM held
                                                 WHERE sku = $t) THEN 1.0 ELSE 0 END) FROM a""",
            {"a": ante, "t": KEY_SKUS["heated_mat"]},
        )[0]

    both = conf([KEY_SKUS["propagator"], KEY_SKUS["seed_compost"]])
    assert both > conf([KEY_SKUS["propagator"]]) + 0.1
    assert both > conf([KEY_SKUS["seed_compost"]]) + 0.1


def test_breadth_confounds_raw_co_purchase(con):
    """Broad shoppers hold more antecedents and buy every target more: an unrelated item
    (a garden hose) shows lift > 1 toward every target although nothing links them."""
    hose = "TW15-101"
    assert one(con, "SELECT name FROM products WHERE sku = ?", [hose])[0].startswith("Garden hose")
    for rule in planted_rules():
        tcol = _sets(rule)[1].replace("p.", "")
        n_all, n_t, n_hose, n_hose_t = one(
            con,
            f"""
            WITH held AS (SELECT DISTINCT o.customer_id, p.sku, p.category FROM order_lines l
                          JOIN orders o USING (order_id) JOIN products p USING (sku)
                          WHERE l.quantity > 0 AND o.ordered_at >= TIMESTAMP '2025-10-01'),
            t AS (SELECT DISTINCT customer_id FROM held WHERE {tcol} = $t),
            h AS (SELECT DISTINCT customer_id FROM held WHERE sku = $hose)
            SELECT (SELECT count(*) FROM customers), (SELECT count(*) FROM t),
                   (SELECT count(*) FROM h), (SELECT count(*) FROM h JOIN t USING (customer_id))
            """,
            {"t": rule["target"], "hose": hose},
        )
        lift = (n_hose_t / n_hose) / (n_t / n_all)
        assert 1.1 < lift < 1.6, (rule["rule_id"], lift)
    holders, others = one(
        con,
        """
        SELECT avg(tr.breadth) FILTER (WHERE p.antecedent_held_at IS NOT NULL),
               avg(tr.breadth) FILTER (WHERE p.antecedent_held_at IS NULL)
        FROM sample_customer_truth tr LEFT JOIN sample_planted p
          ON p.customer_id = tr.customer_id AND p.rule_id = 'heated-mat'""",
    )
    assert holders > 1.3 * others
