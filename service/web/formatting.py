"""How the status page writes numbers, quantities, money and dates.

Dates are ISO 8601 (``2026-12-01``). Quantities carry the service unit and money the service
currency (``GET /api/v1/settings``). Thousands are grouped with a no-break space, which reads the
same in every locale and never wraps between digits.
"""

from __future__ import annotations

import datetime as dt
import math

GROUP = "\u00a0"


def number(value: float, decimals: int | None = None) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    if decimals is None:
        decimals = 0 if abs(value) >= 100 or float(value).is_integer() else 1
    text = f"{value:,.{decimals}f}"
    return text.replace(",", GROUP)


def quantity(value: float | None, unit: str) -> str:
    """``12 400 L``."""
    if value is None:
        return "no level"
    return f"{number(value)}{GROUP}{unit}"


def money(value: float | None, currency: str) -> str:
    """``123.45 EUR``."""
    if value is None:
        return "–"
    return f"{number(value, 2)}{GROUP}{currency}"


def percent(value: float | None, decimals: int = 1) -> str:
    if value is None or not math.isfinite(value):
        return "–"
    return f"{value:.{decimals}f}{GROUP}%"


def weekday(value: dt.date) -> str:
    return ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")[value.weekday()]


def iso_week_of(value: dt.date) -> str:
    year, week, _ = value.isocalendar()
    return f"{year}-W{week:02d}"
