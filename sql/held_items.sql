-- Which baskets hold which items inside a time window.
-- A basket is a customer (all their orders in the window) or a single order.
-- A basket holds a SKU when its net quantity of that SKU in the window is positive:
-- returns (negative quantity) cancel purchases, zero-quantity lines count for nothing,
-- exact duplicate lines count once, and SKUs missing from products are left out.
-- At category or department level, a basket holds the group when it holds any SKU in it.
WITH clean_lines AS (
    SELECT DISTINCT order_id, sku, quantity, net_amount
    FROM order_lines
),
held_skus AS (
    SELECT {basket} AS basket, l.sku
    FROM clean_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :since
      AND o.ordered_at < :until
    GROUP BY {basket}, l.sku
    HAVING sum(l.quantity) > 0
)
SELECT DISTINCT h.basket, p.{level} AS item
FROM held_skus AS h
JOIN products AS p ON p.sku = h.sku{only_item}
