-- reachlist audience: customers who hold every antecedent item of at least one chosen rule
-- inside the lookback window, one row per customer, with the reaching rule of the highest score
-- (its id and its score) and one column per exclusion.
--
-- "Holds an item" follows held_items.sql: the customer's net quantity of a SKU over the window's
-- days is positive (returns cancel purchases), SKUs missing from products are ignored, and a
-- category or department is held when any SKU in it is held. The holdings (holdings.sql) count
-- exact duplicate lines once and ignore orders without a customer id.
--
-- reachlist removes flagged customers in this fixed order and counts each step:
--   has_target, returned_target, no_consent, suppressed, contacted recently, not_adult,
--   outside_region, outside_channel, no_recent_order
-- The contact-frequency cap (it reads the campaign log, which may live in another database) and
-- the holdout (a hash of campaign id and customer id) are applied by reachlist after this query.
WITH antecedent_skus AS (
    -- SKUs of the chosen rules' items each customer holds inside the lookback window
    SELECT customer_id, sku
    FROM holdings
    WHERE order_day >= :since
      AND order_day < :until
      AND sku IN (SELECT sku FROM products WHERE {level} IN (:antecedent_items))
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
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
    -- ever) and the cutoff, and whether any of those days held a purchase
    SELECT customer_id, sku,
           sum(quantity) AS net_quantity,
           max(bought)   AS bought
    FROM holdings
    WHERE order_day >= :target_since
      AND order_day < :until
      AND sku IN (SELECT sku FROM products WHERE {target_level} = :target)
    GROUP BY customer_id, sku
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
listed AS (
    -- each reached customer once: the best rule, and the facts of the customer's rows in
    -- customers. A customer id on several rows of customers (a warehouse quirk; reachlist
    -- refuses it unless the user asks to merge them) reads as strictly as its strictest row:
    -- consent only if every row gives it, an adult only if every row says so, in a chosen region
    -- only if every row is. A customer missing from customers has no facts here and counts as no
    -- consent, age unknown, region unknown. Gathered by one grouping, not a join: a planner that
    -- misjudges the list's size (PostgreSQL takes it for one row) cannot loop over it.
    SELECT customer_id,
           max(rule_id)        AS rule_id,
           max(score)          AS score,
           max(no_consent)     AS no_consent,
           max(not_adult)      AS not_adult,
           max(outside_region) AS outside_region,
           min(email)          AS email
    FROM (
        SELECT customer_id, rule_id, score,
               NULL AS no_consent, NULL AS not_adult, NULL AS outside_region, NULL AS email
        FROM best
        UNION ALL
        SELECT customer_id, NULL, NULL,
               CASE WHEN marketing_consent IS NOT TRUE THEN 1 ELSE 0 END,
               CASE WHEN {not_adult_row} THEN 1 ELSE 0 END,
               CASE WHEN {outside_region_row} THEN 1 ELSE 0 END,
               email
        FROM customers
        WHERE customer_id IN (SELECT customer_id FROM best)
    ) AS rule_and_facts
    GROUP BY customer_id
),
suppressed AS (
    SELECT DISTINCT customer_id FROM suppressions
){filter_ctes}
{final}
