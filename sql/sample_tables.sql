-- The sample warehouse's tables: the contract's five and the planted truth (DuckDB).
CREATE TABLE customers (
    customer_id BIGINT NOT NULL, email VARCHAR, marketing_consent BOOLEAN NOT NULL,
    consent_date DATE, birth_date DATE, region VARCHAR NOT NULL);
CREATE TABLE products (
    sku VARCHAR NOT NULL, name VARCHAR NOT NULL, category VARCHAR NOT NULL,
    department VARCHAR NOT NULL, age_restricted BOOLEAN NOT NULL, sensitive BOOLEAN NOT NULL,
    launch_date DATE NOT NULL, stock_on_hand INTEGER NOT NULL);
CREATE TABLE orders (
    order_id BIGINT NOT NULL, customer_id BIGINT NOT NULL, ordered_at TIMESTAMP NOT NULL,
    channel VARCHAR NOT NULL);
CREATE TABLE order_lines (
    order_id BIGINT NOT NULL, sku VARCHAR NOT NULL, quantity INTEGER NOT NULL,
    net_amount DECIMAL(12,2) NOT NULL);
CREATE TABLE suppressions (
    customer_id BIGINT NOT NULL, reason VARCHAR NOT NULL, suppressed_at DATE NOT NULL);
CREATE TABLE sample_meta (key VARCHAR NOT NULL, value VARCHAR NOT NULL);
CREATE TABLE sample_rules (
    rule_id VARCHAR NOT NULL, antecedent_level VARCHAR NOT NULL, antecedent VARCHAR[] NOT NULL,
    target_level VARCHAR NOT NULL, target VARCHAR NOT NULL, hazard_30d DOUBLE NOT NULL,
    base_hazard_30d DOUBLE NOT NULL, purpose VARCHAR NOT NULL, description VARCHAR NOT NULL);
CREATE TABLE sample_customer_truth (
    customer_id BIGINT NOT NULL, breadth DOUBLE NOT NULL, favoured_categories INTEGER NOT NULL,
    online_share DOUBLE NOT NULL, general_orders INTEGER NOT NULL);
CREATE TABLE sample_planted (
    rule_id VARCHAR NOT NULL, customer_id BIGINT NOT NULL, antecedent_held_at TIMESTAMP,
    target_bought_at TIMESTAMP, target_sku VARCHAR, source VARCHAR NOT NULL,
    target_purchases INTEGER NOT NULL, target_full_returns INTEGER NOT NULL);
CREATE TABLE sample_planted_campaigns (
    campaign_id VARCHAR NOT NULL, rule_id VARCHAR NOT NULL, target VARCHAR NOT NULL,
    purpose VARCHAR NOT NULL, sent_at TIMESTAMP NOT NULL, horizon_days INTEGER NOT NULL,
    holdout_share DOUBLE NOT NULL, planted_ratio DOUBLE NOT NULL, customers BIGINT NOT NULL,
    buyers BIGINT NOT NULL);
