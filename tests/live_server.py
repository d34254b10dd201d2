"""A real HTTP server on loopback for one test's app (werkzeug, threaded), for clients that speak HTTP."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager

from werkzeug.serving import make_server


@contextmanager
def serving(app) -> Iterator[str]:  # type: ignore[no-untyped-def]
    """Serve ``app`` on a free loopback port; yields its base URL (``http://127.0.0.1:<port>``)."""
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, name="live-server", daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_port}"
    finally:
        server.shutdown()
        thread.join(timeout=10)
        server.server_close()
