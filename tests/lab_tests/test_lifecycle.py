"""The test lifecycle through the JSON API: request, specimen, trials, submit, approve, send
back, correction, recomputation, and every refusal on the way.

Reference figures are the check values of /work/shared/reference/domain-reference.md §10
(CV1, CV2, CV4, CV8), computed there with IAPWS 2008 viscosity."""

from __future__ import annotations

import hashlib
import json
import math
from datetime import date, timedelta
from typing import Any

import pytest
from sqlmodel import select

from service.audit.models import AuditEvent
from service.audit.service import decode_changes, history
from service.common import ApparatusKind
from service.engine import ENGINE_VERSION
from service.idempotency.models import IdempotencyRecord
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest, Reading, Trial
from service.signoffs.models import SignOff
from tests.lab_tests.conftest import PASSWORD, Lab, make_apparatus

# CV2 — falling head, constant tailwater: standpipe bore 0.60 cm (a = 0.282743 cm²),
# D = 7.10 cm, L = 11.60 cm, h1 = 100.0 cm, h2 = 70.0 cm, Δt = 3600 s, T = 18.0 °C
# → k20 = 8.6261e-6 cm/s = 8.6261e-8 m/s (±0.05 %), domain-reference §10 CV2.
CV2_SPECIMEN = {"diameter": "7.10 cm", "length": "11.60 cm"}
CV2_TRIAL = {
    "head_initial": "100.0 cm",
    "head_final": "70.0 cm",
    "duration": "3600 s",
    "temperature": "18.0 degC",
}
CV2_K20 = 8.6261e-8


def _close(value: float, expected: float, rel: float) -> bool:
    return math.isclose(value, expected, rel_tol=rel)


def _sha256(value: Any) -> str:
    return hashlib.sha256(
        json.dumps(value, sort_keys=True, separators=(",", ":")).encode()
    ).hexdigest()


def request_falling_head(
    lab: Lab,
    *,
    technician: Any = None,
    thermometer: dict[str, Any] | None = None,
    **fields: Any,
) -> int:
    """A CV2 falling-head test requested by the manager, assigned with its permeameter."""
    items = [
        make_apparatus(
            lab.session,
            ApparatusKind.RIGID_WALL_PERMEAMETER,
            standpipe_area_text="0.282743 cm**2",
            standpipe_area_m2=2.82743e-5,
        )
    ]
    if thermometer is not None:
        items.append(make_apparatus(lab.session, ApparatusKind.THERMOMETER, **thermometer))
    lab.session.commit()
    body = {
        "method": "falling_head",
        "technician_id": (technician or lab.technician).id,
        "apparatus_ids": [item.id for item in items],
        **fields,
    }
    response = lab.client.post(
        f"/api/v1/samples/{lab.sample.id}/tests", json=body, headers=lab.as_(lab.manager)
    )
    assert response.status_code == 201, response.text
    return int(response.json()["id"])


def record_specimen(lab: Lab, test_id: int, user: Any = None, **fields: Any) -> Any:
    return lab.client.patch(
        f"/api/v1/tests/{test_id}/specimen",
        json={**CV2_SPECIMEN, **fields},
        headers=lab.as_(user or lab.technician),
    )


def post_trial(lab: Lab, test_id: int, body: dict[str, Any], key: str, user: Any = None) -> Any:
    return lab.client.post(
        f"/api/v1/tests/{test_id}/trials",
        json=body,
        headers={**lab.as_(user or lab.technician), "Idempotency-Key": key},
    )


def sign(lab: Lab, test_id: int, action: str, user: Any, password: str = PASSWORD) -> Any:
    return lab.client.post(
        f"/api/v1/tests/{test_id}/{action}", json={"password": password}, headers=lab.as_(user)
    )


def submitted_cv2(lab: Lab, **fields: Any) -> int:
    test_id = request_falling_head(lab, **fields)
    assert record_specimen(lab, test_id).status_code == 200
    assert post_trial(lab, test_id, CV2_TRIAL, "cv2-1").status_code == 201
    response = sign(lab, test_id, "submit", lab.technician)
    assert response.status_code == 200, response.text
    return test_id


def approved_cv2(lab: Lab) -> int:
    test_id = submitted_cv2(lab)
    response = sign(lab, test_id, "approve", lab.reviewer)
    assert response.status_code == 200, response.text
    return test_id


