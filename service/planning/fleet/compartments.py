"""Loading one trip into the truck's compartments: one product per compartment.

A trip carries ``L_p`` of each product ``p``; compartment ``c`` holds ``C_c``. A loading gives each
product a set ``S_p`` of compartments, the sets disjoint, with ``Σ_{c ∈ S_p} C_c ≥ L_p``. It is found
exactly by depth-first search over the products (largest load first), trying for each the compartment
subsets of the still-free ones that hold its load, smallest capacity first, backtracking on failure —
with at most a dozen compartments this is at most ``2^C`` subsets per product and answers "no loading
exists" only after trying all of them. Each stop's quantity then fills its product's compartments in
order (a load may span two compartments).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from functools import lru_cache

#: Relative slack on capacities (a load equal to a compartment's capacity fits despite rounding).
TOLERANCE = 1e-9


@dataclass(frozen=True)
class Loading:
    """``compartments[p]``: the compartments (0-based) given to product ``p``; ``stops[k]``: the
    ``(compartment, quantity)`` pieces of stop ``k``'s load, in the order the stops were given."""

    compartments: dict[str, tuple[int, ...]]
    stops: tuple[tuple[tuple[int, float], ...], ...]


@lru_cache(maxsize=65536)
def _sets(loads: tuple[tuple[str, float], ...], capacities: tuple[float, ...]) -> tuple | None:
    n = len(capacities)
    subsets = sorted(range(1, 1 << n), key=lambda m: (sum(capacities[c] for c in range(n) if m >> c & 1), m))
    size = {m: sum(capacities[c] for c in range(n) if m >> c & 1) for m in subsets}

    def search(k: int, free: int) -> list[int] | None:
        if k == len(loads):
            return []
        need = loads[k][1] * (1 - TOLERANCE)
        if size.get(free, 0.0) < need:
            return None
        for m in subsets:
            if m & ~free or size[m] < need:
                continue
            rest = search(k + 1, free & ~m)
            if rest is not None:
                return [m, *rest]
        return None

    found = search(0, (1 << n) - 1)
    if found is None:
        return None
    return tuple((p, tuple(c for c in range(n) if m >> c & 1)) for (p, _), m in zip(loads, found, strict=True))


def load_trip(stops: Sequence[tuple[str, float]], capacities: Sequence[float]) -> Loading | None:
    """Load a trip whose stops take ``(product, quantity)``; ``None`` when no loading exists."""
    totals: dict[str, float] = {}
    for product, quantity in stops:
        totals[product] = totals.get(product, 0.0) + float(quantity)
    key = tuple(sorted(totals.items(), key=lambda item: (-item[1], item[0])))
    sets = _sets(key, tuple(float(c) for c in capacities))
    if sets is None:
        return None
    given = dict(sets)
    room = {p: [[c, float(capacities[c])] for c in cs] for p, cs in given.items()}
    pieces = []
    for product, quantity in stops:
        left, mine = float(quantity), []
        slots = room[product]
        while left > TOLERANCE * max(1.0, float(quantity)):
            if len(slots) > 1 and slots[0][1] <= 0:
                slots.pop(0)
                continue
            slot = slots[0]
            take = left if len(slots) == 1 else min(left, slot[1])
            mine.append((slot[0], take))
            slot[1] -= take
            left -= take
        pieces.append(tuple(mine))
    return Loading(given, tuple(pieces))
