"""Terminal rendering with rich. Only the CLI calls this package; the library never prints.

One module per kind of result; shared formatting lives here.
"""

from __future__ import annotations

from datetime import date, datetime
from typing import Any

CAUTION = (
    "Caution: direct marketing is regulated (consent, data protection, opt-outs). reachlist's "
    "defaults are not legal advice; local law and your organisation's policy take precedence."
)


def fmt_expected(value: float) -> str:
    """An expected number of buyers or units, or an interval's end: whole below 10 only when it
    is whole, so a list expecting 0.4 buyers and 0.7 units does not read "0 buyers, 1 unit"
    (the brief writes them the same way)."""
    if abs(value) >= 9.95:
        return f"{value:,.0f}"
    text = f"{value:.1f}"
    return text.removesuffix(".0")


def fmt_count(value: Any) -> str:
    """Counts with thousands separators; dates as ISO; None as a dash."""
    if value is None:
        return "-"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return f"{value:,}"
    if isinstance(value, float):
        return f"{value:,.4g}"
    if isinstance(value, datetime):
        return value.strftime("%Y-%m-%d %H:%M")
    if isinstance(value, date):
        return value.isoformat()
    return str(value)
