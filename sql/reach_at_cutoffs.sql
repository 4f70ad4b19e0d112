-- Who each chosen rule reaches at each of several past cutoffs, in one pass over the holdings:
-- customers holding every antecedent item of the rule inside the lookback window that ends at
-- the cutoff (every window as long as the list's own). "Holds" as in audience.sql: net quantity
-- over the window's days positive. One row per (cutoff, customer, rule).
-- Written as parts: estimate.takeup_cells joins the same CTEs into the take-up history.
WITH
-- part: ctes
cutoffs AS (
{cutoff_rows}
),
antecedent_skus AS (
    SELECT c.cutoff, h.customer_id, h.sku
    FROM holdings AS h
    JOIN cutoffs AS c ON h.order_day >= c.since AND h.order_day < c.until
    WHERE h.sku IN (SELECT sku FROM products WHERE {level} IN (:antecedent_items))
    GROUP BY c.cutoff, h.customer_id, h.sku
    HAVING sum(h.quantity) > 0
),
held AS (
    SELECT DISTINCT h.cutoff, h.customer_id, p.{level} AS item
    FROM antecedent_skus AS h
    JOIN products AS p ON p.sku = h.sku
    WHERE p.{level} IN (:antecedent_items)
)
-- part: select
SELECT cutoff, customer_id, rule_rank
FROM (
{reached_union}
) AS reached
ORDER BY cutoff, rule_rank, customer_id
-- part: reached_cte
reached AS (
{reached_union}
)
