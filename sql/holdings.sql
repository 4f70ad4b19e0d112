-- reachlist holdings: one row per customer, SKU and day with the customer's net quantity of that
-- SKU on that day. Every question reachlist asks of the order history ("does this customer hold
-- this item inside this window", "did they start buying it after this cutoff") is a sum over
-- these rows, so the order lines are read once (by `reachlist holdings`, into a table kept
-- beside the warehouse) instead of once per question.
--
--   quantity: net units that day (returns are negative lines and cancel purchases)
--   bought:   1 when any line that day was a purchase (quantity > 0), else 0
--
-- The rules every reader relies on are applied here, once: exact duplicate lines of an order
-- count once, orders without a customer id are ignored, zero-quantity lines count for nothing.
-- Windows are whole days, so a sum over the days of a window equals the sum over its order lines.
SELECT o.customer_id,
       l.sku,
       CAST(o.ordered_at AS DATE)                        AS order_day,
       sum(l.quantity)                                   AS quantity,
       max(CASE WHEN l.quantity > 0 THEN 1 ELSE 0 END)   AS bought
FROM (SELECT DISTINCT order_id, sku, quantity, net_amount FROM order_lines) AS l
JOIN orders AS o ON o.order_id = l.order_id
WHERE o.customer_id IS NOT NULL
  AND l.quantity <> 0
GROUP BY o.customer_id, l.sku, CAST(o.ordered_at AS DATE)
