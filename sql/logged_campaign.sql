-- One logged campaign's row (JSON fields still as text).
SELECT campaign_id, created_at, target, purpose, parameters, rules, counts, overrides
FROM campaigns
WHERE campaign_id = :campaign_id
