-- Customer ids that appear on more than one row of customers. Consent, age and region are facts
-- about a customer: two rows that disagree make every list built on them doubtful, so reachlist
-- refuses such a warehouse unless the user asks it to read each id by its strictest row.
--   duplicated_ids: customer ids on more than one row
--   duplicate_rows: the rows those ids occupy
SELECT count(*)               AS duplicated_ids,
       coalesce(sum(rows_per_id), 0) AS duplicate_rows
FROM (
    SELECT customer_id, count(*) AS rows_per_id
    FROM customers
    WHERE customer_id IS NOT NULL
    GROUP BY customer_id
    HAVING count(*) > 1
) AS repeated
