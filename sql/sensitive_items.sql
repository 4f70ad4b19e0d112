-- Which of the given items (at the level slot's column) are marked sensitive in the catalogue.
SELECT DISTINCT {level} AS item
FROM products
WHERE sensitive AND {level} IN (:items)
ORDER BY 1
