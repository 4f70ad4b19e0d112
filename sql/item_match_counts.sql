-- How many products, categories and departments contain the search text (:pattern as in
-- item_search.sql), so reachlist can say when it counted buyers for only some of them.
SELECT sum(CASE WHEN lower(sku) LIKE :pattern ESCAPE '!'
                  OR lower(name) LIKE :pattern ESCAPE '!'
                  OR lower(category) LIKE :pattern ESCAPE '!'
                  OR lower(department) LIKE :pattern ESCAPE '!'
                THEN 1 ELSE 0 END)                                               AS skus,
       count(DISTINCT CASE WHEN lower(category) LIKE :pattern ESCAPE '!'
                           THEN category END)                                    AS categories,
       count(DISTINCT CASE WHEN lower(department) LIKE :pattern ESCAPE '!'
                           THEN department END)                                  AS departments
FROM products
