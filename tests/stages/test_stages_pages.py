"""The stage pages: the stepper, a stage form (decimal keypads, unit pickers), a refusal
beside its field with everything typed kept, the summary with its plots, and the short path
of a rigid-wall test."""

from __future__ import annotations

import re

from sqlmodel import select

from service.stages.example import example_stages
from service.stages.models import TestStage
from tests.auth_helpers import sign_in_cookie
from tests.stages.conftest import Lab, flexible_test, put_stage

HTMX = {"HX-Request": "true"}

SETUP_FORM = {
    "e.membrane": "latex, 0.30 mm",
    "e.diameter": "7.10",
    "e.diameter.unit": "cm",
    "e.length": "7.50",
    "e.length.unit": "cm",
    "e.wet_mass": "590.0",
    "e.wet_mass.unit": "g",
    "e.specific_gravity": "2.70",
}


def test_the_stepper_lists_the_five_stages(lab: Lab) -> None:
    test_id = flexible_test(lab)
    sign_in_cookie(lab.session, lab.client, lab.technician)
    page = lab.client.get(f"/tests/{test_id}/stages", headers=HTMX)
    assert page.status_code == 200
    for title in ("Set-up", "Saturation", "Consolidation", "Permeation", "After the test"):
        assert title in page.text
    test_page = lab.client.get(f"/tests/{test_id}")
    assert f'hx-get="/tests/{test_id}/stages"' in test_page.text


def test_a_stage_form_asks_for_numbers_on_a_decimal_keypad_with_units(lab: Lab) -> None:
    test_id = flexible_test(lab)
    sign_in_cookie(lab.session, lab.client, lab.technician)
    page = lab.client.get(f"/tests/{test_id}/stages/permeation")
    assert page.status_code == 200
    assert 'name="g.readings.0.headwater_pressure"' in page.text
    field = re.search(r'<input[^>]*name="g.readings.0.headwater_pressure"[^>]*>', page.text)
    assert field is not None
    assert 'inputmode="decimal"' in field.group(0)
    assert 'name="g.readings.headwater_pressure.unit"' in page.text


def test_saving_a_stage_opens_it_again_with_its_outcome(lab: Lab) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    answer = lab.client.post(
        f"/tests/{test_id}/stages/setup", data=SETUP_FORM, headers=csrf, follow_redirects=False
    )
    assert answer.status_code == 303
    assert answer.headers["location"] == f"/tests/{test_id}/stages/setup?saved=1"
    lab.session.commit()
    row = lab.session.exec(select(TestStage).where(TestStage.test_id == test_id)).one()
    assert row.typed["diameter"] == "7.10 cm"


def test_a_refused_value_is_shown_beside_its_field_and_everything_typed_is_kept(
    lab: Lab,
) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    form = {**SETUP_FORM, "e.length": "7,50"}
    answer = lab.client.post(f"/tests/{test_id}/stages/setup", data=form, headers=csrf)
    assert answer.status_code == 422
    assert 'id="err-e-length"' in answer.text
    assert "Set-up · Length" in answer.text
    assert 'value="7,50"' in answer.text
    assert 'value="latex, 0.30 mm"' in answer.text
    lab.session.commit()
    assert lab.session.exec(select(TestStage).where(TestStage.test_id == test_id)).first() is None


def test_hostile_text_is_shown_as_text(lab: Lab) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    form = {**SETUP_FORM, "e.membrane": "<script>alert(1)</script>"}
    lab.client.post(f"/tests/{test_id}/stages/setup", data=form, headers=csrf)
    page = lab.client.get(f"/tests/{test_id}/stages")
    assert "<script>alert(1)</script>" not in page.text
    assert "&lt;script&gt;" in page.text


def test_a_rigid_wall_test_shows_no_stages(lab: Lab) -> None:
    test_id = flexible_test(lab, standard="ASTM D5856", rigid=True)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    page = lab.client.get(f"/tests/{test_id}/stages", headers=HTMX)
    assert 'data-testid="no-stages"' in page.text
    answer = lab.client.post(f"/tests/{test_id}/stages/setup", data=SETUP_FORM, headers=csrf)
    assert answer.status_code == 409


def test_the_review_page_shows_the_stages_with_their_plots(lab: Lab) -> None:
    test_id = flexible_test(lab)
    for stage, body in example_stages().items():
        data = body.model_dump(mode="json", exclude_none=True)
        assert put_stage(lab, test_id, stage, data).status_code == 200
    sign_in_cookie(lab.session, lab.client, lab.manager)
    page = lab.client.get(f"/tests/{test_id}/review")
    assert page.status_code == 200
    assert 'data-testid="review-stages"' in page.text
    for plot in ("stage-b", "stage-root-time", "stage-k-time", "stage-k-pore-volumes"):
        assert f'id="{plot}"' in page.text
