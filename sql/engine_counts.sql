-- Counts for mining toward one target, computed where the order lines are (the engine), so only
-- small results reach reachlist: n(i) per item, the target holders' own items, n(X) for the
-- antecedents the search finds, and per-decile tables of shopping breadth.
-- The customer -> item pairs (those of held_items.sql: net quantity positive over the window's
-- days, with the target added under its own label when it sits at another level than the
-- antecedents) are kept once in the engine as reachlist_pairs, each customer's breadth and
-- whether they hold the target as reachlist_breadth; the counting queries read those two.
-- held_skus (which SKUs a customer holds over the window's days) is held_items.sql's own part.
-- part: level_pairs
level_pairs AS (
    SELECT DISTINCT h.basket, p.{level} AS item
    FROM held_skus AS h
    JOIN products AS p ON p.sku = h.sku
    WHERE p.{level} IS NOT NULL  -- a SKU with no category or department is no item there
)
-- part: target_pairs
target_pairs AS (
    SELECT DISTINCT h.basket, :target_label AS item
    FROM held_skus AS h
    JOIN products AS p ON p.sku = h.sku
    WHERE p.{target_level} = :target_name
)
-- part: same_level
SELECT basket, item FROM level_pairs
-- part: other_level
SELECT basket, item FROM level_pairs{without_related}
UNION ALL
SELECT basket, item FROM target_pairs
-- part: breadth_sku
-- breadth: distinct categories held, the target's own item left out; has_y: holds the target
SELECT h.basket,
       count(DISTINCT CASE WHEN h.item <> :target_label THEN p.category END) AS breadth,
       max(CASE WHEN h.item = :target_label THEN 1 ELSE 0 END) AS has_y
FROM reachlist_pairs AS h
LEFT JOIN (SELECT DISTINCT sku, category FROM products) AS p ON p.sku = h.item
GROUP BY h.basket
-- part: breadth_category
SELECT basket,
       count(DISTINCT CASE WHEN item <> :target_label THEN item END) AS breadth,
       max(CASE WHEN item = :target_label THEN 1 ELSE 0 END) AS has_y
FROM reachlist_pairs
GROUP BY basket
-- part: groups_department
breadth_groups AS (
    SELECT DISTINCT h.basket, p.category AS grp
    FROM held_skus AS h
    JOIN products AS p ON p.sku = h.sku{without_target_category}
)
-- part: breadth_department
-- at department level breadth still counts categories (of every SKU held)
SELECT b.basket, coalesce(g.breadth, 0) AS breadth, b.has_y
FROM (
    SELECT basket, max(CASE WHEN item = :target_label THEN 1 ELSE 0 END) AS has_y
    FROM reachlist_pairs
    GROUP BY basket
) AS b
LEFT JOIN (
    SELECT basket, count(DISTINCT grp) AS breadth
    FROM breadth_groups
    GROUP BY basket
) AS g ON g.basket = b.basket
-- part: item_counts
SELECT 0 AS total, item, count(*) AS n
FROM reachlist_pairs
GROUP BY item
UNION ALL
SELECT 1 AS total, NULL AS item, count(DISTINCT basket) AS n
FROM reachlist_pairs
-- part: held_by_target
-- the target holders' items, less those fewer than :min_count of them hold (no rule can use
-- such an item: a rule needs that many co-purchases); the target itself always
held AS (
    SELECT basket, item
    FROM reachlist_pairs
    WHERE basket IN (SELECT basket FROM reachlist_pairs WHERE item = :target_label)
),
kept AS (
    SELECT item FROM held GROUP BY item HAVING count(*) >= :min_count
)
-- part: held_items
SELECT basket, item
FROM held
WHERE item IN (SELECT item FROM kept) OR item = :target_label
-- part: hits
-- the baskets holding each itemset: those of its rarest item (position 0) that hold the
-- others too
first_item AS (
    SELECT c.itemset, c.size, p.basket
    FROM reachlist_itemsets AS c
    JOIN reachlist_pairs AS p ON p.item = c.item
    WHERE c.position = 0
),
hits AS (
    SELECT itemset, basket FROM first_item WHERE size = 1
    UNION ALL
    SELECT f.itemset, f.basket
    FROM first_item AS f
    JOIN reachlist_itemsets AS c ON c.itemset = f.itemset AND c.position > 0
    JOIN reachlist_pairs AS p ON p.basket = f.basket AND p.item = c.item
    GROUP BY f.itemset, f.basket
    HAVING count(*) = max(f.size) - 1
)
-- part: itemset_counts
SELECT itemset, count(*) AS n
FROM hits
GROUP BY itemset
-- part: breadth_histogram
SELECT breadth, count(*) AS n
FROM reachlist_breadth
GROUP BY breadth
-- part: marked
marked AS (
    SELECT basket, {decile} AS decile, has_y
    FROM reachlist_breadth
)
-- part: breadth_tables
SELECT -1 AS itemset, decile, has_y, count(*) AS n
FROM marked
GROUP BY decile, has_y
UNION ALL
SELECT h.itemset, m.decile, m.has_y, count(*) AS n
FROM hits AS h
JOIN marked AS m ON m.basket = h.basket
GROUP BY h.itemset, m.decile, m.has_y
-- part: without_related
WHERE item NOT IN (:related)
-- part: without_target_category
WHERE p.category <> :target_name
-- part: decile_term
CASE WHEN breadth > :edge_{i} THEN 1 ELSE 0 END
