"""Rendering of what `reachlist sample` wrote."""

from __future__ import annotations

from typing import Any


def sample_summary(s: Any) -> str:
    return (
        f"Wrote {s.path}: {s.customers:,} customers, {s.products:,} products, {s.orders:,} orders, "
        f"{s.order_lines:,} order lines, {s.suppressions:,} suppressions; orders "
        f"{s.first_order_at:%Y-%m-%d} .. {s.last_order_at:%Y-%m-%d}; seed {s.seed}; "
        f"{s.file_bytes / 2**20:,.1f} MiB in {s.build_seconds:.1f} s."
    )


def holdings_line(b: Any) -> str:
    return (
        f"Holdings: {b.rows:,} rows (customer x SKU x day) from {b.order_lines:,} order lines "
        f"in {b.seconds:.1f} s, kept in {b.path}; commands that read the history use them."
    )
