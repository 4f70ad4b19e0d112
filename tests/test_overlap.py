"""Promotion overlap: Fisher tests on pairs and triples, checked against scipy and statsmodels."""

from __future__ import annotations

from itertools import combinations
from pathlib import Path

import pytest
from scipy.stats import fisher_exact
from statsmodels.stats.multitest import multipletests

from reachlist.errors import InputError
from reachlist.overlap import promotion_overlap
from reachlist.warehouse import Warehouse
from tests import handmade as hm

ODD = "Q'); DROP TABLE order_lines; --"


def _purchases() -> list[tuple[int, str, str, int]]:
    rows = []
    for c in range(1, 201):
        day = f"2025-0{1 + c % 6}-1{c % 9}"
        if c <= 30:  # X, Y and ODD together
            rows += [(c, day, "X", 1), (c, day, "Y", 1), (c, day, ODD, 1)]
        elif c <= 45:
            rows += [(c, day, "X", 1), (c, day, "Y", 1)]
        elif c <= 75:
            rows += [(c, day, "X", 1)]
        elif c <= 105:
            rows += [(c, day, "Y", 1)]
        else:
            rows += [(c, day, "P", 1)]
        if c % 3 == 0:
            rows.append((c, day, "Z", 1))  # independent of everything
        if c % 10 == 0:
            rows.append((c, "2025-09-01", "X", 1))  # a second order of X alone
    rows += [(1, "2025-02-11", "Y", -1)]  # a return: that order no longer holds Y
    return rows


@pytest.fixture(scope="module")
def shop(tmp_path_factory: pytest.TempPathFactory) -> Path:
    items = ["X", "Y", "Z", "P", ODD, "NEVER"]
    return hm.build(
        tmp_path_factory.mktemp("ov") / "shop.duckdb",
        customers=[hm.customer(c) for c in range(1, 201)],
        products=[hm.product(i, category="c-" + i[:1]) for i in items],
        purchases=_purchases(),
    )


def _baskets(rows: list[tuple[int, str, str, int]]) -> list[set[str]]:
    """Order baskets by hand: net quantity per (customer, day, sku) > 0."""
    net: dict[tuple[int, str, str], int] = {}
    for c, d, s, q in rows:
        net[(c, d, s)] = net.get((c, d, s), 0) + q
    baskets: dict[tuple[int, str], set[str]] = {}
    for (c, d, s), q in net.items():
        if q > 0:
            baskets.setdefault((c, d), set()).add(s)
    return list(baskets.values())


def test_counts_p_values_and_holm_match_references(shop: Path) -> None:
    items = ["X", "Y", "Z", ODD]
    with Warehouse.open(shop, read_only=True) as wh:
        report = promotion_overlap(wh, items, since="2025-01-01", until="2026-01-01")
    baskets = _baskets(_purchases())
    # an order holding only a return of Y holds nothing, but customer 1's day also holds X
    assert report.n_baskets == len([b for b in baskets if b])
    found = {s.items: s for s in report.sets}
    assert len(found) == 6 + 4
    raw = []
    for size in (2, 3):
        for combo in combinations(items, size):
            s = found[combo]
            n_s = sum(1 for b in baskets if set(combo) <= b)
            assert s.n_together == n_s
            ps = []
            for y in combo:
                x = set(combo) - {y}
                a = n_s
                b = sum(1 for k in baskets if x <= k and y not in k)
                c = sum(1 for k in baskets if y in k and not x <= k)
                d = len(baskets) - a - b - c
                ps.append(fisher_exact([[a, b], [c, d]], alternative="greater").pvalue)
            assert s.p_value == pytest.approx(max(ps), rel=1e-9, abs=1e-300)
            raw.append((combo, max(ps)))
    holm = multipletests([p for _, p in raw], method="holm")[1]
    for (combo, _), expected in zip(raw, holm, strict=True):
        assert found[combo].p_adjusted == pytest.approx(expected, rel=1e-9)
    overlapping = {s.items for s in report.overlapping}
    assert ("X", "Y") in overlapping and ("X", "Y", ODD) in overlapping
    assert not any("Z" in combo for combo in overlapping)
    assert all(s.lift > 1 for s in report.overlapping)


def test_customer_baskets_and_categories(shop: Path) -> None:
    with Warehouse.open(shop, read_only=True) as wh:
        report = promotion_overlap(
            wh,
            ["category:c-X", "category:c-Y", "category:c-Z"],
            basket="customer",
            since="2025-01-01",
            until="2026-01-01",
        )
    assert report.level == "category" and report.n_baskets == 200
    assert report.item_counts["c-X"] == 75 + 13  # customers 1-75, and 80, 90, ..., 200


@pytest.mark.parametrize(
    ("items", "match"),
    [
        (["X"], "2 to 15"),
        (["X", "X"], "2 to 15"),
        (["X", "category:c-Y"], "one level"),
        (["X", "NOPE"], "not a sku"),
    ],
)
def test_bad_item_lists(shop: Path, items: list[str], match: str) -> None:
    with Warehouse.open(shop, read_only=True) as wh, pytest.raises(InputError, match=match):
        promotion_overlap(wh, items)


def test_an_item_never_sold_is_never_flagged(shop: Path) -> None:
    with Warehouse.open(shop, read_only=True) as wh:
        report = promotion_overlap(wh, ["X", "NEVER"], since="2025-01-01", until="2026-01-01")
    (only,) = report.sets
    assert (only.n_together, only.p_value, only.significant) == (0, 1.0, False)
