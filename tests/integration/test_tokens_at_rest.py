"""Tokens never appear in plain text: not in any table, not in the logs, not in any response body."""

from __future__ import annotations

import hashlib
import io
import logging

from sqlalchemy import MetaData, select, text

from service import cli
from service.auth import TOKEN_PREFIX, token_hash
from service.observability import JsonFormatter
from service.persistence.models import Token


def _create_token(monkeypatch, capsys, database_url: str, name: str, role: str) -> str:
    monkeypatch.setenv("DATABASE_URL", database_url)
    assert cli.main(["token", "create", name, "--role", role]) == 0
    out = capsys.readouterr().out
    token = out.strip().splitlines()[-1]
    assert token.startswith(TOKEN_PREFIX) and len(token) >= len(TOKEN_PREFIX) + 43
    return token


def _dump_database(db_session) -> str:
    """Every row of every table (the migration table included), as text."""
    metadata = MetaData()
    metadata.reflect(bind=db_session.get_bind())
    assert {"tokens", "sites", "trucks", "alembic_version"} <= set(metadata.tables)
    lines = []
    for table in metadata.sorted_tables:
        for row in db_session.execute(select(table)):
            lines.append(f"{table.name}: {tuple(row)!r}")
    return "\n".join(lines)


def test_tokens_are_stored_as_sha256_and_never_logged(monkeypatch, capsys, caplog, client, database_url, db_session):
    admin = _create_token(monkeypatch, capsys, database_url, "at-rest-admin", "admin")
    viewer = _create_token(monkeypatch, capsys, database_url, "at-rest-viewer", "viewer")

    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.setFormatter(JsonFormatter())
    logging.getLogger("ullage").addHandler(handler)
    caplog.set_level(logging.DEBUG)
    bodies = []
    try:
        for token in (admin, viewer):
            for url in ("/api/v1/settings", "/api/v1/sites", "/api/v1/trucks/NOPE"):
                response = client.get(url, headers={"Authorization": f"Bearer {token}"})
                assert response.status_code in (200, 404)
                bodies.append(response.get_data(as_text=True))
        posted = client.post(
            "/api/v1/trucks",
            headers={"Authorization": f"Bearer {admin}"},
            json={"code": "T1", "name": "x", "dispatch_cost": 1, "capacity": 2},
        )
        assert posted.status_code == 201
        refused = client.post("/api/v1/trucks", headers={"Authorization": f"Bearer {viewer}"}, json={})
        assert refused.status_code == 403
        in_url = client.get(f"/api/v1/sites?token={admin}")
        assert in_url.status_code == 401
        wrong = client.get("/api/v1/sites", headers={"Authorization": f"Bearer {admin}x"})
        assert wrong.status_code == 401
        bodies += [r.get_data(as_text=True) for r in (posted, refused, in_url, wrong)]
    finally:
        logging.getLogger("ullage").removeHandler(handler)

    json_log = stream.getvalue()
    assert '"logger": "ullage.access"' in json_log  # the access log was captured at all
    captured = "\n".join([json_log, caplog.text, *(r.getMessage() for r in caplog.records), *bodies])
    dump = _dump_database(db_session)
    assert "at-rest-admin" in dump  # the dump saw the token rows

    for token in (admin, viewer):
        secret = token[len(TOKEN_PREFIX) :]
        assert secret not in dump
        assert secret not in captured
        assert secret[:16] not in captured + dump  # not even a prefix of the secret
        row = db_session.scalars(select(Token).where(Token.secret_hash == token_hash(token))).one()
        assert row.secret_hash == hashlib.sha256(token.encode()).hexdigest()
        assert row.secret_hash != token and len(row.secret_hash) == 64
        assert row.last_used_at is not None


def test_token_lookup_is_by_hash_not_by_comparing_secrets(app, client, tokens):
    # Every statement the app sends during an authenticated request, with its parameters: the
    # token itself never reaches the database, its SHA-256 does (a lookup on the unique index).
    from sqlalchemy import event

    sent = []
    engines = (app.extensions["ullage.engine"], app.extensions["ullage.read_engine"])

    def capture(conn, cursor, statement, parameters, context, executemany):  # noqa: ANN001
        sent.append((statement, repr(parameters)))

    for engine in engines:
        event.listen(engine, "before_cursor_execute", capture)
    try:
        assert (
            client.get("/api/v1/settings", headers={"Authorization": f"Bearer {tokens['viewer']}"}).status_code == 200
        )
    finally:
        for engine in engines:
            event.remove(engine, "before_cursor_execute", capture)
    assert not any(tokens["viewer"] in statement or tokens["viewer"] in params for statement, params in sent)
    lookups = [
        (statement, params) for statement, params in sent if "secret_hash" in statement and "tokens" in statement
    ]
    assert lookups and any(token_hash(tokens["viewer"]) in params for _, params in lookups)


def test_token_list_shows_no_secrets(monkeypatch, capsys, database_url, db_session):
    token = _create_token(monkeypatch, capsys, database_url, "listed", "dispatcher")
    assert cli.main(["token", "list"]) == 0
    out = capsys.readouterr().out
    assert "listed\tdispatcher\tactive" in out
    assert token not in out and token_hash(token) not in out
    row = db_session.execute(text("SELECT secret_hash FROM tokens WHERE name = 'listed'")).scalar_one()
    assert row == token_hash(token)
