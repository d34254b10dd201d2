"""The service for gunicorn with a slow planner: ``slow_plan_app:create_app()`` (test_slow_plan.py).

Environment: ``SLOW_PLAN_SECONDS`` (added to every plan computation), ``SLOW_PLAN_LEASE_SECONDS``
(the Idempotency-Key lease), ``SLOW_PLAN_LOG`` (a file that gets one line per computation: the
planning process's pid and the start and end times, so the test can count computations across
workers). The slow planner is a module-level function: the service sends it by reference to its
planning processes (service.compute), which import this module from ``PYTHONPATH``.
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
from service.planning import plan_joint


def slow(*args, **kwargs):  # type: ignore[no-untyped-def]
    """The real planner after ``SLOW_PLAN_SECONDS``, journaled (runs in a planning process)."""
    started = time.time()
    time.sleep(float(os.environ["SLOW_PLAN_SECONDS"]))
    result = plan_joint(*args, **kwargs)
    with Path(os.environ["SLOW_PLAN_LOG"]).open("a") as out:
        out.write(f"{os.getpid()} {started:.3f} {time.time():.3f}\n")
    return result


def create_app() -> Flask:
    idempotency.LEASE = dt.timedelta(seconds=float(os.environ["SLOW_PLAN_LEASE_SECONDS"]))
    plans.plan_joint = slow
    return service_app()
