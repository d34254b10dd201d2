"""The dispatcher's morning through Flask's test client, on SQLite and PostgreSQL: each site's latest
reading on the overview, the lowest-first view, the load sheets, and labels that say what they mean."""

from __future__ import annotations

import datetime as dt
import re
from zoneinfo import ZoneInfo

import pytest
from status_helpers import LOW_SITE, PLANNED_TRUCK, UNPLANNED_TRUCK, Page, add_reading, record_plan, today, words

from service import schedule, working_calendar
from service.persistence import repository as repo
from service.persistence.models import Site
from service.planning.projection import Tank
from service.web import formatting

CAUTION = re.compile(
    r"planning aid.*safe fill levels.*overfill prevention.*hazardous liquids.*local codes.*licensed practice",
    re.I | re.S,
)
EMPTY_SITE = "HV-HTG-06"  # read 0 L three hours ago
NBSP = "\u00a0"


def text_of(response) -> str:
    assert response.status_code == 200, response.get_data(as_text=True)[:500]
    assert response.mimetype == "text/html"
    return Page(response.get_data(as_text=True)).text


def quantity(value: float) -> str:
    return f"{round(value):,}".replace(",", " ") + " L"


def rows_of(body: str, css: str) -> list[str]:
    table = body.split(f'class="{css}"')[1].split("</table>")[0]
    return re.findall(r"<tr[^>]*>(.*?)</tr>", table.split("<tbody>")[1].split("</tbody>")[0], re.S)


def clean(html: str) -> str:
    """The text as a browser shows it (the parser joins the pieces around tags with spaces)."""
    text = " ".join(Page(html).text.split()).replace(NBSP, " ")
    return re.sub(r"\(\s+", "(", re.sub(r"\s+([,.)])", r"\1", text))


@pytest.mark.parametrize("path", ["/status/lowest", "/status/load-sheet", "/status/load-sheet?date=2026-12-04"])
def test_the_new_pages_need_a_session(client, demo, path):
    response = client.get(path)
    assert response.status_code == 303
    assert response.headers["Location"].startswith("/status/sign-in?next=")


# ------------------------------------------------------------------ the latest readings


def test_the_age_of_a_reading_reads_as_a_person_says_it():
    now = dt.datetime(2026, 12, 3, 7, 30, tzinfo=dt.UTC)
    for ago, text in (
        (dt.timedelta(seconds=30), "just now"),
        (dt.timedelta(minutes=25), "25 min ago"),
        (dt.timedelta(hours=3), "3 h ago"),
        (dt.timedelta(hours=47, minutes=59), "47 h ago"),
        (dt.timedelta(days=4, hours=1), "4 days ago"),
        (-dt.timedelta(seconds=20), "just now"),  # within the clock skew the API allows
    ):
        assert formatting.age(now - ago, now) == text
    assert formatting.moment(now - dt.timedelta(hours=3), "UTC", now.date()) == "04:30"
    assert formatting.moment(now - dt.timedelta(hours=9), "UTC", now.date()) == "2026-12-02 22:30"
    # 04:30 UTC is 05:30 in Berlin in winter (CET = UTC+1).
    assert formatting.moment(now - dt.timedelta(hours=3), "Europe/Berlin", now.date()) == "05:30"


def test_the_overview_shows_each_sites_latest_reading_and_a_0_l_tank_plainly(app, browser_client, planned, auth):
    now = dt.datetime.now(dt.UTC)
    add_reading(browser_client, auth, EMPTY_SITE, 0.0, now - dt.timedelta(hours=3))
    response = browser_client.get("/status")
    text_of(response)
    body = response.get_data(as_text=True)
    rows = {re.search(r'class="code">([^<]+)<', row)[1]: clean(row) for row in rows_of(body, "readings")}
    zone = ZoneInfo(app.config["ULLAGE_SETTINGS"].timezone)
    local = (now - dt.timedelta(hours=3)).astimezone(zone)
    clock = local.strftime("%H:%M") if local.date() == today(app) else f"{local.date().isoformat()} {local:%H:%M}"
    assert f"0 L at {clock}, 3 h ago" in rows[EMPTY_SITE]
    assert "empty when read" in rows[EMPTY_SITE]
    assert "100 L at" in rows[LOW_SITE] and "below safety stock when read" in rows[LOW_SITE]
    assert "30 000 L at" in rows["HV-DEP-01"] and "when read" not in rows["HV-DEP-01"]
    assert "no reading on record" in rows["HV-FRM-04"]
    assert len(rows) == 16  # every active site of the demo
    # The site's own page says it too.
    site_page = clean(browser_client.get(f"/status/sites/{EMPTY_SITE}").get_data(as_text=True))
    assert f"Latest reading 0 L at {clock}, 3 h ago empty when read" in site_page
    assert "Latest reading none on record" in clean(
        browser_client.get("/status/sites/HV-FRM-04").get_data(as_text=True)
    )
    # Between the warnings and the trucks: warnings stay first.
    assert body.index('id="warnings-heading"') < body.index('id="readings-heading"') < body.index(f">{PLANNED_TRUCK} <")


