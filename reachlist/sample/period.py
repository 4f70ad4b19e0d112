"""The sample's time span and the generator's fixed settings."""

from __future__ import annotations

from datetime import date, datetime

GENERATOR_VERSION = "1"
PERIOD_START = date(2025, 1, 1)  # first order day
PERIOD_END = date(2026, 9, 30)  # last order day (inclusive)
MIN_CUSTOMERS = 500
CHUNK = 50_000  # customers per generation chunk; fixed so results never depend on the machine

EPOCH = datetime(PERIOD_START.year, PERIOD_START.month, PERIOD_START.day)
DAYS = (PERIOD_END - PERIOD_START).days + 1  # 638
T_END = DAYS * 86_400  # seconds after the epoch; orders happen in [0, T_END)
MONTH = 30 * 86_400
