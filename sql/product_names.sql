-- Product names of the given SKUs (for export columns written in words).
SELECT sku, min(name) AS name
FROM products
WHERE sku IN (:skus)
GROUP BY sku
