"""Entries kept on a tablet while it was offline (static/js/outbox.js) as the server sees
them: each carries its idempotency key and the test version it was typed against. A retry
stores nothing twice; an entry typed against an older version is refused (409) with both
versions and nothing stored; the service worker is served from the root within the CSP.
Idempotent retries and optimistic versions are common practice, no source (RFC 9110 §9.2.2
defines idempotent methods; the key header follows the IETF httpapi draft, from memory)."""

from __future__ import annotations

import re

from sqlmodel import select

from service.audit.service import apply_changes
from service.common import TestState
from service.lab_tests import service as lab_tests
from service.lab_tests.models import SaturationStep, Trial
from service.lab_tests.schemas import SendBackRequest
from tests.web.testpage.conftest import HTMX, Lab
from tests.web.testpage.test_test_page import CV2_TRIAL, post, save_specimen

STEP = {"sat.back_pressure": "345 kPa", "sat.b_value": "0.96"}


def _trials(lab: Lab) -> list[Trial]:
    lab.fresh()
    return list(lab.session.exec(select(Trial).where(Trial.test_id == lab.test_id)).all())


def _steps(lab: Lab) -> list[SaturationStep]:
    lab.fresh()
    found = select(SaturationStep).where(SaturationStep.test_id == lab.test_id)
    return list(lab.session.exec(found).all())


def _sent_back(lab: Lab, reason: str) -> int:
    """The test submitted and sent back elsewhere; its version now."""
    test = lab.reload()
    apply_changes(lab.session, test, {"state": TestState.SUBMITTED}, actor_id=lab.reviewer.id)
    lab_tests.send_back(
        lab.session, lab.test_id, SendBackRequest(reason=reason), actor=lab.reviewer
    )
    lab.session.commit()
    return lab.reload().version


def test_a_trial_typed_against_an_older_version_is_refused_with_both(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    typed_on = lab.reload().version
    now = _sent_back(lab, "Recheck the temperature probe.")
    data = {**CV2_TRIAL, "idempotency_key": "kept-1", "based_on_version": str(typed_on)}
    response = post(lab, "/trials", data, csrf)
    assert response.status_code == 409
    table = re.search(r'data-testid="both-versions".*?</table>', response.text, re.S)
    assert table is not None
    assert f'data-current-version="{now}"' in table.group(0)
    assert f"from version {typed_on}" in table.group(0)
    assert "Recheck the temperature probe." in table.group(0)  # the test as it is now
    assert "70.0 cm" in table.group(0)  # the entry as typed
    assert _trials(lab) == []
    # Sent again against the version shown: it lands.
    again = {**data, "idempotency_key": "kept-1b", "based_on_version": str(now)}
    assert post(lab, "/trials", again, csrf).status_code == 201
    assert len(_trials(lab)) == 1


def test_a_retry_of_a_trial_that_landed_is_answered_as_landed(lab: Lab) -> None:
    # The first trial moves a planned test to running (a new version); the tablet never saw
    # the answer and retries with the version it typed against: the same trial, not a 409.
    csrf = lab.sign_in(lab.technician)
    typed_on = lab.reload().version
    data = {**CV2_TRIAL, "idempotency_key": "kept-2", "based_on_version": str(typed_on)}
    first = post(lab, "/trials", data, csrf)
    assert first.status_code == 201
    assert lab.reload().version > typed_on
    again = post(lab, "/trials", data, csrf)
    assert again.status_code == 201
    assert len(_trials(lab)) == 1


def test_a_saturation_step_sent_twice_is_stored_once(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    data = {**STEP, "idempotency_key": "step-1"}
    assert post(lab, "/saturation", data, csrf).status_code == 200
    assert post(lab, "/saturation", data, csrf).status_code == 200
    assert len(_steps(lab)) == 1
    other = {**data, "sat.b_value": "0.97"}
    refused = post(lab, "/saturation", other, csrf)
    assert refused.status_code == 409
    assert 'value="0.97"' in refused.text  # what was typed is kept in the form
    assert len(_steps(lab)) == 1


def test_a_stale_saturation_step_is_refused_and_stores_nothing(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    typed_on = lab.reload().version
    _sent_back(lab, "B-value too low.")
    data = {**STEP, "idempotency_key": "step-2", "based_on_version": str(typed_on)}
    response = post(lab, "/saturation", data, csrf)
    assert response.status_code == 409
    assert 'data-testid="both-versions"' in response.text
    assert "345 kPa" in response.text
    assert _steps(lab) == []


def test_hostile_keys_and_versions_are_refused_plainly(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    for key in ("../../etc/passwd", "x" * 65, "<script>"):
        response = post(lab, "/saturation", {**STEP, "idempotency_key": key}, csrf)
        assert response.status_code == 422, key
        assert "<script>" not in response.text
    # A version that is not a number is not checked; one from the future is stale (409).
    assert post(lab, "/saturation", {**STEP, "based_on_version": "DROP"}, csrf).status_code == 200
    future = {**STEP, "based_on_version": str(10**12)}
    assert post(lab, "/saturation", future, csrf).status_code == 409
    assert len(_steps(lab)) == 1


def test_the_service_worker_is_served_from_the_root(lab: Lab) -> None:
    response = lab.client.get("/sw.js", headers=HTMX)
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/javascript")
    assert response.headers["service-worker-allowed"] == "/"
    assert response.headers["cache-control"] == "no-cache"
    assert "script-src 'self'" in response.headers["content-security-policy"]
    assert 'addEventListener("fetch"' in response.text
