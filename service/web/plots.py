"""Server-rendered SVG plots (no JavaScript): ln(head) against time (a logged run, or each
falling-head trial), k per trial, k against time, k against depth.

Pure functions returning SVG text; nothing here reads the database. The fitted line of
ln(head) against time is the engine's own regression (through the lab-tests door). Every
plot has labelled axes with units and a <title>/<desc> for screen readers, and series are
told apart by marker shape as well as colour.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from html import escape

from service.figures import DISPLAY, number, system
from service.lab_tests.reduction import fit_log_head

INK = "#1b2a2f"
MUTED = "#4b5a60"
GRID = "#d5d9d8"
ACCENT = "#175e74"
WARN = "#774600"
FAIL = "#9a1b1b"
BAND = "#e3eef1"
SERIES_COLOURS = ("#175e74", "#774600", "#1d6a3a", "#6b3fa0", "#9a1b1b", "#4b5a60")
SHAPES = ("circle", "square", "triangle", "diamond", "triangle_down", "cross")

WIDTH = 640
HEIGHT = 380
MARGIN_LEFT = 100
MARGIN_RIGHT = 24
MARGIN_TOP = 34
MARGIN_BOTTOM = 58
FONT = "system-ui, sans-serif"

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")
_SUBSCRIPT = str.maketrans("-0123456789.", "₋₀₁₂₃₄₅₆₇₈₉.")


# ---------- axes ----------


@dataclass(frozen=True, slots=True)
class LinearAxis:
    """Maps values in [lo, hi] linearly onto pixels [start_px, end_px] (either direction)."""

    lo: float
    hi: float
    start_px: float
    end_px: float

    def px(self, value: float) -> float:
        span = self.hi - self.lo
        fraction = (value - self.lo) / span if span else 0.5
        return self.start_px + fraction * (self.end_px - self.start_px)

    def ticks(self, count: int = 5) -> list[float]:
        step = nice_step((self.hi - self.lo) / max(count, 1))
        if step <= 0:
            return [self.lo]
        first = math.ceil(self.lo / step - 1e-9) * step
        out = []
        value = first
        while value <= self.hi + step * 1e-9:
            out.append(0.0 if abs(value) < step * 1e-9 else value)
            value += step
        return out


@dataclass(frozen=True, slots=True)
class LogAxis:
    """Maps positive values in [lo, hi] onto pixels by log10 (one decade = equal length)."""

    lo: float
    hi: float
    start_px: float
    end_px: float

    def __post_init__(self) -> None:
        if not (self.lo > 0 and self.hi > self.lo):
            raise ValueError(f"a log axis needs 0 < lo < hi (got lo={self.lo}, hi={self.hi})")

    def px(self, value: float) -> float:
        fraction = (math.log10(value) - math.log10(self.lo)) / (
            math.log10(self.hi) - math.log10(self.lo)
        )
        return self.start_px + fraction * (self.end_px - self.start_px)

    def ticks(self) -> list[float]:
        """Whole decades when the axis spans two or more; else 1-2-5 steps within the range."""
        low, high = math.log10(self.lo), math.log10(self.hi)
        if high - low >= 2 - 1e-9:
            return [10.0**e for e in range(math.ceil(low - 1e-9), math.floor(high + 1e-9) + 1)]
        out = []
        for exponent in range(math.floor(low) - 1, math.ceil(high) + 1):
            for mantissa in (1, 2, 5):
                value = mantissa * 10.0**exponent
                if self.lo * (1 - 1e-9) <= value <= self.hi * (1 + 1e-9):
                    out.append(value)
        if len(out) < 3:
            # A narrow range (repeat trials agreeing well): evenly spaced ticks read better.
            step = nice_step((self.hi - self.lo) / 4)
            value = math.ceil(self.lo / step) * step
            out = []
            while value <= self.hi * (1 + 1e-9):
                out.append(float(f"{value:.6g}"))
                value += step
        return out


def nice_step(raw: float) -> float:
    """The 1, 2, 2.5 or 5 × 10ⁿ step nearest above `raw` (common practice for axis ticks)."""
    if raw <= 0 or not math.isfinite(raw):
        return 0.0
    exponent = math.floor(math.log10(raw))
    base = 10.0**exponent
    for mantissa in (1, 2, 2.5, 5, 10):
        if raw <= mantissa * base * (1 + 1e-9):
            return mantissa * base
    return 10 * base


def log_range(values: Sequence[float], pad: float = 1.3) -> tuple[float, float]:
    """A log-axis range holding every value with a margin of `pad` (a factor) each side."""
    positive = [v for v in values if v > 0 and math.isfinite(v)]
    if not positive:
        return 1e-10, 1e-6
    lo, hi = min(positive) / pad, max(positive) * pad
    return lo, hi


def sci_label(value: float) -> str:
    """Tick text for a log axis: 10⁻⁹, 2×10⁻⁹, or 1.5×10⁻⁹."""
    exponent = math.floor(math.log10(value) + 1e-9)
    mantissa = value / 10.0**exponent
    power = f"10{str(exponent).translate(_SUPERSCRIPT)}"
    if abs(mantissa - 1) < 1e-6:
        return power
    return f"{mantissa:.3g}×{power}"


def plain_label(value: float) -> str:
    return f"{value:.6g}"


def sci_text(value: float) -> str:
    """A figure for a description or label: 1.76 × 10⁻⁹."""
    exponent = math.floor(math.log10(abs(value))) if value else 0
    mantissa = value / 10.0**exponent
    return f"{mantissa:.3g} × 10{str(exponent).translate(_SUPERSCRIPT)}"


# ---------- SVG pieces ----------


def _f(value: float) -> str:
    return f"{value:.2f}".rstrip("0").rstrip(".")


def _text(x: float, y: float, text: str, **attrs: str) -> str:
    extra = "".join(
        f' {key.rstrip("_").replace("_", "-")}="{escape(val)}"' for key, val in attrs.items()
    )
    return f'<text x="{_f(x)}" y="{_f(y)}"{extra}>{escape(text)}</text>'


def marker(
    shape: str, x: float, y: float, colour: str, *, filled: bool = True, size: float = 5.5
) -> str:
    """One data point drawn as a shape centred at (x, y)."""
    fill = colour if filled else "#ffffff"
    s = size
    if shape == "circle":
        body = f'<circle r="{_f(s)}"/>'
    elif shape == "square":
        body = f'<rect x="{_f(-s)}" y="{_f(-s)}" width="{_f(2 * s)}" height="{_f(2 * s)}"/>'
    elif shape == "triangle":
        body = f'<path d="M0 {_f(-1.2 * s)}L{_f(1.1 * s)} {_f(0.8 * s)}H{_f(-1.1 * s)}Z"/>'
    elif shape == "triangle_down":
        body = f'<path d="M0 {_f(1.2 * s)}L{_f(1.1 * s)} {_f(-0.8 * s)}H{_f(-1.1 * s)}Z"/>'
    elif shape == "diamond":
        body = f'<path d="M0 {_f(-1.3 * s)}L{_f(1.3 * s)} 0L0 {_f(1.3 * s)}L{_f(-1.3 * s)} 0Z"/>'
    else:  # cross
        body = (
            f'<path d="M{_f(-s)} {_f(-s)}L{_f(s)} {_f(s)}M{_f(s)} {_f(-s)}L{_f(-s)} {_f(s)}" '
            'stroke-width="2.5"/>'
        )
    return (
        f'<g class="point" data-shape="{shape}" transform="translate({_f(x)} {_f(y)})" '
        f'fill="{fill}" stroke="{colour}" stroke-width="1.8">{body}</g>'
    )


def _open(plot_id: str, title: str, desc: str, width: int = WIDTH, height: int = HEIGHT) -> str:
    pid = escape(plot_id)
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" class="plot-svg" id="{pid}" '
        f'viewBox="0 0 {width} {height}" width="{width}" height="{height}" role="img" '
        f'aria-labelledby="{pid}-title {pid}-desc" font-family="{FONT}" font-size="13" '
        f'fill="{INK}">'
        f'<title id="{pid}-title">{escape(title)}</title>'
        f'<desc id="{pid}-desc">{escape(desc)}</desc>'
        f'<rect width="{width}" height="{height}" fill="#ffffff"/>'
    )


def _frame(left: float, top: float, right: float, bottom: float) -> str:
    return (
        f'<rect class="frame" x="{_f(left)}" y="{_f(top)}" width="{_f(right - left)}" '
        f'height="{_f(bottom - top)}" fill="none" stroke="{MUTED}" stroke-width="1"/>'
    )


def _x_ticks(
    axis: LinearAxis | LogAxis,
    values: Sequence[float],
    label: Callable[[float], str],
    top: float,
    bottom: float,
) -> str:
    parts = []
    for value in values:
        x = axis.px(value)
        parts.append(
            f'<line x1="{_f(x)}" y1="{_f(top)}" x2="{_f(x)}" y2="{_f(bottom)}" stroke="{GRID}"/>'
        )
        parts.append(_text(x, bottom + 18, label(value), text_anchor="middle", class_="tick"))
    return "".join(parts)


def _y_ticks(
    axis: LinearAxis | LogAxis,
    values: Sequence[float],
    label: Callable[[float], str],
    left: float,
    right: float,
) -> str:
    parts = []
    for value in values:
        y = axis.px(value)
        parts.append(
            f'<line x1="{_f(left)}" y1="{_f(y)}" x2="{_f(right)}" y2="{_f(y)}" stroke="{GRID}"/>'
        )
        parts.append(_text(left - 8, y + 4, label(value), text_anchor="end", class_="tick"))
    return "".join(parts)


def _axis_titles(
    x_title: str, y_title: str, left: float, top: float, right: float, bottom: float
) -> str:
    mid_x = (left + right) / 2
    mid_y = (top + bottom) / 2
    return _text(
        mid_x, bottom + 42, x_title, text_anchor="middle", font_weight="600", class_="axis-title"
    ) + (
        f'<text class="axis-title" x="0" y="0" text-anchor="middle" font-weight="600" '
        f'transform="translate({_f(left - 82)} {_f(mid_y)}) rotate(-90)">{escape(y_title)}</text>'
    )


# ---------- the plots ----------


def _time_unit(t_max_s: float) -> tuple[str, float]:
    if t_max_s <= 600:
        return "s", 1.0
    if t_max_s <= 3 * 3600:
        return "min", 60.0
    return "h", 3600.0


def ln_head_time_svg(
    times_s: Sequence[float],
    heads_m: Sequence[float],
    *,
    fit: tuple[float, float] | None = None,
    plot_id: str = "ln-head-time",
    title: str = "Falling head: ln(head) against time",
) -> str:
    """ln(h) against elapsed time for one falling-head run, with the fitted straight line.

    Parameters
    ----------
    times_s : elapsed times [s]
    heads_m : head differences at those times [m], all > 0
    fit : (slope [1/s], intercept) of ln(h/m) = intercept + slope·t; least squares if None
    """
    if len(times_s) != len(heads_m) or len(times_s) < 2:
        raise ValueError("ln_head_time_svg needs two or more (time, head) readings")
    if any(h <= 0 for h in heads_m):
        raise ValueError("heads must be greater than zero to take their logarithm")
    if fit is None:
        line = fit_log_head(times_s, heads_m)  # the engine's own fit of ln h on t
        fit = (line.slope, line.intercept)
    slope, intercept = fit
    unit, per = _time_unit(max(times_s))
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    ys = [math.log(h) for h in heads_m]
    t_lo, t_hi = min(0.0, min(times_s)), max(times_s)
    x_axis = LinearAxis(t_lo / per, t_hi / per, left, right)
    y_pad = max((max(ys) - min(ys)) * 0.08, 0.01)
    y_axis = LinearAxis(min(ys) - y_pad, max(ys) + y_pad, bottom, top)
    desc = (
        f"{len(times_s)} readings from t = {plain_label(min(times_s) / per)} to "
        f"{plain_label(max(times_s) / per)} {unit}; fitted line ln h = {intercept:.4g} "
        f"{'-' if slope < 0 else '+'} {abs(slope):.4g}·t (t in s, h in m)."
    )
    parts = [
        _open(plot_id, title, desc, height=HEIGHT + legend_height(2)),
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), lambda v: f"{v:.3g}", left, right),
        _frame(left, top, right, bottom),
    ]
    x1, x2 = t_lo, t_hi
    parts.append(
        f'<line class="fit" x1="{_f(x_axis.px(x1 / per))}" '
        f'y1="{_f(y_axis.px(intercept + slope * x1))}" '
        f'x2="{_f(x_axis.px(x2 / per))}" y2="{_f(y_axis.px(intercept + slope * x2))}" '
        f'stroke="{ACCENT}" stroke-width="2" stroke-dasharray="7 4"/>'
    )
    for t, y in zip(times_s, ys, strict=True):
        parts.append(marker("circle", x_axis.px(t / per), y_axis.px(y), INK))
    parts.append(
        _axis_titles(f"Elapsed time t ({unit})", "ln h  (head h in m)", left, top, right, bottom)
    )
    parts.append(
        _legend(
            [("circle", INK, "reading", True)],
            [("fit", ACCENT, "least-squares line")],
            left,
            HEIGHT,
        )
    )
    parts.append("</svg>")
    return "".join(parts)


def _legend(
    points: Sequence[tuple[str, str, str, bool]],
    lines: Sequence[tuple[str, str, str]],
    left: float,
    top: float,
) -> str:
    """A legend in rows below the x-axis title: marker or line, then its words."""
    parts = ['<g class="legend">']
    y = top + 16
    for shape, colour, words, filled in points:
        parts.append(marker(shape, left + 8, y - 4, colour, filled=filled, size=5))
        parts.append(_text(left + 24, y, words))
        y += 22
    for style, colour, words in lines:
        dash = ' stroke-dasharray="7 4"' if style in ("fit", "dashed") else ""
        parts.append(
            f'<line x1="{_f(left)}" y1="{_f(y - 4)}" x2="{_f(left + 18)}" y2="{_f(y - 4)}" '
            f'stroke="{colour}" stroke-width="2.5"{dash}/>'
        )
        parts.append(_text(left + 24, y, words))
        y += 22
    parts.append("</g>")
    return "".join(parts)


def legend_height(rows: int) -> int:
    return 22 * rows + 8


def acceptance_band(
    k_values: Sequence[float], fraction: float = 0.25
) -> tuple[float, float, float]:
    """(mean, mean·(1 − fraction), mean·(1 + fraction)) of the determinations [m/s]."""
    mean = sum(k_values) / len(k_values)
    return mean, mean * (1 - fraction), mean * (1 + fraction)


def k_per_trial_svg(
    k_values: Sequence[float],
    *,
    used: Sequence[int] | None = None,
    band: tuple[float, float] | None = None,
    band_fraction: float = 0.25,
    spec_limit: float | None = None,
    reference_temperature_c: float = 20.0,
    plot_id: str = "k-per-trial",
    title: str = "Hydraulic conductivity of each trial",
    width: int = WIDTH,
    numbers: Sequence[int] | None = None,
) -> str:
    """k at the reference temperature for each trial, the acceptance band and the limit.

    Parameters
    ----------
    k_values : k at the reference temperature per trial [m/s], all > 0
    used : indexes of the trials the result is the mean of (default: all)
    band : (low, high) acceptance band [m/s]; default ±band_fraction of the mean of `used`
    spec_limit : the project's specification limit on k [m/s], drawn as a line
    width : drawing width [px]; narrower for a side panel
    numbers : the trial number shown under each value (default 1, 2, ...): the numbers of
        the table, so trials 2-5 stay 2-5 when trial 1 is excluded
    """
    if not k_values:
        raise ValueError("k_per_trial_svg needs at least one k value")
    if any(k <= 0 for k in k_values):
        raise ValueError("k values must be greater than zero for a log axis")
    if numbers is not None and len(numbers) != len(k_values):
        raise ValueError("k_per_trial_svg needs one trial number per k value")
    shown = list(numbers) if numbers is not None else list(range(1, len(k_values) + 1))
    used_set = set(range(len(k_values)) if used is None else used)
    used_k = [k for j, k in enumerate(k_values) if j in used_set] or list(k_values)
    if band is None:
        _, band_lo, band_hi = acceptance_band(used_k, band_fraction)
        band_words = f"±{band_fraction:.0%} of the mean"
    else:
        band_lo, band_hi = band
        band_words = "acceptance band"
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = width - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    extent = [*k_values, band_lo, band_hi]
    if spec_limit is not None and spec_limit > 0:
        extent.append(spec_limit)
    lo, hi = log_range(extent)
    y_axis = LogAxis(lo, hi, bottom, top)
    n = len(k_values)
    x_axis = LinearAxis(0.5, n + 0.5, left, right)
    ref = f"{reference_temperature_c:g}".translate(_SUBSCRIPT)
    desc_bits = [
        f"{n} trial(s) ({', '.join(str(v) for v in shown)}); k{ref} from "
        f"{sci_text(min(k_values))} to {sci_text(max(k_values))} m/s",
        f"band {sci_text(band_lo)} to {sci_text(band_hi)} m/s ({band_words})",
    ]
    if spec_limit is not None:
        desc_bits.append(f"specification limit {sci_text(spec_limit)} m/s")
    legend_points = [("circle", ACCENT, "trial within band", True)]
    if any(not band_lo <= k <= band_hi for k in k_values):
        legend_points.append(("triangle", WARN, "trial outside band", True))
    if len(used_set) < n:
        legend_points.append(("circle", ACCENT, "trial not in result", False))
    legend_lines = [("dashed", ACCENT, band_words)]
    if spec_limit is not None:
        legend_lines.append(("solid", FAIL, "specification limit"))
    rows = len(legend_points) + len(legend_lines)
    parts = [
        _open(
            plot_id,
            title,
            "; ".join(desc_bits) + ".",
            width=width,
            height=HEIGHT + legend_height(rows),
        ),
        _y_ticks(y_axis, y_axis.ticks(), sci_label, left, right),
    ]
    band_top, band_bottom = y_axis.px(band_hi), y_axis.px(band_lo)
    parts.append(
        f'<rect class="band" x="{_f(left)}" y="{_f(band_top)}" width="{_f(right - left)}" '
        f'height="{_f(band_bottom - band_top)}" fill="{BAND}" stroke="{ACCENT}" '
        f'stroke-dasharray="4 3"/>'
    )
    for j in range(n):
        x = x_axis.px(j + 1)
        parts.append(_text(x, bottom + 18, str(shown[j]), text_anchor="middle", class_="tick"))
    parts.append(_frame(left, top, right, bottom))
    if spec_limit is not None and spec_limit > 0:
        y = y_axis.px(spec_limit)
        parts.append(
            f'<line class="spec-limit" x1="{_f(left)}" y1="{_f(y)}" x2="{_f(right)}" '
            f'y2="{_f(y)}" stroke="{FAIL}" stroke-width="2.5"/>'
        )
        parts.append(_text(left + 6, y - 6, f"limit {sci_text(spec_limit)} m/s", fill=FAIL))
    for j, k in enumerate(k_values):
        inside = band_lo <= k <= band_hi
        shape = "circle" if inside else "triangle"
        colour = ACCENT if inside else WARN
        parts.append(marker(shape, x_axis.px(j + 1), y_axis.px(k), colour, filled=j in used_set))
    parts.append(_legend(legend_points, legend_lines, left, HEIGHT))
    parts.append(_axis_titles("Trial number", f"k{ref} (m/s), log scale", left, top, right, bottom))
    parts.append("</svg>")
    return "".join(parts)


def k_depth_svg(
    series: Mapping[str, Sequence[tuple[float, float]]],
    *,
    spec_limit: float | None = None,
    reference_temperature_c: float = 20.0,
    plot_id: str = "k-depth",
    title: str = "Hydraulic conductivity against depth",
    units: str | None = "si",
) -> str:
    """k at the reference temperature against sample depth, one series per location.

    Parameters
    ----------
    series : location name -> [(depth [m] below ground level, k [m/s]), ...]
    spec_limit : the specification limit on k [m/s], drawn as a vertical line
    units : the user's display units ("us": ft/day and ft; otherwise m/s and m)

    The k axis is logarithmic; depth increases downward from 0 at the top.
    """
    k_unit, k_factor, _ = DISPLAY["k"][system(units)]
    depth_unit, depth_factor, _ = DISPLAY["length"][system(units)]
    series = {
        name: [(d * depth_factor, k * k_factor) for d, k in rows] for name, rows in series.items()
    }
    spec_limit = spec_limit * k_factor if spec_limit else spec_limit
    points = [(d, k) for rows in series.values() for d, k in rows]
    if not points:
        raise ValueError("k_depth_svg needs at least one (depth, k) point")
    if any(k <= 0 for _, k in points) or any(d < 0 for d, _ in points):
        raise ValueError("k must be greater than zero and depth zero or more")
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    extent = [k for _, k in points] + ([spec_limit] if spec_limit else [])
    lo, hi = log_range(extent, pad=2.0)
    x_axis = LogAxis(lo, hi, left, right)
    max_depth = max(d for d, _ in points)
    depth_step = nice_step(max_depth / 5 if max_depth > 0 else 1.0)
    depth_hi = math.ceil(max_depth / depth_step + 1e-9) * depth_step if max_depth > 0 else 1.0
    if depth_hi <= max_depth:
        depth_hi += depth_step
    y_axis = LinearAxis(0.0, depth_hi, top, bottom)
    ref = f"{reference_temperature_c:g}".translate(_SUBSCRIPT)
    desc = (
        f"{len(points)} result(s) at {len(series)} location(s), depths 0 to "
        f"{number(max_depth)} {depth_unit}; k{ref} from "
        f"{sci_text(min(k for _, k in points))} to {sci_text(max(k for _, k in points))} {k_unit}"
        + (f"; specification limit {sci_text(spec_limit)} {k_unit}." if spec_limit else ".")
    )
    parts = [
        _open(plot_id, title, desc, height=HEIGHT + legend_height(len(series) + bool(spec_limit))),
        _x_ticks(x_axis, x_axis.ticks(), sci_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), plain_label, left, right),
        _frame(left, top, right, bottom),
    ]
    if spec_limit:
        x = x_axis.px(spec_limit)
        parts.append(
            f'<line class="spec-limit" x1="{_f(x)}" y1="{_f(top)}" x2="{_f(x)}" '
            f'y2="{_f(bottom)}" stroke="{FAIL}" stroke-width="2.5"/>'
        )
    legend = [f'<g class="legend" transform="translate({left} {HEIGHT})">']
    for index, (name, rows) in enumerate(series.items()):
        shape = SHAPES[index % len(SHAPES)]
        colour = SERIES_COLOURS[index % len(SERIES_COLOURS)]
        parts.append(f'<g class="series" data-location="{escape(name)}">')
        for depth, k in sorted(rows):
            parts.append(marker(shape, x_axis.px(k), y_axis.px(depth), colour))
        parts.append("</g>")
        legend.append(marker(shape, 8, 12 + index * 22, colour, size=5))
        legend.append(_text(22, 17 + index * 22, name))
    if spec_limit:
        y = 12 + len(series) * 22
        legend.append(
            f'<line x1="0" y1="{y}" x2="16" y2="{y}" stroke="{FAIL}" stroke-width="2.5"/>'
        )
        legend.append(_text(22, y + 5, "specification limit"))
    legend.append("</g>")
    parts.extend(legend)
    parts.append(
        _axis_titles(
            f"k{ref} ({k_unit}), log scale",
            f"Depth below ground level ({depth_unit})",
            left,
            top,
            right,
            bottom,
        )
    )
    parts.append("</svg>")
    return "".join(parts)


def ln_head_trials_svg(
    runs: Sequence[tuple[int, float, float, float]],
    *,
    plot_id: str = "ln-head-trials",
    title: str = "Falling head: ln(head) against time, each trial",
) -> str:
    """ln(h) against the time since each trial began, one line per falling-head trial from
    its initial head to its final head: equal slopes are equal conductivities.

    Parameters
    ----------
    runs : (trial number, duration [s], initial head [m], final head [m]) per trial, all > 0
    """
    if not runs:
        raise ValueError("ln_head_trials_svg needs at least one trial")
    if any(t <= 0 or h1 <= 0 or h2 <= 0 for _, t, h1, h2 in runs):
        raise ValueError("durations and heads must be greater than zero")
    unit, per = _time_unit(max(t for _, t, _, _ in runs))
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    ys = [math.log(h) for _, _, h1, h2 in runs for h in (h1, h2)]
    x_axis = LinearAxis(0.0, max(t for _, t, _, _ in runs) / per, left, right)
    y_pad = max((max(ys) - min(ys)) * 0.08, 0.01)
    y_axis = LinearAxis(min(ys) - y_pad, max(ys) + y_pad, bottom, top)
    desc = "; ".join(
        f"trial {n}: h from {plain_label(h1)} m to {plain_label(h2)} m in "
        f"{plain_label(t / per)} {unit}"
        for n, t, h1, h2 in runs
    )
    parts = [
        _open(plot_id, title, desc + ".", height=HEIGHT + legend_height(len(runs))),
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), lambda v: f"{v:.3g}", left, right),
        _frame(left, top, right, bottom),
    ]
    legend = []
    for index, (trial, t, h1, h2) in enumerate(runs):
        shape = SHAPES[index % len(SHAPES)]
        colour = SERIES_COLOURS[index % len(SERIES_COLOURS)]
        x1, y1 = x_axis.px(0.0), y_axis.px(math.log(h1))
        x2, y2 = x_axis.px(t / per), y_axis.px(math.log(h2))
        parts.append(
            f'<g class="series" data-trial="{trial}">'
            f'<line x1="{_f(x1)}" y1="{_f(y1)}" x2="{_f(x2)}" y2="{_f(y2)}" '
            f'stroke="{colour}" stroke-width="2"/>'
            + marker(shape, x1, y1, colour)
            + marker(shape, x2, y2, colour)
            + "</g>"
        )
        legend.append((shape, colour, f"trial {trial}", True))
    parts.append(
        _axis_titles(
            f"Time since the trial began ({unit})", "ln h  (head h in m)", left, top, right, bottom
        )
    )
    parts.append(_legend(legend, [], left, HEIGHT))
    parts.append("</svg>")
    return "".join(parts)


def k_time_svg(
    points: Sequence[tuple[int, float, float]],
    *,
    reference_temperature_c: float = 20.0,
    plot_id: str = "k-time",
    title: str = "Hydraulic conductivity against time",
) -> str:
    """k at the reference temperature of each trial against the permeation time at its end
    (the trials' durations added up): a steady k shows as a flat run of points.

    Parameters
    ----------
    points : (trial number, permeation time at the trial's end [s], k [m/s]) per trial
    """
    if not points:
        raise ValueError("k_time_svg needs at least one trial")
    if any(k <= 0 or t <= 0 for _, t, k in points):
        raise ValueError("k and times must be greater than zero")
    unit, per = _time_unit(max(t for _, t, _ in points))
    left, top = MARGIN_LEFT, MARGIN_TOP
    right, bottom = WIDTH - MARGIN_RIGHT, HEIGHT - MARGIN_BOTTOM
    lo, hi = log_range([k for _, _, k in points])
    y_axis = LogAxis(lo, hi, bottom, top)
    x_axis = LinearAxis(0.0, max(t for _, t, _ in points) / per, left, right)
    ref = f"{reference_temperature_c:g}".translate(_SUBSCRIPT)
    desc = "; ".join(
        f"trial {n}: k{ref} {sci_text(k)} m/s at {plain_label(t / per)} {unit}"
        for n, t, k in points
    )
    parts = [
        _open(plot_id, title, desc + ".", height=HEIGHT + legend_height(1)),
        _x_ticks(x_axis, x_axis.ticks(), plain_label, top, bottom),
        _y_ticks(y_axis, y_axis.ticks(), sci_label, left, right),
        _frame(left, top, right, bottom),
    ]
    xy = [(x_axis.px(t / per), y_axis.px(k)) for _, t, k in points]
    path = " ".join(f"{_f(x)},{_f(y)}" for x, y in xy)
    parts.append(f'<polyline points="{path}" fill="none" stroke="{GRID}" stroke-width="1.5"/>')
    for (trial, _, _), (x, y) in zip(points, xy, strict=True):
        parts.append(marker("circle", x, y, ACCENT))
        parts.append(_text(x, y - 10, str(trial), text_anchor="middle", class_="tick"))
    parts.append(
        _axis_titles(
            f"Permeation time at the end of the trial ({unit})",
            f"k{ref} (m/s), log scale",
            left,
            top,
            right,
            bottom,
        )
    )
    parts.append(_legend([("circle", ACCENT, "trial (its number above)", True)], [], left, HEIGHT))
    parts.append("</svg>")
    return "".join(parts)
