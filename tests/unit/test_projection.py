"""service.planning.projection: corrected quantities and run-out dates, computed by hand (pure, no DB).

Rules (issue 4 §4 and the module docstring): level(D) = max(0, L − d·(t_D − t_r)) at 00:00 of the
delivery day; quantity = clamp(d·g + s − level, 0, min(F − level, free space)) with g the days to the
site's next delivery (the cycle T where the trip does not say); without a reading the planned quantity.
"""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

import pytest

from service.planning.projection import DAY, PlannedTrip, Projection, Tank, day_start

UTC = ZoneInfo("UTC")
D0 = dt.date(2026, 12, 7)


def at(days: float = 0, day: dt.date = D0, zone: ZoneInfo = UTC) -> dt.datetime:
    return day_start(day, zone) + dt.timedelta(days=days)


def tank(code="A", *, d=300.0, F=9000.0, s=500.0, T=10, level=2000.0, when=None):
    return Tank(code, d, F, s, T, level, at() if when is None and level is not None else when)


def day(k: int) -> dt.date:
    return D0 + dt.timedelta(days=k)


def one(projection: Projection, trips):
    return projection.correct(trips)


def test_quantity_keeps_site_above_safety_stock_until_next_delivery():
    p = Projection([tank()], 18000.0, UTC)
    [trip] = p.correct([PlannedTrip(day(3), (("A", 3000.0),))])
    stop = trip.stops[0]
    # level = 2000 − 3·300 = 1100; need = 300·10 + 500 − 1100 = 2400 (room 7900, free 18000)
    assert stop.projected_level_before == pytest.approx(1100.0)
    assert stop.quantity == pytest.approx(2400.0)
    assert stop.planned_quantity == 3000.0
    assert trip.load == pytest.approx(2400.0)
    assert stop.run_out is None and p.run_outs == []


def test_quantity_lasts_the_gap_to_the_next_listed_delivery_not_the_mean_cycle():
    """Rule 2 on a working calendar: a Friday delivery on Monday to Friday lasts three days, not the
    mean gap. Same tank as above (level 1100 on day 3) with its next delivery 3 days later."""
    p = Projection([tank(T=2)], 18000.0, UTC)
    friday = PlannedTrip(day(3), (("A", 3000.0),), {"A": 3})
    stop = p.correct([friday])[0].stops[0]
    # need = 300·3 + 500 − 1100 = 300 (by hand); with the mean T = 2 it would be 0 and the tank would
    # cross its safety stock before Monday.
    assert stop.quantity == pytest.approx(300.0)
    assert stop.run_out is None and p.run_outs == []
    # A site the trip does not give a gap for keeps the cycle: need = 300·2 + 500 − 1100 = 0.
    p = Projection([tank(T=2)], 18000.0, UTC)
    assert p.correct([PlannedTrip(day(3), (("A", 3000.0),))])[0].stops[0].quantity == pytest.approx(0.0)


def test_never_negative_when_level_is_high():
    p = Projection([tank(level=8000.0)], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(1), (("A", 3000.0),))])[0].stops[0]
    # level 7700; need = 3000 + 500 − 7700 = −4200 → 0
    assert stop.projected_level_before == pytest.approx(7700.0)
    assert stop.quantity == 0.0


def test_capped_by_room_below_safe_fill_and_warns():
    p = Projection([tank(T=30)], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(3), (("A", 9000.0),))])[0].stops[0]
    # need = 9000 + 500 − 1100 = 8400 > room 9000 − 1100 = 7900 → 7900, the tank is at F = 9000.
    assert stop.quantity == pytest.approx(7900.0)
    assert stop.projected_level_before + stop.quantity == pytest.approx(9000.0)
    # From 9000 on day 3 the level reaches s = 500 after 8500/300 = 28.33 days: on day 31, before the
    # next delivery on day 33.
    assert stop.run_out is not None and stop.run_out.date == day(31)


