"""Benchmark of the planning core (prints a markdown table; not a test).

Run: ``.venv/bin/python benchmarks/planning.py``. Seeded random instances: daily demand
50–5000, tanks sized so that ``U`` is log-uniform in 3–60 days, holding 0.0005–0.005 per
unit per day, stop cost 5–50, dispatch cost 200, no truck limits. Times are the best of
several repeats of the numerical core on validated arrays; validation of the Python input
objects is timed separately. Every time is also given as a multiple of ``numpy.sort`` of
``n`` floats timed in the same run.

The last table times ``plan_joint`` end to end with the truck's limits set (issue 13): the same
networks (1 000 and 10 000 sites) on a Mon–Fri truck with three trips a day, a capacity ``W`` and
a stop limit ``S`` sized so that the load and the stops each need 40 % of the trips the calendar
offers (``W = D / (0.4 · 3 · 5/7)``, ``S = ⌈Σ 1/⌊U_i⌋ / (0.4 · 3 · 5/7)⌉``; both cuts bind), as a
ratio to the same network without limits in the same run. Targets: ≤ 2 s and ≤ 20 s.
"""

from __future__ import annotations

import math
import resource
import time

import numpy as np
import pure_core  # this directory is on the path when run as a script
from scipy.optimize import minimize

pure_core.make_importable()

from service.planning import SiteInput, TruckInput, plan_joint  # noqa: E402
from service.planning.inputs import validate  # noqa: E402
from service.planning.integer_multiple import integer_policy  # noqa: E402
from service.planning.power_of_two import power_of_two_policy  # noqa: E402
from service.planning.relaxation import relaxation_of  # noqa: E402
from service.planning.staggering import site_weights, stagger  # noqa: E402

SIZES = (10, 100, 1_000, 10_000, 100_000)
LIMITED_SIZES = (1_000, 10_000)
#: Share of the calendar's trips that the load and the stops each need in the limited rows.
UTILISATION = 0.4
#: Address space allowed to the benchmark (bytes): a plan that needs more fails with MemoryError, not the machine.
MEMORY_LIMIT = 8 << 30


def instance(n: int, seed: int = 7):
    rng = np.random.default_rng(seed)
    d = rng.uniform(50, 5000, n)
    U = np.exp(rng.uniform(math.log(3), math.log(60), n))
    h = rng.uniform(0.0005, 0.005, n)
    k = rng.uniform(5, 50, n)
    sites = [SiteInput(f"s{i}", float(d[i]), float(h[i]), float(k[i]), float(d[i] * U[i] / 0.9)) for i in range(n)]
    return sites, TruckInput(200.0)


def limited(sites):
    """The truck of the limits rows: Mon–Fri, three trips a day, ``W`` and ``S`` as in the docstring."""
    offered = 3 * 5 / 7
    D = sum(s.demand_per_day for s in sites)
    W = D / (UTILISATION * offered)
    whole = [math.floor(s.tank_capacity * s.safe_fill / s.demand_per_day + 1e-9) for s in sites]
    S = math.ceil(sum(1 / u for u in whole) / (UTILISATION * offered))
    return TruckInput(200.0, capacity=W, max_stops=S, working_days=(1, 2, 3, 4, 5), trips_per_day=3)


def best_time(fn, repeats: int) -> float:
    best = math.inf
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - start)
    return best


def slsqp(problem):
    """The same relaxation by SLSQP: variables (T0, T_1 … T_n), 1 ≤ T0 ≤ T_i ≤ U_i."""
    K, k, H, U = problem.dispatch_cost, problem.stop_cost, problem.H, problem.cap_days
    n = len(k)

    def f(x):
        return K / x[0] + np.sum(k / x[1:] + H * x[1:])

    def grad(x):
        return np.concatenate([[-K / x[0] ** 2], -k / x[1:] ** 2 + H])

    jac = np.hstack([-np.ones((n, 1)), np.eye(n)])
    cons = {"type": "ineq", "fun": lambda x: x[1:] - x[0], "jac": lambda x: jac}
    x0 = np.concatenate([[1.0], np.clip(np.sqrt(k / H), 1.0, U)])
    res = minimize(
        f,
        x0,
        jac=grad,
        bounds=[(1.0, U.min())] + [(1.0, u) for u in U],
        constraints=[cons],
        method="SLSQP",
        options={"ftol": 1e-12, "maxiter": 1000},
    )
    T0 = min(max(res.x[0], 1.0), U.min())
    return float(f(np.concatenate([[T0], np.clip(res.x[1:], T0, U)])))  # objective at the projected feasible point


