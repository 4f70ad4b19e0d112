"""A small hand-built warehouse whose customers each exercise one edge of the audience definition.

Lookback window 2025-01-01 .. 2025-12-31; target T; rules R1 = A + B -> T, R2 = C -> T,
R3 = INJECT -> T (an item id that looks like SQL).
"""

from __future__ import annotations

from datetime import date, datetime
from pathlib import Path

import duckdb

from reachlist.targets import Target, Window
from tests import handmade as hm

INJECT = "'; DROP TABLE orders; --"
WINDOW = Window(datetime(2025, 1, 1), datetime(2026, 1, 1))
TARGET = Target("sku", "T")
RULES = [("R1", ("A", "B"), 0.30, 3.0), ("R2", ("C",), 0.20, 2.0), ("R3", (INJECT,), 0.10, 1.5)]

PRODUCTS = [
    hm.product("A", category="garden", department="outdoor"),
    hm.product("B", category="garden", department="outdoor"),
    hm.product("C", category="tools", department="outdoor"),
    hm.product("T", category="mats", department="indoor", stock_on_hand=5),
    hm.product("R", category="fuel", department="outdoor", age_restricted=True),
    hm.product("S", category="health", department="indoor", sensitive=True),
    hm.product(INJECT, category="garden", department="outdoor"),
    hm.product("NEW", category="mats", department="indoor", stock_on_hand=40),
]

CUSTOMERS = [
    hm.customer(cid) for cid in (1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 15, 16, 18, 20, 21, 22, 23)
] + [
    hm.customer(11, consent=False),
    hm.customer(12),
    hm.customer(13, birth=None),
    hm.customer(17, birth=date(2010, 5, 1)),
    hm.customer(19),
]
# customer 14 places orders but is missing from customers; 15 lives in the south
CUSTOMERS = [c if c[0] != 15 else hm.customer(15, region="south") for c in CUSTOMERS]

PURCHASES = [
    (1, "2025-03-01", "A", 1),
    (1, "2025-03-01", "B", 2),  # R1
    (2, "2025-03-01", "A", 1),  # half of R1: not reached
    (3, "2025-03-02", "C", 1),  # R2, a one-item antecedent
    (4, "2025-03-03", "A", 1),
    (4, "2025-04-03", "B", 1),
    (4, "2025-05-03", "C", 1),  # R1 and R2
    # A held only through lines that were returned: not held
    (5, "2025-02-01", "A", 1),
    (5, "2025-02-10", "A", -1),
    (5, "2025-02-01", "B", 1),
    # an exact duplicate line counts once, so the later return cancels A; C reaches via R2
    (6, "2025-03-01", "A", 1),
    (6, "2025-03-01", "A", 1),
    (6, "2025-04-01", "A", -1),
    (6, "2025-03-01", "B", 1),
    (6, "2025-03-01", "C", 1),
    # target bought once and returned: does not have the target
    (7, "2025-03-01", "A", 1),
    (7, "2025-03-01", "B", 1),
    (7, "2025-05-01", "T", 1),
    (7, "2025-05-10", "T", -1),
    (8, "2025-03-01", "A", 1),
    (8, "2025-03-01", "B", 1),
    (8, "2025-06-01", "T", 1),  # has T
    (9, "2024-06-01", "A", 1),
    (9, "2024-06-01", "B", 1),  # before the window
    (10, "2025-03-01", "ZZZ-UNKNOWN", 3),
    (10, "2025-03-05", "C", 1),  # unknown SKU ignored
    (11, "2025-03-01", "C", 1),  # no consent
    (12, "2025-03-01", "C", 1),  # suppressed
    (13, "2025-03-01", "C", 1),  # age unknown
    (14, "2025-03-01", "C", 1),  # not in customers
    (15, "2025-03-01", "C", 1),  # region south, ordered on the web
    (16, "2025-01-05", "C", 1),  # last order long before the cutoff
    (17, "2025-11-01", "C", 1),  # a minor
    (18, "2023-02-01", "T", 1),
    (18, "2025-03-01", "A", 1),
    (18, "2025-03-01", "B", 1),
    (19, "2025-12-20", "C", 1),  # suppressed twice
    (20, "2025-07-01", INJECT, 1),  # R3
    (21, "2025-02-01", "A", 2),
    (21, "2025-03-01", "A", -1),
    (21, "2025-03-01", "B", 1),  # partial
    (22, "2026-01-02", "C", 1),  # after the cutoff
    (23, "2025-12-31", "C", 1),
    (23, "2025-12-31", "T", 0),  # zero-quantity target line
]
SUPPRESSIONS = [(12, "asked", None), (19, "bounced", date(2025, 1, 1)), (19, "asked", None)]

# Who each rule reaches, worked out by hand from the rows above.
EXPECTED_REACH = {
    1: {1, 4, 7, 8, 18, 21},
    2: {3, 4, 6, 10, 11, 12, 13, 14, 15, 16, 17, 19, 23},
    3: {20},
}


def build_world(path: Path) -> Path:
    hm.build(
        path,
        customers=CUSTOMERS,
        products=PRODUCTS,
        purchases=PURCHASES,
        suppressions=SUPPRESSIONS,
    )
    con = duckdb.connect(str(path))
    con.execute("UPDATE orders SET channel = 'web' WHERE customer_id = 15")
    con.close()
    return path
