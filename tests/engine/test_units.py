"""Quantity parsing and unit conversions, checked against pint's own definitions."""

from __future__ import annotations

import pytest

from service.engine import units
from service.engine.conversions import DARCY_M2, k_to_cm_per_s, k_to_ft_per_day, k_to_m_per_day
from service.engine.errors import EngineInputError

LOC = ("specimen", "length")


@pytest.mark.parametrize(
    ("text", "kind", "unit"),
    [
        ("12.5 cm", units.LENGTH, "m"),
        ("4.9 in", units.LENGTH, "m"),
        ("2 ft", units.LENGTH, "m"),
        ("355 mL", units.VOLUME, "m**3"),
        ("21.7 in**3", units.VOLUME, "m**3"),
        ("1.3 gallon", units.VOLUME, "m**3"),
        ("2.4 lb", units.MASS, "kg"),
        ("5 min", units.DURATION, "s"),
        ("1.5 day", units.DURATION, "s"),
        ("12 kPa", units.PRESSURE, "Pa"),
        ("1.7 psi", units.PRESSURE, "Pa"),
        ("0.5 mL/min", units.FLOW_RATE, "m**3/s"),
        ("0.283 cm²", units.AREA, "m**2"),
        ("104.9 lb/ft**3", units.DENSITY, "kg/m**3"),
        ("1e-7 cm/s", units.CONDUCTIVITY, "m/s"),
        ("1.002 cP", units.VISCOSITY, "Pa*s"),
    ],
)
def test_conversion_matches_pint(text, kind, unit):
    # pint 0.25 definitions are the reference for every factor
    value, u = units.parse_quantity(text, kind, LOC)
    assert value == pytest.approx(units.ureg.Quantity(text).to(unit).magnitude, rel=1e-12)
    assert u is None


@pytest.mark.parametrize(
    ("text", "celsius"),
    [("21.5 degC", 21.5), ("21.5 °C", 21.5), ("70.7 degF", 21.5), ("294.65 K", 21.5)],
)
def test_temperatures(text, celsius):
    # pint: degF = 5/9 K with offset 459.67 °R; K offset 273.15
    value, _ = units.parse_quantity(text, units.TEMPERATURE, LOC, positive=False)
    assert value == pytest.approx(celsius, abs=1e-9)


def test_percent_is_a_fraction():
    # pint defines percent = 0.01
    assert units.parse_quantity("18.5 %", units.FRACTION, LOC, positive=False)[0] == pytest.approx(
        0.185
    )
    assert units.parse_quantity(0.185, units.FRACTION, LOC, positive=False)[0] == 0.185


def test_object_form_with_uncertainty():
    value, u = units.parse_quantity({"value": 12.5, "unit": "mm", "u": 0.05}, units.LENGTH, LOC)
    assert value == pytest.approx(0.0125)
    assert u == pytest.approx(5e-5)


def test_temperature_uncertainty_is_a_difference():
    # an uncertainty of 0.54 °F is 0.3 K, never an absolute temperature
    _, u = units.parse_quantity(
        {"value": 70, "unit": "degF", "u": 0.54}, units.TEMPERATURE, LOC, positive=False
    )
    assert u == pytest.approx(0.3)
    assert units.parse_uncertainty("0.3 degC", units.TEMPERATURE, LOC) == pytest.approx(0.3)


def test_k_output_units_match_pint():
    # pint definitions of cm/s, m/day, ft/day
    k = 1.234e-6
    q = units.ureg.Quantity(k, "m/s")
    assert k_to_cm_per_s(k) == pytest.approx(q.to("cm/s").magnitude, rel=1e-12)
    assert k_to_m_per_day(k) == pytest.approx(q.to("m/day").magnitude, rel=1e-12)
    assert k_to_ft_per_day(k) == pytest.approx(q.to("ft/day").magnitude, rel=1e-12)


def test_darcy_matches_pint():
    # pint defines darcy; domain-reference §9.3 gives 9.869233e-13 m²
    assert units.ureg.Quantity(1, "darcy").to("m**2").magnitude == pytest.approx(DARCY_M2, rel=1e-6)


def test_pressure_head_per_kpa_at_20c():
    # domain-reference §9.1: 1 kPa -> 10.215 cm at 20 °C (10.197 cm with ρ = 1000)
    from service.engine.reductions import head_from_pressure
    from service.engine.water import STANDARD_GRAVITY, density_tanaka

    assert head_from_pressure(1000, density_tanaka(20) * STANDARD_GRAVITY) * 100 == pytest.approx(
        10.215, abs=5e-4
    )
    assert head_from_pressure(1000, 1000 * STANDARD_GRAVITY) * 100 == pytest.approx(
        10.197, abs=5e-4
    )


@pytest.mark.parametrize(
    ("raw", "kind", "fragment"),
    [
        ("20 C", units.TEMPERATURE, "write 'degC'"),
        ("70 F", units.TEMPERATURE, "write 'degF'"),
        ("12.5 kg", units.LENGTH, "is not a length"),
        ("12.5", units.LENGTH, "is not a length"),
        (12.5, units.LENGTH, "without a unit"),
        ("12,5 cm", units.LENGTH, "decimal comma"),
        ("nan cm", units.LENGTH, "not a finite number"),
        ("1e999 cm", units.LENGTH, "not a finite number"),
        ({"value": float("inf"), "unit": "cm"}, units.LENGTH, "not a finite number"),
        ("-3 cm", units.LENGTH, "greater than zero"),
        ("0 s", units.DURATION, "greater than zero"),
        ("12 furlongz", units.LENGTH, "unknown unit"),
        ("10 m**999", units.AREA, "not one the registry understands"),
        ("cm", units.LENGTH, "does not start with a number"),
        (True, units.LENGTH, "is not a quantity"),
        ([1, "cm"], units.LENGTH, "is not a quantity"),
        ({"value": 1, "unit": "cm", "tolerance": 1}, units.LENGTH, "unknown keys"),
        ({"value": "abc", "unit": "cm"}, units.LENGTH, "is not a number"),
        ({"value": 1, "unit": "cm", "u": -1}, units.LENGTH, "not a valid uncertainty"),
    ],
)
def test_refusals_name_field_value_and_accepted(raw, kind, fragment):
    with pytest.raises(EngineInputError) as info:
        units.parse_quantity(raw, kind, LOC)
    problem = info.value.problems[0]
    assert fragment in problem.msg
    assert problem.loc[:2] == LOC
    assert "accepted:" in problem.msg
    assert problem.msg.startswith("specimen.length")


def test_huge_power_is_refused_quickly():
    # the number is read by Python; an exponent tower in the unit text is refused, not computed
    with pytest.raises(EngineInputError):
        units.parse_quantity("2 m**9**9**9", units.LENGTH, LOC)
