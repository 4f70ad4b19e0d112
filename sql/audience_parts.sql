-- Repeated or optional parts of sql/audience.sql, each after a `-- part: NAME` line.
-- reachlist fills {k} with rule numbers and the other slots with fixed text of its own; every
-- value (items, ids, scores, dates) is a bound parameter.

-- part: rule_block
rule_{k} AS (
    -- customers holding every antecedent item of rule {k}
    SELECT customer_id
    FROM held
    WHERE item IN (:rule_{k}_items)
    GROUP BY customer_id
    HAVING count(*) = :rule_{k}_size
)

-- part: reached_line
    SELECT customer_id, {k} AS rule_rank, :rule_{k}_id AS rule_id, :rule_{k}_score AS score FROM rule_{k}

-- part: channel_cte
,
channel_customers AS (
    -- customers with an order through a chosen channel inside the lookback window
    SELECT DISTINCT customer_id FROM orders
    WHERE channel IN (:channels) AND ordered_at >= :since AND ordered_at < :until
)

-- part: active_cte
,
active_customers AS (
    -- customers with an order (a purchase or a return) recently enough
    SELECT DISTINCT customer_id FROM orders
    WHERE ordered_at >= :active_since AND ordered_at < :until
)

-- part: list_select
SELECT
    b.customer_id,
    b.rule_id,
    b.score,
    {flags}{contact}
FROM listed AS b
ORDER BY b.score DESC, b.customer_id

-- part: reach_select
SELECT customer_id, rule_rank
FROM reached
ORDER BY rule_rank, customer_id

-- part: cutoff_rule_block
rule_{k} AS (
    -- (customer, cutoffs) of rule {k}: bit k set where every antecedent item is held
    SELECT customer_id, bit_and(bits) AS bits
    FROM held
    WHERE item IN (:rule_{k}_items)
    GROUP BY customer_id
    HAVING count(*) = :rule_{k}_size AND bit_and(bits) <> 0
)

-- part: cutoff_reached_line
    SELECT ks.k + 1 AS cutoff, r.customer_id, {k} AS rule_rank
    FROM rule_{k} AS r
    JOIN cutoff_numbers AS ks ON ((r.bits >> ks.k) & 1) = 1

-- part: cutoff_bits_line
    SELECT r.customer_id, {k} AS rule_rank, r.bits
    FROM rule_{k} AS r
