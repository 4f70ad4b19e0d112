-- The campaigns in one log, newest first, at most :limit of them (the caller counts the rest).
SELECT campaign_id, created_at, target, purpose, parameters, counts
FROM campaigns
ORDER BY created_at DESC, campaign_id
LIMIT :limit
