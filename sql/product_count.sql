-- How many product rows the catalogue holds.
SELECT count(*) AS n FROM products
