-- reachlist audience: customers who hold every antecedent item of at least one chosen rule
-- inside the lookback window, one row per customer, with the reaching rule of the highest score
-- (its id and its score) and one column per exclusion.
--
-- "Holds an item" follows held_items.sql: the customer's net quantity of a SKU inside the window
-- is positive (returns cancel purchases), exact duplicate lines count once, SKUs missing from
-- products are ignored, and a category or department is held when any SKU in it is held.
--
-- reachlist removes flagged customers in this fixed order and counts each step:
--   has_target, no_consent, suppressed, contacted recently, not_adult,
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
    -- target SKUs each customer holds between the target-window start (year 1: ever) and the
    -- cutoff
    SELECT o.customer_id, l.sku
    FROM clean_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :target_since
      AND o.ordered_at < :until
      AND l.sku IN (SELECT sku FROM products WHERE {target_level} = :target)
    GROUP BY o.customer_id, l.sku
    HAVING sum(l.quantity) > 0
),
has_target AS (
    SELECT DISTINCT customer_id FROM target_skus
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
suppressed AS (
    SELECT DISTINCT customer_id FROM suppressions
){filter_ctes}
{final}