def test_capped_by_truck_free_space():
    a, b = tank("A"), tank("B", level=1000.0)
    p = Projection([a, b], 3000.0, UTC)
    [trip] = p.correct([PlannedTrip(day(3), (("A", 2500.0), ("B", 2500.0)))])
    first, second = trip.stops
    # A needs 2400 (as above); B: level 1000 − 900 = 100, need 3000 + 500 − 100 = 3400, room 8900.
    # The truck carries 3000 of the 5800 needed: each site gets the same share, 3000/5800 of its need
    # (issue 15: not first come, first served, which left the last stops of a full trip with nothing).
    assert second.projected_level_before == pytest.approx(100.0)
    assert first.quantity == pytest.approx(2400.0 * 3000.0 / 5800.0)
    assert second.quantity == pytest.approx(3400.0 * 3000.0 / 5800.0)
    assert trip.load == pytest.approx(3000.0)
    assert first.run_out is not None and second.run_out is not None  # neither lasts above 500


def test_a_products_stops_share_its_compartments_space():
    """``PlannedTrip.spaces`` (issue 16): A and B share 3000 of compartments, C has 6000 to itself;
    the truck (18 000) is no limit. Same tanks as above: A needs 2400, B 3400, C (level 2000) 2400."""
    a, b, c = tank("A"), tank("B", level=1000.0), tank("C")
    p = Projection([a, b, c], 18000.0, UTC)
    spaces = ((("A", "B"), 3000.0), (("C",), 6000.0))
    [trip] = p.correct([PlannedTrip(day(3), (("A", 2500.0), ("B", 2500.0), ("C", 2500.0)), {}, spaces)])
    first, second, third = trip.stops
    # A and B share 3000 as a full truck's stops do: 3000/5800 of each need (by hand); C gets its need.
    assert first.quantity == pytest.approx(2400.0 * 3000.0 / 5800.0)
    assert second.quantity == pytest.approx(3400.0 * 3000.0 / 5800.0)
    assert third.quantity == pytest.approx(2400.0)
    assert first.run_out is not None and third.run_out is None


def test_planned_quantity_without_a_reading():
    p = Projection([tank(level=None)], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(3), (("A", 3000.0),))])[0].stops[0]
    assert stop.quantity == 3000.0 and stop.projected_level_before is None and stop.run_out is None
    assert p.level_before("A", at(5)) is None


def test_run_out_date_and_level_never_below_zero():
    p = Projection([tank()], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(8), (("A", 3000.0),))])[0].stops[0]
    # 2000 falls to 500 after 1500/300 = 5 days (day 5) and to 0 on day 6.67; at day 8 the level is 0.
    assert stop.projected_level_before == 0.0
    assert stop.run_out is not None and stop.run_out.date == day(5)
    assert stop.quantity == pytest.approx(3500.0)  # 3000 + 500 − 0
    assert [r.date for r in p.run_outs] == [day(5)]
    assert p.level_before("A", at(4)) == pytest.approx(800.0)
    assert p.level_before("A", at(7)) == 0.0


def test_run_out_after_last_delivery_is_noted_by_finish():
    p = Projection([tank()], 18000.0, UTC)
    p.correct([])
    p.finish(at(4))
    assert p.run_outs == []
    p.finish(at(6))
    assert [r.date for r in p.run_outs] == [day(5)]


def test_reading_on_the_delivery_day_precedes_the_delivery():
    # Reading 1000 at 15:00 of day 3; the level is carried back to 00:00: 1000 + 300·15/24 = 1187.5.
    p = Projection([tank(level=1000.0, when=at(3 + 15 / 24))], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(3), (("A", 3000.0),))])[0].stops[0]
    assert stop.projected_level_before == pytest.approx(1187.5)
    assert stop.quantity == pytest.approx(3000.0 + 500.0 - 1187.5)


