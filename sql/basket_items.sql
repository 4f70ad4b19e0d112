-- The baskets holding any of the given items, from a held-items query (the held slot).
SELECT basket, item FROM (
{held}
) AS held
WHERE item IN (:items)
