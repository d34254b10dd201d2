"""Server-side SVG map of one routed trip (no JavaScript, no tiles, no network).

Projection: equirectangular around the points' mean latitude ``φ̄`` — ``x = λ cos φ̄``, ``y = φ``
(degrees), scaled uniformly to fit the drawing with a margin, north up. Over one trip (tens of km)
the distortion is negligible for a sketch; the map shows the order, not a road map (legs are straight
lines, the distances are the route's road estimates).

Drawn: the depot (square, labelled with its code), each stop (circle with its number in driving order),
and the closed polyline depot → stops → depot. Text from data is escaped with :func:`markupsafe.escape`;
the ``<title>`` and ``aria-label`` name the depot and the stops in driving order. Styling comes from
classes (the CSP forbids ``style`` attributes).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

from markupsafe import Markup, escape

from service.routes import TripRoute

WIDTH = 240
HEIGHT = 180
MARGIN = 18


def _project(route: TripRoute) -> list[tuple[float, float]]:
    """Pixel positions of ``route.points`` (depot first, then the stops in driving order)."""
    mean_lat = math.radians(sum(p.latitude for p in route.points) / len(route.points))
    xs = [p.longitude * math.cos(mean_lat) for p in route.points]
    ys = [p.latitude for p in route.points]
    span = max(max(xs) - min(xs), max(ys) - min(ys)) or 1.0
    scale = min(WIDTH, HEIGHT) - 2 * MARGIN
    cx, cy = (max(xs) + min(xs)) / 2, (max(ys) + min(ys)) / 2
    return [
        (WIDTH / 2 + (x - cx) / span * scale, HEIGHT / 2 - (y - cy) / span * scale) for x, y in zip(xs, ys, strict=True)
    ]


def route_svg(route: TripRoute, names: Mapping[str, str], element_id: str) -> Markup:
    """The trip's map as inline SVG markup; empty markup when the trip is not routed."""
    if not route.routed or not route.points:
        return Markup("")
    at = _project(route)
    described = ", ".join(f"{i}. {names.get(code, code)} ({code})" for i, code in enumerate(route.order, 1))
    label = f"Route map from depot {route.depot}: {described}, back to the depot; {route.km:.1f} km"
    path = " ".join(f"{x:.1f},{y:.1f}" for x, y in [*at, at[0]])
    parts = [
        f'<svg class="route-map" id="{escape(element_id)}" viewBox="0 0 {WIDTH} {HEIGHT}" width="{WIDTH}" '
        f'height="{HEIGHT}" role="img" aria-label="{escape(label)}" xmlns="http://www.w3.org/2000/svg">',
        f"<title>{escape(label)}</title>",
        f'<rect class="map-area" x="0.5" y="0.5" width="{WIDTH - 1}" height="{HEIGHT - 1}"/>',
        f'<polyline class="route-line" points="{path}"/>',
    ]
    dx, dy = at[0]
    parts.append(f'<rect class="depot-mark" x="{dx - 6:.1f}" y="{dy - 6:.1f}" width="12" height="12"/>')
    # The label goes on the side of the depot with more room, so it stays inside the drawing.
    lx, anchor = (dx + 9, "start") if dx < WIDTH / 2 else (dx - 9, "end")
    ly = dy - 8 if dy > MARGIN + 4 else dy + 18
    parts.append(
        f'<text class="depot-label" x="{lx:.1f}" y="{ly:.1f}" text-anchor="{anchor}">{escape(route.depot or "")}</text>'
    )
    for i, ((x, y), code) in enumerate(zip(at[1:], route.order, strict=True), 1):
        parts.append(
            f'<g class="stop-mark" data-site="{escape(code)}"><circle cx="{x:.1f}" cy="{y:.1f}" r="8"/>'
            f'<text x="{x:.1f}" y="{y + 4:.1f}" text-anchor="middle">{i}</text></g>'
        )
    parts.append("</svg>")
    # Every piece from data above is escaped; numbers are formatted here.
    return Markup("".join(parts))
