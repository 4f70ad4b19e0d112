-- The order history's watermark: when any of these changes, the holdings built from it are out
-- of date and are rebuilt. An edit that keeps every figure (a line's SKU swapped for another
-- with the same quantity) goes unseen: `reachlist holdings` rebuilds on request.
SELECT (SELECT count(*) FROM order_lines)      AS order_lines,
       (SELECT sum(quantity) FROM order_lines) AS quantity_sum,
       (SELECT count(*) FROM orders)           AS orders,
       (SELECT max(ordered_at) FROM orders)    AS last_order
