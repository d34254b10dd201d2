"""The server-side SVG chart on its own (no database)."""

from __future__ import annotations

import datetime as dt
import re

from status_helpers import Page

from service.schedule import Notice, SiteLevels
from service.web.chart import chart_id, level_svg, nice_step
from service.web.formatting import money, quantity

FIRST = dt.date(2026, 12, 28)  # crosses a year and an ISO year boundary


def levels(days=28, missing=(), deliveries=((2, 4000.0), (10, 4000.0), (27, 3900.0)), outside=True) -> SiteLevels:
    values = []
    for k in range(days):
        values.append((FIRST + dt.timedelta(days=k), None if k in missing else 9000.0 - 500 * (k % 8)))
    dated = [(FIRST + dt.timedelta(days=k), q) for k, q in deliveries]
    if outside:
        dated.append((FIRST + dt.timedelta(days=days + 3), 1000.0))
    return SiteLevels(
        "S-1", tuple(values), tuple(dated), 9000.0, 1000.0, 10000.0, (Notice("run_out_risk", "low", "S-1", FIRST),)
    )


def test_one_marker_per_delivery_in_the_window_and_the_three_lines():
    svg = str(level_svg(levels(), unit="L", site_label="Depot", element_id="c"))
    page = Page(svg)
    assert len(page.by_class("delivery-marker")) == 3
    assert len(page.by_class("level-line")) == 1
    assert page.by_class("safe-fill-line") and page.by_class("safety-stock-line")
    assert "2026-12-28" in svg and "2027-01-24" in svg
    assert re.search(r">10\u00a0000\u00a0L</text>", svg)
    assert page.find("title", id="c-title") and page.find("desc", id="c-desc")
    assert page.find("svg")[0].attrs["aria-labelledby"] == "c-title c-desc"
    assert "3 planned deliveries" in svg


def test_days_without_a_level_break_the_line_and_no_level_draws_none():
    broken = Page(str(level_svg(levels(missing={0, 1, 14}), unit="L", site_label="x", element_id="c")))
    assert len(broken.by_class("level-line")) == 2
    empty = Page(str(level_svg(levels(missing=set(range(28))), unit="L", site_label="x", element_id="c")))
    assert not empty.by_class("level-line")
    assert "No reading: no level projected" in empty.text
    assert len(empty.by_class("delivery-marker")) == 3


def test_text_from_data_is_escaped_and_ids_are_safe():
    svg = str(
        level_svg(
            levels(),
            unit="L",
            site_label='<script>alert(1)</script>"><img src=x onerror=alert(1)>',
            element_id=chart_id("chart", '"><x y="'),
        )
    )
    page = Page(svg)
    assert not page.find("script") and not page.find("img") and not page.find("x")
    assert all(not a.startswith("on") for e in page.elements for a in e.attrs)
    assert "<script>alert(1)</script>" in page.text
    assert chart_id("chart", '"><x y="') == "chart-___x_y__"


def test_small_chart_and_formatting():
    small = Page(str(level_svg(levels(), unit="gal", site_label="x", element_id="m", small=True)))
    assert "small" in small.find("svg")[0].attrs["class"]
    assert len(small.by_class("delivery-marker")) == 3
    assert nice_step(10000, 5) == 2000 and nice_step(250, 2) == 200 and nice_step(0, 3) == 1.0
    assert quantity(12400, "L") == "12\u00a0400\u00a0L" and quantity(30.28, "L") == "30.3\u00a0L"
    assert money(82.771, "EUR") == "82.77\u00a0EUR"
