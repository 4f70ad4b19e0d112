-- The holdout's hash for many customers at once (reachlist/holdout.py): the first 8 bytes of
-- SHA-256 of the campaign's prefix and each id's text, as an unsigned 64-bit integer. The same
-- numbers as Python's hashlib (the tests compare the two); run on an in-memory DuckDB over the
-- fetched ids, never on the warehouse, so every warehouse gets the same groups.
SELECT CAST('0x' || substr(sha256(:prefix || id_text), 1, 16) AS UBIGINT) AS head
FROM holdout_ids
