-- The day each customer gave marketing consent (the latest, for an id on several rows).
SELECT customer_id, max(consent_date) AS consent_date
FROM customers
WHERE customer_id IS NOT NULL
GROUP BY customer_id
