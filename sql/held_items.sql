-- Which customers hold which items inside a time window [:since, :until) of whole days.
-- A customer holds a SKU when their net quantity of it over the window's days is positive:
-- returns cancel purchases, and the holdings (holdings.sql) already count exact duplicate lines
-- once and ignore orders without a customer. SKUs missing from products are left out.
-- At category or department level, a customer holds the group when they hold any SKU in it; a
-- SKU with no category (or department) is left out there, as one missing from products is.
-- At SKU level the pairs are distinct already (one per customer and SKU): products only says
-- which SKUs count (a semi-join, so a SKU listed twice in products is not doubled), and no
-- DISTINCT pass is made (at 1M customers 2.7 s -> 1.7 s for 9.6M pairs).
-- The holdings file also keeps held_skus for the default mining window, each SKU as a small
-- integer code (held_codes_rows over window_items_rows, written by `reachlist holdings`, only
-- SKUs in products: a change of products rebuilds the file); a query for exactly that window
-- reads it (held_skus_built; held_codes_built and held_items_built for mining, which wants the
-- codes) instead of summing the window's days again.
WITH
-- part: held_skus
held_skus AS (
    SELECT customer_id AS basket, sku
    FROM holdings
    WHERE order_day >= :since
      AND order_day < :until
    GROUP BY customer_id, sku
    HAVING sum(quantity) > 0
)
-- part: held_skus_built
held_skus AS (
    SELECT p.customer_id AS basket, i.sku
    FROM {built_table} AS p
    JOIN {built_items} AS i ON i.code = p.code
)
-- part: window_items_rows
SELECT sku, CAST(row_number() OVER (ORDER BY sku) - 1 AS INTEGER) AS code
FROM (SELECT DISTINCT sku FROM products) AS s
-- part: held_codes_rows
SELECT h.basket AS customer_id, i.code
FROM held_skus AS h
JOIN {built_items} AS i ON i.sku = h.sku
ORDER BY h.basket, i.code
-- part: held_tids_rows
-- The same pairs item by item: each code's customers as their position in the pairs' customer
-- order (0, 1, ...), ascending; mining reads it as the baskets of each item instead of sorting
-- the pairs by code in memory
SELECT p.code, c.basket_no
FROM {built_table} AS p
JOIN (
    SELECT customer_id, CAST(row_number() OVER (ORDER BY customer_id) - 1 AS INTEGER) AS basket_no
    FROM (SELECT DISTINCT customer_id FROM {built_table}) AS d
) AS c ON c.customer_id = p.customer_id
ORDER BY p.code, c.basket_no
-- part: held_codes_built
SELECT customer_id AS basket, code
FROM {built_table}
-- part: held_tids_built
SELECT code, basket_no
FROM {built_tids}
-- part: held_items_built
SELECT code, sku AS item
FROM {built_items}
ORDER BY code
-- part: held_pairs
SELECT DISTINCT h.basket, p.{level} AS item
FROM held_skus AS h
JOIN products AS p ON p.sku = h.sku
WHERE p.{level} IS NOT NULL{only_item}
-- part: held_sku_pairs
SELECT h.basket, h.sku AS item
FROM held_skus AS h
WHERE h.sku IN (SELECT sku FROM products){only_sku}
