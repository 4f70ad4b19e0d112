-- How each table of the sample warehouse is loaded from the generator's Arrow table `src`
-- (one part per table, in load order).

-- part: customers
SELECT customer_id, email, marketing_consent, consent_date, birth_date, CAST(region AS VARCHAR) FROM src

-- part: products
SELECT * FROM src

-- part: orders
SELECT order_id, customer_id, CAST(ordered_at AS TIMESTAMP), CAST(channel AS VARCHAR) FROM src

-- part: order_lines
SELECT order_id, CAST(sku AS VARCHAR), quantity, CAST(cents AS DECIMAL(18,0)) / 100 FROM src

-- part: suppressions
SELECT customer_id, CAST(reason AS VARCHAR), suppressed_at FROM src

-- part: sample_rules
SELECT * FROM src

-- part: sample_customer_truth
SELECT * FROM src

-- part: sample_planted
SELECT rule_id, customer_id, CAST(antecedent_held_at AS TIMESTAMP), CAST(target_bought_at AS TIMESTAMP), target_sku, source, target_purchases, target_full_returns FROM src

-- part: sample_planted_campaigns
SELECT campaign_id, rule_id, target, purpose, CAST(sent_at AS TIMESTAMP), horizon_days, holdout_share, planted_ratio, customers, buyers FROM src

-- part: sample_meta
SELECT * FROM src
