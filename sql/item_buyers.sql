-- Customers who bought an item (a SKU, category or department) in [:since, :until) (whole days),
-- with the net units they took. "Bought" follows held_items.sql: the customer's net quantity of a
-- SKU over the window's days is positive (a purchase returned in full does not count); the
-- holdings count exact duplicate lines once; SKUs missing from products are ignored.
-- Used for campaign results (buyers after a send; the campaign log may live in another database,
-- so the join to contacts happens after) and for units per buyer when sizing a clearance.
WITH bought_skus AS (
    SELECT customer_id, sku, sum(quantity) AS units
    FROM holdings
    WHERE sku IN (SELECT sku FROM products WHERE {level} = :item)
      AND order_day >= :since
      AND order_day < :until
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
)
SELECT customer_id, sum(units) AS units
FROM bought_skus
GROUP BY customer_id
ORDER BY customer_id
