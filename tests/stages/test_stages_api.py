"""The stages of a flexible-wall test through the JSON API: stored as typed beside SI, the
engine's figures checked against hand calculations from published relations, refusals named
by label with nothing stored, audit rows, and the short path of rigid-wall tests."""

from __future__ import annotations

import math
from typing import Any

import iapws
import pytest
from sqlmodel import col, func, select

from service.audit.models import AuditEvent
from service.stages.example import example_stages
from service.stages.models import TestStage
from tests.stages.conftest import Lab, flexible_test, put_stage

G = 9.80665  # standard gravity, CGPM 1901 (exact by definition)


def _body(stage: str) -> dict[str, Any]:
    return example_stages()[stage].model_dump(mode="json", exclude_none=True)


def _walk(lab: Lab, test_id: int) -> dict[str, Any]:
    answer: dict[str, Any] = {}
    for stage in ("setup", "saturation", "consolidation", "permeation", "post_test"):
        response = put_stage(lab, test_id, stage, _body(stage))
        assert response.status_code == 200, response.text
        answer = response.json()
    return answer


def test_a_whole_flexible_wall_test_keeps_each_stage_as_typed_beside_si(lab: Lab) -> None:
    test_id = flexible_test(lab)
    stages = _walk(lab, test_id)
    assert stages["needs_stages"] is True
    permeation = stages["permeation"]
    first = permeation["typed"]["readings"][1]
    assert first["headwater_pressure"] == "445 kPa"
    assert first["headwater_reading"] == "1.37 mL"
    # 1 kPa = 1000 Pa and 1 mL = 1e-6 m³ (SI Brochure, 9th ed., tables 4 and 8).
    assert permeation["si"]["readings"][1]["headwater_pressure"] == pytest.approx(445_000)
    assert permeation["si"]["readings"][1]["headwater_reading"] == pytest.approx(1.37e-6)
    assert permeation["si"]["readings"][1]["elapsed"] == pytest.approx(4 * 3600)
    assert permeation["recorded_by_id"] == lab.technician.id


def test_saturation_b_is_skempton_du_over_dsigma3(lab: Lab) -> None:
    test_id = flexible_test(lab)
    put_stage(lab, test_id, "setup", _body("setup"))
    answer = put_stage(lab, test_id, "saturation", _body("saturation")).json()
    b_values = [c["b_value"] for c in answer["saturation"]["outcome"]["b_checks"]]
    # Skempton (1954), Géotechnique 4(4): B = Δu/Δσ3; last check 48 kPa over 50 kPa.
    assert b_values[-1] == pytest.approx(48 / 50)
    assert b_values[0] == pytest.approx(31 / 50)
    assert answer["saturation"]["outcome"]["check"]["status"] == "pass"


def test_head_across_the_specimen_is_pressure_head_plus_levels_less_zero_flow(lab: Lab) -> None:
    test_id = flexible_test(lab)
    answer = _walk(lab, test_id)
    first = answer["permeation"]["outcome"]["determinations"][0]
    # Bernoulli's total head at rest: p/(ρw·g) + z. ρw at 20.4 °C from IAPWS-95 (the
    # `iapws` package), levels of burettes numbered from the top: z = -reading/area.
    rho = iapws.IAPWS95(T=273.15 + 20.4, P=0.101325).rho
    z_hw, z_tw = -1.00e-6 / 0.71e-4, -20.00e-6 / 0.95e-4
    zero = (-4.98e-6 / 0.71e-4) - (-6.72e-6 / 0.95e-4)  # equal pressures, specimen bypassed
    expected = 10_000 / (rho * G) + z_hw - z_tw - zero
    assert first["head_initial_m"] == pytest.approx(expected, rel=2e-4)
    # Inflow is the headwater burette's loss, outflow the tailwater's gain (continuity).
    assert first["inflow_volume_m3"] == pytest.approx(0.37e-6, rel=1e-9)
    assert first["outflow_volume_m3"] == pytest.approx(0.36e-6, rel=1e-9)


