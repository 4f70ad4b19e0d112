-- Which cutoffs' windows each customer holds each SKU in, as bits of one 64-bit mask: the
-- common step of takeup_history.sql (breadth windows) and reach_at_cutoffs.sql (the rules'
-- lookback windows). The input {days} has one row per customer, SKU and day (customer_id, sku,
-- quantity, age = days before a reference day, >= 1). Cutoff k (k = 0 .. {last}) lies k steps
-- of {step} days before the reference day and its window is the {window} days before it, so a
-- day lies in cutoff k's window exactly when k * step < age <= k * step + window.
--
-- "Holds" is a positive net quantity over the window's days. For a pair without a return that
-- is "bought on a day inside the window", and the cutoffs whose window holds a day are a run
-- k_lo .. k_hi worked out from its age (no join to the cutoffs); the few pairs with a return
-- are netted window by window, one conditional sum per cutoff ({netted}).
--
-- Pairs are told apart by PAIR_KEY, one value per pair (a 64-bit hash on DuckDB and Spark).
-- When a pair without a return shares its value with a pair that has one, it goes the netting
-- way too, which is exact for any pair (netted rows are grouped by the customer and SKU
-- themselves): a shared value costs a little work, never a wrong bit.
-- part: ctes
{name}_returned AS (
    SELECT DISTINCT PAIR_KEY(customer_id, sku) AS pair FROM {days} WHERE quantity < 0
),
{name}_runs AS (
    SELECT d.customer_id, d.sku,
           CASE WHEN d.age <= {window} THEN 0
                ELSE CAST(FLOOR((d.age - {window} + {step} - 1) * 1.0 / {step}) AS INTEGER)
           END                                                           AS k_lo,
           LEAST({last}, CAST(FLOOR((d.age - 1) * 1.0 / {step}) AS INTEGER)) AS k_hi
    FROM {days} AS d
    LEFT JOIN {name}_returned AS r ON r.pair = PAIR_KEY(d.customer_id, d.sku)
    WHERE r.pair IS NULL AND d.quantity > 0
),
{name}_netted AS (
    SELECT d.customer_id, d.sku,
{netted}
           AS bits
    FROM {days} AS d
    JOIN {name}_returned AS r ON r.pair = PAIR_KEY(d.customer_id, d.sku)
    GROUP BY d.customer_id, d.sku
),
{name} AS (
    -- bit k set: the customer holds the SKU in cutoff k's window
    SELECT customer_id, sku, (CAST(1 AS BIGINT) << (k_hi + 1)) - (CAST(1 AS BIGINT) << k_lo) AS bits
    FROM {name}_runs
    WHERE k_lo <= k_hi
    UNION ALL
    SELECT customer_id, sku, bits
    FROM {name}_netted
    WHERE bits <> 0
)
-- part: netted_term
           CASE WHEN sum(CASE WHEN d.age > {k} * {step} AND d.age <= {k} * {step} + {window}
                              THEN d.quantity ELSE 0 END) > 0
                THEN CAST(1 AS BIGINT) << {k} ELSE 0 END
