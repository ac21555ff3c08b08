"""The technician's test page: full page and htmx fragment of every route, Vary, CSRF and
role refusals, refused forms that keep what was typed, idempotent trial saves, sign-off.

Reference figures are the check values of /work/shared/reference/domain-reference.md §10
(CV2, CV4), computed there with IAPWS 2008 viscosity."""

from __future__ import annotations

import math
import re
from typing import Any

import pytest
from sqlmodel import select

from service.common import TestState
from service.lab_tests import service as lab_tests
from service.lab_tests.models import SaturationStep, Specimen, Trial
from service.signoffs.models import SignOff
from tests.web.fields import keeps
from tests.web.testpage.conftest import HTMX, PASSWORD, Lab

# CV2 — falling head, constant tailwater: a = 0.282743 cm², D = 7.10 cm, L = 11.60 cm,
# h1 = 100.0 cm, h2 = 70.0 cm, Δt = 3600 s, T = 18.0 °C → k_T = 8.2076e-8 m/s,
# k20 = 8.6261e-8 m/s (±0.05 %), initial gradient 100/11.6 = 8.62 (domain-reference §10 CV2).
CV2_SPECIMEN = {"specimen.diameter": "7.10 cm", "specimen.length": "11.60 cm"}
CV2_TRIAL = {
    "trial.head_initial": "100.0 cm",
    "trial.head_final": "70.0 cm",
    "trial.duration": "3600 s",
    "trial.temperature": "18.0 degC",
}
CV2_K = 8.2076e-8
CV2_K20 = 8.6261e-8

POST_ROUTES = [
    "/specimen",
    "/apparatus",
    "/conditions",
    "/saturation",
    "/trials",
    "/trials/preview",
    "/submit",
]


def figures(text: str) -> list[float]:
    """Numbers shown as 'm × 10⁻ⁿ' turned back into floats."""
    table = str.maketrans("⁻⁰¹²³⁴⁵⁶⁷⁸⁹", "-0123456789")
    return [
        float(m) * 10 ** int(e.translate(table))
        for m, e in re.findall(r"([\d.]+) × 10([⁻⁰¹²³⁴⁵⁶⁷⁸⁹]+)", text)
    ]


def shown(text: str, testid: str) -> float:
    """The figure inside the element marked data-testid=`testid`."""
    return figures(text.split(f'data-testid="{testid}"')[1])[0]


def slot(text: str, name: str) -> str:
    """The message slot beside the field called `name`."""
    return text.split(f'id="err-{name.replace(".", "-")}"')[1].split("</p>")[0]


def post(lab: Lab, tail: str, data: dict[str, Any], csrf: dict[str, str], htmx: bool = True) -> Any:
    headers = {**csrf, **HTMX} if htmx else {}
    body = dict(data) if htmx else {**data, "csrf_token": csrf["X-CSRF-Token"]}
    return lab.client.post(lab.url(tail), data=body, headers=headers)


def save_specimen(lab: Lab, csrf: dict[str, str], **extra: str) -> Any:
    response = post(lab, "/specimen", {**CV2_SPECIMEN, **extra}, csrf)
    assert response.status_code == 200, response.text
    return response


def trial_key(text: str) -> str:
    match = re.search(r'name="idempotency_key" value="([^"]+)"', text)
    assert match is not None
    return match.group(1)


def trials(lab: Lab) -> list[Trial]:
    lab.fresh()
    return list(lab.session.exec(select(Trial).where(Trial.test_id == lab.test_id)).all())


# ---------- the page ----------


def test_page_is_a_labelled_tablet_form(lab: Lab) -> None:
    lab.sign_in(lab.technician)
    response = lab.client.get(lab.url())
    assert response.status_code == 200
    assert response.headers["vary"] == "HX-Request"
    text = response.text
    assert '<html lang="en">' in text
    assert '<link rel="stylesheet" href="/static/css/testpage.css">' in text
    assert '<script src="/static/js/bench.js" defer></script>' in text
    for words in ("26-0101", "P-TP-1", "Falling head, constant tailwater", "2026-12-04"):
        assert words in text
    assert 'data-state="planned"' in text
    assert "licensed engineer" in text
    inputs = re.findall(r'<input id="(f-[^"]+)"[^>]*>', text)
    assert len(inputs) > 20
    for field_id in inputs:
        assert f'<label for="{field_id}">' in text
    for tag in re.findall(r'<input id="f-(?:specimen|trial)-(?!description)[^>]*>', text):
        assert 'inputmode="decimal"' in tag
    assert text.count("data-stopwatch-toggle") == 1
    assert 'data-stopwatch-for="f-trial-duration"' in text
    # The permeameter assigned shows its geometry from the register.
    assert "0.282743 cm²" in text
    # A fresh idempotency key with every render of the trial form.
    assert trial_key(text) != trial_key(lab.client.get(lab.url()).text)