def test_k_of_an_interval_follows_the_rising_tailwater_equation(lab: Lab) -> None:
    test_id = flexible_test(lab)
    answer = _walk(lab, test_id)
    d = answer["permeation"]["outcome"]["determinations"][0]
    dims = answer["consolidation"]["outcome"]["dimensions"]
    a_in, a_out = 0.71e-4, 0.95e-4
    # ASTM D5084 method C: k = a_in·a_out·L/((a_in + a_out)·A·Δt)·ln(h1/h2) (from memory).
    k = (
        a_in * a_out * dims["length_m"] / ((a_in + a_out) * dims["area_m2"] * 4 * 3600)
    ) * math.log(d["head_initial_m"] / d["head_final_m"])
    assert d["k_m_per_s"] == pytest.approx(k, rel=1e-9)
    statuses = {c["id"]: c["status"] for c in answer["permeation"]["outcome"]["checks"]}
    assert statuses["steady_state"] == "pass"
    assert statuses["flow_ratio"] == "pass"
    assert statuses["saturation"] == "pass"


def test_dimensions_at_permeation_follow_the_isotropic_volume_change(lab: Lab) -> None:
    test_id = flexible_test(lab)
    answer = _walk(lab, test_id)
    outcome = answer["consolidation"]["outcome"]
    assert outcome["end"]["complete"] is True
    # Isotropic small strain: εa = εv/3, H = H0(1 − εa) (Head, Manual of Soil Laboratory
    # Testing, Vol. 3, area correction; from memory). V0 = π·D²·H/4.
    v0 = math.pi * 0.071**2 / 4 * 0.075
    eps_v = 3.10e-6 / v0
    assert outcome["dimensions"]["length_m"] == pytest.approx(0.075 * (1 - eps_v / 3))
    assert outcome["dimensions"]["method"] == "isotropic"
    assert outcome["effective_stress_pa"] == pytest.approx(35_000)


def test_post_test_degree_of_saturation_is_w_gs_over_e(lab: Lab) -> None:
    test_id = flexible_test(lab)
    answer = _walk(lab, test_id)
    outcome = answer["post_test"]["outcome"]
    # Phase relations (Das, Principles of Geotechnical Engineering, ch. 3): w = Mw/Ms,
    # ρd = Ms/V, e = Gs·ρw/ρd − 1, S = w·Gs/e; ρw = 1000 kg/m³.
    w = (0.6070 - 0.4979) / 0.4979
    rho_d = 0.4979 / (math.pi * 0.0708**2 / 4 * 0.0746)
    e = 2.70 * 1000 / rho_d - 1
    assert outcome["water_content"] == pytest.approx(w)
    assert outcome["degree_of_saturation"] == pytest.approx(w * 2.70 / e, rel=1e-6)


def test_each_write_leaves_one_audit_row_in_the_tests_chain(lab: Lab) -> None:
    test_id = flexible_test(lab)
    put_stage(lab, test_id, "setup", _body("setup"))
    row = lab.session.exec(select(TestStage).where(TestStage.test_id == test_id)).one()
    count = lab.session.exec(
        select(func.count())
        .select_from(AuditEvent)
        .where(AuditEvent.entity == "test_stage", AuditEvent.entity_id == row.id)
    ).one()
    assert count == 1
    body = {**_body("setup"), "version": 1}
    body["entries"]["membrane"] = "latex, 0.25 mm"
    assert put_stage(lab, test_id, "setup", body).status_code == 200
    lab.session.commit()  # end the read transaction: see the request's write
    count = lab.session.exec(
        select(func.count())
        .select_from(AuditEvent)
        .where(col(AuditEvent.entity) == "test_stage", AuditEvent.entity_id == row.id)
    ).one()
    assert count == 2


