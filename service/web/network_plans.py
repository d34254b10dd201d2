"""The overview's "Network plans" section: the latest network plan jobs (issue 16) with their progress.

Read through :func:`service.persistence.network_jobs.recent` (no inputs or result JSON leaves the
database). Times as the job resource gives them (``docs/fleet.md`` §10): ``elapsed`` from the start to
the end (or now), and for a running job with progress ``p > 0`` the estimate
``left = elapsed × (1 − p) / p``. The page only reads: a running job whose heartbeat is older than the
lease is shown as such and failed by the next worker loop or API read, not here.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from service.persistence import network_jobs as jobs

#: Jobs listed, newest first.
SHOWN = 5
#: Truck codes named in a row; more are counted.
TRUCKS_NAMED = 6


def recent(db: Any, now: dt.datetime, lease_seconds: float) -> list[dict[str, Any]]:
    """The newest ``SHOWN`` jobs as the template shows them."""
    out = []
    for job in jobs.recent(db, SHOWN):
        started, finished, progress = job["started_at"], job["finished_at"], float(job["progress"])
        elapsed = left = None
        if started is not None:
            elapsed = max(0.0, ((finished or now) - started).total_seconds())
            if job["status"] == "running" and progress > 0:
                left = elapsed * (1.0 - progress) / progress
        beat = job["heartbeat_at"]
        silent = (now - beat).total_seconds() if job["status"] == "running" and beat is not None else None
        codes = job["trucks"]
        out.append(
            dict(
                job,
                progress=progress,
                percent=int(progress * 100),
                elapsed=elapsed,
                left=left,
                silent=silent if silent is not None and silent > lease_seconds else None,
                named=codes[:TRUCKS_NAMED],
                more=max(0, len(codes) - TRUCKS_NAMED),
                gap_percent=None if job["gap"] is None else job["gap"] * 100,
            )
        )
    return out
