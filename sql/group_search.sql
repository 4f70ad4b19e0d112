-- Categories or departments ({level}) whose name contains the search text (:pattern as in
-- item_search.sql), with their number of SKUs and how many customers bought any SKU in them in
-- [:since, :until) (net quantity of some SKU of the group positive inside the window).
-- At most :most groups are counted (the first by name).
WITH matched AS (
    SELECT {level} AS item, count(*) AS skus
    FROM products
    WHERE lower({level}) LIKE :pattern ESCAPE '!'
    GROUP BY {level}
    ORDER BY {level}
    LIMIT :most
),
matched_lines AS (
    SELECT DISTINCT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    WHERE l.sku IN (SELECT sku FROM products WHERE {level} IN (SELECT item FROM matched))
),
bought AS (
    SELECT o.customer_id, l.sku, sum(l.quantity) AS units, sum(l.net_amount) AS amount
    FROM matched_lines AS l
    JOIN orders AS o ON o.order_id = l.order_id
    WHERE o.ordered_at >= :since
      AND o.ordered_at < :until
    GROUP BY o.customer_id, l.sku
    HAVING sum(l.quantity) > 0
)
SELECT m.item, m.skus,
       count(DISTINCT b.customer_id) AS buyers,
       coalesce(sum(b.units), 0)     AS units,
       coalesce(sum(b.amount), 0)    AS net_amount
FROM matched AS m
LEFT JOIN products AS p ON p.{level} = m.item
LEFT JOIN bought AS b ON b.sku = p.sku
GROUP BY m.item, m.skus