def test_htmx_get_answers_the_page_body_only(lab: Lab) -> None:
    lab.sign_in(lab.technician)
    response = lab.client.get(lab.url(), headers=HTMX)
    assert response.status_code == 200
    assert "HX-Request" in response.headers["vary"]
    assert "<html" not in response.text
    assert 'id="testpage"' in response.text


def test_overdue_items_are_marked_in_the_picker(lab: Lab) -> None:
    lab.sign_in(lab.technician)
    text = lab.client.get(lab.url()).text
    option = re.search(r"<option[^>]*>THERM-OLD[^<]*</option>", text)
    assert option is not None
    assert "CALIBRATION OVERDUE" in option.group(0)


def test_lab_staff_read_without_forms(lab: Lab) -> None:
    lab.sign_in(lab.reviewer)
    text = lab.client.get(lab.url()).text
    assert 'id="testpage"' in text
    assert 'id="trial-form"' not in text
    assert "recording on it is for" in text


def test_client_of_the_organisation_sees_a_read_only_summary(lab: Lab) -> None:
    lab.sign_in(lab.client_user)
    response = lab.client.get(lab.url())
    assert response.status_code == 200
    assert 'data-testid="client-summary"' in response.text
    assert "<form id=" not in response.text.split('id="testpage"')[1]
    assert "once the laboratory has reviewed and approved" in response.text


@pytest.mark.parametrize("tail", ["", "/permeameter"])
def test_client_of_another_organisation_gets_404(lab: Lab, tail: str) -> None:
    lab.sign_in(lab.stranger)
    response = lab.client.get(lab.url(tail))
    assert response.status_code == 404
    assert "26-0101" not in response.text


@pytest.mark.parametrize("tail", POST_ROUTES)
def test_client_of_another_organisation_gets_404_on_writes(lab: Lab, tail: str) -> None:
    csrf = lab.sign_in(lab.stranger)
    response = post(lab, tail, {**CV2_SPECIMEN, **CV2_TRIAL, "idempotency_key": "k-1"}, csrf)
    assert response.status_code == 404
    assert "26-0101" not in response.text


def test_page_needs_sign_in(lab: Lab) -> None:
    response = lab.client.get(lab.url())
    assert response.status_code == 303
    assert response.headers["location"] == f"/sign-in?next=/tests/{lab.test_id}"


@pytest.mark.parametrize("tail", POST_ROUTES)
def test_writes_without_csrf_are_refused(lab: Lab, tail: str) -> None:
    lab.sign_in(lab.technician)
    data = {**CV2_SPECIMEN, **CV2_TRIAL, "idempotency_key": "k-csrf", "submit.password": PASSWORD}
    response = lab.client.post(lab.url(tail), data=data, headers=HTMX)
    assert response.status_code == 403
    assert "CSRF" in response.text
    assert trials(lab) == []
    assert lab.reload().state == TestState.PLANNED


@pytest.mark.parametrize(
    ("tail", "data"),
    [
        ("/specimen", CV2_SPECIMEN),
        ("/trials", {**CV2_TRIAL, "idempotency_key": "k-other"}),
        ("/submit", {"submit.password": PASSWORD}),
    ],
)
def test_a_technician_not_assigned_is_refused(lab: Lab, tail: str, data: dict[str, str]) -> None:
    csrf = lab.sign_in(lab.other_technician)
    page = lab.client.get(lab.url()).text
    assert 'id="specimen-form"' not in page  # read-only for them
    response = post(lab, tail, data, csrf)
    assert response.status_code == 403
    assert "not assigned to you" in response.text or "assigned technician" in response.text
    assert trials(lab) == []
    assert lab.session.exec(select(Specimen)).first() is None


# ---------- specimen ----------


