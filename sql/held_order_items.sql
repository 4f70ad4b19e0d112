-- Which orders hold which items inside a time window (baskets of one order; customer baskets
-- read the holdings instead: held_items.sql).
-- An order holds a SKU when its net quantity of that SKU in the window is positive:
-- returns (negative quantity) cancel purchases, zero-quantity lines count for nothing,
-- exact duplicate lines count once, and SKUs missing from products are left out.
-- At category or department level, a basket holds the group when it holds any SKU in it (a
-- SKU with none there is left out).
WITH window_orders AS (
    SELECT o.order_id, o.customer_id
    FROM orders AS o
    WHERE o.ordered_at >= :since
      AND o.ordered_at < :until
      AND o.customer_id IS NOT NULL  -- an order without a customer is ignored everywhere
),
window_lines AS (
    -- de-duplicate only the lines of orders inside the window
    SELECT DISTINCT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    WHERE l.order_id IN (SELECT order_id FROM window_orders)
),
held_skus AS (
    SELECT o.order_id AS basket, l.sku
    FROM window_lines AS l
    JOIN window_orders AS o ON o.order_id = l.order_id
    GROUP BY o.order_id, l.sku
    HAVING sum(l.quantity) > 0
)
SELECT DISTINCT h.basket, p.{level} AS item
FROM held_skus AS h
JOIN products AS p ON p.sku = h.sku
WHERE p.{level} IS NOT NULL{only_item}
