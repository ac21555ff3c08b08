"""POST /api/v1/reductions through HTTP: each method's happy path and every refusal as 422."""

from __future__ import annotations

import math

import pytest

from service.api.reductions import EXAMPLES
from tests.engine.helpers import cv1, cv2, cv3, cv4, rel
from tests.engine.refusal_cases import REFUSALS

URL = "/api/v1/reductions"


@pytest.mark.parametrize("name", list(EXAMPLES))
def test_openapi_examples_reduce(client, name):
    response = client.post(URL, json=EXAMPLES[name]["value"])
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["engine_version"] == "1.1.0"
    assert body["result"]["k_ref_m_per_s"] > 0
    assert all(math.isfinite(t["k_m_per_s"]) and t["k_m_per_s"] > 0 for t in body["trials"])


def test_constant_head_cv1(client):
    # domain-reference CV1: k20 = 1.1320e-1 cm/s (±0.05 %)
    body = client.post(URL, json=cv1()).json()
    assert rel(body["result"]["k_ref_cm_per_s"], 1.1320e-1) < 5e-4


def test_falling_head_cv2(client):
    # domain-reference CV2: k20 = 8.6261e-6 cm/s (±0.05 %)
    body = client.post(URL, json=cv2()).json()
    assert rel(body["result"]["k_ref_cm_per_s"], 8.6261e-6) < 5e-4


def test_rising_tail_cv3(client):
    # domain-reference CV3: k20 = 1.7604e-9 m/s (±0.1 %)
    body = client.post(URL, json=cv3()).json()
    assert rel(body["result"]["k_ref_m_per_s"], 1.7604e-9) < 1e-3


def test_readings_cv4(client):
    # domain-reference CV4: k = 2.0000e-5 cm/s (±0.1 %), r² = 0.999996
    body = client.post(URL, json=cv4()).json()
    assert rel(body["trials"][0]["k_m_per_s"], 2.0e-7) < 1e-3
    assert body["trials"][0]["r_squared"] == pytest.approx(0.999996, abs=1e-6)


def test_constant_rate_pressure_to_head(client):
    # domain-reference §3.4: k = q·L/(A·Δh), Δh = Δu/(ρ_w(T)·g); 1 kPa = 10.215 cm at 20 °C (§9.1)
    payload = {
        "method": "constant_rate",
        "specimen": {"length": "10 cm", "area": "40 cm**2"},
        "trials": [
            {"flow_rate": "1 mL/min", "pressure_difference": "1 kPa", "temperature": "20 degC"}
        ],
    }
    body = client.post(URL, json=payload).json()
    expected = (1e-6 / 60) * 0.10 / (40e-4 * 0.10215)
    assert rel(body["trials"][0]["k_m_per_s"], expected) < 1e-4


def test_contract_response_keys(client):
    body = client.post(URL, json=cv3()).json()
    assert {
        "engine_version",
        "reference_temperature_c",
        "temperature_correction",
        "trials",
        "result",
        "specimen",
        "flow",
        "plausibility",
        "checks",
    } <= set(body)
    assert {
        "k_m_per_s",
        "k_ref_m_per_s",
        "temperature_factor",
        "gradient",
        "flow_ratio",
        "r_squared",
        "u_rel",
    } <= set(body["trials"][0])
    assert {
        "k_ref_m_per_s",
        "trials_used",
        "u_rel",
        "expanded_u_rel",
        "intrinsic_permeability_m2",
    } <= set(body["result"])
    assert {"id", "status", "measured", "limit", "message", "source"} <= set(body["checks"][0])


@pytest.mark.parametrize(
    ("name", "build", "mutate", "loc", "kind"), REFUSALS, ids=[r[0] for r in REFUSALS]
)
def test_refusal_is_422_naming_the_field(client, name, build, mutate, loc, kind):
    payload = build()
    mutate(payload)
    response = client.post(
        URL, content=_dumps(payload), headers={"content-type": "application/json"}
    )
    assert response.status_code == 422, response.text
    detail = response.json()["errors"]
    locs = [tuple(d["loc"]) for d in detail]
    # the pydantic layer names a field the same way, sometimes with a union branch appended
    assert any(got[: len(loc) + 1] == ("body", *loc) for got in locs), detail
    for item in detail:
        assert item["msg"]
        assert item["type"]


def _dumps(payload):
    import json

    return json.dumps(payload, allow_nan=True)


def test_malformed_json_is_422(client):
    response = client.post(URL, content=b"{not json", headers={"content-type": "application/json"})
    assert response.status_code == 422


def test_message_names_value_and_accepted(client):
    payload = cv2()
    payload["trials"][0]["duration"] = "20 C"
    (item,) = client.post(URL, json=payload).json()["errors"]
    assert item["loc"] == ["body", "trials", 0, "duration"]
    assert item["label"] == "Trial 1 · Duration"
    assert item["msg"].startswith("Trial 1 · Duration: ")
    assert item["value"] == "20 C"
    assert item["accepted"].startswith("a duration")


