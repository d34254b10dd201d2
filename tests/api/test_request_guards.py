"""Request guards on every route: a body over the limit is 413 also when sent in chunks; a query
parameter given twice is 422 (which one was meant is a guess)."""

from __future__ import annotations

import io
import json

import pytest
from sqlalchemy import func, select

from service.persistence.models import Site, Truck

TRUCK = {"code": "T1", "name": "Truck one", "dispatch_cost": 150.0, "capacity": 18000.0}


class Chunks(io.RawIOBase):
    """A body handed to the app piece by piece with no length, as a server passes on a request sent
    with ``Transfer-Encoding: chunked`` (gunicorn and werkzeug's server decode the chunks and set
    ``wsgi.input_terminated``). Counts the bytes the app pulled."""

    def __init__(self, body: bytes, piece: int = 1 << 16) -> None:
        self._pieces = iter([body[i : i + piece] for i in range(0, len(body), piece)])
        self._rest = b""
        self.pulled = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[no-untyped-def]
        if not self._rest:
            self._rest = next(self._pieces, b"")
        size = min(len(buffer), len(self._rest))
        buffer[:size], self._rest = self._rest[:size], self._rest[size:]
        self.pulled += size
        return size


def post_chunked(client, path: str, body: bytes, headers: dict, content_type: str, piece: int = 1 << 16):
    stream = Chunks(body, piece)
    response = client.post(
        path,
        headers={**headers, "Transfer-Encoding": "chunked", "Content-Type": content_type},
        environ_overrides={"wsgi.input": stream, "wsgi.input_terminated": True},
    )
    return response, stream


def count(db_session, model) -> int:
    return db_session.scalar(select(func.count()).select_from(model))


def assert_413(response) -> None:
    assert response.status_code == 413, response.get_data(as_text=True)
    assert response.mimetype == "application/problem+json"
    assert "1 048 576 bytes" in response.get_json()["detail"]


def test_a_chunked_json_body_over_the_limit_is_413(client, app, auth, db_session):
    limit = app.config["ULLAGE_SETTINGS"].max_body_bytes
    body = json.dumps(TRUCK | {"name": "x" * limit}).encode()
    response, stream = post_chunked(client, "/api/v1/trucks", body, auth("admin"), "application/json")
    assert_413(response)
    assert stream.pulled <= limit + 1  # read one byte past the limit, not the rest
    assert count(db_session, Truck) == 0


def test_a_chunked_body_at_the_limit_is_read_whole(client, app, auth):
    limit = app.config["ULLAGE_SETTINGS"].max_body_bytes
    padding = limit - len(json.dumps(TRUCK | {"name": ""}).encode())
    body = json.dumps(TRUCK | {"name": "x" * padding}).encode()
    assert len(body) == limit
    response, _ = post_chunked(client, "/api/v1/trucks", body, auth("admin"), "application/json")
    assert response.status_code == 422, response.get_json()  # read in full, then refused for the name length
    assert response.get_json()["errors"][0]["pointer"] == "#/name"
    small, _ = post_chunked(client, "/api/v1/trucks", json.dumps(TRUCK).encode(), auth("admin"), "application/json", 3)
    assert small.status_code == 201, small.get_json()


def test_a_chunked_csv_over_the_limit_is_413_not_imported_cut_short(client, app, auth, db_session):
    """The first 1 MiB of this CSV ends exactly at the end of a row: cut there, it is a valid import
    of 4 766 sites, which is what a cut-short body used to become."""
    limit = app.config["ULLAGE_SETTINGS"].max_body_bytes
    assert client.post("/api/v1/trucks", json=TRUCK, headers=auth("admin")).status_code == 201
    header = "code,name,truck,demand_per_day,holding_cost,stop_cost,tank_capacity\n"
    row_length = len(f"S00000,{'n' * 200},T1,1,0,0,10\n")
    rows_in_limit, spare = divmod(limit - len(header), row_length)
    padding = "." + "0" * (spare - 1) if spare else ""  # 10.000…: the first row takes up the spare bytes
    rows = [f"S{i:05d},{'n' * 200},T1,1,0,0,10{padding if i == 0 else ''}\n" for i in range(rows_in_limit + 100)]
    body = (header + "".join(rows)).encode()
    assert body[:limit].endswith(b"\n") and body[limit:].startswith(f"S{rows_in_limit:05d},".encode())
    response, _ = post_chunked(client, "/api/v1/sites/import", body, auth("admin"), "text/csv")
    assert_413(response)
    assert count(db_session, Site) == 0


@pytest.mark.parametrize(
    "path",
    [
        "/api/v1/sites?truck=T1&truck=T2",
        "/api/v1/sites?limit=5&limit=6",
        "/api/v1/trucks?after=A&limit=2&after=B",
        "/api/v1/trucks/T1/trips?week=2026-W50&week=2026-W51",
        "/api/v1/trucks/T1/plans?limit=1&limit=1",
        "/api/v1/sites/import?dry_run=true&dry_run=false",
    ],
)
def test_a_query_parameter_given_twice_is_422_naming_it(client, auth, path):
    name = path.split("?")[1].split("&")[-1].split("=")[0]
    method = client.post if "import" in path else client.get
    response = method(path, headers=auth("admin"))
    assert response.status_code == 422, response.get_json()
    assert response.mimetype == "application/problem+json"
    body = response.get_json()
    assert [e["pointer"] for e in body["errors"]] == [f"#/query/{name}"]
    assert name in body["detail"] and "2 times" in body["detail"]


def test_the_status_page_refuses_a_repeated_query_parameter_too(client):
    response = client.get("/status?week=2026-W50&week=2026-W51")
    assert response.status_code == 422
    assert "week" in response.get_data(as_text=True)
    assert client.get("/status/sign-in?next=/status&next=/status/x").status_code == 422
    assert client.get("/status/sign-in?next=/status").status_code == 200
