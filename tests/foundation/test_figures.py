"""The one formatter: how figures and units are printed on pages and certificates.

Typography throughout is common practice, no source: a power of ten written with the
multiplication sign and a superscript exponent, unit powers as superscripts, the degree
sign for Celsius and Fahrenheit, the middle dot for a product of units, and a measured value
shown with the figures it was typed with. Conversion factors are exact definitions
(international foot and pound, 1959; 1 day = 86 400 s)."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from service.figures import (
    at_least_decimals,
    local_time,
    number,
    sci_text,
    show_text,
    stored_value,
    typed,
    typed_and_shown,
    unit_symbol,
)


@pytest.mark.parametrize(
    ("value", "expected"),
    [
        (5.70028840509214e-10, "5.70 × 10⁻¹⁰"),
        (1e-9, "1.00 × 10⁻⁹"),
        (9.996e-8, "1.00 × 10⁻⁷"),  # rounding carries into the exponent
        (-2.5e-5, "-2.50 × 10⁻⁵"),
        (3.2e7, "3.20 × 10⁷"),
        (0.05, "0.05"),
        (0, "0"),
        (None, "—"),
        (float("nan"), "—"),
    ],
)
def test_scientific_notation_has_a_times_sign_and_superscript(
    value: float | None, expected: str
) -> None:
    # Common practice, no source.
    assert sci_text(value) == expected


@pytest.mark.parametrize("value", [1e-9, 2.3e-12, 4.4e8, 1.2e-15])
def test_no_e_notation_ever(value: float) -> None:
    # Common practice, no source: "1e-9" and "1e-09" are programmers' notation.
    for text in (sci_text(value), number(value), show_text(value, "k")):
        assert "e-" not in text
        assert "e+" not in text


@pytest.mark.parametrize(
    ("unit", "expected"),
    [
        ("cm**2", "cm²"),
        ("g/cm**3", "g/cm³"),
        ("lb/ft**3", "lb/ft³"),
        ("kN/m**3", "kN/m³"),
        ("m^2", "m²"),
        ("kg/m3", "kg/m³"),
        ("degC", "°C"),
        ("degF", "°F"),
        ("mPa*s", "mPa·s"),
        ("m**3/s", "m³/s"),
        ("mL/min", "mL/min"),
        ("m**-1", "m⁻¹"),
    ],
)
def test_unit_symbols_use_superscripts(unit: str, expected: str) -> None:
    # Common practice, no source.
    assert unit_symbol(unit) == expected


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("2.70", "2.70"),  # Gs keeps its trailing zero
        ("1.90 m", "1.90 m"),  # a depth keeps its second decimal
        ("7.10 cm", "7.10 cm"),
        ("39.6 cm**2", "39.6 cm²"),
        ("1.68 g/cm**3", "1.68 g/cm³"),
        ("1e-9 m/s", "1 × 10⁻⁹ m/s"),
        ("5.70e-10 m/s", "5.70 × 10⁻¹⁰ m/s"),
        ("21.5 degC", "21.5 °C"),
        ("de-aired tap water", "de-aired tap water"),
    ],
)
def test_typed_values_keep_the_figures_typed(text: str, expected: str) -> None:
    # Common practice, no source: a measured value is reported to the resolution it was read.
    assert typed(text) == expected


@pytest.mark.parametrize(
    ("value", "quantity", "units", "expected"),
    [
        (5.7e-10, "k", "si", "5.70 × 10⁻¹⁰ m/s"),
        # 5.7e-10 m/s × 86 400 s/day ÷ 0.3048 m/ft = 1.6157e-4 ft/day (exact factors)
        (5.7e-10, "k", "us", "1.62 × 10⁻⁴ ft/day"),
        (1680.0, "density", "si", "1680 kg/m³"),
        # 1680 kg/m³ × 0.3048³ m³/ft³ ÷ 0.45359237 kg/lb = 104.88 lb/ft³
        (1680.0, "density", "us", "105 lb/ft³"),
        (345.0, "pressure", "si", "345 kPa"),
        # 345 kPa ÷ 6.894757 kPa/psi = 50.04 psi
        (345.0, "pressure", "us", "50 psi"),
    ],
)
def test_figures_shown_in_the_users_units(
    value: float, quantity: str, units: str, expected: str
) -> None:
    assert show_text(value, quantity, units) == expected


@pytest.mark.parametrize(
    ("text", "value", "quantity", "units", "expected"),
    [
        ("345 kPa", 345.0, "pressure", "si", "345 kPa"),  # never "345 kPa (345 kPa)"
        # 15.0 cm = 150 mm
        ("15.0 cm", 0.15, "small_length", "si", "15.0 cm (150 mm)"),
        # 345 kPa ÷ 6.894757 kPa/psi = 50.04 psi
        ("345 kPa", 345.0, "pressure", "us", "345 kPa (50 psi)"),
    ],
)
def test_a_typed_value_is_not_repeated_in_the_same_unit(
    text: str, value: float, quantity: str, units: str, expected: str
) -> None:
    assert typed_and_shown(text, value, quantity, units) == expected


@pytest.mark.parametrize(
    ("value", "expected"), [(2.7, "2.70"), (2.715, "2.715"), (3.0, "3.00"), (None, "—")]
)
def test_specific_gravity_keeps_two_decimals(value: float | None, expected: str) -> None:
    # Common practice, no source: Gs is reported to two decimals at least (2.70).
    assert at_least_decimals(value) == expected


@pytest.mark.parametrize(
    ("text", "unit", "expected"),
    [
        ("5.70028840509214e-10", "m/s", "5.70 × 10⁻¹⁰ m/s"),
        ("345.0", "kPa", "345 kPa"),
        ("1.1.0", "", "1.1.0"),  # a version, not a number and a unit
        ("falling_head", "", "falling_head"),
        (None, "", "—"),
    ],
)
def test_audited_values_are_rounded_with_units(text: str | None, unit: str, expected: str) -> None:
    # Common practice, no source: three significant figures for a logged figure.
    assert stored_value(text, unit) == expected


def test_times_are_shown_in_the_lab_zone_to_the_minute() -> None:
    # Asia/Kolkata is UTC+05:30 with no daylight saving (IANA tz database).
    moment = datetime(2026, 12, 2, 13, 54, 43, 748148, tzinfo=UTC)
    assert local_time(moment, "Asia/Kolkata") == "2026-12-02 19:24 IST"
    assert stored_value(moment.isoformat(), zone="UTC") == "2026-12-02 13:54 UTC"
