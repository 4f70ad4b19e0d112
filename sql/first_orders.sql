-- reachlist first orders: when each customer first ordered (one row per customer id). A customer
-- of the history at a cutoff is one whose first order came before it, and their age as a
-- customer is the days from that order's day to the cutoff: every estimate asks this at each of
-- its cutoffs, so `reachlist holdings` keeps these rows beside the holdings (any cutoff reads
-- them) and without that file each query derives them here.
SELECT customer_id, min(ordered_at) AS first_at
FROM orders
WHERE customer_id IS NOT NULL
  AND ordered_at IS NOT NULL
GROUP BY customer_id
