-- Orders per calendar month (a few hundred rows at most for decades of history): `check` looks
-- for months far from the rest (a typed year such as 2062 or 1970) in this small histogram.
SELECT date_trunc('month', ordered_at) AS month, count(*) AS orders
FROM orders
WHERE ordered_at IS NOT NULL
GROUP BY date_trunc('month', ordered_at)
ORDER BY 1
