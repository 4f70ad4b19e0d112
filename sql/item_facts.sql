-- What the products table says about one item (a SKU, category or department): how many SKUs it
-- has, their stock on hand, and whether any of them is age-restricted or sensitive.
SELECT count(*)                                         AS skus,
       sum(stock_on_hand)                               AS stock_on_hand,
       max(CASE WHEN age_restricted THEN 1 ELSE 0 END)  AS age_restricted,
       max(CASE WHEN sensitive THEN 1 ELSE 0 END)       AS sensitive
FROM products
WHERE {level} = :item
