-- Some values a filter column holds, to suggest when a given one is absent.
SELECT DISTINCT {column} AS value
FROM {table}
WHERE {column} IS NOT NULL
ORDER BY 1
LIMIT :most
