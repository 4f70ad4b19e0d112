-- reachlist audience: customers who hold every antecedent item of at least one chosen rule
-- inside the lookback window, one row per customer, with the reaching rule of the highest score
-- (its id and its score) and one column per exclusion.
--
-- "Holds an item" follows held_items.sql: the customer's net quantity of a SKU inside the window
-- is positive (returns cancel purchases), exact duplicate lines count once, SKUs missing from
-- products are ignored, and a category or department is held when any SKU in it is held.
--
-- Orders without a customer id are ignored (no customer can hold what they contain).
--
-- reachlist removes flagged customers in this fixed order and counts each step:
--   has_target, returned_target, no_consent, suppressed, contacted recently, not_adult,
--   outside_region, outside_channel, inactive
-- The contact-frequency cap (it reads the campaign log, which may live in another database) and
-- the holdout (a hash of campaign id and customer id) are applied by reachlist after this query.
WITH clean_lines AS (
    -- only the lines of SKUs the chosen rules or the target mention; exact duplicates count once
    SELECT DISTINCT order_id, sku, quantity, net_amount
    FROM order_lines
    WHERE sku IN (SELECT sku FROM products
                  WHERE {level} IN (:antecedent_items) OR {target_level} = :target)
),
antecedent_skus AS (
    -- SKUs each customer holds inside the lookback window
    SELECT o.customer_id, l.sku
    FROM clean_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :since
      AND o.ordered_at < :until
      AND o.customer_id IS NOT NULL
    GROUP BY o.customer_id, l.sku
    HAVING sum(l.quantity) > 0
),
held AS (
    -- antecedent items (at the rules' item level) each customer holds
    SELECT DISTINCT h.customer_id, p.{level} AS item
    FROM antecedent_skus AS h
    JOIN products AS p ON p.sku = h.sku
    WHERE p.{level} IN (:antecedent_items)
),
target_skus AS (
    -- each customer's net quantity of each target SKU between the target-window start (year 1:
    -- ever) and the cutoff, and whether any of those lines was a purchase
    SELECT o.customer_id, l.sku,
           sum(l.quantity) AS net_quantity,
           max(CASE WHEN l.quantity > 0 THEN 1 ELSE 0 END) AS bought
    FROM clean_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :target_since
      AND o.ordered_at < :until
      AND o.customer_id IS NOT NULL
      AND l.sku IN (SELECT sku FROM products WHERE {target_level} = :target)
    GROUP BY o.customer_id, l.sku
),
has_target AS (
    -- customers who hold a target SKU (net quantity positive)
    SELECT DISTINCT customer_id FROM target_skus WHERE net_quantity > 0
),
returned_target AS (
    -- customers who bought the target and returned all of it (they hold no target SKU: every
    -- net quantity is zero or less): not offered the item they just sent back
    SELECT customer_id FROM target_skus
    GROUP BY customer_id
    HAVING max(bought) = 1 AND max(net_quantity) <= 0
),
{rule_blocks},
reached AS (
    -- every (customer, rule) pair; rule_rank 1 is the best-ranked rule
{reached_union}
),
best AS (
    -- each customer once, with the reaching rule of the highest score (then the better rank)
    SELECT customer_id, rule_rank, rule_id, score
    FROM (
        SELECT customer_id, rule_rank, rule_id, score,
               row_number() OVER (PARTITION BY customer_id
                                  ORDER BY score DESC, rule_rank) AS pick
        FROM reached
    ) AS ranked
    WHERE pick = 1
),
customer_facts AS (
    -- one row per reached customer. A customer id on several rows of customers (a warehouse
    -- quirk; reachlist refuses it unless the user asks to merge them) reads as strictly as its
    -- strictest row: consent only if every row gives it, an adult only if every row says so, in
    -- a chosen region only if every row is. A customer missing from customers matches no row
    -- here and counts as no consent, age unknown, region unknown.
    SELECT customer_id,
           max(CASE WHEN marketing_consent IS NOT TRUE THEN 1 ELSE 0 END) AS no_consent,
           max(CASE WHEN {not_adult_row} THEN 1 ELSE 0 END) AS not_adult,
           max(CASE WHEN {outside_region_row} THEN 1 ELSE 0 END) AS outside_region,
           min(email) AS email
    FROM customers
    WHERE customer_id IN (SELECT customer_id FROM best)
    GROUP BY customer_id
),
suppressed AS (
    SELECT DISTINCT customer_id FROM suppressions
){filter_ctes}
{final}
