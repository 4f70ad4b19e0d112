-- One campaign's listed customers per reaching rule and group (the log names the reaching rule).
SELECT rule_id, contact_group, count(*) AS customers
FROM campaign_contacts
WHERE campaign_id = :campaign_id
GROUP BY rule_id, contact_group
ORDER BY rule_id, contact_group
