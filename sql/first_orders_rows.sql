-- reachlist first orders, as `reachlist holdings` writes them into its file (sql/first_orders.sql
-- derives them), in customer order.
SELECT customer_id, first_at
FROM first_orders
ORDER BY customer_id
