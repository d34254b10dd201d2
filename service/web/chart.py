"""Server-side SVG chart of a site's projected tank level (no JavaScript, no external assets).

The chart is plain SVG markup inlined in the page. Every piece of text that comes from data is
escaped with :func:`markupsafe.escape`; numbers are formatted here. Styling comes from classes
that the stylesheet colours (the CSP forbids ``style`` attributes); lines also differ by dash
pattern and carry text labels, so colour is never the only cue.

Drawing rules:

* x axis: day offsets ``0 … days``; the level at 00:00 of day *i* is drawn at *i*; a planned
  delivery on day *i* is marked at *i + ½* (it happens during that day).
* y axis: ``0 … tank capacity`` in the service unit.
* Days without a projected level (no reading) break the level line; with no level at all, no
  level line is drawn and the planned deliveries are still marked.
* One element with class ``delivery-marker`` per planned delivery inside the window.
"""

from __future__ import annotations

import datetime as dt
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from markupsafe import Markup, escape

from service.web.formatting import quantity


@dataclass(frozen=True)
class Size:
    width: int
    height: int
    left: int
    right: int
    top: int
    bottom: int
    x_ticks_every: int | None  # days between date labels; None: first and last only
    y_ticks: int
    line_labels: bool


FULL = Size(width=760, height=320, left=86, right=112, top=18, bottom=46, x_ticks_every=7, y_ticks=5, line_labels=True)
SMALL = Size(
    width=360, height=150, left=78, right=12, top=10, bottom=30, x_ticks_every=None, y_ticks=2, line_labels=False
)

_ID_SAFE = re.compile(r"[^A-Za-z0-9_-]")


def _num(value: float) -> str:
    return f"{value:.1f}".rstrip("0").rstrip(".")


def nice_step(span: float, ticks: int) -> float:
    """A step of 1, 2, 2.5 or 5 × 10^k that gives about ``ticks`` intervals over ``span``."""
    if span <= 0 or not math.isfinite(span):
        return 1.0
    raw = span / max(ticks, 1)
    power = 10 ** math.floor(math.log10(raw))
    for factor in (1, 2, 2.5, 5, 10):
        if factor * power >= raw:
            return factor * power
    return 10 * power  # pragma: no cover - the loop always returns


def chart_id(prefix: str, code: str) -> str:
    """An element id that is safe in HTML whatever the site code holds."""
    return f"{prefix}-{_ID_SAFE.sub('_', code)}"


