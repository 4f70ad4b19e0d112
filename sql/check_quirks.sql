-- Row counts, the date range and data-quality counts for `reachlist check`.
-- One row; every figure is a count except the two dates.
SELECT
    (SELECT count(*) FROM customers)                                   AS customers,
    (SELECT count(*) FROM products)                                    AS products,
    (SELECT count(*) FROM orders)                                      AS orders,
    (SELECT count(*) FROM order_lines)                                 AS order_lines,
    (SELECT count(*) FROM suppressions)                                AS suppressions,
    (SELECT min(ordered_at) FROM orders)                               AS first_order_at,
    (SELECT max(ordered_at) FROM orders)                               AS last_order_at,
    (SELECT count(DISTINCT channel) FROM orders)                       AS channels,
    (SELECT count(DISTINCT category) FROM products)                    AS categories,
    (SELECT count(DISTINCT department) FROM products)                  AS departments,
    -- quirks every real order history has
    (SELECT count(*) FROM order_lines WHERE quantity < 0)              AS return_lines,
    (SELECT count(*) FROM order_lines WHERE quantity = 0)              AS zero_quantity_lines,
    (SELECT count(*) FROM order_lines)
      - (SELECT count(*) FROM (SELECT DISTINCT order_id, sku, quantity, net_amount
                               FROM order_lines) AS distinct_lines)    AS duplicate_lines,
    (SELECT count(*) FROM order_lines AS l
      WHERE NOT EXISTS (SELECT 1 FROM products AS p WHERE p.sku = l.sku))
                                                                       AS unknown_sku_lines,
    (SELECT count(DISTINCT l.sku) FROM order_lines AS l
      WHERE NOT EXISTS (SELECT 1 FROM products AS p WHERE p.sku = l.sku))
                                                                       AS unknown_skus,
    (SELECT count(*) FROM order_lines AS l
      WHERE NOT EXISTS (SELECT 1 FROM orders AS o WHERE o.order_id = l.order_id))
                                                                       AS lines_without_order,
    (SELECT count(*) FROM orders AS o
      WHERE NOT EXISTS (SELECT 1 FROM customers AS c WHERE c.customer_id = o.customer_id))
                                                                       AS orders_without_customer,
    -- who may be contacted
    (SELECT count(*) FROM customers WHERE marketing_consent IS NOT TRUE) AS customers_without_consent,
    (SELECT count(*) FROM customers WHERE birth_date IS NULL)          AS customers_age_unknown,
    (SELECT count(*) FROM customers WHERE email IS NULL OR email = '') AS customers_without_email,
    (SELECT count(DISTINCT customer_id) FROM suppressions)             AS customers_suppressed,
    -- products that need care
    (SELECT count(*) FROM products WHERE age_restricted)               AS age_restricted_products,
    (SELECT count(DISTINCT category) FROM products WHERE sensitive)    AS sensitive_categories,
    (SELECT count(*) FROM products
      WHERE category IS NULL OR department IS NULL)                    AS products_ungrouped,
    (SELECT count(*) FROM products AS p
      WHERE NOT EXISTS (SELECT 1 FROM order_lines AS l WHERE l.sku = p.sku))
                                                                       AS products_never_sold