def test_deliveries_before_the_readings_day_are_history():
    p = Projection([tank(level=4000.0, when=at(3.5))], 18000.0, UTC)
    trips = p.correct([PlannedTrip(day(2), (("A", 3000.0),)), PlannedTrip(day(12), (("A", 3000.0),))])
    early, later = trips[0].stops[0], trips[1].stops[0]
    assert early.quantity == 3000.0 and early.projected_level_before is None
    # 4000 − 300·8.5 = 1450 at 00:00 of day 12; need 3000 + 500 − 1450 = 2050
    assert later.projected_level_before == pytest.approx(1450.0)
    assert later.quantity == pytest.approx(2050.0)


def test_successive_deliveries_chain():
    p = Projection([tank()], 18000.0, UTC)
    trips = p.correct([PlannedTrip(day(3), (("A", 3000.0),)), PlannedTrip(day(13), (("A", 3000.0),))])
    first, second = trips[0].stops[0], trips[1].stops[0]
    # after day 3: 1100 + 2400 = 3500; ten days later 3500 − 3000 = 500 = s: exactly at the safety stock
    assert second.projected_level_before == pytest.approx(500.0)
    assert second.quantity == pytest.approx(3000.0)
    assert first.run_out is None and second.run_out is None


def test_delivery_day_starts_at_midnight_of_the_service_zone():
    berlin = ZoneInfo("Europe/Berlin")  # UTC+1 in December
    reading = dt.datetime(2026, 12, 7, 0, 0, tzinfo=dt.UTC)  # 01:00 in Berlin
    p = Projection([tank(when=reading)], 18000.0, berlin)
    stop = p.correct([PlannedTrip(day(3), (("A", 3000.0),))])[0].stops[0]
    # 00:00 Berlin on day 3 = 23:00 UTC on day 2: 2 days 23 hours after the reading.
    assert stop.projected_level_before == pytest.approx(2000.0 - 300.0 * (2 + 23 / 24))


def test_unread_sites_keep_their_planned_quantity_when_read_sites_need_more():
    # Truck 5000. A (read) comes first: level 2000 − 3·300 = 1100, need = 300·14 + 500 − 1100 = 3600.
    # B has no reading and keeps its planned 2000 (issue 4 §4), so A gets only the 3000 left.
    unread = Tank("B", 100.0, 5000.0, 100.0, 14, None, None)
    p = Projection([tank(T=14), unread], 5000.0, UTC)
    [trip] = p.correct([PlannedTrip(day(3), (("A", 3000.0), ("B", 2000.0)))])
    a, b = trip.stops
    assert b.quantity == 2000.0 and b.projected_level_before is None
    assert a.quantity == pytest.approx(3000.0)
    assert a.run_out is not None  # 3000 < 3600 needed: A falls below safety stock before its next delivery
    assert trip.load == pytest.approx(5000.0)


# ------------------------------------------------------------------ issue 14: elapsed time, current limits

BERLIN = ZoneInfo("Europe/Berlin")
SPRING, AUTUMN = dt.date(2027, 3, 28), dt.date(2027, 10, 31)  # last Sundays of March and October


def hours_between(later: dt.datetime, earlier: dt.datetime) -> float:
    return (later.astimezone(dt.UTC) - earlier.astimezone(dt.UTC)) / dt.timedelta(hours=1)


