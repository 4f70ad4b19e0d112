-- The facts about the order history that every default window depends on, in one pass.
--   last_order:      the last order time not later than today (:tomorrow is the day after today);
--                    the default window ends the day after it
--   later_orders:    orders dated after today (typos such as 2062, or clocks set wrong); they are
--                    left out of the default window and reported, never used silently
--   latest_later:    the latest of those
--   without_customer: orders with no customer id; no customer can hold them, so every query
--                    leaves them out, and they are reported
SELECT
    max(CASE WHEN ordered_at < :tomorrow THEN ordered_at END)     AS last_order,
    sum(CASE WHEN ordered_at >= :tomorrow THEN 1 ELSE 0 END)      AS later_orders,
    max(CASE WHEN ordered_at >= :tomorrow THEN ordered_at END)    AS latest_later,
    sum(CASE WHEN customer_id IS NULL THEN 1 ELSE 0 END)          AS without_customer
FROM orders
