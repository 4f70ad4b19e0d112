-- Which category and department each SKU belongs to.
SELECT DISTINCT sku, category, department FROM products