def test_the_overview_and_the_site_page_show_the_estimated_rate_next_to_the_stored_one(
    app, browser_client, planned, auth
):
    """Issue 15: readings falling 120 L a day at a site that stores 95 L a day."""
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    for weeks_ago, level in ((2, 2200.0), (1, 2200.0 - 120 * 7), (0, 2200.0 - 120 * 14)):
        add_reading(browser_client, auth, "HV-FRM-04", level, now - dt.timedelta(days=7 * weeks_ago, minutes=1))
    body = browser_client.get("/status").get_data(as_text=True)
    rows = {re.search(r'class="code">([^<]+)<', row)[1]: clean(row) for row in rows_of(body, "readings")}
    assert rows["HV-FRM-04"].endswith("95 L, 120 L estimated")
    assert rows["HV-GAR-02"].endswith("900 L, too little data to estimate")
    site_page = clean(browser_client.get("/status/sites/HV-FRM-04").get_data(as_text=True))
    assert (
        "Use per day 95 L Estimated use per day 120 L, from the readings and deliveries of the last 90 days"
        in site_page
    )


# ------------------------------------------------------------------ lowest first


def test_lowest_first_ranks_by_days_above_safety_stock_with_the_next_delivery(
    app, browser_client, planned, auth, db_session, client
):
    now = dt.datetime.now(dt.UTC)
    levels = {"HV-GAR-03": 5200.0, "HV-IND-07": 9000.0, "HV-MAR-08": 2500.0, EMPTY_SITE: 0.0}
    for code, level in levels.items():
        add_reading(browser_client, auth, code, level, now - dt.timedelta(hours=2))
    levels |= {LOW_SITE: 100.0, "HV-DEP-01": 30000.0}  # the fixture's readings, 5 minutes old
    # The expectation, worked by hand from each site's parameters: the level falls at demand_per_day
    # from the reading to now, never below 0; days above the safety stock = (level - s) / d.
    expected = {}
    for code, level in levels.items():
        site = repo.site_by_code(db_session, code)
        hours = 2 if code not in (LOW_SITE, "HV-DEP-01") else 5 / 60
        now_level = max(0.0, level - site.demand_per_day * hours / 24)
        expected[code] = (
            (now_level - site.safety_stock) / site.demand_per_day,
            now_level,
            site.safety_stock,
            now_level / site.demand_per_day,
        )
    db_session.rollback()
    response = browser_client.get("/status/lowest")
    text_of(response)
    body = response.get_data(as_text=True)
    rows = rows_of(body, "lowest")
    codes = [re.search(r'class="code">([^<]+)<', row)[1] for row in rows]
    ranked = sorted(expected, key=lambda c: (expected[c][0], c))
    assert codes[: len(ranked)] == ranked
    # The tanks without a reading come last, saying so.
    unread = codes[len(ranked) :]
    assert len(unread) == 16 - len(ranked) and unread == sorted(unread, key=lambda c: (c,))
    for row in rows[len(ranked) :]:
        assert "no reading on record" in clean(row)
    by_code = dict(zip(codes, map(clean, rows), strict=True))
    # Empty (level at 0) is told from below the safety stock (0 < level < safety stock).
    assert expected[EMPTY_SITE][1] == 0.0
    assert "0 L empty" in by_code[EMPTY_SITE] and "0 (empty)" in by_code[EMPTY_SITE]
    assert 0 < expected[LOW_SITE][1] < expected[LOW_SITE][2]
    assert "below safety stock" in by_code[LOW_SITE] and "empty" not in by_code[LOW_SITE]
    # Above the safety stock and to empty, one decimal; the page was read up to a minute after the
    # five minutes the expectation counts, so either rounding of that minute's ends is right.
    days, to_empty = expected["HV-DEP-01"][0], expected["HV-DEP-01"][3]
    minute = 1 / 1440  # a minute of use is a minute less of stock, in days
    shown = {f" {days - k * minute:.1f} {to_empty - k * minute:.1f} " for k in (0, 1)}
    assert any(text in f" {by_code['HV-DEP-01']} " for text in shown), (shown, by_code["HV-DEP-01"])
    assert "below safety stock" not in by_code["HV-DEP-01"]
    # The next planned delivery beside each tank: the trips API's first stop with a quantity.
    first = today(app)
    window = client.get(
        f"/api/v1/trucks/{PLANNED_TRUCK}/trips?from={first}&to={first + dt.timedelta(days=27)}",
        headers=auth("viewer"),
    ).get_json()
    for code in ranked:
        stop = next(
            (t["date"], s["quantity"])
            for t in window["trips"]
            for s in t["stops"]
            if s["site"] == code and s["quantity"] > 1e-6
        )
        assert f"{stop[0]}" in by_code[code] and f"{quantity(stop[1])} to deliver" in by_code[code], code
    # A truck without an active plan has no planned delivery, and its tanks say so.
    hv_r2 = [
        c
        for c in codes
        if repo.site_by_code(db_session, c).truck_id != repo.truck_by_code(db_session, PLANNED_TRUCK).id
    ]
    assert hv_r2 and all("none planned in the next 28 days" in by_code[c] for c in hv_r2)


