-- Every SKU with its name (to match a target written as a product name).
SELECT sku, name FROM products
