-- Other campaigns that held customers out since :since, with when their holdout was logged as
-- sent and their parameters (which hold the take-up horizon). reachlist keeps those whose
-- horizon has not ended out of a new campaign's treatment group.
SELECT cc.campaign_id, min(cc.contacted_at) AS sent_at, min(c.parameters) AS parameters
FROM campaign_contacts AS cc
JOIN campaigns AS c ON c.campaign_id = cc.campaign_id
WHERE cc.contact_group = :holdout
  AND cc.contacted_at >= :since
  AND cc.campaign_id <> :campaign_id
GROUP BY cc.campaign_id
ORDER BY cc.campaign_id
