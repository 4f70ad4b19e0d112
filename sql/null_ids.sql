-- Rows without an id that every query joins on, or without the time or quantity every sum reads.
SELECT
    (SELECT count(*) FROM customers WHERE customer_id IS NULL)  AS customers_without_id,
    (SELECT count(*) FROM orders WHERE order_id IS NULL)        AS orders_without_id,
    (SELECT count(*) FROM order_lines WHERE sku IS NULL)        AS lines_without_sku,
    (SELECT count(*) FROM orders WHERE ordered_at IS NULL)      AS orders_without_time,
    (SELECT count(*) FROM order_lines WHERE quantity IS NULL)   AS lines_without_quantity
