"""How every figure is written, on pages, certificates and exports alike: scientific notation
with a real superscript (5.70 × 10⁻¹⁰ m/s), unit symbols with superscripts (cm², g/cm³, °C),
a typed value shown with the significant figures it was typed with, and SI figures shown in
the user's display units (SI or US customary).

Stored values stay SI; only the display changes. Factors are exact definitions: 1 ft =
0.3048 m, 1 lb = 0.45359237 kg (international yard and pound, 1959), 1 day = 86 400 s,
1 psi = 6.894757293168361 kPa (from the pound-force and the inch)."""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any
from zoneinfo import ZoneInfo

_SUPERSCRIPT = str.maketrans("-0123456789", "⁻⁰¹²³⁴⁵⁶⁷⁸⁹")

FT = 0.3048
LB = 0.45359237
# quantity -> {units: (label, factor from the SI value, use scientific notation)}
DISPLAY: dict[str, dict[str, tuple[str, float, bool]]] = {
    "k": {"si": ("m/s", 1.0, True), "us": ("ft/day", 86_400 / FT, True)},
    "length": {"si": ("m", 1.0, False), "us": ("ft", 1 / FT, False)},
    "small_length": {"si": ("mm", 1e3, False), "us": ("in", 1 / 0.0254, False)},
    "specimen_length": {"si": ("cm", 1e2, False), "us": ("in", 1 / 0.0254, False)},
    "density": {"si": ("kg/m³", 1.0, False), "us": ("lb/ft³", FT**3 / LB, False)},
    "pressure": {"si": ("kPa", 1.0, False), "us": ("psi", 1 / 6.894757293168361, False)},
    "area": {"si": ("m²", 1.0, True), "us": ("in²", 1 / 0.0254**2, False)},
    "specimen_area": {"si": ("cm²", 1e4, False), "us": ("in²", 1 / 0.0254**2, False)},
}

# Unit words as pint reads them -> the symbol printed.
_UNIT_WORDS = (
    ("delta_degC", "K"),
    ("degC", "°C"),
    ("degF", "°F"),
    ("ohm", "Ω"),
    ("micro", "µ"),
)
_POWER = re.compile(r"(\*\*|\^)\s*(-?\d+)")
_BARE_POWER = re.compile(r"(?<=[A-Za-z])([23])(?![\d.])")
# A number, then nothing or a unit (a unit starts with a letter or a symbol, never a digit or
# a point: "1.1.0" is a version, not 1.1 of a unit ".0").
_TYPED = re.compile(
    r"^\s*([-+]?(?:\d+(?:\.\d*)?|\.\d+))(?:[eE]([-+]?\d+))?(?:\s*([^\d\s.,:\-].*?))?\s*$"
)


def system(units: str | None) -> str:
    """'us' for US customary, 'si' for anything else."""
    return "us" if units == "us" else "si"


def unit_symbol(unit: str) -> str:
    """A unit as printed: 'cm**2' -> 'cm²', 'g/cm**3' -> 'g/cm³', 'degC' -> '°C',
    'mPa*s' -> 'mPa·s', 'kg/m3' -> 'kg/m³' (typography: common practice, no source)."""
    text = unit.strip()
    for word, symbol in _UNIT_WORDS:
        text = text.replace(word, symbol)
    text = _POWER.sub(lambda m: m.group(2).translate(_SUPERSCRIPT), text)
    text = _BARE_POWER.sub(lambda m: m.group(1).translate(_SUPERSCRIPT), text)
    return text.replace("*", "·")


def power_of_ten(mantissa: str, exponent: int) -> str:
    """'5.70', -10 -> '5.70 × 10⁻¹⁰'."""
    return f"{mantissa} × 10{str(exponent).translate(_SUPERSCRIPT)}"


def sci_text(value: float | None, digits: int = 3) -> str:
    """A figure in scientific notation with a real superscript: 1.76 × 10⁻⁹; figures from
    0.01 to 9999 are written out."""
    if value is None or not math.isfinite(value):
        return "—"
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(abs(value)))
    if -2 <= exponent <= 3:
        return number(value, digits)
    mantissa = value / 10**exponent
    if round(abs(mantissa), digits - 1) >= 10:
        mantissa /= 10
        exponent += 1
    return power_of_ten(f"{mantissa:.{digits - 1}f}", exponent)


def number(value: float | None, digits: int = 3) -> str:
    """A plain figure to `digits` significant digits (trailing zeros dropped: a computed
    figure claims no more than it has); whole numbers below a million written out, never as
    1.99e+03; very small or large ones as a power of ten; a dash when there is none."""
    if value is None or not math.isfinite(value):
        return "—"
    if 10**digits <= abs(value) < 1e6:
        return f"{value:.0f}"
    text = f"{value:.{digits}g}"
    return sci_text(value, digits) if "e" in text else text


def unit_label(quantity: str, units: str | None) -> str:
    """The unit a quantity is shown in for the user's unit system."""
    return DISPLAY[quantity][system(units)][0]


