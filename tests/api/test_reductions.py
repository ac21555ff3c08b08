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
    assert body["engine_version"] == "1.0.0"
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
    assert {"id", "status", "measured", "limit", "message", "source"} == set(body["checks"][0])


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
    spec = client.get("/openapi.json").json()
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
