-- How many baskets a held-items query (the held slot, built by reachlist) yields.
SELECT count(DISTINCT basket) AS n FROM (
{held}
) AS held
