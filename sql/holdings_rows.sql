-- Every holdings row (customer x SKU x day), as the holdings file stores it.
SELECT customer_id, sku, order_day, quantity, bought FROM holdings