def level_svg(levels: Any, *, unit: str, site_label: str, element_id: str, small: bool = False) -> Markup:
    """The SVG markup for a :class:`service.schedule.SiteLevels` (duck-typed)."""
    size = SMALL if small else FULL
    days: Sequence[tuple[dt.date, float | None]] = tuple(levels.days)
    count = max(len(days), 1)
    first = days[0][0] if days else dt.date.today()
    last = days[-1][0] if days else first
    capacity = float(levels.tank_capacity)
    known = [v for _, v in days if v is not None]
    top_value = max([capacity, float(levels.safe_fill_level), *known]) or 1.0
    plot_w = size.width - size.left - size.right
    plot_h = size.height - size.top - size.bottom

    def x(offset: float) -> float:
        return size.left + plot_w * offset / count

    def y(value: float) -> float:
        clamped = min(max(value, 0.0), top_value)
        return size.top + plot_h * (1 - clamped / top_value)

    in_window = [(d, q) for d, q in levels.deliveries if first <= d <= last]
    title_id, desc_id = f"{element_id}-title", f"{element_id}-desc"
    parts: list[str] = [
        f'<svg class="level-chart{" small" if small else ""}" viewBox="0 0 {size.width} {size.height}" '
        f'role="img" aria-labelledby="{title_id} {desc_id}" focusable="false" '
        f'xmlns="http://www.w3.org/2000/svg">',
        f'<title id="{title_id}">{escape(site_label)}: projected tank level, {first.isoformat()} to {last.isoformat()}</title>',
        f'<desc id="{desc_id}">{escape(_describe(levels, days, in_window, unit))}</desc>',
        f'<rect class="plot-area" x="{size.left}" y="{size.top}" width="{plot_w}" height="{plot_h}"/>',
    ]

    # y axis: ticks from 0 to the top, labelled with the unit.
    step = nice_step(top_value, size.y_ticks)
    parts.append('<g class="axis y-axis">')
    tick = 0.0
    while tick <= top_value + 1e-9:
        ty = y(tick)
        parts.append(f'<line class="grid" x1="{size.left}" x2="{size.left + plot_w}" y1="{_num(ty)}" y2="{_num(ty)}"/>')
        parts.append(
            f'<text class="tick-label" x="{size.left - 6}" y="{_num(ty + 4)}" text-anchor="end">'
            f"{escape(quantity(tick, unit))}</text>"
        )
        tick += step
    parts.append("</g>")

    # x axis: ISO dates.
    parts.append('<g class="axis x-axis">')
    base = size.top + plot_h
    parts.append(f'<line class="axis-line" x1="{size.left}" x2="{size.left + plot_w}" y1="{base}" y2="{base}"/>')
    offsets = list(range(0, count, size.x_ticks_every)) if size.x_ticks_every else [0]
    if count - 1 not in offsets:
        if offsets and size.x_ticks_every and count - 1 - offsets[-1] < 4:
            offsets[-1] = count - 1
        else:
            offsets.append(count - 1)
    for offset in offsets:
        day = first + dt.timedelta(days=offset)
        tx = x(offset)
        anchor = "start" if offset == 0 else ("end" if offset == count - 1 and small else "middle")
        parts.append(f'<line class="tick" x1="{_num(tx)}" x2="{_num(tx)}" y1="{base}" y2="{base + 5}"/>')
        parts.append(
            f'<text class="tick-label" x="{_num(tx)}" y="{base + 18}" text-anchor="{anchor}">{day.isoformat()}</text>'
        )
    parts.append("</g>")

    # Reference lines.
    for css, value, label in (
        ("capacity-line", capacity, "tank capacity"),
        ("safe-fill-line", float(levels.safe_fill_level), "safe fill"),
        ("safety-stock-line", float(levels.safety_stock), "safety stock"),
    ):
        ly = _num(y(value))
        parts.append(
            f'<line class="{css}" x1="{size.left}" x2="{size.left + plot_w}" y1="{ly}" y2="{ly}">'
            f"<title>{escape(label)}: {escape(quantity(value, unit))}</title></line>"
        )
        if size.line_labels:
            parts.append(
                f'<text class="line-label {css}-label" x="{size.left + plot_w + 6}" y="{_num(y(value) + 4)}">'
                f"{escape(label)}</text>"
            )

    # Level line, broken where there is no projected level.
    segment: list[str] = []
    segments: list[list[str]] = []
    for offset, (_, level) in enumerate(days):
        if level is None:
            if segment:
                segments.append(segment)
            segment = []
        else:
            segment.append(f"{_num(x(offset))},{_num(y(float(level)))}")
    if segment:
        segments.append(segment)
    for points in segments:
        if len(points) == 1:
            cx, cy = points[0].split(",")
            parts.append(f'<circle class="level-point" cx="{cx}" cy="{cy}" r="2.5"/>')
        else:
            parts.append(f'<polyline class="level-line" points="{" ".join(points)}"/>')
    if not known:
        parts.append(
            f'<text class="no-level" x="{_num(size.left + plot_w / 2)}" y="{_num(size.top + plot_h / 2)}" '
            f'text-anchor="middle">No reading: no level projected</text>'
        )

    # Planned deliveries: one marker each, a triangle on the date axis and a faint guide.
    half = 4 if small else 6
    for day, amount in in_window:
        mx = x((day - first).days + 0.5)
        parts.append(
            f'<g class="delivery-marker" data-date="{day.isoformat()}">'
            f"<title>Planned delivery {day.isoformat()}: {escape(quantity(float(amount), unit))}</title>"
            f'<line class="delivery-guide" x1="{_num(mx)}" x2="{_num(mx)}" y1="{size.top}" y2="{base}"/>'
            f'<path class="delivery-shape" d="M{_num(mx)},{_num(base - 2 * half)} l{half},{2 * half} l{-2 * half},0 z"/>'
            f"</g>"
        )
    parts.append("</svg>")
    return Markup("".join(parts))


def _describe(
    levels: Any, days: Sequence[tuple[dt.date, float | None]], deliveries: Sequence[tuple[dt.date, float]], unit: str
) -> str:
    known = [(d, v) for d, v in days if v is not None]
    words = [
        f"Tank capacity {quantity(float(levels.tank_capacity), unit)}, safe fill level "
        f"{quantity(float(levels.safe_fill_level), unit)}, safety stock {quantity(float(levels.safety_stock), unit)}."
    ]
    if known:
        low_day, low = min(known, key=lambda item: item[1])
        words.append(f"Lowest projected level {quantity(float(low), unit)} on {low_day.isoformat()}.")
    else:
        words.append("No reading on record, so no level is projected.")
    words.append(f"{len(deliveries)} planned deliver{'y' if len(deliveries) == 1 else 'ies'} in the window.")
    return " ".join(words)
