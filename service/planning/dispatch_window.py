"""The trips of a plan on any window of days, with the truck's closed dates applied.

The site patterns (``SitePlan.period_days``, ``delivery_days``) give the deliveries of any window,
vectorised (:meth:`Patterns.deliveries`); a delivery carries ``d_i × (days to the site's next delivery)``
with ``d_i = quantity / cycle_days``. Each date is packed into trips by :func:`packing.pack`, the rule the
planner used, so the trips anyone lists match the plan.

**Closed dates.** A delivery that falls on a closed date moves to the nearest earlier date that is a
working weekday, not closed, does not already serve the site, and has room (the date still packs into
at most ``trips_per_day`` trips), and from which the site's next delivery is at most the pattern's
longest gap away (the only cap the listing knows; the pattern never exceeds the tank's). The site's
previous delivery then carries less and the moved one more, so every stop still delivers ``d_i ×`` the
days to the next one (rule 2). If no such date exists after the previous delivery, the previous
delivery alone covers the stretch when that gap is within the longest gap; else the site gets one
delivery on the nearest earlier open date with room and one on the nearest later open date with room
(both gaps within the longest gap). When none of these keeps the rules, the window's warnings name the
date and the sites: the delivery then goes to the nearest earlier open date that has room (the gap after it may exceed the pattern's longest gap), else to the
nearest later open date before the next delivery where both it and the previous delivery's date have
room, else it is dropped; quantities are clipped to the capacity. Rule 1 (dates, load, stops,
``trips_per_day``) is kept in every case.
"""

from __future__ import annotations

import datetime as dt
import math
from dataclasses import dataclass

import numpy as np

from service.planning.errors import PlanningInputError
from service.planning.inputs import TruckInput, check_calendar, check_truck_number
from service.planning.packing import pack, pack_date
from service.planning.patterns import Patterns, from_site_lists
from service.planning.results import JointResult, SitePlan, Stop, Trip
from service.planning.workweek import WorkWeek


