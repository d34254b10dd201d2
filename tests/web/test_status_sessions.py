"""Status page sessions end on the server, and the cookie is ``Secure`` over HTTPS (issue 14 §3).

Before: the session was only a signed cookie holding the token's id, so a copy of it taken before
sign-out kept working for 12 hours, and the cookie never had ``Secure``.
"""

from __future__ import annotations

import hashlib
from http.cookies import SimpleCookie

import pytest
from sqlalchemy import func, select
from status_helpers import csrf_of, sign_in

from service import create_app
from service.request_db import dispose

COOKIE = "ullage_session"


def session_cookie(response) -> str:
    """The value of the session cookie this response sets."""
    for header in response.headers.getlist("Set-Cookie"):
        if header.startswith(f"{COOKIE}="):
            return SimpleCookie(header)[COOKIE].value
    raise AssertionError(f"no {COOKIE} cookie in {response.headers.getlist('Set-Cookie')}")


def set_cookie_header(response) -> str:
    return next(h for h in response.headers.getlist("Set-Cookie") if h.startswith(f"{COOKIE}="))


def is_secure(header: str) -> bool:
    return "secure" in [part.strip().lower() for part in header.split(";")]


def sessions(db_session) -> int:
    from service.persistence.models import StatusSession  # noqa: PLC0415

    db_session.expire_all()
    return db_session.scalar(select(func.count()).select_from(StatusSession))


def test_a_copied_cookie_is_refused_after_sign_out(app, client, tokens, demo):
    signed = sign_in(client, tokens["viewer"])
    copy = session_cookie(signed)
    thief = app.test_client()
    thief.set_cookie(COOKIE, copy)
    assert thief.get("/status").status_code == 200  # the copy works while the session lives ...

    page = client.get("/status").get_data(as_text=True)
    assert client.post("/status/sign-out", data={"csrf": csrf_of(page)}).status_code == 303
    assert client.get("/status").status_code == 303
    # ... and not after sign-out, although its signature is still good.
    refused = thief.get("/status")
    assert refused.status_code == 303 and refused.headers["Location"].startswith("/status/sign-in")


def test_the_server_keeps_only_a_hash_of_the_session_id_and_sign_out_deletes_it(client, tokens, db_session):
    from service.persistence.models import StatusSession  # noqa: PLC0415

    copy = session_cookie(sign_in(client, tokens["dispatcher"]))
    with client.session_transaction() as stored:
        sid = stored["sid"]
    row = db_session.scalars(select(StatusSession)).one()
    assert row.secret_hash == hashlib.sha256(sid.encode()).hexdigest()
    assert sid not in row.secret_hash and tokens["dispatcher"] not in copy
    page = client.get("/status/sign-out").get_data(as_text=True)
    assert client.post("/status/sign-out", data={"csrf": csrf_of(page)}).status_code == 303
    assert sessions(db_session) == 0


def test_signing_in_again_ends_the_earlier_session(app, client, tokens, demo, db_session):
    first = session_cookie(sign_in(client, tokens["viewer"]))
    sign_in(client, tokens["viewer"])
    assert sessions(db_session) == 1
    old = app.test_client()
    old.set_cookie(COOKIE, first)
    assert old.get("/status").status_code == 303


# ------------------------------------------------------------------ Secure over HTTPS


@pytest.fixture
def make_client(database_url):
    apps = []

    def build(**config):
        application = create_app({"DATABASE_URL": database_url, "TESTING": True, **config})
        apps.append(application)
        return application

    yield build
    for application in apps:
        dispose(application)


def sign_in_header(application, token: str, *, https: bool = False, **headers: str) -> str:
    client = application.test_client()
    base = "https://localhost" if https else "http://localhost"
    form = client.get("/status/sign-in", base_url=base, headers=headers)
    response = client.post(
        "/status/sign-in",
        base_url=base,
        headers=headers,
        data={"csrf": csrf_of(form.get_data(as_text=True)), "token": token},
    )
    assert response.status_code == 303, response.get_data(as_text=True)
    return set_cookie_header(response)


def test_secure_over_https_and_not_over_plain_http_by_default(make_client, tokens):
    application = make_client()
    assert is_secure(sign_in_header(application, tokens["viewer"], https=True))
    assert not is_secure(sign_in_header(application, tokens["viewer"]))


def test_forwarded_proto_counts_only_behind_a_trusted_proxy(make_client, tokens):
    forwarded = {"X-Forwarded-Proto": "https", "X-Forwarded-For": "203.0.113.7"}
    untrusting = make_client()
    assert not is_secure(sign_in_header(untrusting, tokens["viewer"], **forwarded))
    behind_one = make_client(ULLAGE_TRUSTED_PROXIES="1")
    assert is_secure(sign_in_header(behind_one, tokens["viewer"], **forwarded))
    assert not is_secure(sign_in_header(behind_one, tokens["viewer"], **{"X-Forwarded-Proto": "http"}))


@pytest.mark.parametrize(("mode", "https", "secure"), [("always", False, True), ("never", True, False)])
def test_the_setting_can_force_it(make_client, tokens, mode, https, secure):
    application = make_client(ULLAGE_SECURE_COOKIES=mode)
    assert is_secure(sign_in_header(application, tokens["viewer"], https=https)) is secure
