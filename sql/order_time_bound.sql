-- The first or last order time (the aggregate slot: min or max, chosen by reachlist).
SELECT {aggregate}(ordered_at) AS t FROM orders
