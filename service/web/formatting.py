"""How the status page writes numbers, quantities, money and dates.

Dates are ISO 8601 (``2026-12-01``). Quantities carry the service unit and money the service
currency (``GET /api/v1/settings``). Thousands are grouped with a no-break space, which reads the
same in every locale and never wraps between digits.
"""

from __future__ import annotations

import datetime as dt
import math
from zoneinfo import ZoneInfo

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


def days(value: float | None) -> str:
    """Days of stock with one decimal (``2.5``); ``–`` when there is none to count."""
    if value is None or not math.isfinite(value):
        return "–"
    return number(value, 1)


def duration(seconds: float | None) -> str:
    """A length of time: ``45 s``, ``3 min 05 s``, ``1 h 20 min``; ``–`` when unknown."""
    if seconds is None or not math.isfinite(seconds):
        return "–"
    whole = int(round(seconds))
    if whole < 60:
        return f"{whole}{GROUP}s"
    if whole < 3600:
        return f"{whole // 60}{GROUP}min {whole % 60:02d}{GROUP}s"
    return f"{whole // 3600}{GROUP}h {whole % 3600 // 60:02d}{GROUP}min"


def age(then: dt.datetime, now: dt.datetime) -> str:
    """How long ago, as a person says it: ``just now``, ``25 min ago``, ``3 h ago``, ``4 days ago``."""
    minutes = int((now - then).total_seconds() // 60)
    if minutes < 1:
        return "just now"
    if minutes < 60:
        return f"{minutes} min ago"
    if minutes < 48 * 60:
        return f"{minutes // 60} h ago"
    return f"{minutes // (24 * 60)} days ago"


def moment(value: dt.datetime, zone: str, today: dt.date) -> str:
    """A time in the service time zone: ``04:30`` today, ``2026-12-02 04:30`` on another day."""
    local = value.astimezone(ZoneInfo(zone))
    clock = local.strftime("%H:%M")
    return clock if local.date() == today else f"{local.date().isoformat()} {clock}"
