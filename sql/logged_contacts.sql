-- One logged campaign's contacts, both groups.
SELECT campaign_id, customer_id, contact_group, score, rule_id, contacted_at
FROM campaign_contacts
WHERE campaign_id = :campaign_id
ORDER BY customer_id
