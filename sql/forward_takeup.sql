-- reachlist forward take-up at one cutoff: for every customer with an order before the cutoff
-- who lacks the target there, their shopping breadth and whether they started buying the target
-- in the horizon that follows.
--
--   breadth: distinct categories the customer holds in [:breadth_since, :cutoff)
--   lacks the target: holds no SKU of the target at any time before :cutoff
--   bought: holds a SKU of the target in [:cutoff, :outcome_until); units = net units there
--
-- "Holds" follows held_items.sql: net quantity per customer and SKU over the window's days is
-- positive (returns cancel purchases); the holdings count exact duplicate lines once; SKUs missing
-- from products are ignored. Every bound is a whole day. Nothing at or after :outcome_until is read; with :outcome_until = :cutoff the query
-- reads nothing after the cutoff and every customer has bought = 0.
WITH held_before AS (
    -- SKUs each customer holds in the breadth window
    SELECT customer_id, sku
    FROM holdings
    WHERE order_day >= :breadth_since AND order_day < :cutoff
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
),
breadth AS (
    SELECT h.customer_id, count(DISTINCT p.category) AS breadth
    FROM held_before AS h
    JOIN products AS p ON p.sku = h.sku
    GROUP BY h.customer_id
),
target_net AS (
    -- each customer's net quantity of each target SKU before the cutoff and in the horizon
    SELECT customer_id, sku,
           sum(CASE WHEN order_day < :cutoff THEN quantity ELSE 0 END)  AS before_cutoff,
           sum(CASE WHEN order_day >= :cutoff THEN quantity ELSE 0 END) AS in_horizon
    FROM holdings
    WHERE order_day < :outcome_until
      AND sku IN (SELECT sku FROM products WHERE {target_level} = :target)
    GROUP BY customer_id, sku
),
had_target AS (
    SELECT DISTINCT customer_id FROM target_net WHERE before_cutoff > 0
),
bought AS (
    SELECT customer_id, sum(in_horizon) AS units
    FROM target_net
    WHERE in_horizon > 0
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
