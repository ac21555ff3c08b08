"""Figures shown in the user's chosen display units (SI or US customary), always with the unit.

Stored values stay SI; only the display changes. Factors are exact definitions: 1 ft =
0.3048 m, 1 lb = 0.45359237 kg (international yard and pound, 1959), 1 day = 86 400 s."""

from __future__ import annotations

import math

from markupsafe import Markup

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")

FT = 0.3048
LB = 0.45359237
# quantity -> {units: (label, factor from the SI value, use scientific notation)}
_DISPLAY: dict[str, dict[str, tuple[str, float, bool]]] = {
    "k": {"si": ("m/s", 1.0, True), "us": ("ft/day", 86_400 / FT, True)},
    "length": {"si": ("m", 1.0, False), "us": ("ft", 1 / FT, False)},
    "small_length": {"si": ("mm", 1e3, False), "us": ("in", 1 / 0.0254, False)},
    "density": {"si": ("kg/m³", 1.0, False), "us": ("lb/ft³", FT**3 / LB, False)},
    "pressure": {"si": ("kPa", 1.0, False), "us": ("psi", 1 / 6.894757293168361, False)},
    "area": {"si": ("m²", 1.0, True), "us": ("in²", 1 / 0.0254**2, False)},
}


def sci(value: float | None, digits: int = 3) -> Markup | str:
    """A figure in scientific notation with a real superscript: 1.76 × 10⁻⁹."""
    if value is None or not math.isfinite(value):
        return "—"
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(abs(value)))
    if -2 <= exponent <= 3:
        return f"{value:.{digits}g}"
    mantissa = value / 10**exponent
    if round(mantissa, digits - 1) >= 10:
        mantissa /= 10
        exponent += 1
    text = f"{mantissa:.{digits - 1}f} × 10{str(exponent).translate(_SUPERSCRIPT)}"
    return Markup('<span class="sci">{}</span>').format(text)


def number(value: float | None, digits: int = 3) -> str:
    """A plain figure to `digits` significant digits (whole numbers below a million are
    written out, never as 1.99e+03), or a dash when there is none."""
    if value is None or not math.isfinite(value):
        return "—"
    if 10**digits <= abs(value) < 1e6:
        return f"{value:.0f}"
    return f"{value:.{digits}g}"


def unit_label(quantity: str, units: str | None) -> str:
    return _DISPLAY[quantity][_system(units)][0]


def _system(units: str | None) -> str:
    return "us" if units == "us" else "si"


def show(value: float | None, quantity: str, units: str | None = "si", digits: int = 3) -> Markup:
    """`value` (SI) converted to the user's units, formatted, with the unit after it."""
    label, factor, scientific = _DISPLAY[quantity][_system(units)]
    if value is None:
        return Markup("—")
    converted = value * factor
    text = sci(converted, digits) if scientific else number(converted, digits)
    return Markup("{} {}").format(text, label)


def install(env_filters: dict[str, object]) -> None:
    """Register `{{ value|show('k', units) }}` and `{{ 'k'|unit_label(units) }}`."""
    env_filters["sci"] = sci
    env_filters["number"] = number
    env_filters["show"] = show
    env_filters["unit_label"] = unit_label
