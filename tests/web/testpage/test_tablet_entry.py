"""Entering figures on a tablet: a decimal-keypad field and a unit picker for each entry,
joined into the typed text on the server; the unit starts in the user's unit system and then
as last picked on the same permeameter.

Reference figures are CV2 of /work/shared/reference/domain-reference.md §10 (falling head,
a = 0.282743 cm², D = 7.10 cm, L = 11.60 cm, h1 = 100.0 cm, h2 = 70.0 cm, Δt = 3600 s,
T = 18.0 °C → k20 = 8.6261e-8 m/s)."""

from __future__ import annotations

import re

import pytest
from sqlmodel import select

from service.lab_tests.models import Specimen, Trial
from tests.web.fields import keeps
from tests.web.testpage.conftest import HTMX, Lab

CV2_K20 = 8.6261e-8
DIGITS = str.maketrans("⁰¹²³⁴⁵⁶⁷⁸⁹", "0123456789")
# Keypad entries: figures alone, the units chosen in the pickers beside them.
KEYPAD_SPECIMEN = {
    "specimen.diameter": "7.10",
    "specimen.diameter.unit": "cm",
    "specimen.length": "116.0",
    "specimen.length.unit": "mm",
}
KEYPAD_TRIAL = {
    "trial.head_initial": "100,0",  # a keypad with a decimal comma
    "trial.head_initial.unit": "cm",
    "trial.head_final": "0.700",
    "trial.head_final.unit": "m",
    "trial.duration": "60",
    "trial.duration.unit": "min",
    "trial.temperature": "64.4",  # 18.0 °C = 64.4 °F exactly
    "trial.temperature.unit": "degF",
}


def post(lab: Lab, tail: str, data: dict[str, str], csrf: dict[str, str]) -> object:
    return lab.client.post(lab.url(tail), data=data, headers={**csrf, **HTMX})


def picker(text: str, name: str) -> str:
    field_id = "f-" + name.replace(".", "-")
    return text.split(f'id="{field_id}-unit"')[1].split("</select>")[0]


def test_every_entry_is_a_keypad_field_with_a_unit_picker(lab: Lab) -> None:
    lab.sign_in(lab.technician)
    text = lab.client.get(lab.url()).text
    for name in ("specimen.diameter", "specimen.length", "trial.head_initial", "trial.duration"):
        field = re.search(rf'<input id="[^"]+" name="{re.escape(name)}"[^>]*>', text)
        assert field is not None, name
        assert 'inputmode="decimal"' in field.group(0)
        assert 'enterkeyhint="next"' in field.group(0)
        assert 'pattern="[0-9.,eE+\\-]*"' in field.group(0)
        assert f'name="{name}.unit"' in text
    # The user's unit system (SI) picks the catalogue's unit; the picker shows symbols.
    assert 'value="cm" selected' in picker(text, "trial.head_initial")
    assert 'value="degC" selected>°C' in picker(text, "trial.temperature")
    # A plain number (specific gravity) has no picker.
    assert 'name="specimen.specific_gravity.unit"' not in text
    # The stopwatch sits beside the duration field.
    duration = text.split('id="f-trial-duration"')[1].split('class="field-error')[0]
    assert 'data-stopwatch-for="f-trial-duration"' in duration


def test_us_customary_users_start_in_inches_and_fahrenheit(lab: Lab) -> None:
    lab.technician.display_units = "us"
    lab.session.add(lab.technician)
    lab.session.commit()
    lab.sign_in(lab.technician)
    text = lab.client.get(lab.url()).text
    assert 'value="in" selected' in picker(text, "trial.head_initial")
    assert 'value="degF" selected' in picker(text, "trial.temperature")


def test_number_and_unit_are_joined_into_the_typed_text(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    saved = post(lab, "/specimen", KEYPAD_SPECIMEN, csrf)
    assert saved.status_code == 200, saved.text  # type: ignore[attr-defined]
    trial = post(lab, "/trials", {**KEYPAD_TRIAL, "idempotency_key": "keypad-1"}, csrf)
    assert trial.status_code == 201, trial.text  # type: ignore[attr-defined]
    lab.fresh()
    specimen = lab.session.exec(select(Specimen)).one()
    assert (specimen.diameter_text, specimen.length_text) == ("7.10 cm", "116.0 mm")
    (stored,) = lab.session.exec(select(Trial)).all()
    assert stored.entries == {
        "head_initial": "100.0 cm",
        "head_final": "0.700 m",
        "duration": "60 min",
        "temperature": "64.4 degF",
    }
    saved_k20 = trial.text.split('data-testid="saved-k20"')[1]  # type: ignore[attr-defined]
    match = re.search(r"([\d.]+) × 10⁻(\d)", saved_k20.translate(DIGITS))
    assert match is not None
    k20 = float(match.group(1)) * 10 ** -int(match.group(2))
    assert k20 == pytest.approx(CV2_K20, rel=0.006)  # CV2: the same figures in other units


def test_units_are_remembered_for_the_permeameter(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    post(lab, "/specimen", KEYPAD_SPECIMEN, csrf)
    post(lab, "/trials", {**KEYPAD_TRIAL, "idempotency_key": "keypad-2"}, csrf)
    text = lab.client.get(lab.url()).text
    # The next trial's pickers start where the last one left them.
    assert 'value="m" selected' in picker(text, "trial.head_final")
    assert 'value="min" selected' in picker(text, "trial.duration")
    assert 'value="degF" selected' in picker(text, "trial.temperature")
    # The specimen as stored is shown split again.
    keeps(text, "specimen.length", "116.0 mm")


def test_a_refused_keypad_entry_keeps_the_number_and_the_unit(lab: Lab) -> None:
    csrf = lab.sign_in(lab.technician)
    post(lab, "/specimen", KEYPAD_SPECIMEN, csrf)
    data = {**KEYPAD_TRIAL, "trial.head_final": "0.7.1", "idempotency_key": "keypad-3"}
    response = post(lab, "/trials", data, csrf)
    assert response.status_code == 422  # type: ignore[attr-defined]
    text = response.text  # type: ignore[attr-defined]
    keeps(text, "trial.head_final", "0.7.1 m")
    keeps(text, "trial.duration", "60 min")
    message = text.split('id="err-trial-head_final"')[1].split("</p>")[0]
    assert "you typed &#39;0.7.1&#39;" in message
    assert "trials[0]" not in message
    assert lab.session.exec(select(Trial)).first() is None


@pytest.mark.parametrize(
    "hostile",
    [
        '7"><script>alert(1)</script>',
        "1e999999",
        "cm**9**9**9",
    ],
)
def test_a_hostile_unit_is_refused_not_run(lab: Lab, hostile: str) -> None:
    csrf = lab.sign_in(lab.technician)
    data = {**KEYPAD_SPECIMEN, "specimen.length.unit": hostile}
    response = post(lab, "/specimen", data, csrf)
    assert response.status_code == 422  # type: ignore[attr-defined]
    assert "<script>alert(1)" not in response.text  # type: ignore[attr-defined]
    assert lab.session.exec(select(Specimen)).first() is None
