-- reachlist forward take-up at one cutoff: for every customer with an order before the cutoff
-- who lacks the target there, their shopping breadth and whether they started buying the target
-- in the horizon that follows.
--
--   breadth: distinct categories the customer holds in [:breadth_since, :cutoff)
--   lacks the target: holds no SKU of the target at any time before :cutoff
--   bought: holds a SKU of the target in [:cutoff, :outcome_until); units = net units there
--
-- "Holds" follows held_items.sql: net quantity per customer and SKU in the window is positive
-- (returns cancel purchases), exact duplicate lines count once, SKUs missing from products are
-- ignored. Nothing at or after :outcome_until is read; with :outcome_until = :cutoff the query
-- reads nothing after the cutoff and every customer has bought = 0.
WITH window_orders AS (
    -- only orders that can matter: the breadth window up to the end of the outcome horizon
    SELECT order_id, customer_id, ordered_at
    FROM orders
    WHERE ordered_at >= :breadth_since AND ordered_at < :outcome_until
      AND customer_id IS NOT NULL  -- an order without a customer is ignored everywhere
),
target_orders AS (
    -- plus every earlier order, for the target's own SKUs only (to know who held it before)
    SELECT order_id, customer_id, ordered_at
    FROM orders
    WHERE ordered_at < :outcome_until AND customer_id IS NOT NULL
),
lines AS (
    -- exact duplicate lines count once
    SELECT DISTINCT o.customer_id, o.ordered_at, l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    JOIN window_orders AS o ON o.order_id = l.order_id
),
target_lines AS (
    SELECT DISTINCT o.customer_id, o.ordered_at, l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    JOIN target_orders AS o ON o.order_id = l.order_id
    WHERE l.sku IN (SELECT sku FROM products WHERE {target_level} = :target)
),
held_before AS (
    -- SKUs each customer holds in the breadth window
    SELECT customer_id, sku
    FROM lines
    WHERE ordered_at >= :breadth_since AND ordered_at < :cutoff
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
),
breadth AS (
    SELECT h.customer_id, count(DISTINCT p.category) AS breadth
    FROM held_before AS h
    JOIN products AS p ON p.sku = h.sku
    GROUP BY h.customer_id
),
had_target AS (
    SELECT DISTINCT customer_id
    FROM (
        SELECT customer_id, sku FROM target_lines
        WHERE ordered_at < :cutoff
        GROUP BY customer_id, sku
        HAVING sum(quantity) > 0
    ) AS held_target
),
bought AS (
    SELECT customer_id, sum(units) AS units
    FROM (
        SELECT customer_id, sku, sum(quantity) AS units FROM target_lines
        WHERE ordered_at >= :cutoff AND ordered_at < :outcome_until
        GROUP BY customer_id, sku
        HAVING sum(quantity) > 0
    ) AS new_target
    GROUP BY customer_id
),
population AS (
    SELECT DISTINCT customer_id FROM orders WHERE ordered_at < :cutoff AND customer_id IS NOT NULL
)
SELECT pop.customer_id,
       coalesce(b.breadth, 0)                          AS breadth,
       CASE WHEN n.customer_id IS NULL THEN 0 ELSE 1 END AS bought,
       coalesce(n.units, 0)                            AS units
FROM population AS pop
LEFT JOIN breadth AS b ON b.customer_id = pop.customer_id
LEFT JOIN had_target AS t ON t.customer_id = pop.customer_id
LEFT JOIN bought AS n ON n.customer_id = pop.customer_id
WHERE t.customer_id IS NULL
ORDER BY pop.customer_id
