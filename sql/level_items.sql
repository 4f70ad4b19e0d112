-- Every item at one level (the level slot: sku, category or department, named by reachlist); a
-- product with none there names no item.
SELECT DISTINCT {level} AS item FROM products WHERE {level} IS NOT NULL ORDER BY 1
