-- reachlist take-up history: shopping breadth and forward take-up at every cutoff of an estimate,
-- in one query (one pass over the holdings). Cutoff k is :as_of minus k horizons
-- (k = 0 .. :last); k = 0 is as_of itself, whose horizon lies in the future: nothing at or after
-- :as_of is read, so nobody has bought at k = 0. One row per customer with an order before as_of:
--
--   first_age:  days from their first order's day to as_of (at cutoff k they are a customer
--               when first_age > k * :horizon)
--   breadth_k:  distinct categories held in [cutoff_k - :breadth_days, cutoff_k)
--   had_k:      1 when they hold a target SKU over all days before cutoff_k
--   bought_k:   1 when they hold a target SKU over [cutoff_k, cutoff_k + :horizon);
--   units_k:    the net units of those SKUs there
--
-- The same definitions as forward_takeup.sql, which asks them one cutoff at a time (the tests
-- compare the two). "Holds" is a positive net quantity per SKU over the days of a window. For a
-- customer and SKU without a return, that is "bought it on a day inside the window", and the
-- cutoffs whose window holds a day are a run k_lo .. k_hi worked out from the day's age; the few
-- customer-SKU pairs with a return are summed window by window.
--
-- Two shapes from the same definitions (parts below): "wide", one row per customer as above
-- (estimate.takeup_history); and "cells", counted where the data is (estimate.takeup_cells): for
-- every cutoff k >= 1, the customers lacking the target there grouped by (audience group,
-- breadth, bought) with their number and net units; a rule's rank is who that rule reaches at
-- the cutoff (the CTEs of reach_at_cutoffs.sql, joined in), 0 who any rule reaches: a few
-- thousand rows however many customers there are. The same pass gives the customers lacking the
-- target at as_of one by one (customer_id, breadth; with rules only those a rule reaches there):
-- the list is made of them.
-- Breadth does not depend on the target: the holdings file keeps it for the default as_of,
-- horizon and cutoffs (breadth_rows), and a query with those reads it (breadth_built).
WITH
-- part: past
past AS (
    SELECT customer_id, sku, quantity, DAYS_BETWEEN(order_day, :as_of) AS age  -- days before as_of, >= 1
    FROM holdings
    WHERE order_day < :as_of
)
-- part: ctes
{breadth_ctes},
target_pairs AS (
    -- each customer's net quantity of each target SKU before each cutoff and in its horizon:
    -- one conditional sum per cutoff in one pass over the target's days
    SELECT t.customer_id, t.sku,
{target_sums}
    FROM past AS t
    WHERE t.sku IN (SELECT sku FROM products WHERE {target_level} = :target)
    GROUP BY t.customer_id, t.sku
),
target AS (
    -- had_k: holds a target SKU before cutoff k; bought_k: holds one over its horizon, with
    -- units_k the net units of those SKUs there
    SELECT customer_id,
{target_columns}
    FROM target_pairs
    GROUP BY customer_id
),
population AS (
    -- a customer at as_of: first ordered before it (first_orders, kept by `reachlist holdings`)
    SELECT customer_id, DAYS_BETWEEN(CAST(first_at AS DATE), :as_of) AS first_age
    FROM first_orders
    WHERE first_at < :as_of
)
-- part: breadth_derived
{held_bits},
category_codes AS (
    -- a small integer per category: tens of millions of (customer, category) keys hash faster
    -- as integers than as names (the history query 11.9 s -> 10.6 s at 1M customers)
    SELECT sku, CAST(dense_rank() OVER (ORDER BY category) AS INTEGER) AS code
    FROM products
    WHERE category IS NOT NULL
),
category_bits AS (
    SELECT h.customer_id, pr.code, bit_or(h.bits) AS bits
    FROM held_bits AS h
    JOIN category_codes AS pr ON pr.sku = h.sku
    GROUP BY h.customer_id, pr.code
),
breadth AS (
    SELECT customer_id,
{breadth_columns}
    FROM category_bits
    GROUP BY customer_id
)
-- part: breadth_built
breadth AS (
    -- the same columns, kept by `reachlist holdings` for the default as_of, horizon and cutoffs
    SELECT customer_id,
{built_columns}
    FROM {built_table}
)
-- part: breadth_rows
-- what `reachlist holdings` keeps: every customer's breadth at each cutoff
SELECT customer_id,
{breadth_names}
FROM breadth
ORDER BY customer_id
-- part: wide
SELECT pop.customer_id,
       pop.first_age,
{final_columns}
FROM population AS pop
LEFT JOIN breadth AS b ON b.customer_id = pop.customer_id
LEFT JOIN target AS t ON t.customer_id = pop.customer_id
ORDER BY pop.customer_id
-- part: people_at
people_at AS (
    -- one row per customer and cutoff k at which they are a customer lacking the target
    SELECT pop.customer_id, ks.k,
           CAST(coalesce(CASE ks.k {breadth_cases} END, 0) AS INTEGER) AS breadth,
           coalesce(CASE ks.k {bought_cases} END, 0)                  AS bought,
           CAST(coalesce(CASE ks.k {units_cases} END, 0) AS DOUBLE PRECISION) AS units
    FROM population AS pop
    CROSS JOIN {cutoff_numbers} AS ks (k)
    LEFT JOIN breadth AS b ON b.customer_id = pop.customer_id
    LEFT JOIN target AS t ON t.customer_id = pop.customer_id
    WHERE pop.first_age > ks.k * :horizon AND coalesce(CASE ks.k {had_cases} END, 0) = 0
)
-- part: members
members AS (
    -- who each rule reaches at each cutoff (k = 0: as_of), and (as rank 0) who any of them
    -- reaches: each reached row twice, once as itself and once as rank 0, then distinct
    SELECT DISTINCT r.cutoff - 1 AS k, r.customer_id,
                    CASE WHEN x.as_any = 1 THEN 0 ELSE r.rule_rank END AS rule_rank
    FROM reached AS r
    CROSS JOIN (VALUES (0), (1)) AS x (as_any)
)
-- part: cells_reached
-- One select reading people_at and members once (an engine that does not keep a CTE's rows,
-- Spark, would otherwise work each of them out again per reference). grp is the rank of the
-- rule that reaches the customer at cutoff k, 0 for any rule, NULL for nobody (so everyone
-- lacking the target = grp NULL + grp 0). At k = 0 (as_of) only the reached customers, one by
-- one (customer_id set), once per rule that reaches them.
SELECT p.k, m.rule_rank AS grp,
       CASE WHEN p.k = 0 THEN p.customer_id END AS customer_id,
       p.breadth, p.bought, count(*) AS customers, sum(p.units) AS units
FROM people_at AS p
LEFT JOIN members AS m ON m.k = p.k AND m.customer_id = p.customer_id
WHERE p.k >= 1 OR m.rule_rank > 0
GROUP BY p.k, m.rule_rank, CASE WHEN p.k = 0 THEN p.customer_id END, p.breadth, p.bought
ORDER BY k, grp, customer_id, breadth, bought
-- part: cells_plain
-- Without rules: everyone lacking the target, counted (grp NULL); at k = 0 .. one_by_one one by
-- one (customer_id set).
SELECT k, NULL AS grp,
       CASE WHEN k <= :one_by_one THEN customer_id END AS customer_id,
       breadth, bought, count(*) AS customers, sum(units) AS units
FROM people_at
GROUP BY k, CASE WHEN k <= :one_by_one THEN customer_id END, breadth, bought
ORDER BY k, customer_id, breadth, bought
