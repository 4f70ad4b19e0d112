-- Every item at one level (the level slot: sku, category or department, named by reachlist).
SELECT DISTINCT {level} AS item FROM products ORDER BY 1