def read(lab: Lab, test_id: int, user: Any = None) -> dict[str, Any]:
    response = lab.client.get(f"/api/v1/tests/{test_id}", headers=lab.as_(user or lab.manager))
    assert response.status_code == 200, response.text
    return dict(response.json())


# --- the whole lifecycle ------------------------------------------------------------------------


def test_whole_lifecycle_stores_the_reduction_and_both_sign_offs(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    planned = read(lab, test_id)
    assert planned["state"] == "planned"
    # Inherited from the project and the sample when not overridden.
    assert planned["spec_k_max_text"] == "1e-7 m/s"
    assert planned["due_date"] == "2026-11-20"
    assert planned["reference_temperature_c"] == 20.0

    specimen = record_specimen(lab, test_id)
    assert specimen.status_code == 200, specimen.text
    assert specimen.json()["diameter_text"] == "7.10 cm"
    assert math.isclose(specimen.json()["diameter_m"], 0.071)
    assert read(lab, test_id)["state"] == "running"

    written = post_trial(lab, test_id, CV2_TRIAL, "cv2-1")
    assert written.status_code == 201, written.text
    live = written.json()["reduction"]
    assert _close(live["trials"][0]["k_ref_m_per_s"], CV2_K20, 5e-4)  # CV2, ±0.05 %
    assert written.json()["trial"]["entries"] == CV2_TRIAL  # kept exactly as typed
    assert math.isclose(written.json()["trial"]["head_final_m"], 0.70)

    submitted = sign(lab, test_id, "submit", lab.technician)
    assert submitted.status_code == 200, submitted.text
    body = submitted.json()
    assert body["state"] == "submitted"
    assert _close(body["result_k_ref_m_per_s"], CV2_K20, 5e-4)  # CV2
    assert _close(body["trials"][0]["k_ref_m_per_s"], CV2_K20, 5e-4)
    assert _close(body["trials"][0]["gradient"], 100.0 / 11.6, 1e-6)  # i = h1/L, CV2 "8.62"
    assert body["engine_version"] == ENGINE_VERSION
    assert len(body["input_hash"]) == 64

    approved = sign(lab, test_id, "approve", lab.reviewer)
    assert approved.status_code == 200, approved.text
    final = read(lab, test_id)
    assert final["state"] == "approved"
    assert final["reviewer_id"] == lab.reviewer.id
    meanings = [(s["meaning"], s["user_id"]) for s in final["sign_offs"]]
    assert meanings == [("performed", lab.technician.id), ("approved", lab.reviewer.id)]
    # Each sign-off holds the hash of exactly what was signed: input hash + result hash.
    expected = _sha256({"input_hash": final["input_hash"], "result_hash": _sha256(final["result"])})
    assert {s["content_hash"] for s in final["sign_offs"]} == {expected}


def test_port_spacing_of_the_permeameter_feeds_the_reduction(lab: Lab) -> None:
    # CV1 — constant head with manometer taps: D = 10.16 cm, tap spacing 15.0 cm,
    # Δh = 4.50 cm, 355 mL in 120 s, 23.0 °C → k20 = 1.1320e-3 m/s (±0.05 %), CV1.
    permeameter = make_apparatus(
        lab.session,
        ApparatusKind.RIGID_WALL_PERMEAMETER,
        port_spacing_text="15.0 cm",
        port_spacing_m=0.15,
    )
    lab.session.commit()
    response = lab.client.post(
        f"/api/v1/samples/{lab.sample.id}/tests",
        json={
            "method": "constant_head",
            "technician_id": lab.technician.id,
            "apparatus_ids": [permeameter.id],
        },
        headers=lab.as_(lab.manager),
    )
    test_id = response.json()["id"]
    # The specimen is longer than the tap spacing: the spacing must be the flow length.
    assert record_specimen(lab, test_id, diameter="10.16 cm", length="20 cm").status_code == 200
    trial = {
        "volume": "355 mL",
        "duration": "120 s",
        "head_difference": "4.50 cm",
        "temperature": "23.0 degC",
    }
    written = post_trial(lab, test_id, trial, "cv1-1")
    assert written.status_code == 201, written.text
    assert _close(written.json()["reduction"]["trials"][0]["k_ref_m_per_s"], 1.1320e-3, 5e-4)


def test_multi_reading_run_stores_its_readings(lab: Lab) -> None:
    # CV4 — a = 0.300 cm², D = 5.08 cm, L = 10.0 cm, six readings at 20.0 °C
    # → k = 2.0000e-5 cm/s = 2.0000e-7 m/s (±0.1 %) by regression of ln h on t, CV4.
    permeameter = make_apparatus(
        lab.session,
        ApparatusKind.RIGID_WALL_PERMEAMETER,
        standpipe_area_text="0.300 cm**2",
        standpipe_area_m2=3.0e-5,
    )
    lab.session.commit()
    test_id = lab.client.post(
        f"/api/v1/samples/{lab.sample.id}/tests",
        json={
            "method": "falling_head",
            "technician_id": lab.technician.id,
            "apparatus_ids": [permeameter.id],
        },
        headers=lab.as_(lab.manager),
    ).json()["id"]
    assert record_specimen(lab, test_id, diameter="5.08 cm", length="10.0 cm").status_code == 200
    points = [(0, 120.0), (600, 110.7), (1200, 102.0), (1800, 94.1), (2400, 86.8), (3000, 80.0)]
    trial = {
        "readings": [{"time": f"{t} s", "head": f"{h} cm"} for t, h in points],
        "temperature": "20.0 degC",
    }
    written = post_trial(lab, test_id, trial, "cv4-1")
    assert written.status_code == 201, written.text
    assert _close(written.json()["reduction"]["trials"][0]["k_ref_m_per_s"], 2.0000e-7, 1e-3)
    stored = lab.session.exec(select(Reading).order_by(Reading.seq)).all()
    assert [(r.time_text, r.head_text) for r in stored] == [
        (f"{t} s", f"{h} cm") for t, h in points
    ]
    assert math.isclose(stored[-1].head_m, 0.80)


# --- refusals -------------------------------------------------------------------------------------


def test_a_test_may_not_be_approved_by_who_performed_it(lab: Lab) -> None:
    # The lab manager runs the test and submits it (a 'performed' sign-off) ...
    test_id = request_falling_head(lab)
    assert record_specimen(lab, test_id, user=lab.manager).status_code == 200
    assert post_trial(lab, test_id, CV2_TRIAL, "k1", user=lab.manager).status_code == 201
    assert sign(lab, test_id, "submit", lab.manager).status_code == 200
    # ... and may not approve it, though lab managers approve others' tests.
    refused = sign(lab, test_id, "approve", lab.manager)
    assert refused.status_code == 403
    assert "performed" in refused.json()["detail"]
    assert read(lab, test_id)["state"] == "submitted"


def test_the_assigned_technician_cannot_approve_either(lab: Lab) -> None:
    test_id = submitted_cv2(lab, technician=lab.technician)
    assert sign(lab, test_id, "approve", lab.technician).status_code == 403


def test_stale_specimen_version_answers_409_with_both_versions(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    first = record_specimen(lab, test_id).json()
    path = f"/api/v1/tests/{test_id}/specimen"
    moved = lab.client.patch(
        path,
        json={"version": first["version"], "length": "11.58 cm"},
        headers=lab.as_(lab.technician),
    )
    assert moved.status_code == 200
    stale = lab.client.patch(
        path,
        json={"version": first["version"], "length": "11.65 cm"},
        headers=lab.as_(lab.manager),
    )
    assert stale.status_code == 409
    context = stale.json()
    assert context["yours"] == {"version": first["version"], "length": "11.65 cm"}
    assert context["current"]["version"] == first["version"] + 1
    assert context["current"]["length_text"] == "11.58 cm"


def test_stale_trial_version_answers_409(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    trial = post_trial(lab, test_id, CV2_TRIAL, "k1").json()["trial"]
    path = f"/api/v1/tests/{test_id}/trials/{trial['id']}"
    headers = lab.as_(lab.technician)
    edited = lab.client.patch(path, json={"version": 1, "head_final": "71.0 cm"}, headers=headers)
    assert edited.status_code == 200, edited.text
    assert edited.json()["trial"]["entries"]["head_final"] == "71.0 cm"
    stale = lab.client.patch(path, json={"version": 1, "head_final": "69.0 cm"}, headers=headers)
    assert stale.status_code == 409
    assert stale.json()["current"]["version"] == 2
    assert stale.json()["yours"]["version"] == 1


def test_a_retried_trial_write_stores_one_trial_and_answers_the_same(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    first = post_trial(lab, test_id, CV2_TRIAL, "tablet-7f3a")
    again = post_trial(lab, test_id, CV2_TRIAL, "tablet-7f3a")
    assert first.status_code == again.status_code == 201
    assert first.json() == again.json()
    assert len(lab.session.exec(select(Trial)).all()) == 1
    assert len(lab.session.exec(select(IdempotencyRecord)).all()) == 1


def test_a_reused_key_with_another_body_is_refused(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    assert post_trial(lab, test_id, CV2_TRIAL, "k-1").status_code == 201
    other = post_trial(lab, test_id, {**CV2_TRIAL, "head_final": "60.0 cm"}, "k-1")
    assert other.status_code == 409
    assert len(lab.session.exec(select(Trial)).all()) == 1


def test_a_trial_write_needs_an_idempotency_key(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    response = lab.client.post(
        f"/api/v1/tests/{test_id}/trials", json=CV2_TRIAL, headers=lab.as_(lab.technician)
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["header", "Idempotency-Key"]


def test_an_impossible_trial_is_refused_naming_the_field_and_nothing_is_stored(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    risen = post_trial(lab, test_id, {**CV2_TRIAL, "head_final": "110 cm"}, "bad-1")
    assert risen.status_code == 422
    problem = risen.json()["errors"][0]
    # one trial posted: named as that trial (its number), not by its place among the trials
    assert problem["loc"] == ["body", "head_final"]
    assert problem["label"] == "Trial 1 · Head at end"
    assert problem["msg"].startswith("Trial 1 · Head at end: must be below the head at start")
    assert problem["value"] == "110 cm"
    assert lab.session.exec(select(Trial)).all() == []
    assert lab.session.exec(select(IdempotencyRecord)).all() == []


def test_an_implausible_magnitude_is_refused_not_stored(lab: Lab) -> None:
    # issue 15: "1e308 m" in a stored trial once made every reduction answer 500 ("Out of range
    # float values are not JSON compliant"); engine 1.1 refuses it at entry, naming the field
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    huge = post_trial(lab, test_id, {**CV2_TRIAL, "head_initial": "1e308 m"}, "huge-1")
    assert huge.status_code == 422
    assert huge.json()["errors"][0]["loc"] == ["body", "head_initial"]
    assert lab.session.exec(select(Trial)).all() == []
    assert (
        lab.client.get(f"/api/v1/tests/{test_id}", headers=lab.as_(lab.technician)).status_code
        == 200
    )


def test_a_wrong_unit_is_refused_naming_the_field(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    response = record_specimen(lab, test_id, diameter="7.10 kg")
    assert response.status_code == 422
    problem = response.json()["errors"][0]
    assert problem["loc"] == ["body", "diameter"]
    assert problem["label"] == "Specimen · Diameter"
    assert problem["value"] == "7.10 kg"
    assert problem["accepted"].startswith("a length")
    assert read(lab, test_id)["specimen"] is None
    assert read(lab, test_id)["state"] == "planned"


def test_another_technician_may_not_record_on_the_test(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    response = record_specimen(lab, test_id, user=lab.other_technician)
    assert response.status_code == 403


def test_expired_calibration_blocks_submit_naming_the_item(lab: Lab) -> None:
    overdue = {
        "identifier": "THERM-OLD",
        "resolution_si": 0.1,
        "resolution_text": "0.1 K",
        "calibrated_on": date.today() - timedelta(days=400),
        "calibration_due": date.today() - timedelta(days=1),
    }
    test_id = request_falling_head(lab, thermometer=overdue)
    record_specimen(lab, test_id)
    post_trial(lab, test_id, CV2_TRIAL, "k1")
    refused = sign(lab, test_id, "submit", lab.technician)
    assert refused.status_code == 409
    assert "THERM-OLD" in refused.json()["detail"]
    state = read(lab, test_id)
    assert state["state"] == "running"
    assert state["sign_offs"] == []


def test_wrong_password_at_sign_off_is_403_and_changes_nothing(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    post_trial(lab, test_id, CV2_TRIAL, "k1")
    before = read(lab, test_id)
    refused = sign(lab, test_id, "submit", lab.technician, password="not my password")
    assert refused.status_code == 403
    assert read(lab, test_id) == before

    assert sign(lab, test_id, "submit", lab.technician).status_code == 200
    submitted = read(lab, test_id)
    refused = sign(lab, test_id, "approve", lab.reviewer, password="not my password")
    assert refused.status_code == 403
    assert read(lab, test_id) == submitted


def test_editing_an_approved_test_is_refused_naming_its_state(lab: Lab) -> None:
    test_id = approved_cv2(lab)
    trial = post_trial(lab, test_id, CV2_TRIAL, "late-1", user=lab.manager)
    assert trial.status_code == 409
    assert "approved" in trial.json()["detail"]
    specimen = lab.client.patch(
        f"/api/v1/tests/{test_id}/specimen",
        json={"version": 1, "length": "11.0 cm"},
        headers=lab.as_(lab.manager),
    )
    assert specimen.status_code == 409
    assert specimen.json()["state"] == "approved"


def test_a_wrong_transition_names_the_state_and_what_is_allowed(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    refused = sign(lab, test_id, "approve", lab.reviewer)
    assert refused.status_code == 409
    body = refused.json()
    assert body["state"] == "planned"
    assert "start" in body["allowed"]
    assert "planned" in body["detail"]


def test_send_back_needs_a_reason(lab: Lab) -> None:
    test_id = submitted_cv2(lab)
    path = f"/api/v1/tests/{test_id}/send-back"
    empty = lab.client.post(path, json={"reason": "  "}, headers=lab.as_(lab.reviewer))
    assert empty.status_code == 422
    assert empty.json()["errors"][0]["loc"] == ["body", "reason"]
    assert read(lab, test_id)["state"] == "submitted"

    reason = "Trial 1 temperature looks like the room, not the permeant; check the log."
    sent = lab.client.post(path, json={"reason": reason}, headers=lab.as_(lab.reviewer))
    assert sent.status_code == 200
    assert sent.json()["state"] == "running"
    assert sent.json()["sent_back_reason"] == reason
    # Back with the technician: they may record again and resubmit.
    assert post_trial(lab, test_id, CV2_TRIAL, "k2").status_code == 201
    assert sign(lab, test_id, "submit", lab.technician).status_code == 200


def test_a_correction_creates_revision_2_and_the_old_test_points_to_it(lab: Lab) -> None:
    old_id = approved_cv2(lab)
    lab_tests.mark_issued(lab.session, old_id, actor=lab.manager)
    lab.session.commit()
    reason = "Specimen length transcribed as 11.60 cm; the datasheet reads 11.06 cm."
    created = lab.client.post(
        f"/api/v1/tests/{old_id}/corrections",
        json={"reason": reason},
        headers=lab.as_(lab.reviewer),
    )
    assert created.status_code == 201, created.text
    new = created.json()
    assert (new["revision"], new["supersedes_id"], new["state"]) == (2, old_id, "running")
    assert new["series"] == read(lab, old_id)["series"]
    assert new["correction_reason"] == reason
    assert [t["entries"] for t in new["trials"]] == [CV2_TRIAL]
    assert new["specimen"]["length_text"] == "11.60 cm"
    old = read(lab, old_id)
    assert old["superseded_by_id"] == new["id"]
    assert old["state"] == "issued"  # until the correction is approved

    fixed = lab.client.patch(
        f"/api/v1/tests/{new['id']}/specimen",
        json={"version": new["specimen"]["version"], "length": "11.06 cm"},
        headers=lab.as_(lab.technician),
    )
    assert fixed.status_code == 200, fixed.text
    assert sign(lab, new["id"], "submit", lab.technician).status_code == 200
    assert sign(lab, new["id"], "approve", lab.reviewer).status_code == 200
    old = read(lab, old_id)
    assert old["state"] == "superseded"
    assert old["result"] is not None  # the old one stays readable
    # k is proportional to L (domain-reference §3.1): 11.06/11.60 of the CV2 value.
    k_new = read(lab, new["id"])["result_k_ref_m_per_s"]
    assert _close(k_new, CV2_K20 * 11.06 / 11.60, 5e-4)


def test_the_stored_result_equals_a_recomputation(lab: Lab) -> None:
    test_id = submitted_cv2(lab)
    report = lab.client.get(f"/api/v1/tests/{test_id}/recompute", headers=lab.as_(lab.reviewer))
    assert report.status_code == 200
    assert report.json()["matches"] is True
    assert report.json()["differences"] == []

    # An entry altered behind the application's back is detected.
    trial = lab.session.exec(select(Trial).where(Trial.test_id == test_id)).one()
    trial.entries = {**trial.entries, "head_final": "69.0 cm"}
    lab.session.add(trial)
    lab.session.commit()
    report = lab.client.get(f"/api/v1/tests/{test_id}/recompute", headers=lab.as_(lab.reviewer))
    assert report.json()["matches"] is False
    assert "result.k_ref_m_per_s" in report.json()["differences"]


def test_missing_uncertainties_come_from_the_thermometer_resolution(lab: Lab) -> None:
    # A resolution r is taken as u = r/√12 (GUM §4.3.7); r = 0.3·√12 K gives u(T) = 0.3 K.
    # CV8(b): on CV2 at 18 °C, u(T) = 0.3 K contributes 0.758 % to u_rel(k20)
    # (d ln R/dT = −0.02525 K⁻¹), domain-reference §10 CV8(b).
    resolution = 0.3 * math.sqrt(12.0)
    thermometer = {"resolution_si": resolution, "resolution_text": f"{resolution:.4f} K"}
    test_id = request_falling_head(lab, thermometer=thermometer)
    record_specimen(lab, test_id)
    written = post_trial(lab, test_id, CV2_TRIAL, "k1").json()
    assert written["reduction"]["trials"][0]["u_rel"] == pytest.approx(0.00758, abs=1e-4)
    # A `u` typed with the entry wins over the register's: 0.6 K doubles the term.
    typed_u = {**CV2_TRIAL, "temperature": {"value": 18.0, "unit": "degC", "u": 0.6}}
    written = post_trial(lab, test_id, typed_u, "k2").json()
    assert written["reduction"]["trials"][1]["u_rel"] == pytest.approx(0.01515, abs=2e-4)
    # Fixed at submission so the result can be recomputed later.
    assert sign(lab, test_id, "submit", lab.technician).status_code == 200
    assert read(lab, test_id)["default_uncertainties"] == {"temperature": "0.3 K"}


def test_a_client_reads_its_own_tests_only_and_never_writes(lab: Lab) -> None:
    test_id = submitted_cv2(lab)
    own = lab.client.get(f"/api/v1/tests/{test_id}", headers=lab.as_(lab.client_user))
    assert own.status_code == 200
    listed = lab.client.get(
        f"/api/v1/samples/{lab.sample.id}/tests", headers=lab.as_(lab.client_user)
    )
    assert [t["id"] for t in listed.json()["items"]] == [test_id]
    for path in (f"/api/v1/tests/{test_id}", f"/api/v1/samples/{lab.sample.id}/tests"):
        assert lab.client.get(path, headers=lab.as_(lab.stranger)).status_code == 404
    recompute = f"/api/v1/tests/{test_id}/recompute"
    assert lab.client.get(recompute, headers=lab.as_(lab.stranger)).status_code == 404
    write = post_trial(lab, test_id, CV2_TRIAL, "c1", user=lab.client_user)
    assert write.status_code == 403


def test_every_change_is_audited(lab: Lab) -> None:
    test_id = submitted_cv2(lab)
    events = history(lab.session, "permeability_test", test_id)
    states = [(e.old_value, e.new_value) for e in events if e.field == "state"]
    assert states == [(None, "planned"), ("planned", "running"), ("running", "submitted")]
    assert {e.actor_id for e in events if e.field == "state"} == {
        lab.manager.id,
        lab.technician.id,
    }
    trial_rows = lab.session.exec(select(AuditEvent).where(AuditEvent.entity == "trial")).all()
    assert trial_rows
    # The trial's creation is one audit row holding every field it was created with.
    created = [decode_changes(row) for row in trial_rows if "test_id" in decode_changes(row)]
    assert len(created) == 1
    assert {"entries", "seq", "recorded_by_id"} <= set(created[0])
    assert {row.chain for row in trial_rows} == {f"permeability_test:{test_id}"}
    sign_offs = lab.session.exec(select(SignOff).where(SignOff.test_id == test_id)).all()
    assert [s.meaning for s in sign_offs] == ["performed"]


def test_reference_temperature_must_be_one_offered(lab: Lab) -> None:
    response = lab.client.post(
        f"/api/v1/samples/{lab.sample.id}/tests",
        json={"method": "falling_head", "reference_temperature_c": 15},
        headers=lab.as_(lab.manager),
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"][-1] == "reference_temperature_c"
    assert lab.session.exec(select(PermeabilityTest)).all() == []


def test_conditions_are_kept_as_typed_beside_kilopascals(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    path = f"/api/v1/tests/{test_id}"
    # 1 psi = 6.894757 kPa (NIST SP 811 appendix B, from memory); 1 bar = 100 kPa (definition).
    changed = lab.client.patch(
        path,
        json={"version": 1, "cell_pressure": "80 psi", "back_pressure": "5.15 bar"},
        headers=lab.as_(lab.technician),
    )
    assert changed.status_code == 200, changed.text
    body = changed.json()
    assert body["cell_pressure_text"] == "80 psi"
    assert body["cell_pressure_kpa"] == pytest.approx(551.5806, rel=1e-6)
    assert body["back_pressure_kpa"] == pytest.approx(515.0, rel=1e-12)
    assert body["version"] == 2

    wrong = lab.client.patch(
        path,
        json={"version": 2, "effective_confining": "35 kg"},
        headers=lab.as_(lab.technician),
    )
    assert wrong.status_code == 422
    assert wrong.json()["errors"][0]["loc"] == ["body", "effective_confining"]

    step = lab.client.post(
        f"{path}/saturation",
        json={"back_pressure": "345 kPa", "b_value": 0.96},
        headers=lab.as_(lab.technician),
    )
    assert step.status_code == 201
    assert step.json()["back_pressure_kpa"] == pytest.approx(345.0)
    assert read(lab, test_id)["saturation"][0]["b_value"] == 0.96


def test_only_a_technician_of_the_lab_can_be_assigned(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    response = lab.client.patch(
        f"/api/v1/tests/{test_id}",
        json={"version": 1, "technician_id": lab.reviewer.id},
        headers=lab.as_(lab.manager),
    )
    assert response.status_code == 422
    assert response.json()["errors"][0]["loc"] == ["body", "technician_id"]
    # And a technician may not reassign tests.
    response = lab.client.patch(
        f"/api/v1/tests/{test_id}",
        json={"version": 1, "technician_id": lab.other_technician.id},
        headers=lab.as_(lab.technician),
    )
    assert response.status_code == 403


def test_an_excluded_trial_leaves_the_reduction_and_needs_a_reason(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    record_specimen(lab, test_id)
    first = post_trial(lab, test_id, CV2_TRIAL, "k1").json()["trial"]
    post_trial(lab, test_id, {**CV2_TRIAL, "head_final": "60.0 cm"}, "k2")
    path = f"/api/v1/tests/{test_id}/trials/{first['id']}/exclude"
    headers = lab.as_(lab.technician)
    assert lab.client.post(path, json={"version": 1}, headers=headers).status_code == 422
    excluded = lab.client.post(
        path, json={"version": 1, "reason": "air bubble in the standpipe"}, headers=headers
    )
    assert excluded.status_code == 200, excluded.text
    live = excluded.json()["reduction"]
    assert [t["seq"] for t in live["trials"]] == [2]
    # ln(100/60)/ln(100/70) times the CV2 value: k ∝ ln(h1/h2) (domain-reference §3.1).
    ratio = math.log(100 / 60) / math.log(100 / 70)
    assert _close(live["result"]["k_ref_m_per_s"], CV2_K20 * ratio, 5e-4)


def test_a_trial_before_the_specimen_is_kept_and_the_reduction_says_what_is_missing(
    lab: Lab,
) -> None:
    test_id = request_falling_head(lab)
    written = post_trial(lab, test_id, CV2_TRIAL, "k1")
    assert written.status_code == 201, written.text
    live = written.json()["reduction"]
    assert live["result"] is None
    assert ["specimen", "diameter"] in [p["loc"] for p in live["pending"]]
    assert written.json()["test_state"] == "running"
