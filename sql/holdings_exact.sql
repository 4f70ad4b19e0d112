-- The second step of holdings_rows.sql: the days of more than one line in the rows it wrote
-- (the table named below, reachlist's own), summed again from their distinct lines: exact duplicate
-- lines once, as holdings.sql counts them. These rows replace those days' rows.
--
-- The orders behind each such day are found by equal values, with a null day or SKU (a value of
-- its own in a grouping) in a branch of its own, so that no join compares rows it then throws
-- away; UNION drops the duplicate lines. The sums at the end are holdings_rows.sql's grouping,
-- of these lines.
WITH
shared_orders AS (
    SELECT o.order_id, d.sku
    FROM {days} AS d
    JOIN orders AS o ON o.customer_id = d.customer_id
                    AND CAST(o.ordered_at AS DATE) = d.order_day
    WHERE d.lines > 1
    UNION
    SELECT o.order_id, d.sku
    FROM {days} AS d
    JOIN orders AS o ON o.customer_id = d.customer_id
    WHERE d.lines > 1
      AND d.order_day IS NULL
      AND o.ordered_at IS NULL
),
distinct_lines AS (
    SELECT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    JOIN shared_orders AS s ON s.order_id = l.order_id AND s.sku = l.sku
    WHERE l.quantity <> 0
    UNION
    SELECT l.order_id, l.sku, l.quantity, l.net_amount
    FROM order_lines AS l
    JOIN shared_orders AS s ON s.order_id = l.order_id
    WHERE l.quantity <> 0
      AND l.sku IS NULL
      AND s.sku IS NULL
)
{day_sums}