def test_specimen_is_saved_as_typed_and_the_test_starts(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    response = save_specimen(lab, csrf, **{"specimen.specific_gravity": "2.72"})
    assert "HX-Request" in response.headers["vary"]
    text = response.text
    assert "<html" not in text
    assert "Specimen saved." in text
    keeps(text, "specimen.diameter", "7.10 cm")
    # Header and the other forms' test version come along out of band.
    assert 'id="test-header" hx-swap-oob="true"' in text
    assert 'data-state="running"' in text
    assert 'id="tv-apparatus" name="version" value="2" hx-swap-oob="true"' in text
    lab.fresh()
    specimen = lab.session.exec(select(Specimen)).one()
    assert (specimen.diameter_text, specimen.length_text) == ("7.10 cm", "11.60 cm")
    assert math.isclose(specimen.diameter_m or 0, 0.071)
    assert specimen.specific_gravity == 2.72
    assert lab.reload().state == TestState.RUNNING


def test_specimen_full_page_post_without_javascript(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    response = post(lab, "/specimen", CV2_SPECIMEN, csrf, htmx=False)
    assert response.status_code == 200
    assert '<html lang="en">' in response.text
    assert "hx-swap-oob" not in response.text
    keeps(response.text, "specimen.length", "11.60 cm")


@pytest.mark.parametrize("htmx", [True, False])
def test_refused_specimen_keeps_everything_typed(lab: Lab, htmx: bool) -> None:
    csrf = lab.sign_in(lab.technician)
    data = {**CV2_SPECIMEN, "specimen.length": "11.6 C", "specimen.wet_mass": "560 g"}
    response = post(lab, "/specimen", data, csrf, htmx=htmx)
    assert response.status_code == 422
    text = response.text
    assert ("<html" in text) is not htmx
    message = slot(text, "specimen.length")
    assert "11.6 C" in message
    assert "length" in message
    for name, typed in (
        ("specimen.diameter", "7.10 cm"),
        ("specimen.length", "11.6 C"),
        ("specimen.wet_mass", "560 g"),
    ):
        keeps(text, name, typed)
    assert 'aria-invalid="true"' in text
    assert lab.session.exec(select(Specimen)).first() is None
    assert lab.reload().state == TestState.PLANNED


def test_specific_gravity_must_be_a_number(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    response = post(lab, "/specimen", {**CV2_SPECIMEN, "specimen.specific_gravity": "2.7x"}, csrf)
    assert response.status_code == 422
    message = slot(response.text, "specimen.specific_gravity")
    assert "2.7x" in message
    assert "such as 2.70" in message
    keeps(response.text, "specimen.diameter", "7.10 cm")


def test_stale_specimen_answers_409_with_both_versions(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    # Someone else changes the specimen (version 1 → 2) ...
    save_specimen(lab, csrf, **{"specimen.version": "1", "specimen.wet_mass": "560.0 g"})
    # ... while this tablet still holds version 1 and types another mass.
    data = {**CV2_SPECIMEN, "specimen.version": "1", "specimen.wet_mass": "561.5 g"}
    response = post(lab, "/specimen", data, csrf)
    assert response.status_code == 409
    text = response.text
    versions = text.split('data-testid="both-versions"')[1].split("</table>")[0]
    assert "561.5 g" in versions
    assert "560.0 g" in versions
    assert "version 1" in versions
    assert "version 2" in versions
    keeps(text, "specimen.wet_mass", "561.5 g")  # kept in the form
    assert 'name="specimen.version" value="2"' in text  # saving again is deliberate
    lab.fresh()
    assert lab.session.exec(select(Specimen)).one().wet_mass_text == "560.0 g"


# ---------- apparatus ----------


def test_choosing_a_permeameter_shows_its_geometry(lab: Lab) -> None:
    lab.sign_in(lab.technician)
    query = {"app.permeameter": str(lab.spaced_permeameter.id)}
    fragment = lab.client.get(lab.url("/permeameter"), params=query, headers=HTMX)
    assert fragment.status_code == 200
    assert "HX-Request" in fragment.headers["vary"]
    assert fragment.text.lstrip().startswith("{#") is False
    assert 'id="permeameter-geometry"' in fragment.text
    assert "<html" not in fragment.text
    spacing = fragment.text.split('data-testid="port-spacing"')[1].split("</dd>")[0]
    assert "15.0 cm" in spacing
    assert "150 mm" in spacing  # 15.0 cm = 150 mm
    page = lab.client.get(lab.url("/permeameter"), params=query)
    assert '<html lang="en">' in page.text
    assert "15.0 cm" in page.text
    # nothing saved
    assert lab_tests.apparatus_of(lab.session, lab.test_id)[0].identifier == "PERM-CV2"


def test_apparatus_is_assigned_from_the_picker(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    data = {
        "app.permeameter": str(lab.spaced_permeameter.id),
        "app.thermometer": str(lab.thermometer.id),
        "version": "1",
    }
    response = post(lab, "/apparatus", data, csrf)
    assert response.status_code == 200, response.text
    assert "Apparatus saved." in response.text
    lab.fresh()
    assigned = {a.identifier for a in lab_tests.apparatus_of(lab.session, lab.test_id)}
    assert assigned == {"PERM-TAPS", "THERM-OK"}
    assert 'id="tv-apparatus" name="version" value="2"' in response.text


def test_stale_apparatus_choice_is_kept_and_refused(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)  # the test starts: version 2
    data = {"app.permeameter": str(lab.spaced_permeameter.id), "version": "1"}
    response = post(lab, "/apparatus", data, csrf)
    assert response.status_code == 409
    selected = re.search(r'<option value="(\d+)" selected>PERM', response.text)
    assert selected is not None
    assert selected.group(1) == str(lab.spaced_permeameter.id)
    lab.fresh()
    assert lab_tests.apparatus_of(lab.session, lab.test_id)[0].identifier == "PERM-CV2"


# ---------- live reduction ----------


def test_preview_shows_k_k20_and_gradient_without_storing(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    response = post(lab, "/trials/preview", CV2_TRIAL, csrf)
    assert response.status_code == 200
    assert "HX-Request" in response.headers["vary"]
    text = response.text
    assert "<html" not in text
    # Three significant figures are shown: compare within half a unit in the last place.
    assert shown(text, "live-k") == pytest.approx(CV2_K, rel=0.006)  # CV2 k_T
    assert shown(text, "live-k20") == pytest.approx(CV2_K20, rel=0.006)  # CV2 k20
    assert "8.62" in text.split('data-testid="live-gradient"')[1][:20]  # CV2 i = 100/11.6
    assert 'data-testid="live-checks"' in text
    # Messages beside the trial's fields are refreshed out of band (none here).
    assert 'id="err-trial-duration" aria-live="polite" hx-swap-oob="true"></p>' in text
    assert trials(lab) == []


def test_preview_check_texts_follow_the_users_units(lab: Lab) -> None:
    # 1 in = 25.4 mm exactly (international inch, 1959; NIST SP 811 (2008) B.8). Hazen's
    # formula holds for D10 of 0.1 mm to 3 mm (the built-in rule), quoted in inches here.
    lab.technician.display_units = "us"
    lab.session.add(lab.technician)
    lab.session.commit()
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    text = post(lab, "/trials/preview", CV2_TRIAL, csrf).text
    hazen = text.split('data-check="hazen"')[1].split("</li>")[0]
    assert " mm" not in hazen
    inches = [float(x) for x in re.findall(r"([\d.]+) in\b", hazen)]
    assert [x * 25.4 for x in inches] == pytest.approx([0.1, 3.0], rel=3e-2)


def test_preview_full_page_without_javascript(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    response = post(lab, "/trials/preview", CV2_TRIAL, csrf, htmx=False)
    assert response.status_code == 200
    assert '<html lang="en">' in response.text
    keeps(response.text, "trial.head_initial", "100.0 cm")
    assert shown(response.text, "live-k20") == pytest.approx(CV2_K20, rel=0.006)


def test_preview_refuses_a_wrong_unit_beside_its_field(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    response = post(lab, "/trials/preview", {**CV2_TRIAL, "trial.head_final": "70 C"}, csrf)
    assert response.status_code == 422
    message = slot(response.text, "trial.head_final")
    assert "70 C" in message
    assert "length" in message


def test_preview_of_a_readings_run_uses_the_regression(lab: Lab) -> None:
    # CV4 — a = 0.300 cm², D = 5.08 cm, L = 10.0 cm, six readings at 20.0 °C → k = 2.0000e-7
    # m/s (±0.1 %) by least squares of ln h on t (domain-reference §10 CV4).
    lab.permeameter.standpipe_area_text = "0.300 cm**2"
    lab.permeameter.standpipe_area_m2 = 3.0e-5
    lab.session.add(lab.permeameter)
    lab.session.commit()
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf, **{"specimen.diameter": "5.08 cm", "specimen.length": "10.0 cm"})
    data = {"trial.temperature": "20.0 degC"}
    readings = [(0, 120.0), (600, 110.7), (1200, 102.0), (1800, 94.1), (2400, 86.8), (3000, 80.0)]
    for row, (time_s, head_cm) in enumerate(readings):
        data[f"trial.readings.{row}.time"] = f"{time_s} s"
        data[f"trial.readings.{row}.head"] = f"{head_cm} cm"
    response = post(lab, "/trials/preview", data, csrf)
    assert response.status_code == 200, response.text
    assert shown(response.text, "live-k") == pytest.approx(2.0000e-7, rel=0.006)  # CV4


def test_a_warning_is_shown_beside_the_trial_that_causes_it(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    response = post(lab, "/trials/preview", {**CV2_TRIAL, "trial.temperature": ""}, csrf)
    notes = response.text.split('id="trial-notes-new" hx-swap-oob="true"')[1].split("</ul>")[0]
    assert "No temperature" in notes


# ---------- saving trials ----------


def test_save_trial_stores_it_as_typed_and_lists_it(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    key = trial_key(lab.client.get(lab.url()).text)
    response = post(lab, "/trials", {**CV2_TRIAL, "idempotency_key": key}, csrf)
    assert response.status_code == 201, response.text
    text = response.text
    assert "Trial 1 saved." in text
    assert trial_key(text) != key  # a new key for the next trial
    assert 'value="100.0"' not in text.split('id="trial-form"')[1].split("</form>")[0]
    saved = text.split('data-testid="saved-trials"')[1]
    assert figures(saved.split('data-testid="saved-k20"')[1])[0] == pytest.approx(
        CV2_K20, rel=0.006
    )  # CV2
    (trial,) = trials(lab)
    assert trial.entries == {
        "head_initial": "100.0 cm",
        "head_final": "70.0 cm",
        "duration": "3600 s",
        "temperature": "18.0 degC",
    }


def test_a_double_tap_or_retry_stores_one_trial(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    data = {**CV2_TRIAL, "idempotency_key": "tablet-key-1"}
    first = post(lab, "/trials", data, csrf)
    again = post(lab, "/trials", data, csrf)
    assert (first.status_code, again.status_code) == (201, 201)
    assert len(trials(lab)) == 1
    assert "Trial 1 saved." in again.text


def test_a_used_key_with_other_entries_saves_nothing_and_says_so(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    post(lab, "/trials", {**CV2_TRIAL, "idempotency_key": "tablet-key-2"}, csrf)
    other = {**CV2_TRIAL, "trial.head_final": "60.0 cm", "idempotency_key": "tablet-key-2"}
    response = post(lab, "/trials", other, csrf)
    assert response.status_code == 409
    assert "already used to save a different trial" in response.text
    keeps(response.text, "trial.head_final", "60.0 cm")
    assert trial_key(response.text) != "tablet-key-2"
    assert len(trials(lab)) == 1


@pytest.mark.parametrize("htmx", [True, False])
def test_refused_trial_keeps_everything_typed(lab: Lab, htmx: bool) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    data = {**CV2_TRIAL, "trial.duration": "3600 kg", "idempotency_key": "k-refused"}
    response = post(lab, "/trials", data, csrf, htmx=htmx)
    assert response.status_code == 422
    text = response.text
    assert "3600 kg" in slot(text, "trial.duration")
    for name, typed in CV2_TRIAL.items():
        keeps(text, name, "3600 kg" if name == "trial.duration" else typed)
    assert trial_key(text) == "k-refused"  # nothing stored: the same key may be used again
    assert trials(lab) == []


def test_exclude_needs_a_reason_then_leaves_the_trial_out(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    save_specimen(lab, csrf)
    post(lab, "/trials", {**CV2_TRIAL, "idempotency_key": "k-a"}, csrf)
    (trial,) = trials(lab)
    tail = f"/trials/{trial.id}/exclude"
    refused = post(lab, tail, {"version": "1", f"exclude.{trial.id}.reason": "  "}, csrf)
    assert refused.status_code == 422
    assert "say why" in slot(refused.text, f"exclude.{trial.id}.reason")
    reason = "air bubble in the standpipe"
    response = post(lab, tail, {"version": "1", f"exclude.{trial.id}.reason": reason}, csrf)
    assert response.status_code == 200
    assert "Left out" in response.text
    assert reason in response.text
    (trial,) = trials(lab)
    assert (trial.excluded, trial.exclusion_reason) == (True, reason)
    back = post(lab, f"/trials/{trial.id}/include", {"version": "2"}, csrf)
    assert back.status_code == 200
    assert trials(lab)[0].excluded is False


# ---------- conditions and saturation (ASTM D5084) ----------


def test_flexible_wall_conditions_and_saturation_steps(lab: Lab) -> None:
    lab.test.standard = "ASTM D5084"
    lab.session.add(lab.test)
    lab.session.commit()
    csrf = lab.sign_in(lab.technician)
    page = lab.client.get(lab.url()).text
    assert 'id="conditions-section"' in page
    data = {
        "cond.cell_pressure": "80 psi",
        "cond.back_pressure": "515 kPa",
        "cond.effective_confining": "35 kPa",
        "cond.permeant": "de-aired tap water",
        "version": "1",
    }
    response = post(lab, "/conditions", data, csrf)
    assert response.status_code == 200, response.text
    test = lab.reload()
    # 1 psi = 6.894757 kPa (NIST SP 811 appendix B, from memory).
    assert test.cell_pressure_text == "80 psi"
    assert test.cell_pressure_kpa == pytest.approx(80 * 6.894757, rel=1e-6)
    bad = post(lab, "/saturation", {"sat.back_pressure": "345 kPa", "sat.b_value": "high"}, csrf)
    assert bad.status_code == 422
    assert "high" in slot(bad.text, "sat.b_value")
    keeps(bad.text, "sat.back_pressure", "345 kPa")
    step = post(lab, "/saturation", {"sat.back_pressure": "345 kPa", "sat.b_value": "0.96"}, csrf)
    assert step.status_code == 200, step.text
    assert 'data-testid="saturation-steps"' in step.text
    lab.fresh()
    saved = lab.session.exec(select(SaturationStep)).one()
    assert (saved.back_pressure_text, saved.b_value) == ("345 kPa", 0.96)


# ---------- submission ----------


def _ready_to_submit(lab: Lab, csrf: dict[str, str]) -> None:
    save_specimen(lab, csrf)
    assert post(lab, "/trials", {**CV2_TRIAL, "idempotency_key": "k-s"}, csrf).status_code == 201


def test_wrong_password_is_named_beside_the_field_and_nothing_changes(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    _ready_to_submit(lab, csrf)
    data = {
        "submit.password": "not my password",
        "submit.note": "two trials agree",
        "version": str(lab.reload().version),
    }
    response = post(lab, "/submit", data, csrf)
    assert response.status_code == 403
    assert "password is not correct" in slot(response.text, "submit.password")
    assert 'value="two trials agree"' in response.text
    assert 'value="not my password"' not in response.text  # a password is never echoed
    assert lab.reload().state == TestState.RUNNING
    assert lab.session.exec(select(SignOff)).first() is None


def test_overdue_calibration_refuses_submission_naming_the_item(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    _ready_to_submit(lab, csrf)
    version = str(lab.reload().version)
    chosen = {
        "app.permeameter": str(lab.permeameter.id),
        "app.thermometer": str(lab.overdue_thermometer.id),
        "version": version,
    }
    assert post(lab, "/apparatus", chosen, csrf).status_code == 200
    response = post(lab, "/submit", {"submit.password": PASSWORD}, csrf)
    assert response.status_code == 409
    problems = response.text.split('data-testid="apparatus-problems"')[1].split("</ul>")[0]
    assert "THERM-OLD" in problems
    assert "due for calibration" in problems
    assert lab.reload().state == TestState.RUNNING


def test_submit_with_the_password_signs_and_reloads_the_page(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    _ready_to_submit(lab, csrf)
    version = str(lab.reload().version)
    response = post(lab, "/submit", {"submit.password": PASSWORD, "version": version}, csrf)
    assert response.status_code == 200
    assert response.headers["hx-redirect"] == f"/tests/{lab.test_id}"
    test = lab.reload()
    assert test.state == TestState.SUBMITTED
    assert test.result_k_ref_m_per_s == pytest.approx(CV2_K20, rel=5e-4)  # CV2, ±0.05 %
    page = lab.client.get(lab.url()).text
    assert 'data-state="submitted"' in page
    assert 'id="trial-form"' not in page
    assert 'data-testid="sign-offs"' in page
    plain = post(lab, "/submit", {"submit.password": PASSWORD}, csrf, htmx=False)
    assert plain.status_code == 409  # already submitted: said in the section, as a page
    assert '<html lang="en">' in plain.text
    assert "cannot submit" in plain.text
