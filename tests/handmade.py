"""Small hand-built warehouses for edge cases (invented rows; checks against outside sources live
in the reference tests)."""

from __future__ import annotations

from datetime import date, datetime
from pathlib import Path
from typing import Any

import duckdb

DDL = {
    "customers": "customer_id BIGINT, email VARCHAR, marketing_consent BOOLEAN, "
    "consent_date DATE, birth_date DATE, region VARCHAR",
    "products": "sku VARCHAR, name VARCHAR, category VARCHAR, department VARCHAR, "
    "age_restricted BOOLEAN, sensitive BOOLEAN, launch_date DATE, stock_on_hand INTEGER",
    "orders": "order_id BIGINT, customer_id BIGINT, ordered_at TIMESTAMP, channel VARCHAR",
    "order_lines": "order_id BIGINT, sku VARCHAR, quantity INTEGER, net_amount DECIMAL(12,2)",
    "suppressions": "customer_id BIGINT, reason VARCHAR, suppressed_at DATE",
}


def product(sku: str, category: str = "cat", department: str = "dept", **kw: Any) -> tuple:
    return (
        sku,
        kw.get("name", sku),
        category,
        department,
        kw.get("age_restricted", False),
        kw.get("sensitive", False),
        kw.get("launch_date", date(2024, 1, 1)),
        kw.get("stock_on_hand", 10),
    )


def customer(
    cid: int, consent: bool = True, birth: date | None = date(1980, 1, 1), **kw: Any
) -> tuple:
    return (
        cid,
        kw.get("email", f"c{cid}@example.invalid"),
        consent,
        date(2024, 1, 1) if consent else None,
        birth,
        kw.get("region", "north"),
    )


def build(
    path: Path,
    *,
    customers: list[tuple],
    products: list[tuple],
    purchases: list[tuple[int, str, str, int]],
    suppressions: list[tuple] = (),  # type: ignore[assignment]
    names: dict[str, str] | None = None,
) -> Path:
    """purchases: (customer_id, 'YYYY-MM-DD', sku, quantity); one order per (customer, day)."""
    con = duckdb.connect(str(path))
    names = names or {}
    for t, ddl in DDL.items():
        con.execute(f"CREATE TABLE {names.get(t, t)} ({ddl})")
    con.executemany(
        f"INSERT INTO {names.get('customers', 'customers')} VALUES (?,?,?,?,?,?)", customers
    )
    con.executemany(
        f"INSERT INTO {names.get('products', 'products')} VALUES (?,?,?,?,?,?,?,?)", products
    )
    orders: dict[tuple[int, str], int] = {}
    lines = []
    for cid, day, sku, qty in purchases:
        oid = orders.setdefault((cid, day), len(orders) + 1)
        lines.append((oid, sku, qty, 9.99 * qty))
    con.executemany(
        f"INSERT INTO {names.get('orders', 'orders')} VALUES (?,?,?,?)",
        [(oid, cid, datetime.fromisoformat(day), "store") for (cid, day), oid in orders.items()],
    )
    con.executemany(
        f"INSERT INTO {names.get('order_lines', 'order_lines')} VALUES (?,?,?,?)", lines
    )
    if suppressions:
        con.executemany(
            f"INSERT INTO {names.get('suppressions', 'suppressions')} VALUES (?,?,?)", suppressions
        )
    con.close()
    return path
