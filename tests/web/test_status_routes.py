"""The status page shows each trip in driving order with a server-drawn SVG route map (issue 16)."""

from __future__ import annotations

import re

from status_helpers import PLANNED_TRUCK, Page, today

DEPOT = {"code": "HV-DW", "name": "Invented west depot", "latitude": 51.745, "longitude": -3.40}


def give_depot(client, auth) -> None:
    assert client.post("/api/v1/depots", json=DEPOT, headers=auth("admin")).status_code == 201
    truck = client.get(f"/api/v1/trucks/{PLANNED_TRUCK}", headers=auth("admin"))
    patched = client.patch(
        f"/api/v1/trucks/{PLANNED_TRUCK}",
        json={"depot": DEPOT["code"]},
        headers=auth("admin", **{"If-Match": truck.headers["ETag"]}),
    )
    assert patched.status_code == 200, patched.get_json()


def drop_depot(client, auth) -> None:
    truck = client.get(f"/api/v1/trucks/{PLANNED_TRUCK}", headers=auth("admin"))
    patched = client.patch(
        f"/api/v1/trucks/{PLANNED_TRUCK}",
        json={"depot": None},
        headers=auth("admin", **{"If-Match": truck.headers["ETag"]}),
    )
    assert patched.status_code == 200, patched.get_json()
    assert patched.get_json()["depot"] is None


def week_of(app) -> str:
    year, week, _ = today(app).isocalendar()
    return f"{year}-W{week:02d}"


def test_trips_are_listed_in_driving_order_with_a_route_map(app, client, auth, planned, browser_client):
    give_depot(client, auth)
    week = week_of(app)
    api = client.get(f"/api/v1/trucks/{PLANNED_TRUCK}/trips?week={week}", headers=auth("viewer")).get_json()
    assert api["trips"], "the demo plan has trips this week"
    body = browser_client.get(f"/status?week={week}").get_data(as_text=True)
    page = Page(body)
    maps = page.find("svg", class_="route-map")
    assert len(maps) == len(api["trips"])
    lists = page.find("ol", class_="in-order")
    assert len(lists) == len(api["trips"])
    # Each list's site codes, in page order, are the API's driving order of the same trip.
    shown = [re.findall(r"HV-[A-Z]{3}-[0-9]{2}", " ".join(ol.text)) for ol in lists]
    assert shown == [trip["route"]["stops"] for trip in api["trips"]]
    for svg, trip in zip(maps, api["trips"], strict=True):
        label = svg.attrs["aria-label"] or ""
        assert svg.attrs["role"] == "img" and label.startswith(f"Route map from depot {DEPOT['code']}")
        codes = re.findall(r"\((HV-[A-Z]{3}-[0-9]{2})\)", label)
        assert codes == trip["route"]["stops"]
        assert f"{trip['route']['km']:.1f} km" in label
    # Numbered stop marks, a polyline, the depot mark; nothing fetched from elsewhere.
    assert len(page.find("polyline", class_="route-line")) == len(api["trips"])
    assert len(page.by_class("stop-mark")) == sum(len(t["stops"]) for t in api["trips"])
    assert "Stops in driving order from depot HV-DW" in page.text
    assert "http://" not in body.replace('xmlns="http://www.w3.org/2000/svg"', "")
    assert "planning aid" in page.text  # the page's caution stays


def test_without_a_depot_the_page_keeps_its_caution_and_draws_no_map(app, client, auth, planned, browser_client):
    drop_depot(client, auth)
    page = Page(browser_client.get(f"/status?week={week_of(app)}").get_data(as_text=True))
    assert not page.find("svg", class_="route-map")
    assert "Stops, not in driving order (quantity to deliver)" in page.text


def test_the_route_map_escapes_names_and_draws_every_stop_inside_the_drawing():
    from service.routes import Point, trip_route  # noqa: PLC0415
    from service.web.route_map import HEIGHT, WIDTH, route_svg  # noqa: PLC0415

    route = trip_route("D<1>", Point(51.70, -3.35), [("A", Point(51.75, -3.30)), ("B", Point(51.65, -3.42))])
    svg = str(route_svg(route, {"A": 'Tank "<script>alert(1)</script>"', "B": "B & sons"}, 'id"x'))
    assert "<script>" not in svg and "&lt;script&gt;" in svg and "B &amp; sons" in svg and 'id="id&#34;x"' in svg
    assert "D&lt;1&gt;" in svg and "<title>" in svg
    page = Page(svg)
    circles = page.find("circle")
    assert len(circles) == 2
    for circle in circles:
        assert 0 <= float(circle.attrs["cx"] or "") <= WIDTH and 0 <= float(circle.attrs["cy"] or "") <= HEIGHT
    assert route_svg(trip_route(None, None, [("A", None)]), {}, "x") == ""