def test_lowest_first_pure_ranking_puts_unread_tanks_last():
    def stock(code, level, days):
        return schedule.TankStock(code, code, "T", level, None, level, 0.0, days, days, None)

    items = [stock("B", None, None), stock("C", 500.0, 5.0), stock("A", None, None), stock("D", 0.0, -2.0)]
    assert [s.site for s in schedule.lowest_first(items)] == ["D", "C", "A", "B"]
    assert schedule.level_state(0.0, 100.0) == "empty"
    assert schedule.level_state(50.0, 100.0) == "below safety stock"
    assert schedule.level_state(100.0, 100.0) == "ok"
    assert schedule.level_state(None, 100.0) is None


# ------------------------------------------------------------------ load sheets


def first_common_trip_day(client, auth, first: dt.date) -> dt.date:
    """The first day from ``first`` on which both demo trucks have a trip."""
    days = []
    for truck in (PLANNED_TRUCK, UNPLANNED_TRUCK):
        trips = client.get(
            f"/api/v1/trucks/{truck}/trips?from={first}&to={first + dt.timedelta(days=27)}", headers=auth("viewer")
        ).get_json()["trips"]
        days.append({t["date"] for t in trips})
    return dt.date.fromisoformat(min(days[0] & days[1]))


def test_the_load_sheet_defaults_to_tomorrow_and_refuses_a_bad_date(app, browser_client, planned):
    tomorrow = today(app) + dt.timedelta(days=1)
    page = Page(browser_client.get("/status/load-sheet").get_data(as_text=True))
    assert words(page.find("h1")[0]).startswith(f"Load sheets {tomorrow.isoformat()}")
    assert page.find("input", name="date", type="date")[0].attrs["value"] == tomorrow.isoformat()
    for bad in ("tomorrow", "2026-13-01", "2026-2-1", "１９７０-01-01", "1969-12-31", "2201-01-01"):
        response = browser_client.get(f"/status/load-sheet?date={bad}")
        assert response.status_code == 400, bad
        assert "Unknown date" in Page(response.get_data(as_text=True)).text


