"""SVG plots of the stages of a flexible-wall test (in the style of service/web/plots.py):
B against back pressure, volume change against root time and log time, k20 against time and
against pore volumes of flow. Pure functions of plain numbers."""

from __future__ import annotations

import math
from collections.abc import Sequence

from service.web.plots import (
    ACCENT,
    HEIGHT,
    INK,
    MARGIN_BOTTOM,
    MARGIN_LEFT,
    MARGIN_RIGHT,
    MARGIN_TOP,
    WARN,
    WIDTH,
    LinearAxis,
    LogAxis,
    _axis_titles,
    _f,
    _frame,
    _open,
    _text,
    _x_ticks,
    _y_ticks,
    log_range,
    marker,
    plain_label,
    sci_label,
)


def xy_svg(
    xs: Sequence[float],
    ys: Sequence[float],
    *,
    x_title: str,
    y_title: str,
    plot_id: str,
    title: str,
    log_y: bool = False,
    joined: bool = False,
    level: tuple[float, str] | None = None,
) -> str:
    """Points (x, y) on linear axes (y by log10 with `log_y`), optionally joined, with an
    optional horizontal level line (value, its words) such as a limit."""
    if len(xs) != len(ys) or not xs:
        raise ValueError("xy_svg needs one or more points, as many x as y")
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    x_lo, x_hi = min(0.0, min(xs)), max(xs)
    if x_hi <= x_lo:
        x_hi = x_lo + 1.0
    x_axis = LinearAxis(x_lo, x_hi * 1.04, left, right)
    y_values = [*ys, *([level[0]] if level else [])]
    y_axis: LinearAxis | LogAxis
    if log_y:
        lo, hi = log_range(y_values)
        y_axis = LogAxis(lo, hi, bottom, top)
        y_ticks, y_label = y_axis.ticks(), sci_label
    else:
        lo, hi = min(0.0, min(y_values)), max(y_values)
        pad = (hi - lo) * 0.08 or 1.0
        y_axis = LinearAxis(lo, hi + pad, bottom, top)
        y_ticks, y_label = y_axis.ticks(), plain_label
    desc = f"{len(xs)} points; {x_title} from {plain_label(min(xs))} to {plain_label(max(xs))}."
    parts = [
        _open(plot_id, title, desc),
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_ticks, y_label, left, right),
        _frame(left, top, right, bottom),
    ]
    if level is not None:
        y = y_axis.px(level[0])
        parts.append(
            f'<line class="level" x1="{_f(left)}" y1="{_f(y)}" x2="{_f(right)}" y2="{_f(y)}" '
            f'stroke="{WARN}" stroke-width="1.5" stroke-dasharray="6 4"/>'
        )
        parts.append(_text(right - 6, y - 6, level[1], text_anchor="end", fill=WARN))
    points = [(x_axis.px(x), y_axis.px(y)) for x, y in zip(xs, ys, strict=True)]
    if joined and len(points) > 1:
        path = " ".join(f"{_f(x)},{_f(y)}" for x, y in points)
        parts.append(
            f'<polyline points="{path}" fill="none" stroke="{ACCENT}" stroke-width="1.5"/>'
        )
    for x, y in points:
        parts.append(marker("circle", x, y, INK, size=4.5))
    parts.append(_axis_titles(x_title, y_title, left, top, right, bottom))
    parts.append("</svg>")
    return "".join(parts)


def b_back_pressure_svg(back_pressures_kpa: Sequence[float], b_values: Sequence[float]) -> str:
    """Skempton's B against the back pressure of each check, with the 0.95 level."""
    return xy_svg(
        back_pressures_kpa,
        b_values,
        x_title="Back pressure (kPa)",
        y_title="B",
        plot_id="stage-b",
        title="Saturation: B against back pressure",
        joined=True,
        level=(0.95, "B = 0.95"),
    )


def volume_root_time_svg(times_s: Sequence[float], volumes_ml: Sequence[float]) -> str:
    """Volume expelled against the square root of time (the root-time plot)."""
    return xy_svg(
        [math.sqrt(t / 60.0) for t in times_s],
        volumes_ml,
        x_title="√t  (t in min)",
        y_title="Volume change ΔV (mL)",
        plot_id="stage-root-time",
        title="Consolidation: volume change against root time",
        joined=True,
    )


def volume_log_time_svg(times_s: Sequence[float], volumes_ml: Sequence[float]) -> str:
    """Volume expelled against log10 of time (times above zero only)."""
    pairs = [(math.log10(t / 60.0), v) for t, v in zip(times_s, volumes_ml, strict=True) if t > 0]
    return xy_svg(
        [p[0] for p in pairs],
        [p[1] for p in pairs],
        x_title="log₁₀ t  (t in min)",
        y_title="Volume change ΔV (mL)",
        plot_id="stage-log-time",
        title="Consolidation: volume change against log time",
        joined=True,
    )


def k_stage_svg(xs: Sequence[float], ks: Sequence[float], *, against: str) -> str:
    """k at 20 °C of each permeation interval against elapsed time (h) or pore volumes."""
    by_time = against == "time"
    return xy_svg(
        xs,
        ks,
        x_title="Elapsed time (h)" if by_time else "Pore volumes of flow",
        y_title="k₂₀ (m/s)",
        plot_id="stage-k-time" if by_time else "stage-k-pore-volumes",
        title="Permeation: k against " + ("time" if by_time else "pore volumes of flow"),
        log_y=True,
    )
