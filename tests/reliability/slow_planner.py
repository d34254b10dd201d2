"""Stand-ins for the planner, for the bounded-work tests only (monkeypatched into a view).

They are module-level functions so that the service's pool can send them to its child processes
by reference; nothing in the service imports this module.
"""

from __future__ import annotations

import time
from dataclasses import replace

from service.planning import plan_joint as real_plan_joint

#: A runaway is stopped by the service long before this; the bound only keeps a failing run short.
RUNAWAY_SECONDS = 30.0


def runaway(sites, truck, *, method="best", base_days=None, start_date=None):  # type: ignore[no-untyped-def]
    """A planner without ``deadline_seconds``, busy on the CPU for ``RUNAWAY_SECONDS``."""
    end = time.monotonic() + RUNAWAY_SECONDS
    spins = 0
    while time.monotonic() < end:
        spins += 1
    return real_plan_joint(sites, truck, method=method, base_days=base_days, start_date=start_date)


def anytime(sites, truck, *, method="best", base_days=None, start_date=None, deadline_seconds=None):  # type: ignore[no-untyped-def]
    """A planner that takes a deadline: the real plan, with a warning naming the deadline it got."""
    result = real_plan_joint(sites, truck, method=method, base_days=base_days, start_date=start_date)
    return replace(result, warnings=(*result.warnings, f"deadline_seconds={deadline_seconds!r}"))


#: How much longer :func:`slow` takes than the real planner.
SLOW_SECONDS = 5.0


def slow(sites, truck, *, method="best", base_days=None, start_date=None):  # type: ignore[no-untyped-def]
    """The real plan, ``SLOW_SECONDS`` late (a computation longer than a shortened lease)."""
    time.sleep(SLOW_SECONDS)
    return real_plan_joint(sites, truck, method=method, base_days=base_days, start_date=start_date)
