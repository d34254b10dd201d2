"""What one planning request costs by its size (prints a table; not a test).

The default of ``ULLAGE_MAX_PLAN_SITES`` comes from it: per size, the request-body validation
that runs in the gunicorn worker (JSON + the joint request schema, holding the worker's GIL), the
planner without truck limits, and the planner with a 36 000-unit load and 10 stops per trip, run
in the service's own pool (service.compute) and stopped at ``--limit`` seconds like a request.
Seeded invented tanks: daily demand 50–5000, a tank lasting 3–60 days (log-uniform).

    .venv/bin/python benchmarks/bounds.py [--sizes 300 1000 3000 10000] [--limit 20]
"""

from __future__ import annotations

import argparse
import json
import math
import random
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from service import compute  # noqa: E402
from service.api.schemas.calculations import JointRequestSchema  # noqa: E402
from service.planning import SiteInput, TruckInput, plan_joint  # noqa: E402


def body(n: int) -> dict:
    rng = random.Random(n)
    sites = []
    for i in range(n):
        demand = rng.uniform(50, 5000)
        sites.append(
            {
                "code": f"S{i}",
                "demand_per_day": demand,
                "holding_cost": rng.uniform(0.0005, 0.005),
                "stop_cost": rng.uniform(5, 50),
                "tank_capacity": demand * math.exp(rng.uniform(math.log(3), math.log(60))) / 0.9,
            }
        )
    return {"dispatch_cost": 200, "truck_capacity": 36000, "max_stops": 10, "sites": sites}


def timed(fn, *args, **kwargs) -> float:  # type: ignore[no-untyped-def]
    start = time.perf_counter()
    fn(*args, **kwargs)
    return time.perf_counter() - start


def planned(sites: list[SiteInput], truck: TruckInput) -> float:
    """In a pool child: seconds of ``plan_joint``."""
    return timed(plan_joint, sites, truck)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[300, 1000, 3000, 10000])
    parser.add_argument("--limit", type=float, default=20.0, help="hard limit of the limited planning, seconds")
    args = parser.parse_args(argv)
    pool = compute.pool(1, 0)
    print("| sites | body | validation in the worker | planner, no truck limits | planner, 36 000 / 10 stops |")
    print("|---|---|---|---|---|")
    for n in args.sizes:
        data = body(n)
        text = json.dumps(data)
        validation = timed(lambda text=text: JointRequestSchema().load(json.loads(text)))
        sites = [SiteInput(**s) for s in data["sites"]]
        free = pool.run(planned, (sites, TruckInput(200.0)), limit=600, wait=0)
        try:
            limited = f"{pool.run(planned, (sites, TruckInput(200.0, 36000.0, 10)), limit=args.limit, wait=0):.2f} s"
        except compute.Overrun:
            limited = f"stopped at {args.limit:g} s"
        print(f"| {n} | {len(text) / 1e6:.2f} MB | {validation * 1000:.0f} ms | {free:.2f} s | {limited} |")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
