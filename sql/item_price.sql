-- The net price per unit of an item (a SKU, category or department) in [:since, :until): net
-- amount over units of its purchase lines (quantity > 0; exact duplicate lines count once), with
-- the units sold, for the economics of an offer. Returns one row; units 0 when nothing sold.
WITH lines AS (
    SELECT DISTINCT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    WHERE l.sku IN (SELECT sku FROM products WHERE {level} = :item)
      AND l.quantity > 0
)
SELECT coalesce(sum(l.quantity), 0)                        AS units,
       sum(l.net_amount) / nullif(sum(l.quantity), 0)      AS price
FROM lines AS l
JOIN orders AS o ON o.order_id = l.order_id
WHERE o.ordered_at >= :since
  AND o.ordered_at < :until
