"""Speed and memory of the network plan (prints figures; not a test).

Run: ``.venv/bin/python benchmarks/fleet.py [small|large|all]``. Networks come from
``tests/unit/planning/fleet/networks.py`` (an invented region, 2–4 compartment trucks, four products):
``small`` is 300 sites / 4 trucks / 2 depots, ``shifts`` the same with 12-hour shifts, ``large`` 10 000 sites / 60 trucks / 6 depots. Each size
runs in its own child process, so its peak resident memory (``resource.getrusage``, ``ru_maxrss``) is
its own. Printed: wall time, peak memory, the longest interval between two changes of the reported
fraction, and between two changes written when at most one report a second is written (as the job
worker does), the network cost per day, the lower bound and the gap, unserved sites and routed trips.

Issue 16's targets: small ≤ 10 s, large ≤ 300 s on the 2-core machine, progress at least every 2 s.
"""

from __future__ import annotations

import datetime as dt
import math
import resource
import subprocess
import sys
import time

import pure_core  # this directory is on the path when run as a script

pure_core.make_importable()

#: The job worker writes a progress report at most once a second (``service/network_worker.PROGRESS_SECONDS``).
WRITE_SECONDS = 1.0
SIZES = {"small": (300, 4, 2), "shifts": (300, 4, 2), "large": (10_000, 60, 6)}
#: Time budget handed to plan_network per size (s): the target less a margin.
BUDGET = {"small": 9.0, "shifts": 9.0, "large": 280.0}
#: ``shifts``: the small network with 12-hour shifts at 70 km/h, 10 min per stop, 30 min loading.
SHIFT = {"shift_hours": 12.0, "average_speed_kmh": 70.0, "stop_minutes": 10.0, "load_minutes": 30.0}


def changes(marks: list[tuple[float, float]]) -> list[float]:
    """Seconds between successive changes of the fraction (the first from the start of the list)."""
    times = [at for k, (at, f) in enumerate(marks) if k == 0 or f != marks[k - 1][1]]
    return [b - a for a, b in zip(times, times[1:], strict=False)] or [0.0]


def run(size: str) -> None:
    from service.planning.fleet import plan_network
    from tests.unit.planning.fleet.networks import fleet

    n, m, g = SIZES[size]
    args = fleet(n, m, g, seed=1)
    if size == "shifts":
        from dataclasses import replace

        args = (args[0], [replace(t, **SHIFT) for t in args[1]], *args[2:])
    marks: list[tuple[float, float]] = []
    began = time.perf_counter()
    result = plan_network(
        *args, start_date=dt.date(2026, 1, 5), time_budget_seconds=BUDGET[size],
        progress=lambda f: marks.append((time.perf_counter(), f)),
    )  # fmt: skip
    elapsed = time.perf_counter() - began
    written, last = [], -math.inf  # what the job worker writes: a report once a second at most
    for at, fraction in marks:
        if at - last >= WRITE_SECONDS:
            written.append((at, fraction))
            last = at
    seen = (max(changes(marks)), max(changes(written)))
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    trips = sum(len(p.trips) for p in result.trucks)
    print(
        f"| {n} / {m} / {g} | {elapsed:.1f} s | {peak_mb:.0f} MB | {seen[0]:.2f} s, {seen[1]:.2f} s "
        f"| {result.status.name.lower()} "
        f"| {result.cost_per_day:,.0f} | {result.lower_bound_per_day:,.0f} | {result.gap:.1%} "
        f"| {len(result.unserved)} | {trips} |"
        + "".join(f" {p.truck}: longest {p.utilisation['longest_day_hours']:.1f} h" for p in result.trucks if "shift_hours" in p.utilisation),
        flush=True,
    )


def main(which: str = "all") -> None:
    print("| sites / trucks / depots | time | peak memory | longest interval between progress changes: reported, "
          "written | status | cost per day | bound | gap | unserved | trips listed |")  # fmt: skip
    print("|---|---|---|---|---|---|---|---|---|---|")
    for size in SIZES if which == "all" else [which]:
        subprocess.run([sys.executable, __file__, "--child", size], check=True)


if __name__ == "__main__":
    if len(sys.argv) > 2 and sys.argv[1] == "--child":
        run(sys.argv[2])
    else:
        main(sys.argv[1] if len(sys.argv) > 1 else "all")