@pytest.mark.parametrize(("change", "elapsed"), [(SPRING, 47), (AUTUMN, 49)])
def test_demand_between_deliveries_across_a_clock_change_is_for_the_elapsed_hours(change, elapsed):
    # d = 240 per day = 10 per hour, cycle 2 days, safety stock 500. A reading of 500 at 00:00 of
    # the day before the change; deliveries then and two days later, 47 (spring) or 49 (autumn)
    # hours apart. The first brings the level to d·T + s = 980.
    # EU summer time runs from 01:00 UTC on the last Sunday of March to 01:00 UTC on the last
    # Sunday of October (Directive 2000/84/EC, from memory); the zone database agrees for 2027:
    # Berlin's 28 March has 23 hours and its 31 October 25.
    assert hours_between(day_start(change + DAY, BERLIN), day_start(change, BERLIN)) == elapsed - 24
    before = change - DAY
    p = Projection([Tank("A", 240.0, 9000.0, 500.0, 2, 500.0, day_start(before, BERLIN))], 18000.0, BERLIN)
    first, second = p.correct([PlannedTrip(before, (("A", 480.0),)), PlannedTrip(change + DAY, (("A", 480.0),))])
    assert first.stops[0].projected_level_before == pytest.approx(500.0)
    assert first.stops[0].quantity == pytest.approx(480.0)
    assert hours_between(day_start(change + DAY, BERLIN), day_start(before, BERLIN)) == elapsed
    assert second.stops[0].projected_level_before == pytest.approx(980.0 - 10.0 * elapsed)
    assert second.stops[0].quantity == pytest.approx(480.0 + 500.0 - (980.0 - 10.0 * elapsed))


@pytest.mark.parametrize(("change", "elapsed"), [(SPRING, 47), (AUTUMN, 49)])
def test_projected_levels_between_deliveries_count_elapsed_hours(change, elapsed):
    # The status page's chart: the level at 00:00 two days after a delivery made the day before the change.
    before = change - DAY
    p = Projection([Tank("A", 240.0, 9000.0, 500.0, 2, 500.0, day_start(before, BERLIN))], 18000.0, BERLIN)
    p.correct([PlannedTrip(before, (("A", 480.0),))])
    assert p.level_before("A", day_start(change + DAY, BERLIN)) == pytest.approx(980.0 - 10.0 * elapsed)


def test_run_out_date_after_the_spring_change_is_from_elapsed_time():
    # Truck capacity 475: the delivery of 27 March (00:00 CET = 23:00 UTC on the 26th) lifts 500 to
    # 975, 475 above the safety stock: 47.5 hours at 10 per hour, i.e. 22:30 UTC on 28 March =
    # 00:30 CEST on the 29th. Wall-clock arithmetic would put it at 23:30 on the 28th.
    before = SPRING - DAY
    p = Projection([Tank("A", 240.0, 9000.0, 500.0, 2, 500.0, day_start(before, BERLIN))], 475.0, BERLIN)
    [trip] = p.correct([PlannedTrip(before, (("A", 480.0),))])
    assert trip.stops[0].quantity == pytest.approx(475.0)
    # The next delivery (00:00 CEST on the 29th, 47 hours later) would come before the crossing.
    assert trip.stops[0].run_out is None
    p.finish(day_start(SPRING + 2 * DAY, BERLIN))
    assert [r.date for r in p.run_outs] == [SPRING + DAY]


def test_an_unread_site_gets_no_more_than_the_room_above_its_safety_stock():
    # Safe fill level 2700 (tank 3000 × 0.9), safety stock 500: the plan's 6500 becomes 2200.
    p = Projection([Tank("A", 500.0, 2700.0, 500.0, 13, None, None)], 10000.0, UTC)
    stop = p.correct([PlannedTrip(day(0), (("A", 6500.0),))])[0].stops[0]
    assert stop.quantity == pytest.approx(2200.0)
    assert (stop.wanted, stop.room) == (6500.0, pytest.approx(2200.0))


def test_a_level_above_the_safe_fill_gets_nothing():
    p = Projection([tank(level=9500.0)], 18000.0, UTC)
    stop = p.correct([PlannedTrip(day(0), (("A", 3000.0),))])[0].stops[0]
    assert stop.quantity == 0.0 and stop.room == pytest.approx(-500.0)