def test_the_load_sheet_has_one_sheet_per_truck_with_stops_room_load_and_cautions(
    app, browser_client, planned, client, auth, db_session
):
    record_plan(client, auth, UNPLANNED_TRUCK, today(app))
    day = first_common_trip_day(client, auth, today(app) + dt.timedelta(days=1))
    response = browser_client.get(f"/status/load-sheet?date={day}")
    text_of(response)
    body = response.get_data(as_text=True)
    sections = body.split('<section class="card sheet"')[1:]
    assert len(sections) == 2
    for truck, section in zip((PLANNED_TRUCK, UNPLANNED_TRUCK), sections, strict=True):
        sheet = clean(section.split("</section>")[0])
        assert f"Load sheet · {truck}" in sheet and day.isoformat() in sheet
        assert CAUTION.search(sheet)
        [trip] = client.get(f"/api/v1/trucks/{truck}/trips?from={day}&to={day}", headers=auth("viewer")).get_json()[
            "trips"
        ]
        # The demo's trucks have depots: the sheet lists the stops in the API's driving order.
        route = trip["route"]
        assert f"Stops in driving order from depot {route['depot']} and back, {route['km']:.1f} km" in sheet
        assert f"Back to depot {route['depot']} {route['legs'][-1]['km']:.1f}" in sheet
        by_site = {stop["site"]: stop for stop in trip["stops"]}
        stop_rows = [clean(r) for r in rows_of(section, "sheet-stops")]
        assert len(stop_rows) == len(trip["stops"])
        for number, (row, code) in enumerate(zip(stop_rows, route["stops"], strict=True), start=1):
            stop, leg = by_site[code], route["legs"][number - 1]
            assert stop["sequence"] == number and leg["to"] == code
            site = repo.site_by_code(db_session, stop["site"])
            assert row.startswith(f"{number} {site.name} {code} {leg['km']:.1f} ")
            assert f"{quantity(stop['quantity'])}" in row
            assert f"{site.latitude:.5f}, {site.longitude:.5f}" in row
            safe_fill = site.safe_fill * site.tank_capacity
            if stop["projected_level_before"] is None:
                assert row.endswith(f"no reading {quantity(safe_fill)} not known: check the gauge")
            else:  # room in the tank = safe fill level - projected level before the delivery
                room = safe_fill - stop["projected_level_before"]
                level = quantity(stop["projected_level_before"])
                assert row.endswith(f"{level} {quantity(safe_fill)} {quantity(room)}")
        capacity = repo.truck_by_code(db_session, truck).capacity
        assert f"Total load {quantity(trip['load'])} of {quantity(capacity)}" in sheet
    db_session.rollback()


def test_a_day_without_trips_says_which_trucks_have_none(app, browser_client, planned, client, auth, db_session):
    trips = client.get(
        f"/api/v1/trucks/{PLANNED_TRUCK}/trips?from={today(app)}&to={today(app) + dt.timedelta(days=27)}",
        headers=auth("viewer"),
    ).get_json()["trips"]
    busy = {t["date"] for t in trips}
    calendar = working_calendar.Calendar.of(repo.truck_by_code(db_session, PLANNED_TRUCK))
    free = [today(app) + dt.timedelta(days=k) for k in range(1, 28)]
    free = [day for day in free if day.isoformat() not in busy]
    # A working day without a trip, and a weekday the truck does not work (Mon–Fri in sample_data).
    day = next(day for day in free if calendar.off_reason(day) is None)
    text = text_of(browser_client.get(f"/status/load-sheet?date={day}"))
    # The demo has four trucks (issue 16); only PLANNED_TRUCK has an active plan.
    unplanned = f"{UNPLANNED_TRUCK} (no active plan), HV-R3 (no active plan), HV-R4 (no active plan)"
    assert f"No load sheet for {PLANNED_TRUCK} (no trip on this day), {unplanned}." in text
    assert f"No truck has a trip on {day}." in text
    sunday = next(day for day in free if day.isoweekday() == 7)
    text = text_of(browser_client.get(f"/status/load-sheet?date={sunday}"))
    assert f"No load sheet for {PLANNED_TRUCK} (does not work on Sun), {unplanned}." in text
    db_session.rollback()