def limits_table() -> None:
    """plan_joint end to end with the truck's limits set, against the same network without limits."""
    print()
    print("| n | limits (W, S, Mon–Fri, 3 trips a day) | no limits | ratio | status | gap | target |")
    print("|---|---|---|---|---|---|---|")
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    resource.setrlimit(resource.RLIMIT_AS, (MEMORY_LIMIT, hard))

    def timed(sites, truck):
        start = time.perf_counter()
        try:
            return plan_joint(sites, truck), time.perf_counter() - start
        except MemoryError:
            return None, time.perf_counter() - start

    for n in LIMITED_SIZES:
        sites, plain = instance(n)
        truck = limited(sites)
        result, t_limits = timed(sites, truck)
        _, t_plain = timed(sites, plain)
        target = 2.0 if n == 1_000 else 20.0
        plain_cell = f"{t_plain:.2f} s" if _ is not None else f"MemoryError after {t_plain:.1f} s"
        status = "MemoryError" if result is None else result.status.name.lower()
        gap = "" if result is None else f"{result.gap * 100:.1f} %"
        print(
            f"| {n} (W = {truck.capacity:.0f}, S = {truck.max_stops}) | {t_limits:.2f} s | {plain_cell} | "
            f"{t_limits / t_plain:.2f}× | {status} | {gap} | ≤ {target:.0f} s |"
        )
    resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def main() -> None:
    rows = []
    for n in SIZES:
        repeats = 20 if n <= 10_000 else 5
        sites, truck = instance(n)
        t_validate = best_time(lambda: validate(sites, truck), 3 if n == 100_000 else repeats)
        problem = validate(sites, truck)
        floats = np.random.default_rng(1).random(n)
        t_sort = best_time(lambda: np.sort(floats), repeats * 5)
        t_lb = best_time(lambda: relaxation_of(problem), repeats)
        relaxation = relaxation_of(problem)
        t_pot = best_time(lambda: power_of_two_policy(problem, relaxation, None), repeats)
        t_int = best_time(lambda: integer_policy(problem, relaxation), repeats)
        policy = power_of_two_policy(problem, relaxation, None)
        multiples = policy.cycles // policy.dispatch_interval
        weights = site_weights(problem.demand * policy.cycles, problem.capacity, problem.max_stops)
        t_stagger = best_time(lambda: stagger(multiples, weights), max(3, repeats // 4))
        rows.append((n, t_sort, t_validate, t_lb, t_pot, t_int, t_stagger))

    def cell(t, sort):
        return f"{t * 1e3:.3f} ms ({t / sort:.1f}×)"

    print(
        "| n | numpy.sort | validate inputs | lower bound | power_of_two (opt. base) | integer | staggering (PoT) | LB + PoT |"
    )
    print("|---|---|---|---|---|---|---|---|")
    for n, s, v, lb, pot, it, st in rows:
        print(
            f"| {n} | {s * 1e3:.3f} ms | {cell(v, s)} | {cell(lb, s)} | {cell(pot, s)} | {cell(it, s)} | {cell(st, s)} | {cell(lb + pot, s)} |"
        )
    first = next(r for r in rows if r[0] == 1_000)
    last = next(r for r in rows if r[0] == 100_000)

    def slope(i):
        return math.log(last[i] / first[i]) / math.log(last[0] / first[0])

    print()
    print(
        f"log-log slope 1 000 → 100 000: lower bound {slope(3):.2f}, power_of_two {slope(4):.2f}, "
        f"integer {slope(5):.2f}, staggering {slope(6):.2f}, LB + PoT "
        f"{math.log((last[3] + last[4]) / (first[3] + first[4])) / math.log(100):.2f}, numpy.sort {slope(1):.2f}"
    )
    print(f"LB + PoT at n = 100 000: {(last[3] + last[4]) / last[1]:.1f}× numpy.sort (target ≤ 30×)")

    limits_table()

    sites, truck = instance(100_000)
    t_full = best_time(lambda: plan_joint(sites, truck), 1)
    print(
        f"plan_joint(method='best') end to end at n = 100 000 (validation, both methods, staggering, listing): {t_full:.2f} s"
    )

    sites, truck = instance(200, seed=11)
    problem = validate(sites, truck)
    t_ours = best_time(lambda: relaxation_of(problem), 50)
    ours = relaxation_of(problem).value
    t_slsqp = best_time(lambda: slsqp(problem), 1)
    theirs = slsqp(problem)
    print()
    print("| n = 200 relaxation | time | objective |")
    print("|---|---|---|")
    print(f"| breakpoint scan (ours) | {t_ours * 1e3:.3f} ms | {ours:.10f} |")
    print(f"| scipy.optimize.minimize (SLSQP) | {t_slsqp * 1e3:.1f} ms | {theirs:.10f} |")
    print()
    print(
        f"speed-up {t_slsqp / t_ours:.0f}× (target ≥ 1000×); objective ours − SLSQP = {ours - theirs:.3e} (target ≤ 0)"
    )


if __name__ == "__main__":
    main()
