-- Every holdings row (customer x SKU x day) at once, as `reachlist holdings` writes the file and
-- a PostgreSQL command keeps them for itself: the rows of holdings.sql, worked out another way,
-- in two steps. This query is the first; holdings_exact.sql is the second.
--
-- holdings.sql drops exact duplicate lines from every line and then groups the rest by customer,
-- SKU and day: two groupings of all the lines. Inside a question about a few SKUs or days that is
-- right, because the engine pushes the question's filters into the groupings and reads only the
-- lines they need. Written whole, one grouping does: a day made of one line has no duplicate to
-- drop, so its sums stand. `lines` counts a day's lines; the few days of more than one (the same
-- SKU twice in an order, or in two orders of the day) are then summed again from their distinct
-- lines and replace these rows (holdings_exact.sql). At 1M customers, 23M lines, this first
-- step wrote the file's rows in 7.3-8.6 s against 11.3-12.8 s for holdings.sql's (three runs
-- each, same minutes); with the second step and the first orders 9.4-11.1 s against 12.4-13.8 s. tests/test_holdings_netting.py holds both ways to the rule.
--
-- The grouping below reads the order lines here and, in holdings_exact.sql, the distinct lines
-- of those days.
-- part: day_sums
SELECT o.customer_id,
       l.sku,
       CAST(o.ordered_at AS DATE)                        AS order_day,
       sum(l.quantity)                                   AS quantity,
       max(CASE WHEN l.quantity > 0 THEN 1 ELSE 0 END)   AS bought,
       count(*)                                          AS lines
FROM {lines} AS l
JOIN orders AS o ON o.order_id = l.order_id
WHERE o.customer_id IS NOT NULL
  AND l.quantity <> 0
GROUP BY o.customer_id, l.sku, CAST(o.ordered_at AS DATE)