def test_a_truck_with_several_trips_a_day_gets_them_numbered_on_its_load_sheet(app, browser_client, client, auth):
    """One stop a trip and two tanks that each hold under two days of stock: every day has two
    trips, listed on the load sheet as "Trip 1" and "Trip 2", each with its own stop."""
    truck = {"code": "T2", "name": "Two trips", "dispatch_cost": 100.0, "capacity": 5000.0, "max_stops": 1}
    truck |= {"working_days": [1, 2, 3, 4, 5, 6, 7], "trips_per_day": 2}
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    for code in ("D1", "D2"):
        site = {"code": code, "name": f"Daily {code}", "truck": "T2", "demand_per_day": 1000.0}
        site |= {"holding_cost": 0.002, "stop_cost": 10.0, "tank_capacity": 2000.0, "safe_fill": 0.9}
        site |= {"safety_stock": 100.0}
        response = client.post("/api/v1/sites", json=site, headers=auth("admin"))
        assert response.status_code == 201, response.get_json()
    record_plan(client, auth, "T2", today(app))
    day = today(app) + dt.timedelta(days=1)
    [first, second] = client.get(f"/api/v1/trucks/T2/trips?from={day}&to={day}", headers=auth("viewer")).get_json()[
        "trips"
    ]
    assert (first["trip"], second["trip"]) == (1, 2)
    body = browser_client.get(f"/status/load-sheet?date={day}").get_data(as_text=True)
    [section] = body.split('<section class="card sheet"')[1:]
    captions = [clean(c) for c in re.findall(r"<caption>(.*?)</caption>", section, re.S)]
    assert [c.split(":")[0] for c in captions] == ["Trip 1", "Trip 2"]
    tables = section.split('class="sheet-stops"')[1:]
    for trip, table in zip((first, second), tables, strict=True):
        [row] = [clean(r) for r in rows_of('class="sheet-stops"' + table, "sheet-stops")]
        assert trip["stops"][0]["site"] in row


def test_the_load_sheet_says_which_compartment_holds_each_stops_load(app, browser_client, client, auth):
    """A truck of two compartments (3000 | 2000) and two daily sites of two products: each trip's
    heating oil goes in one compartment and its diesel in the other (issue 16)."""
    for code, name in (("KER", "Heating oil"), ("DSL", "Diesel")):
        product = {"code": code, "name": name, "safe_fill": 0.95}
        assert client.post("/api/v1/products", json=product, headers=auth("admin")).status_code == 201
    truck = {"code": "T3", "name": "Two compartments", "dispatch_cost": 100.0, "capacity": 5000.0, "max_stops": 2}
    truck |= {"compartments": [3000.0, 2000.0], "working_days": [1, 2, 3, 4, 5, 6, 7], "trips_per_day": 2}
    assert client.post("/api/v1/trucks", json=truck, headers=auth("admin")).status_code == 201
    for code, product in (("K1", "KER"), ("D1", "DSL")):
        site = {"code": code, "name": f"Daily {code}", "truck": "T3", "product": product, "demand_per_day": 900.0}
        site |= {"holding_cost": 0.002, "stop_cost": 10.0, "tank_capacity": 2000.0, "safe_fill": 0.9}
        site |= {"safety_stock": 100.0}
        response = client.post("/api/v1/sites", json=site, headers=auth("admin"))
        assert response.status_code == 201, response.get_json()
    record_plan(client, auth, "T3", today(app))
    day = today(app) + dt.timedelta(days=1)
    trips = client.get(f"/api/v1/trucks/T3/trips?from={day}&to={day}", headers=auth("viewer")).get_json()["trips"]
    stops = [s for t in trips for s in t["stops"]]
    assert stops and all(s["compartments"] for s in stops)
    text = text_of(browser_client.get(f"/status/load-sheet?date={day}"))
    for stop in stops:
        for number, part in stop["compartments"]:
            assert f"{quantity(part)} in compartment {number}" in text


# ------------------------------------------------------------------ labels


def test_labels_say_what_they_mean(app, browser_client, planned, client, auth):
    record_plan(client, auth, UNPLANNED_TRUCK, today(app))
    day = first_common_trip_day(client, auth, today(app))
    pages = {
        "overview": browser_client.get("/status"),
        "lowest": browser_client.get("/status/lowest"),
        "sheet": browser_client.get(f"/status/load-sheet?date={day}"),
        "site": browser_client.get(f"/status/sites/{LOW_SITE}"),
    }
    texts = {name: text_of(response) for name, response in pages.items()}
    for name, text in texts.items():
        assert "delivered" not in text.lower(), name  # no delivery is recorded yet
        assert re.sub(r"not in driving order", "", text).lower().count("in order") == 0, name
    # The demo's trucks have depots and its sites coordinates: the week's stops are routed.
    depot = client.get(f"/api/v1/trucks/{PLANNED_TRUCK}", headers=auth("viewer")).get_json()["depot"]
    assert f"Stops in driving order from depot {depot} (quantity to deliver)" in texts["overview"]
    assert "to deliver" in texts["lowest"]


