-- How many customers hold an item (a SKU, category or department) before the cutoff, and how
-- many net units they hold: units / buyers is the typical number of units a buyer takes, used to
-- size a clearance list (expected units = expected buyers x units per buyer).
-- Holding follows held_items.sql: net quantity per customer and SKU is positive, exact duplicate
-- lines count once, SKUs missing from products are ignored.
WITH clean_lines AS (
    SELECT DISTINCT order_id, sku, quantity, net_amount
    FROM order_lines
    WHERE sku IN (SELECT sku FROM products WHERE {level} = :item)
),
held_skus AS (
    SELECT o.customer_id, l.sku, sum(l.quantity) AS units
    FROM clean_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at < :until
    GROUP BY o.customer_id, l.sku
    HAVING sum(l.quantity) > 0
)
SELECT count(DISTINCT customer_id) AS buyers,
       coalesce(sum(units), 0)     AS units
FROM held_skus
