"""Small inline SVG plots for the catalogue pages: drawn on the server, no script, readable without colour."""

from __future__ import annotations

import math

from django.utils.html import escape
from django.utils.safestring import SafeString, mark_safe

from services.estimate.time_models import format_duration

WIDTH, HEIGHT, MARGIN = 420, 320, 56
# Round durations for the ticks of a log time axis.
TICKS_S = (10, 60, 300, 600, 1800, 3600, 2 * 3600, 4 * 3600, 12 * 3600, 86400, 3 * 86400, 7 * 86400)


def calibration_scatter(points: list[dict], factor: float, applies: bool) -> SafeString:
    """Return estimated against actual print time on log-log axes, outliers marked by a cross and their reason.

    ``points`` are the calibration's points (``estimated_s``, ``actual_s``, ``outlier``); unusable
    rows (not finite, not positive) are left off the plot.
    """
    usable = [p for p in points if _positive(p["estimated_s"]) and _positive(p["actual_s"])]
    if not usable:
        return mark_safe("")
    times = [t for p in usable for t in (p["estimated_s"], p["actual_s"], p["estimated_s"] * factor)]
    lo, hi = math.log10(min(times)) - 0.1, math.log10(max(times)) + 0.1
    x = lambda t: MARGIN + (math.log10(t) - lo) / (hi - lo) * (WIDTH - 1.5 * MARGIN)  # noqa: E731
    y = lambda t: HEIGHT - MARGIN - (math.log10(t) - lo) / (hi - lo) * (HEIGHT - 1.5 * MARGIN)  # noqa: E731
    t0, t1 = 10**lo, 10**hi
    parts = [f'<svg class="plot" role="img" viewBox="0 0 {WIDTH} {HEIGHT}" width="{WIDTH}" height="{HEIGHT}">',
             "<title>Estimated against actual print time, logarithmic axes</title>",
             _line(x(t0), y(t0), x(t1), y(t1), "4 3", "estimate right (actual = estimated)")]
    if applies:
        parts.append(_line(x(t0), y(t0 * factor), x(t1 / factor), y(t1), "", f"correction × {factor:.3f}"))
    parts += _axes(lo, hi, x, y)
    for p in usable:
        parts.append(_marker(x(p["estimated_s"]), y(p["actual_s"]), p))
    parts.append("</svg>")
    return mark_safe("".join(parts))


def _positive(value) -> bool:
    return isinstance(value, (int, float)) and math.isfinite(value) and value > 0


def _line(x0, y0, x1, y1, dash: str, label: str) -> str:
    dashes = f' stroke-dasharray="{dash}"' if dash else ""
    return (f'<line x1="{x0:.1f}" y1="{y0:.1f}" x2="{x1:.1f}" y2="{y1:.1f}" stroke="currentColor"{dashes}>'
            f"<title>{escape(label)}</title></line>")


def _axes(lo: float, hi: float, x, y) -> list[str]:
    """Return the axis lines, a tick at each round duration in range, and the axis titles."""
    base = HEIGHT - MARGIN
    out = [f'<line x1="{MARGIN}" y1="{base}" x2="{WIDTH - MARGIN / 2}" y2="{base}" stroke="currentColor"/>',
           f'<line x1="{MARGIN}" y1="{base}" x2="{MARGIN}" y2="{MARGIN / 2}" stroke="currentColor"/>']
    shown = [t for t in TICKS_S if lo <= math.log10(t) <= hi]
    # At most six ticks, evenly thinned, so the labels do not run into each other.
    for t in shown[::max(1, math.ceil(len(shown) / 6))]:
        label = escape(format_duration(t))
        out.append(f'<text x="{x(t):.1f}" y="{base + 16}" text-anchor="middle" font-size="10">{label}</text>')
        out.append(f'<text x="{MARGIN - 4}" y="{y(t) + 3:.1f}" text-anchor="end" font-size="10">{label}</text>')
    out.append(f'<text x="{(WIDTH + MARGIN) / 2:.0f}" y="{HEIGHT - 8}" text-anchor="middle" font-size="11">'
               "estimated by the time model</text>")
    out.append(f'<text x="12" y="{HEIGHT / 2:.0f}" text-anchor="middle" font-size="11" '
               f'transform="rotate(-90 12 {HEIGHT / 2:.0f})">actual</text>')
    return out


def _marker(cx: float, cy: float, point: dict) -> str:
    said = f"estimated {format_duration(point['estimated_s'])}, took {format_duration(point['actual_s'])}"
    if point.get("outlier"):
        title = escape(f"{said}; outlier, left out: {point['outlier']}")
        return (f'<g class="outlier" stroke="#b3261e" stroke-width="2"><title>{title}</title>'
                f'<line x1="{cx - 5:.1f}" y1="{cy - 5:.1f}" x2="{cx + 5:.1f}" y2="{cy + 5:.1f}"/>'
                f'<line x1="{cx - 5:.1f}" y1="{cy + 5:.1f}" x2="{cx + 5:.1f}" y2="{cy - 5:.1f}"/></g>')
    return (f'<circle class="counted" cx="{cx:.1f}" cy="{cy:.1f}" r="4" fill="currentColor" fill-opacity=".55">'
            f"<title>{escape(said)}</title></circle>")
