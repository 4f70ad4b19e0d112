-- Who each chosen rule reaches at each of several past cutoffs, in one pass over the holdings:
-- customers holding every antecedent item of the rule inside the lookback window that ends at
-- the cutoff (every window as long as the list's own, :reach_days). "Holds" as in audience.sql:
-- net quantity over the window's days positive. One row per (cutoff, customer, rule).
-- Cutoff c (from 1) is :reach_until minus (c - 1) steps of :reach_step days: for a customer-SKU
-- pair without a return, the cutoffs whose window holds a day are a run k_lo .. k_hi (k = c - 1)
-- worked out from the day's age (cutoff_runs.sql; bit k of a mask, no join to the cutoffs); the
-- few pairs with a return are netted window by window. A rule reaches a
-- customer at cutoff k when bit k is set for every item of the rule.
-- Written as parts: estimate.takeup_cells joins the same CTEs into the take-up history.
WITH
-- part: ctes
antecedent_days AS (
    -- the antecedent SKUs' days inside the earliest window's start .. the first cutoff
    SELECT h.customer_id, h.sku, h.quantity, DAYS_BETWEEN(h.order_day, :reach_until) AS age
    FROM holdings AS h
    WHERE h.sku IN (SELECT sku FROM products WHERE {level} IN (:antecedent_items))
      AND h.order_day >= :reach_since
      AND h.order_day < :reach_until
),
{antecedent_bits},
held AS (
    -- bit k set: the customer holds the item (at the rules' level) in cutoff k's window
    SELECT b.customer_id, p.item, bit_or(b.bits) AS bits
    FROM antecedent_bits AS b
    JOIN (SELECT DISTINCT sku, {level} AS item
          FROM products
          WHERE {level} IN (:antecedent_items)) AS p ON p.sku = b.sku
    GROUP BY b.customer_id, p.item
),
cutoff_numbers AS (
    SELECT k FROM {cutoff_numbers} AS ks (k)
)
-- part: select
SELECT cutoff, customer_id, rule_rank
FROM (
{reached_union}
) AS reached
ORDER BY cutoff, rule_rank, customer_id
-- part: bits_select
-- the same answer one row per (customer, rule): bit k of bits set when the rule reaches the
-- customer at cutoff k + 1 (a tenth of the rows above, for a caller that reads bits)
SELECT customer_id, rule_rank, bits
FROM (
{bits_union}
) AS reached
-- part: reached_cte
reached AS (
{reached_union}
)
