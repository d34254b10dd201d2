"""The service for gunicorn with a slow planner: ``slow_plan_app:create_app()`` (test_slow_plan.py).

Environment: ``SLOW_PLAN_SECONDS`` (added to every plan computation), ``SLOW_PLAN_LEASE_SECONDS``
(the Idempotency-Key lease), ``SLOW_PLAN_LOG`` (a file that gets one line per computation: the
worker's pid and the start and end times, so the test can count computations across workers).
"""

from __future__ import annotations

import datetime as dt
import os
import time
from pathlib import Path

from flask import Flask

from service import idempotency
from service.api import plans
from service.app import create_app as service_app


def create_app() -> Flask:
    delay = float(os.environ["SLOW_PLAN_SECONDS"])
    journal = Path(os.environ["SLOW_PLAN_LOG"])
    idempotency.LEASE = dt.timedelta(seconds=float(os.environ["SLOW_PLAN_LEASE_SECONDS"]))
    real = plans.plan_joint

    def slow(*args, **kwargs):  # type: ignore[no-untyped-def]
        started = time.time()
        time.sleep(delay)
        result = real(*args, **kwargs)
        with journal.open("a") as out:
            out.write(f"{os.getpid()} {started:.3f} {time.time():.3f}\n")
        return result

    plans.plan_joint = slow
    return service_app()