def show_text(value: float | None, quantity: str, units: str | None = "si", digits: int = 3) -> str:
    """`value` (SI) converted to the user's units, formatted, with the unit after it."""
    label, factor, scientific = DISPLAY[quantity][system(units)]
    if value is None:
        return "—"
    converted = value * factor
    text = sci_text(converted, digits) if scientific else number(converted, digits)
    return f"{text} {label}"


def check_text(check: Mapping[str, Any], units: str | None = "si") -> str:
    """A check's message in the user's units: the engine writes it in SI and keeps each figure
    it quotes as [text, SI value, quantity, digits] (`figures`); for a US-customary user each is
    replaced by the same value shown as `show_text` shows it (71.0 mm -> 2.80 in). A message
    without figures (one stored before they were kept) is shown as written."""
    message = str(check.get("message") or "")
    if system(units) == "si":
        return message
    for text, value, quantity, digits in check.get("figures") or ():
        if quantity in DISPLAY and value is not None:
            message = message.replace(text, show_text(value, quantity, units, digits))
    return message


def typed(text: str) -> str:
    """A value as typed, printed: the figures typed kept ('1.90 m' stays '1.90 m'), an
    exponent as a power of ten ('1e-9 m/s' -> '1 × 10⁻⁹ m/s'), the unit as a symbol
    ('39.6 cm**2' -> '39.6 cm²'). Text that is not a number and a unit is left alone."""
    match = _TYPED.match(text or "")
    if match is None:
        return text or ""
    mantissa, exponent, unit = match.groups()
    figure = power_of_ten(mantissa, int(exponent)) if exponent else mantissa
    return f"{figure} {unit_symbol(unit or '')}".strip()


def typed_and_shown(
    text: str, value: float | None, quantity: str, units: str | None = "si", digits: int = 3
) -> str:
    """A typed value, then the same in the user's display unit when it was typed in another
    ('15.0 cm (150 mm)'); never the same figure twice ('345 kPa', not '345 kPa (345 kPa)')."""
    shown = typed(text)
    if value is None:
        return shown
    label = unit_label(quantity, units)
    if not shown or shown.endswith(" " + label):
        return shown or show_text(value, quantity, units, digits)
    return f"{shown} ({show_text(value, quantity, units, digits)})"


def at_least_decimals(value: float | None, decimals: int = 2) -> str:
    """A figure stored as a float, with at least `decimals` decimals, as such figures are
    typed and reported (a specific gravity 2.70, not 2.7; common practice, no source)."""
    if value is None or not math.isfinite(value):
        return "—"
    text = repr(float(value))
    if "e" in text:
        return number(value)
    whole, _, fraction = text.partition(".")
    fraction = fraction.rstrip("0")
    return f"{whole}.{fraction.ljust(decimals, '0')}"


def local_time(moment: datetime | None, zone: str = "UTC") -> str:
    """A stored (UTC) time in the laboratory's zone, to the minute, with the zone's name:
    '2026-12-02 14:05 CET'; never microseconds."""
    if moment is None:
        return "—"
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.astimezone(ZoneInfo(zone)).strftime("%Y-%m-%d %H:%M %Z")


_TIMESTAMP = re.compile(r"^\d{4}-\d\d-\d\d[T ]\d\d:\d\d")
# A stored column's unit suffix -> the unit printed after its value.
_COLUMN_UNITS = (
    ("_m_per_s", "m/s"),
    ("_kg_per_m3", "kg/m³"),
    ("_kpa", "kPa"),
    ("_pa", "Pa"),
    ("_m2", "m²"),
    ("_m3", "m³"),
    ("_kg", "kg"),
    ("_pct", "%"),
    ("_c", "°C"),
    ("_m", "m"),
    ("_s", "s"),
)


def column_unit(column: str) -> tuple[str, str]:
    """A column name split into its name and its unit: 'result_k_ref_m_per_s' ->
    ('result_k_ref', 'm/s'); a column without a unit suffix -> (column, '')."""
    for suffix, unit in _COLUMN_UNITS:
        if column.endswith(suffix):
            return column[: -len(suffix)], unit
    return column, ""


def stored_value(text: str | None, unit: str = "", zone: str = "UTC") -> str:
    """A value as the audit log keeps it (text), for reading: numbers rounded to three
    significant figures with their unit ('5.70028840509214e-10', 'm/s' -> '5.70 × 10⁻¹⁰
    m/s'), times in the laboratory's zone to the minute, typed quantities with unit symbols,
    anything else as it is."""
    if text is None or text == "":
        return "—"
    if _TIMESTAMP.match(text):
        try:
            return local_time(datetime.fromisoformat(text), zone)
        except ValueError:
            return text
    try:
        value = float(text)
    except ValueError:
        return typed(text)
    if not math.isfinite(value):
        return text
    figure = sci_text(value) if value != 0 and abs(value) < 1e-2 else number(value)
    return f"{figure} {unit}".strip()