def test_openapi_documents_the_route_with_examples(client):
    spec = client.app.openapi()  # /openapi.json itself needs a sign-in
    operation = spec["paths"]["/api/v1/reductions"]["post"]
    examples = operation["requestBody"]["content"]["application/json"]["examples"]
    assert set(examples) == set(EXAMPLES)
    assert "422" in operation["responses"]


@pytest.mark.parametrize(
    "raw",
    [
        b'{"method": NaN, "trials": []}',
        b'{"method": "constant_head", "trials": [{"volume": Infinity}]}',
    ],
)
def test_non_finite_json_anywhere_is_422_not_500(client, raw):
    response = client.post(URL, content=raw, headers={"content-type": "application/json"})
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"][0] == "body"


# --- engine 1.1 additions through HTTP (reductions-api.md, "Additions in engine 1.1") --------


def test_engine_1_1_fields_are_in_the_response(client):
    payload = dict(cv3(), permeameter="rigid_wall", specification={"k_max": "1e-9 m/s"})
    body = client.post(URL, json=payload).json()
    assert body["rules_version"]
    assert body["permeameter"] == "rigid_wall"
    assert body["result"]["decision_rule"] == "simple"
    assert {"coverage_factor", "effective_degrees_of_freedom"} <= set(body["result"])
    assert "head_term_rel" in body["trials"][0]
    assert {c["id"] for c in body["checks"]} >= {"trend", "head_change", "phase_relations"}
    assert all("limit_confirmed" in c for c in body["checks"])


def test_coverage_factor_through_http(client):
    # four determinations with scatter: k_p = t_95.45(⌊ν_eff⌋) > 2 (GUM G.2b, Table G.2)
    payload = dict(cv3(), saturation=[{"b_value": 0.97}])
    trial = payload["trials"][0]
    durations = ("80000 s", "86400 s", "92000 s", "86400 s")
    payload["trials"] = [
        dict(trial, duration=d, temperature={"value": 21.5, "unit": "degC", "u": 0.1})
        for d in durations
    ]
    result = client.post(URL, json=payload).json()["result"]
    assert 3.0 <= result["effective_degrees_of_freedom"] < 4.0
    assert result["coverage_factor"] == pytest.approx(3.307, abs=1e-3)
    assert result["expanded_u_rel"] == pytest.approx(result["coverage_factor"] * result["u_rel"])


def test_guarded_acceptance_through_http(client):
    payload = dict(cv3(), specification={"k_max": "1.77e-9 m/s", "decision_rule": "guard_band"})
    payload["trials"][0]["temperature"] = {"value": 21.5, "unit": "degC", "u": 0.3}
    body = client.post(URL, json=payload).json()
    (spec,) = [c for c in body["checks"] if c["id"] == "specification"]
    assert spec["status"] == "warn"  # 1.7604e-9 ± 1.4 % straddles 1.77e-9
    assert body["result"]["decision_rule"] == "guard_band"


def test_trend_fails_through_http(client):
    from tests.engine.helpers import constant_rate

    payload = constant_rate([3.6e-9, 3.3e-9, 3.0e-9, 2.7e-9], "ASTM D5084")
    checks = {c["id"]: c["status"] for c in client.post(URL, json=payload).json()["checks"]}
    assert checks["trend"] == "fail"
    assert checks["saturation"] == "fail"  # flexible wall by default under D5084, no B-value


def test_bare_water_content_is_refused_naming_the_field(client):
    payload = cv2()
    payload["specimen"]["water_content"] = 5
    detail = client.post(URL, json=payload).json()["errors"]
    (item,) = [d for d in detail if d["loc"][:3] == ["body", "specimen", "water_content"]]
    assert item["type"] == "missing_unit"
    assert "%" in item["accepted"]


def test_huge_magnitude_is_a_422_not_a_500(client):
    # issue 15: "1e308 m" in a trial once answered 500 "Out of range float values are not JSON
    # compliant"; every figure the engine returns must be finite
    payload = cv2()
    payload["trials"][0]["head_initial"] = "1e308 m"
    response = client.post(URL, json=payload)
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "trials", 0, "head_initial"]
    for field, value in (("duration", "1e9 s"), ("head_final", "1e-9 m")):
        payload = cv2()
        payload["trials"][0][field] = value
        response = client.post(URL, json=payload)
        assert response.status_code in (200, 422), response.text
        if response.status_code == 200:
            _assert_all_finite(response.json())


def _assert_all_finite(value):
    if isinstance(value, float):
        assert math.isfinite(value)
    elif isinstance(value, dict):
        for item in value.values():
            _assert_all_finite(item)
    elif isinstance(value, list):
        for item in value:
            _assert_all_finite(item)