def test_a_warning_says_the_site_the_date_and_what_to_do_once(app, browser_client, planned):
    page = Page(browser_client.get("/status").get_data(as_text=True))
    [risk] = [words(e) for e in page.find("li", class_="kind-run_out_risk") if LOW_SITE in words(e)]
    date = re.search(r"\d{4}-\d{2}-\d{2}", risk)[0]
    assert risk.count(LOW_SITE) == 1 and risk.count(date) == 1
    assert risk.count("safety stock") == 1
    assert risk.count("bring its delivery forward or re-plan") == 1
    # The stop beside it says in a few words what the warning says in full.
    notes = [words(e) for e in page.find("span", class_="kind-run_out_risk")]
    assert notes and all(LOW_SITE not in n for n in notes)
    assert all(re.search(r"(empty|below safety stock) (before this delivery|from \d{4}-\d{2}-\d{2})", n) for n in notes)
    [missing] = [words(e) for e in page.find("li", class_="kind-no_recent_reading") if "HV-FRM-04" in words(e)]
    assert missing.count("HV-FRM-04") == 1 and missing.endswith("Record a reading.")


@pytest.mark.parametrize("code, fraction, state", [(EMPTY_SITE, 0.0, "empty"), ("HV-MAR-08", 0.5, "below")])
def test_the_level_table_tells_empty_from_below_safety_stock(
    app, browser_client, planned, auth, db_session, code, fraction, state
):
    """A reading 6 h before today's 00:00 at ``fraction`` × safety stock + 6 h of use: today's level at
    00:00 is that fraction of the safety stock (0: empty; 0.5: below the safety stock, not empty)."""
    site = repo.site_by_code(db_session, code)
    zone = ZoneInfo(app.config["ULLAGE_SETTINGS"].timezone)
    midnight = dt.datetime.combine(today(app), dt.time(0), tzinfo=zone).astimezone(dt.UTC)
    add_reading(
        browser_client,
        auth,
        code,
        fraction * site.safety_stock + site.demand_per_day / 4,
        midnight - dt.timedelta(hours=6),
    )
    levels = schedule.site_levels(db_session, site, today(app), 28, app.config["ULLAGE_SETTINGS"])
    db_session.rollback()
    body = browser_client.get(f"/status/sites/{code}").get_data(as_text=True)
    rows = rows_of(body, "levels")
    assert len(rows) == 28
    first = clean(re.findall(r"<td>(.*?)</td>", rows[0], re.S)[0])
    if state == "empty":
        assert first == "0 L (empty)"
    else:
        assert first == f"{quantity(site.safety_stock / 2)} (below safety stock)"
    for row, (_, value) in zip(rows, levels.days, strict=True):
        cell = clean(re.findall(r"<td>(.*?)</td>", row, re.S)[0])
        if value <= 1e-6:
            assert cell == "0 L (empty)"
        elif value < levels.safety_stock - 1e-6:
            assert cell.endswith("(below safety stock)") and "empty" not in cell
        else:
            assert "(" not in cell


def test_a_run_out_warning_says_when_the_tank_is_empty_too(app, browser_client, demo, client, auth, db_session):
    """A plan that starts in five days and a tank read at 100 L now: it is below its safety stock at
    once and empty once 100 L are used, at 00:00 of the next day after that (worked by hand from
    demand_per_day, not from the projection)."""
    record_plan(client, auth, PLANNED_TRUCK, today(app) + dt.timedelta(days=5))
    now = dt.datetime.now(dt.UTC) - dt.timedelta(minutes=5)
    add_reading(client, auth, LOW_SITE, 100.0, now)
    site = repo.site_by_code(db_session, LOW_SITE)
    zone = ZoneInfo(app.config["ULLAGE_SETTINGS"].timezone)
    empty_at = (now + dt.timedelta(days=100.0 / site.demand_per_day)).astimezone(zone)
    db_session.rollback()
    empty_day = empty_at.date() + dt.timedelta(days=1)  # the first 00:00 after the level reaches 0
    page = Page(browser_client.get("/status").get_data(as_text=True))
    [risk] = [words(e) for e in page.find("li", class_="kind-run_out_risk") if LOW_SITE in words(e)]
    assert f"below its safety stock on {today(app).isoformat()}, and empty by {empty_day.isoformat()}." in risk


