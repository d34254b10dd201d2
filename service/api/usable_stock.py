"""The one-day rule for stored sites: a delivery must cover at least one day of demand.

A plan's cycles are whole days, so every active site needs a usable stock that lasts one day:

    q = min(f·V − s, W),    U = q / d,    refused when U · (1 + 1e-9) < 1

(``docs/planning.md`` §1: tank capacity ``V``, safe fill ``f``, safety stock ``s``, demand per
day ``d``, truck capacity ``W``). The planning core refuses a whole plan for one such site, so the
API refuses the write that would store one: a site create, change or CSV row, or a truck change
that lowers its capacity below one day's demand of an active site. The tolerance is the core's
``WHOLE_DAY_TOLERANCE``, relative to the ratio, so rounding never refuses a site that holds
exactly a day: 0.94 × 4 300 L is 4 041.999…95 in floating point, and with 4 042 L a day it counts
as one whole day. An inactive site is not planned; it is checked when it is switched back on.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from service.errors import Problem
from service.planning.inputs import WHOLE_DAY_TOLERANCE

#: The site fields that enter the rule (``truck`` brings the truck's capacity, ``active`` the rule itself).
RULE_FIELDS = frozenset({"demand_per_day", "tank_capacity", "safe_fill", "safety_stock", "truck", "active"})
#: The fields a refusal may point at, in order of preference (the first one the request named),
#: by what limits the stock: the tank, or the truck's capacity.
_TANK_FIELDS = ("tank_capacity", "safe_fill", "safety_stock", "demand_per_day", "active")
_TRUCK_FIELDS = ("truck", "demand_per_day", "active")
#: At most this many site codes are named in a truck refusal's ``detail`` (``errors`` lists all).
NAMED_IN_DETAIL = 10


def tank_stock(site: Mapping[str, Any]) -> float:
    """``f·V − s``: what the tank can take above its safety stock, up to its safe fill."""
    return site["tank_capacity"] * site["safe_fill"] - site["safety_stock"]


def values(site: Any) -> dict[str, Any]:
    """A stored site's fields that enter the rule, as a mapping."""
    return {
        name: getattr(site, name) for name in ("demand_per_day", "tank_capacity", "safe_fill", "safety_stock", "active")
    }


def lasts_a_day(usable: float, demand: float) -> bool:
    """``q / d · (1 + 1e-9) ≥ 1``: the planning core's whole-day floor of ``U`` is at least 1."""
    return usable / demand * (1 + WHOLE_DAY_TOLERANCE) >= 1.0


def amount(value: float, digits: int = 6) -> str:
    """A number as a person writes it: ``4 300``, ``0.9``, ``1 234 568`` (``digits`` significant
    digits, thousands grouped with a space, no exponent, no trailing zeros)."""
    if value == 0:
        return "0"
    decimals = max(0, digits - 1 - math.floor(math.log10(abs(value))))
    text = f"{value:,.{decimals}f}"
    if "." in text:
        text = text.rstrip("0").rstrip(".")
    return text.replace(",", " ")


def _pair(a: float, b: float) -> tuple[str, str]:
    """``a`` and ``b`` written with the fewest digits (from 6) that still tell them apart."""
    for digits in range(6, 18):
        left, right = amount(a, digits), amount(b, digits)
        if left != right:
            break
    return left, right


def shortfall(site: Mapping[str, Any], truck_code: str, capacity: float, unit: str) -> tuple[str, str] | None:
    """``None`` when an active ``site`` holds a day's demand with this truck; otherwise
    (the kind of limit, ``"tank"`` or ``"truck"``, and the sentence that says so)."""
    if not site.get("active", True):
        return None
    stock = tank_stock(site)
    usable = min(stock, capacity)
    demand = site["demand_per_day"]
    if lasts_a_day(usable, demand):
        return None
    shown, day = _pair(usable, demand)
    if stock <= capacity:
        kind = "tank"
        cause = (
            f"(tank_capacity {amount(site['tank_capacity'])} {unit} × safe_fill {amount(site['safe_fill'])}"
            f" − safety_stock {amount(site['safety_stock'])} {unit})"
        )
        remedy = "Raise tank_capacity or safe_fill, or lower safety_stock or demand_per_day."
    else:
        kind = "truck"
        cause = f"(capped by the capacity of truck {truck_code})"
        remedy = f"Serve the site with a truck that carries at least {day} {unit}, or lower demand_per_day."
    return kind, (
        f"Usable stock {shown} {unit} {cause} is less than one day's demand of {day} {unit}; "
        f"every plan of truck {truck_code} would fail. {remedy}"
    )


def pointer_field(kind: str, named: Iterable[str]) -> str:
    """The field a refusal points at: the first field the request named that sets the limit."""
    order = _TANK_FIELDS if kind == "tank" else _TRUCK_FIELDS
    named = set(named)
    return next((name for name in order if name in named), order[0])


def check_site(
    code: str, site: Mapping[str, Any], truck_code: str, capacity: float, unit: str, named: Iterable[str]
) -> None:
    """Raise a 422 Problem when the site, as it would be stored, holds less than a day's demand."""
    found = shortfall(site, truck_code, capacity, unit)
    if found is not None:
        kind, message = found
        raise Problem(
            422,
            f"Site {code}: {message}",
            kind="validation",
            errors=[{"pointer": f"#/{pointer_field(kind, named)}", "detail": message}],
        )


def check_truck_capacity(truck_code: str, old: float, new: float, sites: Sequence[Any], unit: str) -> None:
    """Raise a 422 Problem naming the active sites that hold a day's demand at capacity ``old``
    but not at ``new`` (the ones the change would break)."""
    broken = [
        s
        for s in sites
        if s.active
        and lasts_a_day(min(tank_stock(values(s)), old), s.demand_per_day)
        and not lasts_a_day(min(tank_stock(values(s)), new), s.demand_per_day)
    ]
    if not broken:
        return
    needed = max(s.demand_per_day for s in broken)
    codes = [s.code for s in broken]
    named = ", ".join(codes[:NAMED_IN_DETAIL]) + (
        f" and {len(codes) - NAMED_IN_DETAIL} more" if len(codes) > NAMED_IN_DETAIL else ""
    )
    raise Problem(
        422,
        f"With capacity {amount(new)} {unit}, truck {truck_code} would carry less than one day's demand of "
        f"{'site' if len(codes) == 1 else 'sites'} {named}, and every plan of the truck would fail. Keep the "
        f"capacity at {amount(needed)} {unit} or more, or move those sites to another truck first.",
        kind="validation",
        errors=[
            {
                "pointer": "#/capacity",
                "detail": f"Site {s.code}: usable stock {amount(min(tank_stock(values(s)), new))} {unit}, "
                f"demand {amount(s.demand_per_day)} {unit} a day.",
            }
            for s in broken
        ],
    )