def test_unread_sites_reserve_only_what_fits_their_room():
    # Truck 5000. B (no reading) planned 4000 but its room is 1500 − 0 = 1500, so it reserves 1500 and
    # A (read: need 300·14 + 500 − 1100 = 3600) gets 5000 − 1500 = 3500.
    unread = Tank("B", 100.0, 1500.0, 0.0, 14, None, None)
    p = Projection([tank(T=14), unread], 5000.0, UTC)
    [trip] = p.correct([PlannedTrip(day(3), (("A", 3000.0), ("B", 4000.0)))])
    a, b = trip.stops
    assert b.quantity == pytest.approx(1500.0)
    assert a.quantity == pytest.approx(3500.0) and a.wanted == pytest.approx(3600.0)
    assert trip.load == pytest.approx(5000.0)


def test_over_max_stops_the_sites_with_fewest_days_of_stock_keep_their_stops():
    # max_stops 2. On day 3: A read high (5000 − 900 = 4100, (4100 − 500)/300 = 12 days), B read low
    # (1000 − 900 = 100, below its safety stock: (100 − 500)/300 = −4/3 days), C and D unread (0 days,
    # the plan's order breaks the tie): B and C keep their stops, A and D are dropped.
    tanks = [tank("A", level=5000.0), tank("B", level=1000.0), tank("C", level=None), tank("D", level=None)]
    p = Projection(tanks, 18000.0, UTC, max_stops=2)
    assert p.days_of_stock("A", at(3)) == pytest.approx(12.0)
    assert p.days_of_stock("B", at(3)) == pytest.approx(-400.0 / 300.0)
    [trip] = p.correct([PlannedTrip(day(3), (("A", 1.0), ("B", 1.0), ("C", 1.0), ("D", 1.0)))])
    assert [s.site for s in trip.stops] == ["B", "C"]
    assert trip.dropped == ("A", "D")
    # A's tank was not refilled: it keeps falling from its reading.
    assert p.level_before("A", at(4)) == pytest.approx(5000.0 - 4 * 300.0)


def weather_tank(daily, **kw):
    """A weather site: the expected demand of each listed day (others: d = 300)."""
    return Tank("W", 300.0, 9000.0, 500.0, 10, kw.get("level", 5000.0), at(kw.get("start", 0.0)), daily_demand=daily)


def test_weather_tank_uses_each_days_expected_demand():
    # Hand computation: from 12:00 of day 0 the level falls by half of day 0 (100/2), then 400 on
    # day 1 and 700 on day 2; at 00:00 of day 3 it is 5000 − 50 − 400 − 700 = 3850.
    daily = {day(0): 100.0, day(1): 400.0, day(2): 700.0} | {day(k): 1000.0 for k in range(3, 8)}
    p = Projection([weather_tank(daily, start=0.5)], 18000.0, UTC)
    assert p.level_before("W", at(3)) == pytest.approx(3850.0)
    assert p.level_before("W", at(1.25)) == pytest.approx(5000.0 - 50.0 - 100.0)  # a quarter of day 1
    # A delivery on day 3 with the next one 5 days later: need = 5 · 1000 + s − level = 1650.
    [trip] = p.correct([PlannedTrip(day(3), (("W", 1.0),), {"W": 5})])
    assert trip.stops[0].quantity == pytest.approx(5000.0 + 500.0 - 3850.0)
    assert trip.stops[0].run_out is None
    # After the delivery 5500, 5000 above s: days 3 to 7 use exactly that, so 5 days of stock.
    assert p.days_of_stock("W", at(3)) == pytest.approx(5.0)
    assert p.days_of_stock("W", at(3.5)) == pytest.approx(4.5)


def test_weather_tank_run_out_date_follows_the_cold_days():
    # 5000 − 500 = 4500 above s; days of 1000, 1000, 3000 cross it during day 2 (at 2500 of 3000),
    # where a flat 300 per day would last 15 days.
    daily = {day(0): 1000.0, day(1): 1000.0, day(2): 3000.0}
    p = Projection([weather_tank(daily)], 18000.0, UTC)
    p.finish(at(5))
    assert [r.date for r in p.run_outs] == [day(2)]
    flat = Projection([weather_tank({})], 18000.0, UTC)
    flat.finish(at(5))
    assert flat.run_outs == []
