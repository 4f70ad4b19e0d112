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
WITH customers AS NOT MATERIALIZED (SELECT "customer_id" AS customer_id, "email" AS email, "marketing_consent" AS marketing_consent, "consent_date" AS consent_date, "birth_date" AS birth_date, "region" AS region FROM "retail"."customers"),
     products AS NOT MATERIALIZED (SELECT "sku" AS sku, "name" AS name, "category" AS category, "department" AS department, "age_restricted" AS age_restricted, "sensitive" AS sensitive, "launch_date" AS launch_date, "stock_on_hand" AS stock_on_hand FROM "retail"."products"),
     orders AS NOT MATERIALIZED (SELECT "order_id" AS order_id, "customer_id" AS customer_id, "ordered_at" AS ordered_at, "channel" AS channel FROM "retail"."orders"),
     order_lines AS NOT MATERIALIZED (SELECT "order_id" AS order_id, "sku" AS sku, "quantity" AS quantity, "net_amount" AS net_amount FROM "retail"."order_lines"),
     suppressions AS NOT MATERIALIZED (SELECT "customer_id" AS customer_id, "reason" AS reason, "suppressed_at" AS suppressed_at FROM "retail"."suppressions"),
     holdings AS NOT MATERIALIZED (SELECT o.customer_id,
       l.sku,
       CAST(o.ordered_at AS DATE)                        AS order_day,
       sum(l.quantity)                                   AS quantity,
       max(CASE WHEN l.quantity > 0 THEN 1 ELSE 0 END)   AS bought
FROM (SELECT DISTINCT order_id, sku, quantity, net_amount FROM order_lines) AS l
JOIN orders AS o ON o.order_id = l.order_id
WHERE o.customer_id IS NOT NULL
  AND l.quantity <> 0
GROUP BY o.customer_id, l.sku, CAST(o.ordered_at AS DATE)),
antecedent_skus AS (
    -- SKUs of the chosen rules' items each customer holds inside the lookback window
    SELECT customer_id, sku
    FROM holdings
    WHERE order_day >= :since
      AND order_day < :until
      AND sku IN (SELECT sku FROM products WHERE sku IN (:antecedent_items_0, :antecedent_items_1, :antecedent_items_2, :antecedent_items_3))
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
),
held AS (
    -- antecedent items (at the rules' item level) each customer holds
    SELECT DISTINCT h.customer_id, p.sku AS item
    FROM antecedent_skus AS h
    JOIN products AS p ON p.sku = h.sku
    WHERE p.sku IN (:antecedent_items_0, :antecedent_items_1, :antecedent_items_2, :antecedent_items_3)
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
      AND sku IN (SELECT sku FROM products WHERE sku = :target)
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
rule_1 AS (
    -- customers holding every antecedent item of rule 1
    SELECT customer_id
    FROM held
    WHERE item IN (:rule_1_items_0, :rule_1_items_1)
    GROUP BY customer_id
    HAVING count(*) = :rule_1_size
),
rule_2 AS (
    -- customers holding every antecedent item of rule 2
    SELECT customer_id
    FROM held
    WHERE item IN (:rule_2_items_0)
    GROUP BY customer_id
    HAVING count(*) = :rule_2_size
),
rule_3 AS (
    -- customers holding every antecedent item of rule 3
    SELECT customer_id
    FROM held
    WHERE item IN (:rule_3_items_0)
    GROUP BY customer_id
    HAVING count(*) = :rule_3_size
),
reached AS (
    -- every (customer, rule) pair; rule_rank 1 is the best-ranked rule
    SELECT customer_id, 1 AS rule_rank, :rule_1_id AS rule_id, :rule_1_score AS score FROM rule_1
    UNION ALL
    SELECT customer_id, 2 AS rule_rank, :rule_2_id AS rule_id, :rule_2_score AS score FROM rule_2
    UNION ALL
    SELECT customer_id, 3 AS rule_rank, :rule_3_id AS rule_id, :rule_3_score AS score FROM rule_3
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
               CASE WHEN birth_date IS NULL OR birth_date > :adult_born_by THEN 1 ELSE 0 END,
               CASE WHEN NOT coalesce(region IN (:regions_0), FALSE) THEN 1 ELSE 0 END,
               email
        FROM customers
        WHERE customer_id IN (SELECT customer_id FROM best)
    ) AS rule_and_facts
    GROUP BY customer_id
),
suppressed AS (
    SELECT DISTINCT customer_id FROM suppressions
),
channel_customers AS (
    -- customers with an order through a chosen channel inside the lookback window
    SELECT DISTINCT customer_id FROM orders
    WHERE channel IN (:channels_0) AND ordered_at >= :since AND ordered_at < :until
),
active_customers AS (
    -- customers with an order (a purchase or a return) recently enough
    SELECT DISTINCT customer_id FROM orders
    WHERE ordered_at >= :active_since AND ordered_at < :until
)
SELECT
    b.customer_id,
    b.rule_id,
    b.score,
    coalesce(b.customer_id IN (SELECT customer_id FROM has_target), FALSE) AS has_target,
    coalesce(b.customer_id IN (SELECT customer_id FROM returned_target), FALSE) AS returned_target,
    coalesce(b.no_consent = 1, TRUE) AS no_consent,
    coalesce(b.customer_id IN (SELECT customer_id FROM suppressed), FALSE) AS suppressed,
    coalesce(b.not_adult = 1, TRUE) AS not_adult,
    coalesce(b.outside_region = 1, TRUE) AS outside_region,
    NOT coalesce(b.customer_id IN (SELECT customer_id FROM channel_customers), FALSE) AS outside_channel,
    NOT coalesce(b.customer_id IN (SELECT customer_id FROM active_customers), FALSE) AS no_recent_order,
    b.email
FROM listed AS b
ORDER BY b.score DESC, b.customer_id

-- bound values (never spliced into the text above):
--   :antecedent_items_0 = 'A'
--   :antecedent_items_1 = 'B'
--   :antecedent_items_2 = 'C'
--   :antecedent_items_3 = '''; DROP TABLE orders; --'
--   :target = 'T'
--   :since = DATE '2025-01-01'
--   :until = DATE '2026-01-01'
--   :target_since = DATE '2025-10-03'
--   :rule_1_items_0 = 'A'
--   :rule_1_items_1 = 'B'
--   :rule_1_size = 2
--   :rule_1_id = 'R1'
--   :rule_1_score = 0.3
--   :rule_2_items_0 = 'C'
--   :rule_2_size = 1
--   :rule_2_id = 'R2'
--   :rule_2_score = 0.2
--   :rule_3_items_0 = '''; DROP TABLE orders; --'
--   :rule_3_size = 1
--   :rule_3_id = 'R3'
--   :rule_3_score = 0.1
--   :adult_born_by = DATE '2008-06-01'
--   :regions_0 = 'north'
--   :channels_0 = 'web'
--   :active_since = DATE '2025-12-02'
