"""Tank levels projected from the latest reading, and delivery quantities corrected by them.

Pure (standard library only). The rules, per site with demand ``d``, safe-fill level
``F = safe_fill × tank_capacity``, safety stock ``s`` and cycle ``T`` days, all of them the
site's *current* values (the plan only gives the dates, the cycle and the planned quantities):

* From a reading ``L`` taken at time ``t_r`` the level falls at ``d`` per day and never below 0
  (a weather site's ``Tank.daily_demand`` gives the expected demand of each local day instead:
  :func:`used_between`).
  A delivery on day ``D`` is projected at the truck's shift start of ``D`` (service time zone;
  00:00 by default here), before that day's delivery:
  ``level(D) = max(0, level_prev − d·(t_D − t_prev))``, where ``t_D − t_prev`` is the
  elapsed time (computed in UTC, so a daylight-saving change adds or removes no hour of demand).
  Deliveries on days before the reading's own date are history and are not replayed; on the
  reading's date the level is carried back to 00:00 (the reading is taken to precede that day's
  delivery).
* The corrected quantity keeps the site at or above ``s`` until its next planned delivery
  ``g`` days later: ``need = d·g + s − level(D)``, clamped to ``[0, min(F − level(D), free)]``
  where ``free`` is the truck's capacity minus what earlier stops of the same trip take and minus
  what the trip's stops without a reading keep; when the trip cannot carry every corrected stop's
  quantity, the space goes first to what keeps each site at ``s`` until its next delivery (scaled
  alike when even that does not fit), then to the noise covers (``Projection._shares``). A site
  with a ``service_level`` adds ``z·σ·√g`` (``Tank.noise_cover``) to ``need``. ``g`` is the days from ``D`` to the site's next
  delivery in the listing (``PlannedTrip.next_days``: on a working calendar the gaps of a pattern
  differ, e.g. a Friday delivery lasts until Monday); where the listing does not say, the cycle ``T``.
* A site without a reading (or a delivery before its reading's date) keeps its planned quantity,
  but never more than ``F − s`` (the room when the level is at the safety stock, the level the plan
  assumes just before a delivery) nor more than ``free``.
* On a truck with compartments (``PlannedTrip.spaces``) the stops of one product share the space of
  the compartments given to that product on the trip, as the stops of a trip share the truck: ``free``
  is also at most that space minus what the product's earlier stops take and its unread stops keep,
  and the product's stops share it as above when it cannot carry them all.
* A trip with more stops than the truck's current ``max_stops`` keeps the stops with the fewest
  days of stock above the safety stock at 00:00 of the day (``(level − s)/d``; a site without a
  projected level counts as at its safety stock, 0 days; ties in the plan's stop order); the
  others are dropped from the trip (listed in ``CorrectedTrip.dropped``) and their tanks go on
  falling.
* Deliveries are made at ``shift_start`` of their day (local time). Recorded deliveries are
  history: a stop of a day with one shows what was delivered, and the recorded deliveries after
  the reading are replayed in time order (a reading after a same-day delivery counts after it).
* A stop carries ``run_out_risk`` when the site is projected below ``s`` before the delivery, or
  when the clamped quantity cannot carry it to the next delivery above ``s``; the warning names
  the projected date the level crosses ``s``.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

#: Quantities closer than this (in the service unit) are equal; keeps float noise from warnings.
TOLERANCE = 1e-6
DAY = dt.timedelta(days=1)


@dataclass(frozen=True)
class Tank:
    """What the projection needs to know about one site."""

    code: str
    demand_per_day: float
    safe_fill_level: float
    safety_stock: float
    cycle_days: float
    reading_level: float | None = None
    reading_at: dt.datetime | None = None
    #: Recorded deliveries ``(time, quantity)``: history, replayed in time order after the reading.
    deliveries: tuple[tuple[dt.datetime, float], ...] = ()
    #: ``z·σ`` per √day: a corrected quantity also covers ``z·σ·√g`` of consumption noise.
    noise_cover: float = 0.0
    #: Expected demand of local days (weather sites: ``b + v · E[DD]``); other days use ``demand_per_day``.
    daily_demand: Mapping[dt.date, float] = field(default_factory=dict, hash=False, compare=False)


@dataclass(frozen=True)
class PlannedTrip:
    """One truck trip of the plan on a calendar date, stops as ``(site code, planned quantity)``;
    ``next_days`` the days from ``date`` to each site's next planned delivery, where known."""

    date: dt.date
    stops: tuple[tuple[str, float], ...]
    next_days: Mapping[str, int] = field(default_factory=dict, hash=False, compare=False)
    #: On a truck with compartments: ``(site codes, space)`` per product on the trip, the codes sharing
    #: the space of the compartments given to their product; each group's load stays within it.
    spaces: tuple[tuple[tuple[str, ...], float], ...] = ()


