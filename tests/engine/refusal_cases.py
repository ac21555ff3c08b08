"""Refusal cases shared by the engine and API tests: (name, mutate(payload), expected loc, kind)."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from tests.engine.helpers import cv1, cv2, cv3, cv4


def _set(path: tuple, value: Any) -> Callable[[dict], None]:
    def mutate(payload: dict) -> None:
        node = payload
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = value

    return mutate


def _del(path: tuple) -> Callable[[dict], None]:
    def mutate(payload: dict) -> None:
        node = payload
        for key in path[:-1]:
            node = node[key]
        del node[path[-1]]

    return mutate


REFUSALS: list[tuple[str, Callable[[], dict], Callable[[dict], None], tuple, str]] = [
    (
        "wrong dimension",
        cv1,
        _set(("trials", 0, "duration"), "20 cm"),
        ("trials", 0, "duration"),
        "wrong_dimension",
    ),
    (
        "coulomb for celsius",
        cv1,
        _set(("trials", 0, "temperature"), "20 C"),
        ("trials", 0, "temperature"),
        "wrong_dimension",
    ),
    (
        "non-finite",
        cv1,
        _set(("trials", 0, "volume"), {"value": float("nan"), "unit": "mL"}),
        ("trials", 0, "volume"),
        "not_finite",
    ),
    (
        "zero duration",
        cv1,
        _set(("trials", 0, "duration"), "0 s"),
        ("trials", 0, "duration"),
        "not_positive",
    ),
    (
        "negative length",
        cv1,
        _set(("specimen", "length"), "-5 cm"),
        ("specimen", "length"),
        "not_positive",
    ),
    (
        "negative area",
        cv2,
        _set(("apparatus", "standpipe_diameter"), "-0.6 cm"),
        ("apparatus", "standpipe_diameter"),
        "not_positive",
    ),
    (
        "zero mass",
        cv1,
        _set(("specimen", "wet_mass"), "0 g"),
        ("specimen", "wet_mass"),
        "not_positive",
    ),
    (
        "number without unit",
        cv1,
        _set(("specimen", "diameter"), 10.16),
        ("specimen", "diameter"),
        "missing_unit",
    ),
    (
        "head did not fall",
        cv2,
        _set(("trials", 0, "head_final"), "100.0 cm"),
        ("trials", 0, "head_final"),
        "impossible_test",
    ),
    (
        "head rose",
        cv2,
        _set(("trials", 0, "head_final"), "120.0 cm"),
        ("trials", 0, "head_final"),
        "impossible_test",
    ),
    (
        "readings rise",
        cv4,
        _set(("trials", 0, "readings", 3, "head"), "104 cm"),
        ("trials", 0, "readings", 3, "head"),
        "impossible_test",
    ),
    (
        "readings times not increasing",
        cv4,
        _set(("trials", 0, "readings", 2, "time"), "600 s"),
        ("trials", 0, "readings", 2, "time"),
        "impossible_test",
    ),
    (
        "one reading",
        cv4,
        lambda p: p["trials"][0].update(readings=p["trials"][0]["readings"][:1]),
        ("trials", 0, "readings"),
        "too_few_readings",
    ),
    (
        "readings do not fall",
        cv4,
        lambda p: p["trials"][0].update(
            readings=[{"time": "0 s", "head": "1 m"}, {"time": "1 s", "head": "1 m"}]
        ),
        ("trials", 0, "readings", 1, "head"),
        "impossible_test",
    ),
    (
        "volumes exceed head",
        cv3,
        _set(("trials", 0, "inflow_volume"), "200 mL"),
        ("trials", 0, "inflow_volume"),
        "impossible_test",
    ),
    ("unknown method", cv1, _set(("method",), "constant_pressure"), ("method",), "bad_choice"),
    ("unknown standard", cv1, _set(("standard",), "ASTM D9999"), ("standard",), "bad_choice"),
    (
        "field of another method",
        cv1,
        _set(("trials", 0, "head_initial"), "10 cm"),
        ("trials", 0, "head_initial"),
        "unknown_field",
    ),
    (
        "missing duration",
        cv1,
        _del(("trials", 0, "duration")),
        ("trials", 0, "duration"),
        "missing",
    ),
    ("missing volume", cv1, _del(("trials", 0, "volume")), ("trials", 0, "volume"), "missing"),
    (
        "volume and mass",
        cv1,
        _set(("trials", 0, "water_mass"), "355 g"),
        ("trials", 0, "water_mass"),
        "ambiguous",
    ),
    (
        "missing standpipe",
        cv2,
        _del(("apparatus", "standpipe_diameter")),
        ("apparatus", "standpipe_area"),
        "missing",
    ),
    (
        "missing tailwater area",
        cv3,
        _del(("apparatus", "tailwater_area")),
        ("apparatus", "tailwater_area"),
        "missing",
    ),
    ("missing diameter", cv2, _del(("specimen", "diameter")), ("specimen", "diameter"), "missing"),
    (
        "diameter and area",
        cv2,
        _set(("specimen", "area"), "39.6 cm**2"),
        ("specimen", "area"),
        "ambiguous",
    ),
    (
        "temperature out of range",
        cv2,
        _set(("trials", 0, "temperature"), "80 degC"),
        ("trials", 0, "temperature"),
        "out_of_range",
    ),
    (
        "astm formula below 10 C",
        cv2,
        lambda p: (
            p.update(options={"temperature_correction": "astm_d5084"}),
            p["trials"][0].update(temperature="5 degC"),
        ),
        ("trials", 0, "temperature"),
        "out_of_range",
    ),
    (
        "astm formula other reference",
        cv2,
        _set(
            ("options",),
            {"temperature_correction": "astm_d5084", "reference_temperature": "10 degC"},
        ),
        ("options", "temperature_correction"),
        "incompatible_options",
    ),
    ("no trials", cv1, _set(("trials",), []), ("trials",), "missing"),
    (
        "bad b-value",
        cv3,
        _set(("saturation",), [{"b_value": 1.5}]),
        ("saturation", 0, "b_value"),
        "out_of_range",
    ),
    (
        "bad specification",
        cv3,
        _set(("specification",), {"k_max": "1e-9 kg"}),
        ("specification", "k_max"),
        "wrong_dimension",
    ),
    (
        "impossible specimen",
        cv2,
        lambda p: p["specimen"].update(
            wet_mass="2000 g", water_content="1 %", specific_gravity=2.65
        ),
        ("specimen", "wet_mass"),
        "impossible_test",
    ),
    (
        "water content above 1000 %",
        cv2,
        _set(("specimen", "water_content"), "2240 %"),
        ("specimen", "water_content"),
        "out_of_range",
    ),
    # engine 1.1: a bare number is never read as a percentage (issue 11: 5 became 500 %)
    (
        "water content without percent",
        cv2,
        _set(("specimen", "water_content"), 5),
        ("specimen", "water_content"),
        "missing_unit",
    ),
    (
        "retained fraction without percent",
        cv2,
        _set(("specimen", "retained_on_lower_sieve"), "40"),
        ("specimen", "retained_on_lower_sieve"),
        "missing_unit",
    ),
    # engine 1.1: the manometer ports cannot be further apart than the specimen is long
    (
        "manometer spacing longer than the specimen",
        cv1,
        _set(("apparatus", "manometer_spacing"), "25 cm"),
        ("apparatus", "manometer_spacing"),
        "out_of_range",
    ),
    # issue 15: a magnitude no test has ("1e308 m") is refused, never a non-finite figure
    (
        "implausible head",
        cv2,
        _set(("trials", 0, "head_initial"), "1e308 m"),
        ("trials", 0, "head_initial"),
        "out_of_range",
    ),
    (
        "implausible duration",
        cv1,
        _set(("trials", 0, "duration"), "1e-30 s"),
        ("trials", 0, "duration"),
        "out_of_range",
    ),
    (
        "stated viscosity with the ASTM formula",
        cv2,
        _set(("options",), {"temperature_correction": "astm_d5084", "viscosity": "1.002 cP"}),
        ("options", "viscosity"),
        "incompatible_options",
    ),
    (
        "unknown decision rule",
        cv3,
        _set(("specification",), {"k_max": "1e-9 m/s", "decision_rule": "shared_risk"}),
        ("specification", "decision_rule"),
        "bad_choice",
    ),
    ("unknown permeameter", cv3, _set(("permeameter",), "steel"), ("permeameter",), "bad_choice"),
    ("unknown top-level field", cv1, _set(("notes",), "hello"), ("notes",), "unknown_field"),
]
