-- The order history's watermark: when any of these changes, the holdings built from it are out
-- of date and are rebuilt. An edit that keeps every figure (a line's SKU swapped for another
-- with the same quantity) goes unseen: `reachlist holdings` rebuilds on request. A change of
-- any SKU's category is a change too (the file keeps breadth, counted in categories).
SELECT (SELECT count(*) FROM order_lines)      AS order_lines,
       (SELECT sum(quantity) FROM order_lines) AS quantity_sum,
       (SELECT count(*) FROM orders)           AS orders,
       (SELECT max(ordered_at) FROM orders)    AS last_order,
       -- which category each SKU is in: the kept breadth counts categories
       (SELECT md5(string_agg(CAST(sku AS VARCHAR) || '|' || coalesce(CAST(category AS VARCHAR), ''),
                              ',' ORDER BY sku, category))
        FROM products)                         AS catalogue