@dataclass(frozen=True)
class RunOut:
    """The site is projected below its safety stock from ``date`` on."""

    site: str
    date: dt.date


@dataclass(frozen=True)
class CorrectedStop:
    """One delivery. ``wanted`` is the quantity before the room and truck limits (``need`` from a
    reading, else the planned quantity) and ``room`` the space below the safe-fill level, so
    ``quantity < min(wanted, room)`` means the truck's free space cut it."""

    site: str
    planned_quantity: float
    quantity: float
    projected_level_before: float | None
    run_out: RunOut | None
    wanted: float = 0.0
    room: float = 0.0
    #: The tank is projected empty from this date on (before this delivery or before the next).
    empty: RunOut | None = None
    #: A delivery recorded on this date: what was delivered (history, never recomputed) and when.
    delivered_quantity: float | None = None
    delivered_at: dt.datetime | None = None


@dataclass(frozen=True)
class CorrectedTrip:
    """One trip; ``dropped`` are the sites taken off it because it had more than ``max_stops``."""

    date: dt.date
    load: float
    stops: tuple[CorrectedStop, ...]
    dropped: tuple[str, ...] = ()


@dataclass
class _State:
    level: float
    at: dt.datetime
    events: list[tuple[dt.datetime, float]] = field(default_factory=list)
    #: Recorded deliveries after the reading not yet replayed, in time order.
    pending: list[tuple[dt.datetime, float]] = field(default_factory=list)


def day_start(day: dt.date, zone: ZoneInfo) -> dt.datetime:
    """00:00 of ``day`` in ``zone``, as an aware datetime in UTC.

    In UTC so that differences and sums with it count elapsed time: Python subtracts two datetimes
    that share a ``tzinfo`` by their wall-clock fields, which across a daylight-saving change is
    an hour off the elapsed time (Python documentation, ``datetime`` "aware" arithmetic).
    """
    return dt.datetime.combine(day, dt.time(0), tzinfo=zone).astimezone(dt.UTC)


def _days(later: dt.datetime, earlier: dt.datetime) -> float:
    """Elapsed days between two aware instants (in UTC, whatever zones they carry)."""
    return (later.astimezone(dt.UTC) - earlier.astimezone(dt.UTC)).total_seconds() / 86400.0


def used_between(tank: Tank, earlier: dt.datetime, later: dt.datetime, zone: ZoneInfo) -> float:
    """Expected use from ``earlier`` to ``later`` (negative when ``later`` is earlier).

    ``demand_per_day`` per elapsed day; for a tank with ``daily_demand`` (a weather site) each local
    day's expected demand accrues evenly over that day's elapsed hours (as its degree days do).
    """
    if not tank.daily_demand:
        return tank.demand_per_day * _days(later, earlier)
    if later < earlier:
        return -used_between(tank, later, earlier, zone)
    total, day = 0.0, earlier.astimezone(zone).date()
    while (start := day_start(day, zone)) < later:
        end = day_start(day + DAY, zone)
        overlap = _days(min(end, later), max(start, earlier))
        if overlap > 0:
            total += tank.daily_demand.get(day, tank.demand_per_day) * overlap / _days(end, start)
        day += DAY
    return total


def _used_up(tank: Tank, start: dt.datetime, amount: float, until: dt.datetime, zone: ZoneInfo) -> dt.datetime | None:
    """The instant ``amount`` has been used from ``start``, if before ``until`` (else ``None``)."""
    if not tank.daily_demand:
        if tank.demand_per_day <= 0:
            return None
        at = start.astimezone(dt.UTC) + dt.timedelta(days=amount / tank.demand_per_day)
        return at if at < until else None
    left, day = amount, start.astimezone(zone).date()
    while (begin := max(day_start(day, zone), start)) < until:
        end = day_start(day + DAY, zone)
        rate = tank.daily_demand.get(day, tank.demand_per_day) / _days(end, day_start(day, zone))  # per elapsed day
        part = rate * _days(end, begin)
        if rate > 0 and part >= left:
            at = begin + dt.timedelta(days=left / rate)
            return at if at < until else None
        left -= part
        day += DAY
    return None


