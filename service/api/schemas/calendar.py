"""The truck's working calendar fields, shared by stored trucks and the joint calculation."""

from __future__ import annotations

import datetime as dt
from typing import Any

import marshmallow as ma

from service import working_calendar
from service.api.fields import DATE_RANGE, BoundedDate, JsonInt, Range
from service.api.schemas.common import StrictSchema

#: ISO dates of the years 1970 to 2200 (fields.FIRST_DATE to LAST_DATE), as WEEK_PATTERN states weeks.
DATE_PATTERN = r"^(19[7-9][0-9]|20[0-9]{2}|21[0-9]{2}|2200)-(0[1-9]|1[0-2])-(0[1-9]|[12][0-9]|3[01])$"


def no_repeats(what: str):  # type: ignore[no-untyped-def]
    def check(values: list[Any]) -> None:
        seen = set()
        for value in values:
            if value in seen:
                shown = value.isoformat() if isinstance(value, dt.date) else value
                raise ma.ValidationError(f"Each {what} at most once; {shown} is repeated.")
            seen.add(value)

    return check


def _region(value: str | None) -> None:
    if value is not None:
        error = working_calendar.region_error(value)
        if error is not None:
            raise ma.ValidationError(error)


class DateList(ma.fields.List):
    """ISO dates in, ISO dates out (stored as ISO text, so dumping keeps text as it is)."""

    def _serialize(self, value: Any, attr: Any, obj: Any, **kwargs: Any) -> list[str] | None:
        if value is None:
            return None
        return [v if isinstance(v, str) else v.isoformat() for v in value]


class CalendarSchema(StrictSchema):
    """``working_days``, ``trips_per_day``, ``closed_dates``, ``holiday_region`` (issue 13).

    Loaded values are normalised to their stored form: sorted lists, dates as ISO text.
    """

    working_days = ma.fields.List(
        JsonInt(validate=Range(min=1, max=7)),
        load_default=lambda: list(working_calendar.DEFAULT_WORKING_DAYS),
        validate=[ma.validate.Length(min=1, max=7), no_repeats("weekday")],
        metadata={
            "description": "ISO weekdays the truck works (1 = Monday … 7 = Sunday), each at most once; "
            "default [1, 2, 3, 4, 5]. Trips are planned on these days only.",
            "uniqueItems": True,
        },
    )
    trips_per_day = JsonInt(
        load_default=working_calendar.DEFAULT_TRIPS_PER_DAY,
        validate=Range(min=1, max=working_calendar.MAX_TRIPS_PER_DAY),
        metadata={"description": "Trips the truck can run on one working day (1–24); default 1"},
    )
    closed_dates = DateList(
        # The pattern states the accepted years in the OpenAPI document (format "date" the days).
        BoundedDate(metadata={"pattern": DATE_PATTERN}),
        load_default=list,
        validate=[ma.validate.Length(max=working_calendar.MAX_CLOSED_DATES), no_repeats("date")],
        metadata={
            "description": f"ISO dates the truck does not work (at most {working_calendar.MAX_CLOSED_DATES}, "
            f"{DATE_RANGE}), each at most once; default []. A delivery that falls on one moves to an "
            "earlier working day.",
            "uniqueItems": True,
        },
    )
    holiday_region = ma.fields.String(
        load_default=None,
        allow_none=True,
        validate=[ma.validate.Length(min=2, max=40), _region],
        metadata={
            "description": "Region code of the `holidays` package whose public holidays close the truck: a "
            "country (GB, US, DE) or a country and subdivision (GB-SCT, US-NY, DE-BY); default null (none). "
            "The regions are those of the installed package.",
            "enum": [*working_calendar.region_codes(), None],
        },
    )

    @ma.post_load
    def stored_form(self, data: dict[str, Any], **_: Any) -> dict[str, Any]:
        if "working_days" in data:
            data["working_days"] = sorted(data["working_days"])
        if "closed_dates" in data:
            data["closed_dates"] = [d.isoformat() for d in sorted(data["closed_dates"])]
        return data
