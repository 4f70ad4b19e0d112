-- Products whose code, name, category or department contains the search text (:pattern is the
-- lower-cased text between % signs, with %, _ and ! escaped by !), and how many customers bought
-- each in [:since, :until) with the net units and net amount they took. "Bought" follows
-- held_items.sql: net quantity per customer and SKU inside the window is positive (a purchase
-- returned in full does not count), exact duplicate lines count once.
-- At most :most products are counted (the first by code); reachlist says so when more match.
WITH matched AS (
    SELECT sku, name, category, department
    FROM products
    WHERE lower(sku) LIKE :pattern ESCAPE '!'
       OR lower(name) LIKE :pattern ESCAPE '!'
       OR lower(category) LIKE :pattern ESCAPE '!'
       OR lower(department) LIKE :pattern ESCAPE '!'
    ORDER BY sku
    LIMIT :most
),
matched_lines AS (
    SELECT DISTINCT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    WHERE l.sku IN (SELECT sku FROM matched)
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
SELECT m.sku, m.name, m.category, m.department,
       count(b.customer_id)         AS buyers,
       coalesce(sum(b.units), 0)    AS units,
       coalesce(sum(b.amount), 0)   AS net_amount
FROM matched AS m
LEFT JOIN bought AS b ON b.sku = m.sku
GROUP BY m.sku, m.name, m.category, m.department
