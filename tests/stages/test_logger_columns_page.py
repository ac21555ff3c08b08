"""The logger columns page of a stage: reached from the stage page, a heading box and a unit
picker per quantity, saved through the API's own rule (audited), a refusal beside its field
with everything typed kept, and nothing of it shown to a client."""

from __future__ import annotations

import re

from sqlmodel import select

from service.audit.service import audit_rows
from service.stages.models import LoggerMapping
from tests.auth_helpers import sign_in_cookie
from tests.stages.conftest import Lab, flexible_test, put_stage
from tests.stages.test_stages_logger import CLEAN, _permeameter

FORM = {
    "time.column": "Elapsed (min)",
    "time.unit": "min",
    "c.volume_change.column": "Vol (mL)",
    "c.volume_change.unit": "mL",
}


def _url(test_id: int, stage: str = "consolidation") -> str:
    return f"/tests/{test_id}/stages/{stage}/logger-columns"


def _mappings(lab: Lab) -> list[LoggerMapping]:
    lab.session.commit()
    return list(lab.session.exec(select(LoggerMapping)).all())


def test_the_stage_page_links_to_the_columns_form_of_its_permeameter(lab: Lab) -> None:
    test_id = flexible_test(lab)
    sign_in_cookie(lab.session, lab.client, lab.technician)
    stage = lab.client.get(f"/tests/{test_id}/stages/permeation")
    link = re.search(r'<a [^>]*data-testid="set-columns"[^>]*>([^<]*)</a>', stage.text)
    assert link is not None
    assert f'href="{_url(test_id, "permeation")}"' in link.group(0)
    assert link.group(1).startswith("Set up the logger columns for ")
    page = lab.client.get(_url(test_id, "permeation"))
    assert page.status_code == 200
    for name in ("headwater_reading", "tailwater_reading", "headwater_pressure",
                 "tailwater_pressure", "temperature"):  # fmt: skip
        assert f'name="c.{name}.column"' in page.text
        assert re.search(rf'<select[^>]*name="c\.{name}\.unit"', page.text)
    assert re.search(r'<select[^>]*name="time\.unit"', page.text)
    # A pressure is offered in kPa and psi, a temperature in °C and °F (common practice, no
    # source: the units a lab's transducers and thermometers read in).
    assert '<option value="psi">psi</option>' in page.text
    assert "°F" in page.text


def test_only_technicians_and_managers_set_columns_and_clients_see_nothing(lab: Lab) -> None:
    test_id = flexible_test(lab)
    sign_in_cookie(lab.session, lab.client, lab.manager)
    assert lab.client.get(_url(test_id)).status_code == 200
    sign_in_cookie(lab.session, lab.client, lab.reviewer)
    assert lab.client.get(_url(test_id)).status_code == 403
    for outsider in (lab.client_user, lab.stranger):
        csrf = sign_in_cookie(lab.session, lab.client, outsider)
        assert lab.client.get(_url(test_id)).status_code == 404
        assert lab.client.post(_url(test_id), data=FORM, headers=csrf).status_code == 404
    assert _mappings(lab) == []


def test_saving_stores_the_mapping_audited_and_a_file_then_reads(lab: Lab) -> None:
    test_id = flexible_test(lab)
    body = {"entries": {"cell_pressure": "465 kPa", "back_pressure": "430 kPa"}}
    assert put_stage(lab, test_id, "consolidation", body).status_code == 200
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    saved = lab.client.post(_url(test_id), data=FORM, headers=csrf, follow_redirects=False)
    assert saved.status_code == 303, saved.text
    assert saved.headers["location"] == f"/tests/{test_id}/stages/consolidation?columns=1"
    [row] = _mappings(lab)
    assert row.apparatus_id == _permeameter(lab, test_id)
    time = {"column": "Elapsed (min)", "unit": "min", "datetime_format": None}
    assert row.mapping["time"] == time
    assert row.mapping["channels"] == {
        "volume_change": {"column": "Vol (mL)", "unit": "mL", "required": True}
    }
    assert row.id is not None
    [created] = audit_rows(lab.session, "logger_mapping", row.id)
    assert created.actor_id == lab.technician.id
    stage = lab.client.get(f"/tests/{test_id}/stages/consolidation?columns=1")
    assert 'data-testid="columns-saved"' in stage.text
    assert "Vol (mL)" in stage.text
    # The form opens with what was saved; a change is a second audit row.
    page = lab.client.get(_url(test_id))
    assert 'value="Vol (mL)"' in page.text
    changed = {**FORM, "c.volume_change.column": "2", "version": str(row.version)}
    answer = lab.client.post(_url(test_id), data=changed, headers=csrf, follow_redirects=False)
    assert answer.status_code == 303, answer.text
    lab.session.commit()
    assert len(audit_rows(lab.session, "logger_mapping", row.id)) == 2
    files = {"file": ("cell.csv", CLEAN.encode())}
    taken = lab.client.post(
        f"/tests/{test_id}/stages/consolidation/logger",
        files=files,
        headers=csrf,
        follow_redirects=False,
    )
    assert taken.status_code == 303, taken.text


def test_a_wrong_unit_is_refused_beside_its_field_with_everything_kept(lab: Lab) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    # kPa is a pressure, not a volume (SI Brochure, 9th ed., table 4).
    form = {**FORM, "c.volume_change.unit": "kPa", "c.volume_change.gaps": "on"}
    answer = lab.client.post(_url(test_id), data=form, headers=csrf)
    assert answer.status_code == 422
    beside = re.search(r'id="err-c-volume_change-unit"[^>]*>(.*?)</p>', answer.text, re.S)
    assert beside is not None
    assert "kPa" in beside.group(1)
    assert "Volume change · Unit" in answer.text
    assert 'value="Elapsed (min)"' in answer.text
    assert 'value="Vol (mL)"' in answer.text
    assert '<option value="kPa" selected>' in answer.text
    assert re.search(r'name="c.volume_change.gaps"[^>]* checked', answer.text)
    assert _mappings(lab) == []


def test_hostile_entries_are_refused_or_shown_as_text(lab: Lab) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    form = {
        **FORM,
        "time.column": "",
        "time.unit": "clock:<script>alert(1)</script>",
        "c.volume_change.column": '"><script>alert(2)</script>',
        "c.nonsense.column": "x",
    }
    answer = lab.client.post(_url(test_id), data=form, headers=csrf)
    assert answer.status_code == 422
    assert "<script>" not in answer.text
    assert "&lt;script&gt;alert(2)" in answer.text
    assert 'id="err-time-column"' in answer.text
    assert "Time column · Heading" in answer.text
    # No heading at all is refused by label, not stored.
    empty = {"time.column": "t", "time.unit": "min", "c.volume_change.column": ""}
    answer = lab.client.post(_url(test_id), data=empty, headers=csrf)
    assert answer.status_code == 422
    assert "at least one" in answer.text
    assert lab.client.get(_url(test_id, "saturation")).status_code == 404
    assert _mappings(lab) == []


def test_a_file_refused_for_want_of_columns_links_to_the_form(lab: Lab) -> None:
    test_id = flexible_test(lab)
    csrf = sign_in_cookie(lab.session, lab.client, lab.technician)
    answer = lab.client.post(
        f"/tests/{test_id}/stages/consolidation/logger",
        files={"file": ("cell.csv", CLEAN.encode())},
        headers=csrf,
    )
    assert answer.status_code == 409
    assert 'data-testid="columns-missing"' in answer.text
    assert f'href="{_url(test_id)}"' in answer.text
