"""Under gunicorn: only ``ULLAGE_TRUSTED_PROXIES`` decides whether ``X-Forwarded-Proto`` is believed.

gunicorn believes ``X-Forwarded-Proto`` from 127.0.0.1 by default (``forwarded_allow_ips``), so
with the project's gunicorn settings a local client could otherwise claim HTTPS; the service turns
that off (``secure_scheme_headers = {}`` in service/gunicorn_conf.py) and leaves it to the app.
"""

from __future__ import annotations

import re

import pytest
import requests

from .helpers import add_tokens, migrate, start_gunicorn


def set_cookie(response: requests.Response) -> str:
    return next(v for k, v in response.raw.headers.items() if k.lower() == "set-cookie")


def signed_in_cookie(base: str, token: str, **headers: str) -> str:
    """The Set-Cookie of a sign-in (the form's cookie sent back by hand: a Secure one would not be
    sent over plain HTTP by a cookie jar, as a browser would not either)."""
    form = requests.get(f"{base}/status/sign-in", headers=headers, timeout=10)
    csrf = re.search(r'name="csrf" value="([^"]+)"', form.text)
    assert csrf, form.text
    response = requests.post(
        f"{base}/status/sign-in",
        data={"csrf": csrf[1], "token": token},
        headers={**headers, "Cookie": set_cookie(form).split(";")[0]},
        allow_redirects=False,
        timeout=10,
    )
    assert response.status_code == 303, response.text
    return set_cookie(response)


@pytest.mark.parametrize(("trusted", "secure"), [("0", False), ("1", True)])
def test_forwarded_proto_from_loopback_only_with_a_trusted_proxy(tmp_path, trusted, secure):
    url = f"sqlite:///{tmp_path / 'proxy.db'}"
    migrate(url)
    tokens = add_tokens(url)
    server = start_gunicorn(url, tmp_path, workers=1, threads=2, extra_env={"ULLAGE_TRUSTED_PROXIES": trusted})
    try:
        plain = signed_in_cookie(server.base, tokens["viewer"])
        assert "secure" not in [p.strip().lower() for p in plain.split(";")]
        forwarded = signed_in_cookie(server.base, tokens["viewer"], **{"X-Forwarded-Proto": "https"})
        assert ("secure" in [p.strip().lower() for p in forwarded.split(";")]) is secure, forwarded
    finally:
        assert server.stop() == 0
