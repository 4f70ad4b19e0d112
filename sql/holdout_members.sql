-- The held-out customers of the given campaigns.
SELECT DISTINCT customer_id
FROM campaign_contacts
WHERE contact_group = :holdout
  AND campaign_id IN (:campaign_ids)
