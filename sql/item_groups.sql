-- The category and department a SKU belongs to (a new item's natural stand-ins).
SELECT category, department
FROM products
WHERE sku = :sku