def test_a_run_out_warning_of_a_tank_that_read_0_l_says_it_is_empty(app, browser_client, planned, auth):
    now = dt.datetime.now(dt.UTC) - dt.timedelta(minutes=1)
    add_reading(browser_client, auth, EMPTY_SITE, 0.0, now)
    page = Page(browser_client.get("/status").get_data(as_text=True))
    [risk] = [words(e) for e in page.find("li", class_="kind-run_out_risk") if EMPTY_SITE in words(e)]
    local = now.astimezone(ZoneInfo(app.config["ULLAGE_SETTINGS"].timezone))
    date = re.search(r"safety stock on (\d{4}-\d{2}-\d{2})", risk)[1]
    when = f"{local:%H:%M} that day" if date == local.date().isoformat() else f"{local:%Y-%m-%d %H:%M}"
    assert f"; it read 0 L (empty) at {when}." in risk
    assert risk.count(EMPTY_SITE) == 1 and risk.count(date) == 1


def test_the_stock_now_and_a_site_in_no_plan_count_the_deliveries_recorded_since_the_reading(
    app, browser_client, planned, auth, client, db_session
):
    code = "HV-GAR-12"  # on HV-R2, which has no active plan: 700 L/day, safety stock 2 000 L
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    read_at, delivered_at = now - dt.timedelta(hours=4), now - dt.timedelta(hours=2)
    for quantity_, at in ((1000.0, now - dt.timedelta(hours=6)), (6000.0, delivered_at)):
        response = client.post(
            f"/api/v1/sites/{code}/deliveries",
            json={"quantity": quantity_, "delivered_at": at.isoformat()},
            headers=auth("dispatcher"),
        )
        assert response.status_code == 201, response.get_data(as_text=True)
    add_reading(browser_client, auth, code, 3000.0, read_at)
    # Worked by hand: the reading falls at 700 L/day, the delivery after it adds 6 000 L, the one
    # before it is already in the reading: 3 000 − 700 × 4/24 + 6 000 = 8 883.3 L now.
    rows = rows_of(browser_client.get("/status/lowest").get_data(as_text=True), "lowest")
    row = next(clean(r) for r in rows if f'class="code">{code}<' in r)
    minute = 700 / 1440  # the page is read up to a minute after ``now``
    assert any(quantity(9000 - 700 * 4 / 24 - k * minute) in row for k in (0, 1, 2)), row
    # The site page's projected levels (no plan): the same replay, at 00:00 of the next days.
    settings_ = app.config["ULLAGE_SETTINGS"]
    zone = ZoneInfo(settings_.timezone)
    tomorrow = today(app) + dt.timedelta(days=1)
    site = repo.site_by_code(db_session, code)
    levels = schedule.site_levels(db_session, site, tomorrow, 2, settings_)
    for day, level in levels.days:
        midnight = dt.datetime.combine(day, dt.time(0), tzinfo=zone)
        elapsed = (midnight - read_at).total_seconds() / 86400
        assert level == pytest.approx(max(0.0, 9000 - 700 * elapsed), abs=1e-6)
    assert [n.kind for n in levels.notices] == ["no_active_plan"]


def test_the_stock_now_of_a_weather_site_falls_at_the_expected_use_of_each_day():
    # Worked by hand: 500 L read a day ago, 100 L delivered 12 h ago, an expected use of 200 L on
    # every day (not the stored 100): 500 − 200 + 100 = 400 L now; (400 − 50) / 200 = 1.75 days
    # above the safety stock and 400 / 200 = 2 days to empty at today's expected use.
    now = dt.datetime(2026, 12, 3, 12, 0, tzinfo=dt.UTC)
    site = Site(
        code="W", name="Weather site", demand_per_day=100.0, safety_stock=50.0, safe_fill=0.9, tank_capacity=1000.0
    )
    days = {now.date() + dt.timedelta(days=k): 200.0 for k in (-2, -1, 0, 1)}
    tank = Tank(
        "W",
        100.0,
        900.0,
        50.0,
        1,
        500.0,
        now - dt.timedelta(days=1),
        ((now - dt.timedelta(hours=12), 100.0),),
        0.0,
        days,
    )
    stock = schedule.tank_stock(site, "T", tank, now, ZoneInfo("UTC"))
    assert stock.level == pytest.approx(400.0)
    assert stock.days_above_safety == pytest.approx(1.75) and stock.days_to_empty == pytest.approx(2.0)
    assert stock.reading_level == 500.0 and stock.state == "ok"