def _crossing(state: _State, tank: Tank, until: dt.datetime, zone: ZoneInfo) -> RunOut | None:
    """When the level, falling from ``state``, drops below the safety stock before ``until``."""
    margin = state.level - tank.safety_stock
    if margin < -TOLERANCE:
        return RunOut(tank.code, state.at.astimezone(zone).date())
    at = _used_up(tank, state.at, margin, until, zone)
    if at is not None and state.level - used_between(tank, state.at, until, zone) < tank.safety_stock - TOLERANCE:
        return RunOut(tank.code, at.astimezone(zone).date())
    return None


def _empty(state: _State, tank: Tank, until: dt.datetime, zone: ZoneInfo) -> RunOut | None:
    """When the level, falling from ``state``, reaches zero before ``until``."""
    if state.level <= TOLERANCE:
        return RunOut(tank.code, state.at.astimezone(zone).date())
    at = _used_up(tank, state.at, state.level, until, zone)
    return RunOut(tank.code, at.astimezone(zone).date()) if at is not None else None


class Projection:
    """Replays the planned trips and the recorded deliveries from each site's reading and corrects
    the quantities. Deliveries are made at ``shift_start`` (local time of ``zone``) of their day."""

    def __init__(
        self,
        tanks: Iterable[Tank],
        capacity: float,
        zone: ZoneInfo,
        max_stops: int | None = None,
        shift_start: dt.time = dt.time(0),
    ) -> None:
        self.tanks = {t.code: t for t in tanks}
        self.capacity = capacity
        self.max_stops = max_stops
        self.zone = zone
        self.shift_start = shift_start
        self.run_outs: list[RunOut] = []
        self.empties: list[RunOut] = []
        self._states: dict[str, _State] = {}
        self._delivered: dict[tuple[str, dt.date], tuple[float, dt.datetime]] = {}
        for tank in self.tanks.values():
            for at, quantity in sorted(tank.deliveries):
                key = (tank.code, at.astimezone(zone).date())
                before = self._delivered.get(key, (0.0, at))[0]
                self._delivered[key] = (before + quantity, at)
            if tank.reading_level is not None and tank.reading_at is not None:
                self._states[tank.code] = _State(
                    tank.reading_level,
                    tank.reading_at,
                    [(tank.reading_at, tank.reading_level)],
                    [(at, q) for at, q in sorted(tank.deliveries) if at > tank.reading_at],
                )

    def delivery_time(self, day: dt.date) -> dt.datetime:
        """When a delivery of ``day`` is made: the shift start of that local day, in UTC."""
        return dt.datetime.combine(day, self.shift_start, tzinfo=self.zone).astimezone(dt.UTC)

    def _risk(self, state: _State, tank: Tank, until: dt.datetime) -> tuple[RunOut | None, RunOut | None]:
        """Below the safety stock / empty before ``until``, noted for the notices."""
        risk, empty = _crossing(state, tank, until, self.zone), _empty(state, tank, until, self.zone)
        if risk is not None:
            self.run_outs.append(risk)
        if empty is not None:
            self.empties.append(empty)
        return risk, empty

    def _advance(self, code: str, until: dt.datetime) -> None:
        """Replay the site's recorded deliveries up to ``until`` (each adds its quantity to the level
        projected at its time; what happened, never clamped)."""
        state = self._states.get(code)
        if state is None:
            return
        tank = self.tanks[code]
        while state.pending and state.pending[0][0] <= until:
            at, quantity = state.pending.pop(0)
            self._risk(state, tank, at)
            level = self._level_at(state, tank, at)
            state.events.append((at, level))
            state.events.append((at, level + quantity))
            state.level, state.at = level + quantity, at

    def _next_delivery(self, when: dt.datetime, gap: float) -> dt.datetime:
        """The next planned delivery's time: its day's shift start (a calendar date, whatever the clocks do)."""
        return self.delivery_time(when.astimezone(self.zone).date() + gap * DAY)

    def _use_until(self, tank: Tank, when: dt.datetime, following: dt.datetime, gap: float) -> float:
        """Expected use until the next delivery: ``d × gap`` days, or a weather site's expected days."""
        return used_between(tank, when, following, self.zone) if tank.daily_demand else tank.demand_per_day * gap

    def _level_at(self, state: _State, tank: Tank, when: dt.datetime) -> float:
        return max(0.0, state.level - used_between(tank, state.at, when, self.zone))

    def _projected(self, code: str, when: dt.datetime) -> bool:
        """Whether the delivery at ``when`` is corrected from a reading (not history, not unread)."""
        state = self._states.get(code)
        return state is not None and when.astimezone(self.zone).date() >= state.at.astimezone(self.zone).date()

    def _unread_room(self, tank: Tank) -> float:
        """Room below the safe-fill level when the level is at the safety stock (the plan's assumption)."""
        return max(0.0, tank.safe_fill_level - tank.safety_stock)

    def _recorded(self, tank: Tank, planned: float, when: dt.datetime) -> CorrectedStop | None:
        """The stop as delivered, when a delivery of the site is recorded on that day (history: the
        quantity is what was delivered; the projected level is the one before the day's first
        recorded delivery when that came after the reading, else unknown)."""
        day = when.astimezone(self.zone).date()
        done = self._delivered.get((tank.code, day))
        if done is None:
            return None
        quantity, at = done
        state = self._states.get(tank.code)
        level = None
        if state is not None:
            firsts = [a for a, _q in state.pending if a.astimezone(self.zone).date() == day]
            if firsts:
                self._advance(tank.code, firsts[0] - dt.timedelta(microseconds=1))
                level = self._level_at(state, tank, firsts[0])
                self._advance(tank.code, at)
        return CorrectedStop(tank.code, planned, quantity, level, None, quantity, 0.0, None, quantity, at)

    def _stop(self, tank: Tank, planned: float, when: dt.datetime, free: float, gap: float) -> CorrectedStop:
        recorded = self._recorded(tank, planned, when)
        if recorded is not None:
            return recorded
        self._advance(tank.code, when)
        if not self._projected(tank.code, when):
            room = self._unread_room(tank)
            quantity = max(0.0, min(planned, room, free))
            return CorrectedStop(tank.code, planned, quantity, None, None, planned, room)
        state = self._states[tank.code]
        risk, empty = self._risk(state, tank, when)
        level = self._level_at(state, tank, when)
        following = self._next_delivery(when, gap)
        need = (
            self._use_until(tank, when, following, gap) + tank.safety_stock - level + tank.noise_cover * math.sqrt(gap)
        )
        room = tank.safe_fill_level - level
        quantity = max(0.0, min(need, room, free))
        after = _State(level + quantity, when)
        later_risk, later_empty = self._risk(after, tank, following)
        state.events.append((when, level))
        state.events.append((when, after.level))
        state.level, state.at = after.level, when
        return CorrectedStop(
            tank.code, planned, quantity, level, risk or later_risk, max(0.0, need), room, empty or later_empty
        )

    def days_of_stock(self, code: str, when: dt.datetime) -> float:
        """Days until the site falls to its safety stock, from ``when`` (0 without a projected level)."""
        if not self._projected(code, when):
            return 0.0
        tank = self.tanks[code]
        margin = self._level_at(self._states[code], tank, when) - tank.safety_stock
        if tank.daily_demand and margin >= 0:
            at = _used_up(tank, when, margin, when + 3660 * DAY, self.zone)
            return math.inf if at is None else _days(at, when)
        if tank.demand_per_day <= 0:
            return math.inf if margin >= 0 else -math.inf
        return margin / tank.demand_per_day

    def _within_max_stops(self, stops: Sequence[tuple[str, float]], when: dt.datetime) -> tuple[list, tuple]:
        """The stops kept (in the plan's order) and the sites dropped, for the current ``max_stops``."""
        if self.max_stops is None or len(stops) <= self.max_stops:
            return list(stops), ()
        ranked = sorted(range(len(stops)), key=lambda i: self.days_of_stock(stops[i][0], when))  # stable
        keep = set(ranked[: self.max_stops])
        return [s for i, s in enumerate(stops) if i in keep], tuple(s[0] for i, s in enumerate(stops) if i not in keep)

    def _shares(
        self, trip: PlannedTrip, kept: Sequence[tuple[str, float]], when: dt.datetime, budget: float
    ) -> dict[str, float]:
        """The truck space each stop corrected from a reading may take, when the trip cannot carry
        every such stop's wanted quantity: first what keeps each site at its safety stock until its
        next delivery (``base``, scaled down alike when even that does not fit), then the noise
        covers, scaled alike. Recorded deliveries of the day take their quantity first."""
        base: dict[str, float] = {}
        want: dict[str, float] = {}
        day = when.astimezone(self.zone).date()
        for code, _planned in kept:
            done = self._delivered.get((code, day))
            if done is not None:
                budget -= done[0]
                continue
            if not self._projected(code, when):
                continue
            tank = self.tanks[code]
            self._advance(code, when)
            gap = trip.next_days.get(code, tank.cycle_days)
            level = self._level_at(self._states[code], tank, when)
            room = max(0.0, tank.safe_fill_level - level)
            use = self._use_until(tank, when, self._next_delivery(when, gap), gap)
            need = use + tank.safety_stock - level
            base[code] = min(room, max(0.0, need))
            want[code] = min(room, max(0.0, need + tank.noise_cover * math.sqrt(gap)))
        budget = max(0.0, budget)
        if sum(want.values()) <= budget + TOLERANCE:
            return {}
        total = sum(base.values())
        if total >= budget:
            return {code: b * budget / total for code, b in base.items()} if total > 0 else dict.fromkeys(base, 0.0)
        extra = sum(want.values()) - total
        return {code: base[code] + (want[code] - base[code]) * (budget - total) / extra for code in base}

    def correct(self, trips: Sequence[PlannedTrip]) -> list[CorrectedTrip]:
        """Corrected trips, in date order (the trips must be given in date order)."""
        out = []
        for trip in trips:
            when = self.delivery_time(trip.date)
            kept, dropped = self._within_max_stops(trip.stops, when)
            stops = []
            load = 0.0
            # Sites without a reading keep their planned quantity (within their room): reserve it
            # before the others.
            unread = {
                code: min(planned, self._unread_room(self.tanks[code]))
                for code, planned in kept
                if not self._projected(code, when)
            }
            reserved = sum(unread.values())
            shares = self._shares(trip, kept, when, self.capacity - reserved)
            group = {code: g for g, (codes, _space) in enumerate(trip.spaces) for code in codes}
            held = [sum(unread.get(c, 0.0) for c in codes) for codes, _space in trip.spaces]
            group_shares = [
                self._shares(trip, [s for s in kept if s[0] in codes], when, space - held[g])
                for g, (codes, space) in enumerate(trip.spaces)
            ]
            group_load = [0.0] * len(trip.spaces)
            for code, planned in kept:
                reserved -= unread.get(code, 0.0)
                tank = self.tanks[code]
                gap = trip.next_days.get(code, tank.cycle_days)
                free = shares.get(code, self.capacity - load - reserved)
                g = group.get(code)
                if g is not None:
                    held[g] -= unread.get(code, 0.0)
                    room = trip.spaces[g][1] - group_load[g] - held[g]
                    free = max(0.0, min(free, group_shares[g].get(code, room)))
                stop = self._stop(tank, planned, when, free, gap)
                load += stop.quantity
                if g is not None:
                    group_load[g] += stop.quantity
                stops.append(stop)
            out.append(CorrectedTrip(trip.date, load, tuple(stops), dropped))
        return out

    def finish(self, until: dt.datetime) -> None:
        """Note run-outs between each site's last delivery and ``until``."""
        for code, state in self._states.items():
            self._advance(code, until)
            self._risk(state, self.tanks[code], until)

    def level_before(self, code: str, when: dt.datetime) -> float | None:
        """Projected level at ``when`` (before any delivery at that instant); ``None`` without a reading."""
        state = self._states.get(code)
        if state is None or not state.events or when < state.events[0][0]:
            return None
        tank = self.tanks[code]
        last_at, last_level = state.events[0]
        for at, level in state.events:
            if at >= when:
                break
            last_at, last_level = at, level
        return max(0.0, last_level - used_between(tank, last_at, when, self.zone))
