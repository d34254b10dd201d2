"""Economic order quantity of one site served alone by the truck, with tank and truck caps."""

from __future__ import annotations

import math

import numpy as np

from service.planning.cycle_cost import cycle_cost
from service.planning.inputs import SiteInput, TruckInput, validate
from service.planning.results import CycleResult


def _eoq(order_cost: float, holding_cost: float, demand_rate: float) -> tuple[float, float, float]:
    """Uncapped economic order quantity in any consistent time unit.

    ``T* = sqrt(2 K / (h d))``, ``Q* = d T*``, ``C* = sqrt(2 K h d)`` (Harris 1913), for
    ordering cost ``K`` per order, holding cost ``h`` per unit per time unit and demand
    ``d`` per time unit; requires ``K > 0`` and ``h d > 0``.

    Returns
    -------
    tuple of float
        ``(T*, Q*, C*)``: cycle length, order quantity, cost per time unit.
    """
    cycle = math.sqrt(2.0 * order_cost / (holding_cost * demand_rate))
    return cycle, demand_rate * cycle, math.sqrt(2.0 * order_cost * holding_cost * demand_rate)


def single_site_cycle(site: SiteInput, truck: TruckInput) -> CycleResult:
    """Best cycle of one site that has the truck to itself.

    One delivery costs ``a = K + k``; the cost per day of a cycle of ``T`` days is
    ``a / T + H T`` with ``H = h d / 2`` (Harris 1913). The continuous cycle is
    ``T_c = min(sqrt(a / H), U)`` with ``U = min(f V - s, W) / d`` (``T_c = U`` when
    ``H = 0``; when also ``a = 0`` every cycle costs 0 and the longest, ``U``, is
    taken). The cost is convex in ``T``, so the best whole-day cycle is the better of
    ``floor(T_c)`` and ``ceil(T_c)`` inside ``[1, floor(U)]`` (ties: the shorter).

    ``binding`` is ``"tank"`` when the tank cap ``(f V - s) / d`` is below the free optimum
    and not above the truck cap ``W / d``, ``"truck"`` when the truck cap is the smaller one
    below the free optimum, and ``None`` otherwise (also when ``a = H = 0``).

    Raises
    ------
    PlanningInputError
        See :func:`service.planning.inputs.validate`.
    """
    p = validate([site], truck)
    a = p.dispatch_cost + float(p.stop_cost[0])
    H = float(p.H[0])
    cap = float(p.cap_days[0])
    free = math.sqrt(a / H) if H > 0 else math.inf
    if a == 0 and H == 0:
        continuous, binding = cap, None
    else:
        continuous = min(free, cap)
        binding = ("tank" if p.tank_binds[0] else "truck") if free > cap else None
    longest = int(p.whole_days[0])
    candidates = np.unique(np.clip([math.floor(continuous), math.ceil(continuous)], 1, longest))
    costs = cycle_cost(a, H, candidates)
    whole = int(candidates[int(np.argmin(costs))])
    cost_continuous = 2.0 * math.sqrt(a * H) if continuous == free else float(cycle_cost(a, H, continuous))
    return CycleResult(
        cycle_days_continuous=float(continuous),
        cost_per_day_continuous=cost_continuous,
        cycle_days=whole,
        quantity=float(p.demand[0]) * whole,
        cost_per_day=float(costs.min()),
        binding=binding,
    )
