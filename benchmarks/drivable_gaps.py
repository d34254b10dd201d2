"""Gaps of drivable plans on 150 realistic one-truck networks (prints markdown tables; not a test).

Run: ``.venv/bin/python benchmarks/drivable_gaps.py [count] [jobs]`` (``jobs`` processes; each plan's time
is then measured beside the others). Networks come from
``tests/unit/planning/drivable_networks.py`` with seeds ``0 … count-1`` (farm diesel, garages,
heating-oil homes, industrial chemicals; trucks of 20 000–38 000 L, 6–12 stops, Mon–Fri, Mon–Sat or
every day, 1–3 trips a day, some with public holidays closed). For each network:

* ``gap = cost_per_day / lower_bound_per_day − 1`` of ``plan_joint(method="best")`` (the service's own
  bound), per class of network (truck-binding, calendar-binding, both, neither);
* the gap to the independent reference bound (``docs/planning.md``, "The plain bound") (``ref gap``,
  at least the reported gap when the service's bound is at least the reference);
* ``best`` against the cheapest plan of the methods it runs (``best / min − 1``, target ≤ 1 %);
* every plan through ``check_plan`` (rules 1–3); violations are counted and the first ones printed.

Issue 13's targets: where the truck or its calendar binds, median gap ≤ 8 % and p90 ≤ 20 %; where
neither binds, median ≤ 3 %.
"""

from __future__ import annotations

import multiprocessing
import sys
import time

import numpy as np
import pure_core  # this directory is on the path when run as a script

pure_core.make_importable()

from service.planning import plan_joint  # noqa: E402
from service.planning.joint import METHODS  # noqa: E402
from tests.unit.planning.drivable_networks import network  # noqa: E402
from tests.unit.planning.drivable_oracle import check_plan, reference_bound  # noqa: E402

CLASSES = ("truck", "calendar", "truck+calendar", "neither")


def _stats(values) -> str:
    if not values:
        return "– | – | –"
    v = np.asarray(values) * 100
    return f"{np.median(v):.1f} % | {np.percentile(v, 90):.1f} % | {v.max():.1f} %"


def _one(seed: int) -> tuple[dict | None, list[str]]:
    """One network: its row (None when ``best`` found no plan) and its rule violations."""
    methods = [m for m in METHODS if m != "best"]
    violations = []
    net = network(seed)
    t0 = time.perf_counter()
    best = plan_joint(net.sites, net.truck, start_date=net.start_date)
    seconds = time.perf_counter() - t0
    costs = {}
    for m in methods:
        r = plan_joint(net.sites, net.truck, method=m, start_date=net.start_date)
        if r.success:
            costs[m] = r.cost_per_day
    try:
        check_plan(best, net.sites, net.truck)
    except AssertionError as error:
        violations.append(f"seed {seed} (best, n={len(net.sites)}): {str(error).splitlines()[0]}")
    if not best.success:
        violations.append(f"seed {seed}: infeasible ({best.message}) — the generator only makes feasible networks")
        return None, violations
    reference = reference_bound(net.sites, net.truck, primal=False).value
    row = {
        "seed": seed,
        "class": net.label,
        "n": len(net.sites),
        "gap": best.cost_per_day / best.lower_bound_per_day - 1,
        "ref_gap": best.cost_per_day / reference - 1,
        "bound_vs_ref": best.lower_bound_per_day / reference - 1,
        "vs_methods": best.cost_per_day / min(costs.values()) - 1 if costs else 0.0,
        "status": best.status.name.lower(),
        "seconds": seconds,
    }
    return row, violations


def main(count: int = 150, jobs: int = 1) -> None:
    methods = [m for m in METHODS if m != "best"]
    rows = []
    violations: list[str] = []
    start_all = time.perf_counter()
    with multiprocessing.Pool(jobs) as pool:
        for seed, (row, found) in enumerate(pool.imap(_one, range(count))):
            if seed % 10 == 0:
                print(f"… network {seed} at {time.perf_counter() - start_all:.0f} s", file=sys.stderr, flush=True)
            violations.extend(found)
            if row is not None:
                rows.append(row)
    total = time.perf_counter() - start_all

    print(f"{count} networks, methods run by best: {', '.join(methods)}; {total:.0f} s in all")
    print()
    print("| class | networks | sites (median) | gap median | gap p90 | gap max | ref gap median | ref gap p90 | best vs methods (max) | optimal |")
    print("|---|---|---|---|---|---|---|---|---|---|")
    groups = [(c, [r for r in rows if r["class"] == c]) for c in CLASSES]
    groups.append(("truck or calendar", [r for r in rows if r["class"] != "neither"]))
    groups.append(("all", rows))
    for name, group in groups:
        if not group:
            print(f"| {name} | 0 | | | | | | | | |")
            continue
        gap = _stats([r["gap"] for r in group])
        ref = _stats([r["ref_gap"] for r in group]).rsplit(" | ", 1)[0]
        worst = max(r["vs_methods"] for r in group) * 100
        optimal = sum(r["status"] == "optimal" for r in group)
        n_median = int(np.median([r["n"] for r in group]))
        print(f"| {name} | {len(group)} | {n_median} | {gap} | {ref} | {worst:.2f} % | {optimal} |")
    print()
    below = [r for r in rows if r["bound_vs_ref"] < -1e-7]
    print(
        f"service bound / reference bound − 1: min {min(r['bound_vs_ref'] for r in rows):.2e}, "
        f"median {np.median([r['bound_vs_ref'] for r in rows]):.2e} ({len(below)} networks below the reference)"
    )
    seconds = [r["seconds"] for r in rows]
    print(f"plan_joint(best) seconds: median {np.median(seconds):.2f}, max {max(seconds):.2f}")
    worst = sorted(rows, key=lambda r: -r["gap"])[:5]
    print("largest gaps: " + ", ".join(f"seed {r['seed']} ({r['class']}, n={r['n']}) {r['gap'] * 100:.1f} %" for r in worst))
    print(f"rule violations (check_plan): {len(violations)}")
    for line in violations[:30]:
        print(f"  {line}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 150, int(sys.argv[2]) if len(sys.argv) > 2 else 1)