def test_a_bad_unit_is_refused_by_label_and_nothing_is_stored(lab: Lab) -> None:
    test_id = flexible_test(lab)
    _walk(lab, test_id)
    body = _body("permeation")
    body["groups"]["readings"][2]["headwater_pressure"] = "445 mL"
    body["version"] = 1
    response = put_stage(lab, test_id, "permeation", body)
    assert response.status_code == 422
    errors = response.json()["errors"]
    assert errors[0]["label"] == "Permeation · Reading 3 · Headwater pressure"
    assert "kPa" in errors[0]["accepted"]
    stored = lab.client.get(f"/api/v1/tests/{test_id}/stages", headers=lab.as_(lab.technician))
    assert stored.json()["permeation"]["typed"]["readings"][2]["headwater_pressure"] == "445 kPa"


def test_a_head_that_rises_is_refused_naming_the_reading(lab: Lab) -> None:
    test_id = flexible_test(lab)
    _walk(lab, test_id)
    body = {**_body("permeation"), "version": 1}
    body["groups"]["readings"][3]["headwater_reading"] = "1.20 mL"  # level rose: no inflow
    response = put_stage(lab, test_id, "permeation", body)
    assert response.status_code == 422
    assert response.json()["errors"][0]["label"].startswith("Permeation · Reading 4")


def test_a_rigid_wall_test_keeps_its_short_path(lab: Lab) -> None:
    test_id = flexible_test(lab, standard="ASTM D5856", rigid=True)
    response = put_stage(lab, test_id, "setup", _body("setup"))
    assert response.status_code == 409
    read = lab.client.get(f"/api/v1/tests/{test_id}/stages", headers=lab.as_(lab.technician))
    assert read.json()["needs_stages"] is False
    assert read.json()["setup"] is None


def test_a_stale_version_is_refused(lab: Lab) -> None:
    test_id = flexible_test(lab)
    put_stage(lab, test_id, "setup", _body("setup"))
    changed = {**_body("setup"), "version": 1}
    changed["entries"]["membrane"] = "latex, 0.25 mm"
    assert put_stage(lab, test_id, "setup", changed).status_code == 200
    assert put_stage(lab, test_id, "setup", {**_body("setup"), "version": 1}).status_code == 409


def test_clients_may_not_record_and_strangers_see_nothing(lab: Lab) -> None:
    test_id = flexible_test(lab)
    assert put_stage(lab, test_id, "setup", _body("setup"), lab.client_user).status_code == 403
    assert put_stage(lab, test_id, "setup", _body("setup"), lab.stranger).status_code == 404
    got = lab.client.get(f"/api/v1/tests/{test_id}/stages", headers=lab.as_(lab.stranger))
    assert got.status_code == 404


@pytest.mark.parametrize(
    "body",
    [
        {"entries": {"membrane": "x" * 5000}},
        {"entries": {"diameter": "1e308 cm", "length": "7 cm", "wet_mass": "500 g"}},
        {"entries": {"diameter": "nan cm", "length": "7 cm", "wet_mass": "500 g"}},
        {"entries": {"__class__": "7 cm"}},
        {"groups": {"readings": [{"elapsed": "1 s"}]}},
        {"entries": {"diameter": ["7 cm"]}},
    ],
)
def test_hostile_setups_are_refused_not_stored(lab: Lab, body: dict[str, Any]) -> None:
    test_id = flexible_test(lab)
    response = put_stage(lab, test_id, "setup", body)
    assert response.status_code == 422, response.text
    assert lab.session.exec(select(TestStage).where(TestStage.test_id == test_id)).first() is None


def test_too_many_rows_are_refused(lab: Lab) -> None:
    test_id = flexible_test(lab)
    rows = [{"elapsed": f"{j} s", "volume_change": "1 mL"} for j in range(501)]
    body = {"entries": {"cell_pressure": "465 kPa", "back_pressure": "430 kPa"}}
    response = put_stage(lab, test_id, "consolidation", {**body, "groups": {"readings": rows}})
    assert response.status_code == 422
