-- Customers contacted (treatment) since a day by campaigns other than this one: the contact cap.
SELECT DISTINCT customer_id
FROM campaign_contacts
WHERE contact_group = :treatment
  AND contacted_at >= :since
  AND campaign_id <> :campaign_id
