-- Whether the campaign log already holds this campaign.
SELECT count(*) AS n FROM campaigns WHERE campaign_id = :campaign_id
