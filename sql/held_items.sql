-- Which customers hold which items inside a time window [:since, :until) of whole days.
-- A customer holds a SKU when their net quantity of it over the window's days is positive:
-- returns cancel purchases, and the holdings (holdings.sql) already count exact duplicate lines
-- once and ignore orders without a customer. SKUs missing from products are left out.
-- At category or department level, a customer holds the group when they hold any SKU in it.
WITH
-- part: held_skus
held_skus AS (
    SELECT customer_id AS basket, sku
    FROM holdings
    WHERE order_day >= :since
      AND order_day < :until
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
)
-- part: held_pairs
SELECT DISTINCT h.basket, p.{level} AS item
FROM held_skus AS h
JOIN products AS p ON p.sku = h.sku{only_item}
