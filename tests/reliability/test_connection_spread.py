"""A listener per worker (``ULLAGE_REUSE_PORT=1``) spreads a burst of keep-alive connections.

With one shared listening socket, 32 connections opened at once pile onto one of two workers on
this machine: with ``ULLAGE_REUSE_PORT=0`` this test failed in 4 of 5 tries (the other worker held
0, 3, 0 and 0 of the 32), and a load run with such a pile-up gets weekly trips at half their rate. With a socket per worker the kernel picks a socket by a hash of the
connection's addresses, so each of two workers holds about half; fewer than 4 of 32 on one
worker has probability 2 · P(Binomial(32, 1/2) ≤ 3) = 2 · 5 489 / 2³² ≈ 2.6e-6.
"""

from __future__ import annotations

import http.client
import threading

from tests.reliability.helpers import HOST, migrate, start_gunicorn

CONNECTIONS = 32


def test_a_burst_of_keep_alive_connections_reaches_every_worker(tmp_path):
    url = f"sqlite:///{tmp_path / 'spread.db'}"
    migrate(url)
    server = start_gunicorn(url, tmp_path, workers=2, extra_env={"ULLAGE_REUSE_PORT": "1"})
    connections = [http.client.HTTPConnection(HOST, server.port, timeout=10) for _ in range(CONNECTIONS)]
    statuses: list[int] = []

    def ask(connection: http.client.HTTPConnection) -> None:
        connection.request("GET", "/livez")
        response = connection.getresponse()
        response.read()
        statuses.append(response.status)

    try:
        threads = [threading.Thread(target=ask, args=(c,)) for c in connections]
        for thread in threads:
            thread.start()
        for thread in threads:
            thread.join(30)
        assert statuses == [200] * CONNECTIONS
        held = server.connections_per_worker()
        assert len(held) == 2 and sum(held.values()) == CONNECTIONS, held
        assert min(held.values()) >= 4, held
    finally:
        for connection in connections:
            connection.close()
        assert server.stop() == 0
