"""SVG plots of a compaction series (no JavaScript, in the style of service/web/plots.py):
k20 against moulding water content and against dry density with the specification limit, and
the compaction plane (dry density against water content) with the compaction curve, the
zero-air-voids line and the acceptable zone (after Daniel & Benson 1990, docs/methods.md
§14.7). Pure functions of plain numbers; nothing here reads the database.

Specimens that meet the limit are filled circles, those that do not are open triangles
(shape as well as colour); specimens without a k20 yet are grey crosses.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from html import escape

from service.web.plots import (
    ACCENT,
    BAND,
    FAIL,
    HEIGHT,
    INK,
    MARGIN_BOTTOM,
    MARGIN_LEFT,
    MARGIN_RIGHT,
    MARGIN_TOP,
    MUTED,
    WARN,
    WIDTH,
    LinearAxis,
    LogAxis,
    _axis_titles,
    _f,
    _frame,
    _legend,
    _open,
    _text,
    _x_ticks,
    _y_ticks,
    legend_height,
    log_range,
    marker,
    plain_label,
    sci_label,
    sci_text,
)

PASS = "#1d6a3a"


@dataclass(frozen=True, slots=True)
class PlotPoint:
    """A specimen on a plot: x in the plot's unit, k20 [m/s] or None, and its classing."""

    label: str
    x: float
    k: float | None
    acceptable: bool | None


def _style(point: PlotPoint) -> tuple[str, str, bool]:
    if point.acceptable is True:
        return "circle", PASS, True
    if point.acceptable is False:
        return "triangle", FAIL, False
    return "cross", MUTED, True


def _linear_range(values: Sequence[float], pad: float = 0.08) -> tuple[float, float]:
    lo, hi = min(values), max(values)
    span = (hi - lo) or max(abs(hi) * 0.1, 1.0)
    return lo - span * pad, hi + span * pad


def _legend_points(points: Sequence[PlotPoint]) -> list[tuple[str, str, str, bool]]:
    out = []
    if any(p.acceptable is True for p in points):
        out.append(("circle", PASS, "specimen meets the limit", True))
    if any(p.acceptable is False for p in points):
        out.append(("triangle", FAIL, "specimen above the limit", False))
    if any(p.acceptable is None for p in points):
        out.append(("cross", MUTED, "no k20 yet, or no limit", True))
    return out


def _point(point: PlotPoint, px: float, py: float) -> str:
    shape, colour, filled = _style(point)
    return (
        f'<g class="specimen" data-label="{escape(point.label)}" data-x="{point.x:.6g}" '
        f'data-k="{"" if point.k is None else f"{point.k:.6g}"}">'
        + marker(shape, px, py, colour, filled=filled)
        + _text(px + 9, py - 8, point.label, font_size="11", fill=INK)
        + "</g>"
    )


def k_against_svg(
    points: Sequence[PlotPoint],
    *,
    x_title: str,
    spec_limit: float | None,
    marker_x: float | None = None,
    marker_words: str = "",
    plot_id: str,
    title: str,
) -> str:
    """k20 (log axis) against a moulding quantity (linear axis), with the limit as a line.

    Parameters
    ----------
    points : specimens; those without k are left out of this plot
    x_title : the x-axis title with its unit
    spec_limit : the specification limit on k20 [m/s]
    marker_x : a vertical reference line (the optimum water content or maximum dry density)
    """
    shown = [p for p in points if p.k is not None and p.k > 0]
    if not shown:
        raise ValueError("k_against_svg needs at least one specimen with a k20")
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    ks = [p.k for p in shown if p.k is not None]
    lo, hi = log_range([*ks, *([spec_limit] if spec_limit else [])], pad=2.0)
    y_axis = LogAxis(lo, hi, bottom, top)
    xs = [p.x for p in shown] + ([marker_x] if marker_x is not None else [])
    x_lo, x_hi = _linear_range(xs)
    x_axis = LinearAxis(x_lo, x_hi, left, right)
    lines: list[tuple[str, str, str]] = []
    if spec_limit:
        lines.append(("solid", FAIL, f"specification limit {sci_text(spec_limit)} m/s"))
    if marker_x is not None:
        lines.append(("dashed", ACCENT, marker_words))
    legend_points = _legend_points(shown)
    desc = (
        f"{len(shown)} specimen(s); k20 from {sci_text(min(ks))} to {sci_text(max(ks))} m/s"
        + (f"; specification limit {sci_text(spec_limit)} m/s" if spec_limit else "")
        + "."
    )
    parts = [
        _open(plot_id, title, desc, height=HEIGHT + legend_height(len(legend_points) + len(lines))),
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), sci_label, left, right),
        _frame(left, top, right, bottom),
    ]
    if spec_limit:
        y = y_axis.px(spec_limit)
        parts.append(
            f'<line class="spec-limit" x1="{_f(left)}" y1="{_f(y)}" x2="{_f(right)}" '
            f'y2="{_f(y)}" stroke="{FAIL}" stroke-width="2.5"/>'
        )
    if marker_x is not None:
        x = x_axis.px(marker_x)
        parts.append(
            f'<line class="optimum" x1="{_f(x)}" y1="{_f(top)}" x2="{_f(x)}" y2="{_f(bottom)}" '
            f'stroke="{ACCENT}" stroke-width="2" stroke-dasharray="7 4"/>'
        )
    for p in shown:
        assert p.k is not None
        parts.append(_point(p, x_axis.px(p.x), y_axis.px(p.k)))
    parts.append(_legend(legend_points, lines, left, HEIGHT))
    parts.append(_axis_titles(x_title, "k20 (m/s), log scale", left, top, right, bottom))
    parts.append("</svg>")
    return "".join(parts)


