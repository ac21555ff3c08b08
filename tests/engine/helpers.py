"""Builders of contract-shaped requests for engine tests (the same shape the API takes)."""

from __future__ import annotations

from typing import Any

from service.engine import parse_request, reduce, result_to_dict


def run(payload: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
    """Parse, reduce and render one request, the one public path of the engine."""
    return result_to_dict(reduce(parse_request(payload, **kwargs)))


def check(body: dict[str, Any], check_id: str) -> dict[str, Any]:
    """The check with ``check_id`` in a response body."""
    (found,) = [c for c in body["checks"] if c["id"] == check_id]
    return found


def rel(a: float, b: float) -> float:
    """Relative difference of a from b."""
    return abs(a / b - 1.0)


def cv1(**trial_extra: Any) -> dict[str, Any]:
    """domain-reference CV1: constant head with manometer taps (rigid wall, granular)."""
    return {
        "method": "constant_head",
        "specimen": {
            "length": "20 cm",
            "diameter": "10.16 cm",
            "void_ratio": 0.38 / 0.62,
            "d10": "0.30 mm",
        },
        "apparatus": {"manometer_spacing": "15.0 cm"},
        "trials": [
            {
                "volume": "355 mL",
                "duration": "120 s",
                "head_difference": "4.50 cm",
                "temperature": "23.0 degC",
                **trial_extra,
            }
        ],
    }


def cv2() -> dict[str, Any]:
    """domain-reference CV2: falling head, constant tailwater (Method B)."""
    return {
        "method": "falling_head",
        "specimen": {"length": "11.60 cm", "diameter": "7.10 cm"},
        "apparatus": {"standpipe_diameter": "0.60 cm"},
        "trials": [
            {
                "head_initial": "100.0 cm",
                "head_final": "70.0 cm",
                "duration": "3600 s",
                "temperature": "18.0 degC",
            }
        ],
    }


def cv3() -> dict[str, Any]:
    """domain-reference CV3: falling headwater, rising tailwater, unequal burettes (Method C)."""
    return {
        "method": "falling_head_rising_tail",
        "standard": "ASTM D5084",
        "specimen": {"length": "7.32 cm", "diameter": "7.11 cm"},
        "apparatus": {"headwater_area": "0.710 cm**2", "tailwater_area": "0.950 cm**2"},
        "trials": [
            {
                "head_initial": "125.0 cm",
                "duration": "86400 s",
                "inflow_volume": "9.75 mL",
                "outflow_volume": "9.50 mL",
                "temperature": "21.5 degC",
            }
        ],
    }


CV4_READINGS = [(0, 120.0), (600, 110.7), (1200, 102.0), (1800, 94.1), (2400, 86.8), (3000, 80.0)]


def cv4() -> dict[str, Any]:
    """domain-reference CV4: multi-reading falling head reduced by regression (Method B)."""
    return {
        "method": "falling_head",
        "specimen": {"length": "10.0 cm", "diameter": "5.08 cm"},
        "apparatus": {"standpipe_area": "0.300 cm**2"},
        "trials": [
            {
                "readings": [{"time": f"{t} s", "head": f"{h} cm"} for t, h in CV4_READINGS],
                "temperature": "20.0 degC",
            }
        ],
    }


def constant_rate(
    k_values: list[float],
    standard: str | None = None,
    *,
    temperature: str | None = "20 degC",
    **extra: Any,
) -> dict:
    """Constant-rate trials chosen to give the k values listed (at 20 °C unless told).

    With L = 10 cm, A = 100 cm² and Δh = 100 cm, Darcy's law k = q·L/(A·Δh) gives
    k = 10·q [m/s per m³/s] (hand arithmetic), so each trial pumps q = k/10.
    """
    trials = [{"flow_rate": f"{k / 10!r} m**3/s", "head_difference": "100 cm"} for k in k_values]
    if temperature is not None:
        for trial in trials:
            trial["temperature"] = temperature
    return {
        "method": "constant_rate",
        "standard": standard,
        "specimen": {"length": "10 cm", "area": "100 cm**2"},
        "trials": trials,
        **extra,
    }
