"""Quantity parsing and unit conversions, checked against exact published factors.

Factors: NIST SP 811 (2008), Appendix B (the 1959 international yard and pound: 1 in =
0.0254 m, 1 lb = 0.45359237 kg exactly; 1 US gallon = 231 in³; 1 psi = 6894.757 Pa;
1 darcy = 9.869233e-13 m²), from memory; SI prefixes and the minute, hour and day by
definition.
"""

from __future__ import annotations

import pytest

from service.engine import units
from service.engine.errors import EngineInputError
from tests.engine.helpers import constant_rate, run

LOC = ("specimen", "length")
INCH = 0.0254
POUND = 0.45359237


@pytest.mark.parametrize(
    ("text", "kind", "si"),
    [
        ("12.5 cm", units.LENGTH, 0.125),
        ("4.9 in", units.LENGTH, 4.9 * INCH),
        ("2 ft", units.LENGTH, 2 * 12 * INCH),
        ("355 mL", units.VOLUME, 355e-6),
        ("21.7 in**3", units.VOLUME, 21.7 * INCH**3),
        ("1.3 gallon", units.VOLUME, 1.3 * 231 * INCH**3),
        ("2.4 lb", units.MASS, 2.4 * POUND),
        ("5 min", units.DURATION, 300.0),
        ("1.5 day", units.DURATION, 1.5 * 86400),
        ("12 kPa", units.PRESSURE, 12e3),
        ("1.7 psi", units.PRESSURE, 1.7 * 6894.757),
        ("0.5 mL/min", units.FLOW_RATE, 0.5e-6 / 60),
        ("0.283 cm²", units.AREA, 0.283e-4),
        ("104.9 lb/ft**3", units.DENSITY, 104.9 * POUND / (12 * INCH) ** 3),
        ("1e-7 cm/s", units.CONDUCTIVITY, 1e-9),
        ("1.002 cP", units.VISCOSITY, 1.002e-3),
    ],
)
def test_conversion_matches_published_factor(text, kind, si):
    value, u = units.parse_quantity(text, kind, LOC)
    tolerance = 1e-7 if "psi" in text else 1e-12  # NIST lists psi to 7 figures
    assert value == pytest.approx(si, rel=tolerance)
    assert u is None


@pytest.mark.parametrize(
    ("text", "celsius"),
    [("21.5 degC", 21.5), ("21.5 °C", 21.5), ("70.7 degF", 21.5), ("294.65 K", 21.5)],
)
def test_temperatures(text, celsius):
    # t/°C = (t/°F − 32)·5/9 and T/K − 273.15 (NIST SP 811 App. B.9)
    value, _ = units.parse_quantity(text, units.TEMPERATURE, LOC, positive=False)
    assert value == pytest.approx(celsius, abs=1e-9)


def test_percent_is_a_fraction_and_needs_its_sign():
    # engine 1.1 contract: "18.5 %" or {"value": 0.185, "unit": ""}; a bare number is refused
    got = units.parse_quantity("18.5 %", units.FRACTION, LOC, positive=False)[0]
    assert got == pytest.approx(0.185)
    fraction = {"value": 0.185, "unit": ""}
    assert units.parse_quantity(fraction, units.FRACTION, LOC, positive=False)[0] == 0.185
    for bare in (5, 0.185, "5", {"value": 5}):
        with pytest.raises(EngineInputError) as info:
            units.parse_quantity(bare, units.FRACTION, LOC, positive=False)
        assert info.value.kind == "missing_unit"


def test_object_form_with_uncertainty():
    value, u = units.parse_quantity({"value": 12.5, "unit": "mm", "u": 0.05}, units.LENGTH, LOC)
    assert value == pytest.approx(0.0125)
    assert u == pytest.approx(5e-5)


def test_temperature_uncertainty_is_a_difference():
    # an uncertainty of 0.54 °F is 0.3 K (a °F interval is 5/9 K), never an absolute temperature
    _, u = units.parse_quantity(
        {"value": 70, "unit": "degF", "u": 0.54}, units.TEMPERATURE, LOC, positive=False
    )
    assert u == pytest.approx(0.3)
    assert units.parse_uncertainty("0.3 degC", units.TEMPERATURE, LOC) == pytest.approx(0.3)


def test_k_reported_in_every_unit():
    # 1 cm/s = 0.01 m/s; 1 m/day = 1/86400 m/s; 1 ft/day = 0.3048/86400 m/s; 1 D = 9.869233e-13
    # m² (NIST SP 811 App. B); k = 1.234e-6 m/s from constant-rate trials at 20 °C
    result = run(constant_rate([1.234e-6]))["result"]
    k = result["k_ref_m_per_s"]
    assert k == pytest.approx(1.234e-6, rel=1e-12)
    assert result["k_ref_cm_per_s"] == pytest.approx(k * 100, rel=1e-12)
    assert result["k_ref_m_per_day"] == pytest.approx(k * 86400, rel=1e-12)
    assert result["k_ref_ft_per_day"] == pytest.approx(k * 86400 / (12 * INCH), rel=1e-12)
    darcy = result["intrinsic_permeability_m2"] / 9.869233e-13
    assert result["intrinsic_permeability_darcy"] == pytest.approx(darcy, rel=1e-7)


def test_pressure_head_per_kpa_at_20c():
    # domain-reference §9.1: 1 kPa -> 10.215 cm at 20 °C (10.197 cm with ρ = 1000), through a
    # constant-rate reduction whose k = q·L/(A·Δh) reveals the head (q = 1e-10 m³/s, L = 10 cm,
    # A = 100 cm²: Δh = 1e-9·0.1/(0.01·k))
    payload = constant_rate([1e-9])
    payload["trials"][0].pop("head_difference")
    payload["trials"][0]["pressure_difference"] = "1 kPa"
    k = run(payload)["trials"][0]["k_m_per_s"]
    assert 1e-10 * 0.1 / (0.01 * k) * 100 == pytest.approx(10.215, abs=5e-4)
    payload["options"] = {"water_density": "nominal"}
    k = run(payload)["trials"][0]["k_m_per_s"]
    assert 1e-10 * 0.1 / (0.01 * k) * 100 == pytest.approx(10.197, abs=5e-4)


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
        # issue 15: "1e308 m" in a stored trial once reached JSON as a non-finite figure
        ("1e308 m", units.LENGTH, "too large for any permeability test"),
        ("1e-300 m", units.LENGTH, "too small for any permeability test"),
        ({"value": 1, "unit": "cm", "u": 1e300}, units.LENGTH, "too large"),
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
