-- How many campaigns one log holds.
SELECT count(*) AS n
FROM campaigns