@dataclass(frozen=True)
class TripWindow:
    """Trips of a window and the warnings of closed dates that could not be handled within the rules."""

    trips: tuple[Trip, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class Limits:
    """What the listing needs of the truck."""

    capacity: float
    max_stops: int | None
    trips_per_day: int | None
    working_days: tuple[int, ...]
    closed_dates: tuple[dt.date, ...]


def limits_of(truck: TruckInput) -> Limits:
    """Validated :class:`Limits` of a truck (raises :class:`PlanningInputError`)."""
    capacity = check_truck_number(truck.capacity, "capacity", optional=True, integer=False, minimum=0, strict=True)
    max_stops = check_truck_number(truck.max_stops, "max_stops", optional=True, integer=True, minimum=1, strict=False)
    working_days, trips_per_day, closed = check_calendar(truck)
    return Limits(math.inf if capacity is None else capacity, max_stops, trips_per_day, working_days, closed)


class _Relocation:
    """Moves deliveries off closed dates (see the module docstring); plain Python over the few affected."""

    def __init__(self, day, site, demand, longest, limits: Limits, week: WorkWeek, closed: set[int]):
        self.demand, self.longest, self.limits, self.week, self.closed = demand, longest, limits, week, closed
        self.by_day: dict[int, set[int]] = {}
        order = np.lexsort((day, site))
        s_sorted, d_sorted = site[order], day[order]
        bounds = np.flatnonzero(np.concatenate([[True], s_sorted[1:] != s_sorted[:-1], [True]]))
        self.site_days = {
            int(s_sorted[a]): d_sorted[a:b].tolist() for a, b in zip(bounds[:-1], bounds[1:], strict=True)
        }
        self._day, self._site = day, site
        self.fixed: dict[tuple[int, int], float] = {}  # (site, day) -> quantity kept when a drop breaks rule 2

    def sites_on(self, t: int) -> set[int]:
        if t not in self.by_day:
            lo, hi = np.searchsorted(self._day, [t, t + 1])
            self.by_day[t] = set(self._site[lo:hi].tolist())
        return self.by_day[t]

    def _open(self, t: int) -> bool:
        return bool(self.week.is_working(t)) and t not in self.closed

    def _quantity(self, i: int, t: int) -> float:
        if (i, t) in self.fixed:
            return self.fixed[(i, t)]
        days = self.site_days[i]
        k = days.index(t)
        nxt = days[k + 1] if k + 1 < len(days) else t + int(self.longest[i])
        return min(float(self.demand[i] * (nxt - t)), self.limits.capacity)

    def _room(self, t: int, i: int, q: float) -> bool:
        """Whether date ``t`` still packs into ``trips_per_day`` trips with site ``i`` bringing ``q`` there
        (``q`` clipped to the capacity; replaces ``i``'s own delivery on ``t`` if it has one)."""
        if self.limits.trips_per_day is None:
            return True
        present = sorted(self.sites_on(t) - {i})
        qs = np.array([self._quantity(j, t) for j in present] + [min(q, self.limits.capacity)])
        return len(pack_date(qs, self.limits.capacity, self.limits.max_stops)) <= self.limits.trips_per_day

    def _move(self, i: int, old: int, new: int | None) -> None:
        days = self.site_days[i]
        days.remove(old)
        self.sites_on(old).discard(i)
        if new is not None:
            days.append(new)
            days.sort()
            self.sites_on(new).add(i)

    def relocate(self, i: int, c: int) -> bool:
        """Move site ``i``'s delivery off closed day ``c``; False when the rules could not be kept."""
        days = self.site_days[i]
        k = days.index(c)
        prev = days[k - 1] if k > 0 else None
        nxt = days[k + 1] if k + 1 < len(days) else None
        cap = int(self.longest[i])
        d = float(self.demand[i])
        lowest = (prev + 1) if prev is not None else c - cap
        earlier = [t for t in range(c - 1, lowest - 1, -1) if self._open(t) and i not in self.sites_on(t)]
        for t in earlier:
            if nxt is not None and nxt - t > cap:
                break
            if self._room(t, i, d * ((nxt if nxt is not None else t + cap) - t)):
                self._move(i, c, t)
                return True
        if prev is not None and nxt is not None and nxt - prev <= cap and self._room(prev, i, d * (nxt - prev)):
            self._move(i, c, None)
            return True
        if nxt is not None:
            later = [t for t in range(c + 1, nxt) if self._open(t) and nxt - t <= cap]
            for t in earlier:
                after = next((x for x in later if x - t <= cap and self._room(x, i, d * (nxt - x))), None)
                if after is not None and self._room(t, i, d * (after - t)):
                    self._move(i, c, t)
                    days.append(after)
                    days.sort()
                    self.sites_on(after).add(i)
                    return True
        return self._keep_rule_1(i, c, prev, nxt, earlier)

    def _keep_rule_1(self, i: int, c: int, prev: int | None, nxt: int | None, earlier: list[int]) -> bool:
        """No earlier move keeps rules 1–2 (True when the later move below happens to keep them): keep rule 1 (every date within the truck's limits) and break rule 2
        (warned): the nearest earlier open date with room, else the nearest later one before the next
        delivery whose room and the previous delivery's date both allow it, else the delivery is dropped (the previous delivery keeps its quantity when its
        date has no room for more). Quantities above the capacity are clipped to it."""
        d, cap = float(self.demand[i]), int(self.longest[i])
        for t in earlier:
            if self._room(t, i, d * ((nxt if nxt is not None else t + cap) - t)):
                self._move(i, c, t)
                return False
        end = nxt if nxt is not None else c + cap
        for t in range(c + 1, end):
            if not self._open(t) or i in self.sites_on(t):
                continue
            if self._room(t, i, d * (end - t)) and (prev is None or self._room(prev, i, d * (t - prev))):
                self._move(i, c, t)
                return (prev is None or t - prev <= cap) and end - t <= cap
        if prev is not None and not self._room(prev, i, d * (end - prev)):
            self.fixed[(i, prev)] = self._quantity(i, prev)  # the previous delivery keeps its quantity
        self._move(i, c, None)
        return False

    def result(self, affected: list[int]):
        """Delivery days and sites of the ``affected`` sites after the moves."""
        day = np.array([t for i in affected for t in self.site_days[i]], dtype=np.int64)
        site = np.array([i for i in affected for _ in self.site_days[i]], dtype=np.int64)
        return day, site


def _deliveries(patterns: Patterns, demand, first: int, last: int, limits: Limits, week: WorkWeek, start: dt.date):
    """Deliveries ``(day, site, quantity)`` on ``first … last`` with closed dates applied, and warnings."""
    longest = patterns.longest_gap()
    margin = 2 * int(longest.max()) + 14
    lo, hi = first - margin, last + margin
    closed = {(c - start).days for c in limits.closed_dates}
    closed = {t for t in closed if lo <= t <= hi}
    day, site, gap = patterns.deliveries(lo, hi)
    warnings: list[tuple[int, list[int]]] = []
    on_closed = np.isin(day, np.fromiter(closed, dtype=np.int64, count=len(closed))) if closed else None
    if on_closed is None or not on_closed.any():
        quantity = demand[site] * gap
    else:
        mover = _Relocation(day, site, demand, longest, limits, week, closed)
        affected = np.unique(site[on_closed])
        failed: dict[int, list[int]] = {}
        for t, i in sorted(zip(day[on_closed].tolist(), site[on_closed].tolist(), strict=True)):
            if not mover.relocate(i, t):
                failed.setdefault(t, []).append(i)
        keep = ~np.isin(site, affected)
        moved_day, moved_site = mover.result(affected.tolist())
        moved_order = np.lexsort((moved_day, moved_site))
        moved_day, moved_site = moved_day[moved_order], moved_site[moved_order]
        nxt = np.append(moved_day[1:], 0)
        has_next = np.append(moved_site[1:] == moved_site[:-1], False)
        moved_gap = np.where(has_next, nxt - moved_day, longest[moved_site])
        day = np.concatenate([day[keep], moved_day])
        site = np.concatenate([site[keep], moved_site])
        moved_quantity = np.minimum(demand[moved_site] * moved_gap, limits.capacity)
        for (i, t), q in mover.fixed.items():
            moved_quantity[(moved_site == i) & (moved_day == t)] = q
        quantity = np.concatenate([demand[site[: keep.sum()]] * gap[keep], moved_quantity])
        order = np.lexsort((site, day))
        day, site, quantity = day[order], site[order], quantity[order]
        reach = int(longest.max())  # a closure just after the window changes its last quantities
        for t, sites in sorted(failed.items()):
            if first <= t <= last + reach:
                warnings.append((t, sites))
    inside = (day >= first) & (day <= last)
    return day[inside], site[inside], quantity[inside], warnings


def window_trips(
    sites: tuple[SitePlan, ...], start: dt.date, limits: Limits, first: int, last: int, stop_limit: int | None = None
) -> tuple[list[Trip], list[str], int]:
    """Trips on days ``first … last`` (see the module docstring) and warnings.

    With ``stop_limit`` the listing ends after the last whole day that keeps the stops at most that
    many; the third value is the last day listed (``last`` when not cut).
    """
    if not sites:
        return [], [], last
    patterns = from_site_lists([s.period_days for s in sites], [s.delivery_days for s in sites])
    demand = np.array([s.quantity / s.cycle_days for s in sites])
    week = WorkWeek(start, limits.working_days)
    day, site, quantity, failed = _deliveries(patterns, demand, first, last, limits, week, start)
    listed_last = last
    if stop_limit is not None and len(day) > stop_limit:
        listed_last = int(day[stop_limit]) - 1
        if listed_last < int(day[0]):
            listed_last = int(day[0])
        keep = day <= listed_last
        day, site, quantity = day[keep], site[keep], quantity[keep]
    trip, _, _ = pack(day, site, quantity, limits.capacity, limits.max_stops)
    codes = [s.code for s in sites]
    order = np.lexsort((site, trip, day))
    trips: list[Trip] = []
    d_list, s_list, q_list, t_list = (a[order].tolist() for a in (day, site, quantity, trip))
    j = 0
    total = len(d_list)
    while j < total:
        k = j
        while k < total and d_list[k] == d_list[j] and t_list[k] == t_list[j]:
            k += 1
        stops = tuple(Stop(codes[s_list[x]], q_list[x]) for x in range(j, k))
        trips.append(
            Trip(
                day=d_list[j],
                date=start + dt.timedelta(days=d_list[j]),
                trip=t_list[j] + 1,
                load=float(sum(q_list[j:k])),
                stops=stops,
            )
        )
        j = k
    warnings = [
        f"closed date {(start + dt.timedelta(days=t)).isoformat()}: no move keeps every gap within the tank "
        f"for {', '.join(f'`{codes[i]}`' for i in sorted(set(s)))}"
        for t, s in failed
        if t <= listed_last + int(patterns.longest_gap().max())
    ]
    return trips, warnings, listed_last


def trips_between(result: JointResult, truck: TruckInput, first_day: int, last_day: int) -> TripWindow:
    """Trips on days ``first_day … last_day`` inclusive (days since ``result.start_date``).

    Any integer days are allowed (the patterns repeat). The trips are the site patterns packed into
    trips as the planner packed them, with ``truck.closed_dates`` applied (module docstring). The work is
    vectorised over the window's deliveries; only the few deliveries on closed dates are handled one by
    one. An unsuccessful result has no trips.

    Raises
    ------
    PlanningInputError
        For an invalid truck or ``last_day < first_day`` (field ``"last_day"``).
    """
    limits = limits_of(truck)
    for name, value in (("first_day", first_day), ("last_day", last_day)):
        if isinstance(value, bool) or not isinstance(value, int):
            raise PlanningInputError(f"{name} must be an integer, got {value!r}", field=name)
    if last_day < first_day:
        raise PlanningInputError(f"last_day {last_day} is before first_day {first_day}", field="last_day")
    if not result.success:
        return TripWindow((), ())
    trips, warnings, _ = window_trips(result.sites, result.start_date, limits, first_day, last_day)
    return TripWindow(tuple(trips), tuple(warnings))