@dataclass(frozen=True, slots=True)
class Plane:
    """What the compaction plane draws, water content in % and dry density in Mg/m³."""

    specimens: Sequence[PlotPoint]  # x: w [%]; y in `densities`
    densities: Sequence[float]  # ρ_d of each specimen [Mg/m³]
    zero_air_voids: Sequence[tuple[float, float]]
    curve_points: Sequence[tuple[float, float]] = ()
    curve: Sequence[tuple[float, float]] = ()  # the fitted curve, drawn
    zone: Sequence[tuple[float, float]] = ()  # acceptable-zone polygon, clipped at S = 1
    zone_line: Sequence[tuple[float, float]] = ()  # S = saturation bound
    zone_line_words: str = ""
    min_line: Sequence[tuple[float, float]] = ()  # S = minimum saturation
    min_line_words: str = ""


def _path(points: Sequence[tuple[float, float]], xa: LinearAxis, ya: LinearAxis) -> str:
    return "M" + "L".join(f"{_f(xa.px(x))} {_f(ya.px(y))}" for x, y in points)


def compaction_plane_svg(
    plane: Plane, *, plot_id: str = "compaction-plane", title: str = "Compaction plane"
) -> str:
    """Dry density against water content: specimens, compaction curve, zero-air-voids line,
    lines of constant saturation and the acceptable zone (shaded)."""
    if not plane.specimens and not plane.curve_points:
        raise ValueError("compaction_plane_svg needs at least one specimen or curve point")
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    xs = [p.x for p in plane.specimens] + [w for w, _ in plane.curve_points]
    ys = list(plane.densities) + [r for _, r in plane.curve_points]
    x_lo, x_hi = _linear_range(xs, pad=0.15)
    y_lo, y_hi = _linear_range(ys, pad=0.25)
    x_axis = LinearAxis(x_lo, x_hi, left, right)
    y_axis = LinearAxis(y_lo, y_hi, bottom, top)

    def inside(points: Sequence[tuple[float, float]]) -> list[tuple[float, float]]:
        # Lines run past the frame; the clip path cuts them at it.
        return [(x, y) for x, y in points if x_lo - 5 <= x <= x_hi + 5]

    legend_points = _legend_points(plane.specimens)
    lines: list[tuple[str, str, str]] = [("solid", INK, "zero air voids (S = 100 %)")]
    parts = [
        "",  # the opening, once the legend is known
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), lambda v: f"{v:.3f}", left, right),
        f'<clipPath id="{escape(plot_id)}-clip"><rect x="{_f(left)}" y="{_f(top)}" '
        f'width="{_f(right - left)}" height="{_f(bottom - top)}"/></clipPath>',
        f'<g clip-path="url(#{escape(plot_id)}-clip)">',
    ]
    if len(plane.zone) >= 3:
        parts.append(
            f'<path class="zone" d="{_path(plane.zone, x_axis, y_axis)}Z" fill="{BAND}" '
            f'stroke="{ACCENT}" stroke-width="1.5" stroke-dasharray="4 3"/>'
        )
        legend_points.append(
            ("square", ACCENT, "acceptable zone (encloses specimens that met it)", False)
        )
    zav = inside(plane.zero_air_voids)
    if zav:
        parts.append(
            f'<path class="zero-air-voids" d="{_path(zav, x_axis, y_axis)}" fill="none" '
            f'stroke="{INK}" stroke-width="2"/>'
        )
    for points, colour, words, css in (
        (plane.zone_line, ACCENT, plane.zone_line_words, "zone-line"),
        (plane.min_line, WARN, plane.min_line_words, "min-saturation"),
    ):
        drawn = inside(points)
        if drawn:
            parts.append(
                f'<path class="{css}" d="{_path(drawn, x_axis, y_axis)}" fill="none" '
                f'stroke="{colour}" stroke-width="2" stroke-dasharray="7 4"/>'
            )
            lines.append(("dashed", colour, words))
    if plane.curve:
        parts.append(
            f'<path class="compaction-curve" d="{_path(plane.curve, x_axis, y_axis)}" '
            f'fill="none" stroke="{MUTED}" stroke-width="2"/>'
        )
        lines.append(("solid", MUTED, "compaction curve (fitted)"))
    parts.append("</g>")
    for w, rho in plane.curve_points:
        shape = marker("square", x_axis.px(w), y_axis.px(rho), MUTED, filled=False, size=4.5)
        parts.append(f'<g class="curve-point">{shape}</g>')
    if plane.curve_points:
        legend_points.append(("square", MUTED, "compaction test point", False))
    for p, rho in zip(plane.specimens, plane.densities, strict=True):
        parts.append(_point(p, x_axis.px(p.x), y_axis.px(rho)))
    parts.append(_frame(left, top, right, bottom))
    parts.append(_legend(legend_points, lines, left, HEIGHT))
    parts.append(
        _axis_titles(
            "Moulding water content w (%)", "Dry density (Mg/m³)", left, top, right, bottom
        )
    )
    parts.append("</svg>")
    desc = (
        f"{len(plane.specimens)} specimen(s) and {len(plane.curve_points)} compaction test "
        f"point(s); water content {plain_label(x_lo)} to {plain_label(x_hi)} %"
        + ("; the acceptable zone is shaded." if len(plane.zone) >= 3 else ".")
    )
    rows = len(legend_points) + len(lines)
    parts[0] = _open(plot_id, title, desc, height=HEIGHT + legend_height(rows))
    return "".join(parts)
