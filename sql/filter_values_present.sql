-- Which of the given values a filter column holds (the table and column slots: customers.region
-- or orders.channel, chosen by reachlist).
SELECT DISTINCT {column} AS value FROM {table} WHERE {column} IN (:values)
