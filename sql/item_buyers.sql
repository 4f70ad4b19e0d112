-- Customers who bought an item (a SKU, category or department) in [:since, :until), with the net
-- units they took. "Bought" follows held_items.sql: net quantity per customer and SKU inside the
-- window is positive (a purchase returned in full does not count), exact duplicate lines count
-- once, SKUs missing from products are ignored.
-- Used for campaign results (buyers after a send; the campaign log may live in another database,
-- so the join to contacts happens after) and for units per buyer when sizing a clearance.
WITH target_lines AS (
    SELECT DISTINCT order_id, sku, quantity, net_amount
    FROM order_lines
    WHERE sku IN (SELECT sku FROM products WHERE {level} = :item)
),
bought_skus AS (
    SELECT o.customer_id, l.sku, sum(l.quantity) AS units
    FROM target_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :since
      AND o.ordered_at < :until
      AND o.customer_id IS NOT NULL  -- an order without a customer is ignored everywhere
    GROUP BY o.customer_id, l.sku
    HAVING sum(l.quantity) > 0
)
SELECT customer_id, sum(units) AS units
FROM bought_skus
GROUP BY customer_id
ORDER BY customer_id
