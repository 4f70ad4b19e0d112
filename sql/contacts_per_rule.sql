-- One campaign's listed customers per reaching rule and group (the log's reason is the rule id).
SELECT reason AS rule_id, contact_group, count(*) AS customers
FROM campaign_contacts
WHERE campaign_id = :campaign_id
GROUP BY reason, contact_group
ORDER BY reason, contact_group
