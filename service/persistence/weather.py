"""Daily mean temperatures per weather region, and the readings a site's weather fit uses.

Small functions over a session; they may flush, never commit. ``weather_days`` is watched by the
change-stamp triggers, so a re-posted day is updated in place (a plain UPDATE fires the update
trigger on both databases; no upsert on a watched table).
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from sqlalchemy import Select, select
from sqlalchemy.orm import Session

from service.persistence.models import Reading, WeatherDay


def post_days(
    session: Session, region: str, rows: Sequence[tuple[dt.date, float, str]], created_by: str
) -> tuple[int, int]:
    """Store ``(day, mean_temperature, source)`` rows of ``region``; a day already stored is replaced.

    Returns ``(created, replaced)``. The rows' days must be distinct (the caller checks).
    """
    if not rows:
        return 0, 0
    days = [r[0] for r in rows]
    stored = {
        w.day: w
        for w in session.scalars(
            select(WeatherDay).where(WeatherDay.region == region, WeatherDay.day.between(min(days), max(days)))
        )
    }
    created = 0
    for day, mean, source in rows:
        row = stored.get(day)
        if row is None:
            session.add(WeatherDay(region=region, day=day, mean_temperature=mean, source=source, created_by=created_by))
            created += 1
        else:
            row.mean_temperature, row.source, row.created_by = mean, source, created_by
    session.flush()
    return created, len(rows) - created


def region_days(region: str, first: dt.date | None = None, last: dt.date | None = None) -> Select[Any]:
    """The statement of a region's days in ``[first, last]`` (either end open when ``None``);
    ordered by the caller (keyset pages by ``WeatherDay.day``)."""
    statement = select(WeatherDay).where(WeatherDay.region == region)
    if first is not None:
        statement = statement.where(WeatherDay.day >= first)
    if last is not None:
        statement = statement.where(WeatherDay.day <= last)
    return statement


def days_between(session: Session, region: str, first: dt.date | None, last: dt.date | None) -> list[WeatherDay]:
    """The region's stored days in ``[first, last]``, in day order."""
    return list(session.scalars(region_days(region, first, last).order_by(WeatherDay.day)))


def site_readings(session: Session, site_id: int, since: dt.datetime, until: dt.datetime) -> list[Reading]:
    """The site's readings measured in ``[since, until]``, in time order."""
    return list(
        session.scalars(
            select(Reading)
            .where(Reading.site_id == site_id, Reading.measured_at >= since, Reading.measured_at <= until)
            .order_by(Reading.measured_at, Reading.id)
        )
    )


def latest_reading_time(session: Session, site_id: int) -> dt.datetime | None:
    """When the site's latest reading was measured (``None`` without readings)."""
    return session.scalar(
        select(Reading.measured_at).where(Reading.site_id == site_id).order_by(Reading.measured_at.desc()).limit(1)
    )
