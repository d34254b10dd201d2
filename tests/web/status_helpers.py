"""Small HTML helpers for the status page tests (standard library only)."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from html.parser import HTMLParser

from service import schedule


@dataclass
class Element:
    tag: str
    attrs: dict[str, str | None]
    text: list[str] = field(default_factory=list)


class Page(HTMLParser):
    """Every start tag with its attributes, and the text (entities decoded)."""

    def __init__(self, html: str) -> None:
        super().__init__(convert_charrefs=True)
        self.elements: list[Element] = []
        self.texts: list[str] = []
        self._open: list[Element] = []
        self.feed(html)
        self.close()

    def handle_starttag(self, tag, attrs):  # type: ignore[no-untyped-def]
        element = Element(tag, dict(attrs))
        self.elements.append(element)
        if tag not in {"input", "meta", "link", "br", "img", "path", "line", "rect", "circle", "polyline"}:
            self._open.append(element)

    def handle_startendtag(self, tag, attrs):  # type: ignore[no-untyped-def]
        self.elements.append(Element(tag, dict(attrs)))

    def handle_endtag(self, tag):  # type: ignore[no-untyped-def]
        for index in range(len(self._open) - 1, -1, -1):
            if self._open[index].tag == tag:
                del self._open[index:]
                break

    def handle_data(self, data):  # type: ignore[no-untyped-def]
        self.texts.append(data)
        for element in self._open:
            element.text.append(data)

    @property
    def text(self) -> str:
        return " ".join(" ".join(self.texts).split())

    def find(self, tag: str, **attrs: str) -> list[Element]:
        def matches(element: Element) -> bool:
            for name, value in attrs.items():
                name = name.rstrip("_")
                have = element.attrs.get(name) or ""
                if name == "class":
                    if value not in have.split():
                        return False
                elif have != value:
                    return False
            return True

        return [e for e in self.elements if e.tag == tag and matches(e)]

    def by_class(self, css: str) -> list[Element]:
        return [e for e in self.elements if css in (e.attrs.get("class") or "").split()]


def words(element: Element) -> str:
    return " ".join(" ".join(element.text).split())


def csrf_of(html: str) -> str:
    fields = Page(html).find("input", name="csrf")
    assert fields, "the form has no CSRF field"
    return fields[0].attrs["value"] or ""


def parse_csp(value: str) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for part in value.split(";"):
        bits = part.split()
        if bits:
            out[bits[0].lower()] = bits[1:]
    return out


PLANNED_TRUCK = "HV-R1"
UNPLANNED_TRUCK = "HV-R2"
LOW_SITE = "HV-GAR-02"  # gets a nearly empty reading: a run-out risk


def today(app) -> dt.date:
    return schedule.today(app.config["ULLAGE_SETTINGS"])


def record_plan(client, auth, truck: str, start: dt.date, **options) -> int:
    response = client.post(
        f"/api/v1/trucks/{truck}/plans", json={"start_date": start.isoformat(), **options}, headers=auth("dispatcher")
    )
    assert response.status_code == 201, response.get_data(as_text=True)
    plan_id = response.get_json()["id"]
    activated = client.post(f"/api/v1/plans/{plan_id}/activate", headers=auth("dispatcher"))
    assert activated.status_code == 200, activated.get_data(as_text=True)
    return plan_id


def add_reading(client, auth, site: str, level: float, when: dt.datetime | None = None) -> None:
    when = when or dt.datetime.now(dt.UTC) - dt.timedelta(minutes=5)
    response = client.post(
        f"/api/v1/sites/{site}/readings",
        json={"level": level, "measured_at": when.isoformat()},
        headers=auth("dispatcher"),
    )
    assert response.status_code == 201, response.get_data(as_text=True)


def sign_in(client, token: str, next_path: str | None = None):
    page = client.get("/status/sign-in")
    assert page.status_code == 200
    data = {"csrf": csrf_of(page.get_data(as_text=True)), "token": token}
    if next_path:
        data["next"] = next_path
    return client.post("/status/sign-in", data=data)
