"""The apparatus register pages (/apparatus): list, add, edit."""

from __future__ import annotations

import re

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session, select

from service.apparatus.models import Apparatus
from service.common import Role
from tests.factories import make_user
from tests.web.manager.conftest import HTMX, Lab, signed_in

NEW_PERMEAMETER = {
    "identifier": "PRM-T9",
    "kind": "rigid_wall_permeameter",
    "description": "Rigid-wall cell, 4 in",
    "specimen_area": "12.57 in^2",
    "port_spacing": "100 mm",
    "resolution": "1 mm",
    "calibrated_on": "2026-11-01",
    "calibration_due": "2027-11-01",
    "is_active": "on",
}


def _picker(text: str, name: str) -> str:
    return text.split(f'id="f-{name}-unit"')[1].split("</select>")[0]


def _item(session: Session, identifier: str) -> Apparatus | None:
    session.expire_all()
    return session.exec(select(Apparatus).where(Apparatus.identifier == identifier)).first()


def test_register_page_and_fragment(session: Session, lab: Lab, web_client: TestClient) -> None:
    signed_in(session, web_client, lab.manager)
    page = web_client.get("/apparatus")
    assert page.status_code == 200
    assert "<!doctype html>" in page.text
    assert "HX-Request" in page.headers["vary"]
    overdue = re.search(r'<tr class="is-overdue" data-apparatus="TMR-T1">.*?</tr>', page.text, re.S)
    assert overdue is not None
    assert 'data-testid="calibration-overdue"' in overdue.group(0)
    assert page.text.count('data-testid="calibration-overdue"') == 1
    assert 'href="/apparatus/new"' in page.text
    fragment = web_client.get("/apparatus?show=overdue", headers=HTMX)
    assert fragment.text.lstrip().startswith('<div id="apparatus-list"')
    assert re.findall(r'data-apparatus="([^"]+)"', fragment.text) == ["TMR-T1"]


def test_technician_reads_but_does_not_edit(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    csrf = signed_in(session, web_client, lab.technician)
    page = web_client.get("/apparatus")
    assert page.status_code == 200
    assert "/edit" not in page.text
    assert web_client.get("/apparatus/new").status_code == 403
    assert web_client.post("/apparatus", data=NEW_PERMEAMETER, headers=csrf).status_code == 403
    assert _item(session, "PRM-T9") is None


def test_client_gets_404(session: Session, lab: Lab, web_client: TestClient) -> None:
    signed_in(session, web_client, lab.client)
    assert web_client.get("/apparatus").status_code == 404


@pytest.mark.parametrize("role", [Role.LAB_MANAGER, Role.ADMIN])
def test_add_an_item(session: Session, lab: Lab, web_client: TestClient, role: Role) -> None:
    user = make_user(session, role=role, organisation=lab.lab)
    csrf = signed_in(session, web_client, user)
    form = web_client.get("/apparatus/new", headers=HTMX)
    assert form.status_code == 200
    assert form.text.lstrip().startswith('<section class="panel apparatus-form"')
    answer = web_client.post("/apparatus", data=NEW_PERMEAMETER, headers=csrf)
    assert answer.status_code == 303
    item = _item(session, "PRM-T9")
    assert item is not None
    assert answer.headers["location"] == f"/apparatus?saved={item.id}"
    # 12.57 in² = 12.57 × 6.4516e-4 m² (1 in = 0.0254 m exactly, international inch, 1959).
    assert item.specimen_area_m2 == pytest.approx(12.57 * 0.0254**2, rel=1e-12)
    assert item.specimen_area_text == "12.57 in^2"
    assert item.port_spacing_m == pytest.approx(0.100, rel=1e-12)
    assert item.resolution_si == pytest.approx(1e-3, rel=1e-12)


def test_refused_item_keeps_everything_typed(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    typed = {
        **NEW_PERMEAMETER,
        "specimen_area": "81",  # a keypad figure and a wrong unit picked beside it
        "specimen_area.unit": "cm",
        "calibration_due": "2025-01-01",
    }
    answer = web_client.post("/apparatus", data=typed, headers={**csrf, **HTMX})
    assert answer.status_code == 422
    assert answer.text.lstrip().startswith('<section class="panel apparatus-form"')
    for name in ("identifier", "description"):
        assert f'value="{typed[name]}"' in answer.text, name
    # Each figure back in its keypad field, its unit chosen in the picker beside it.
    for name, number, unit in (
        ("specimen_area", "81", "cm"),
        ("port_spacing", "100", "mm"),
        ("resolution", "1", "mm"),
    ):
        assert f'name="{name}" type="text" value="{number}"' in answer.text, name
        assert f'value="{unit}" selected' in _picker(answer.text, name), name
    assert 'value="2025-01-01"' in answer.text
    # The message sits beside the field that caused it.
    assert re.search(
        r'id="err-calibration_due"[^>]*>.*?before the calibration date', answer.text, re.S
    )
    assert _item(session, "PRM-T9") is None


def test_wrong_unit_is_named_beside_its_field(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    typed = {**NEW_PERMEAMETER, "specimen_area": "81 cm"}
    answer = web_client.post("/apparatus", data=typed, headers={**csrf, **HTMX})
    assert answer.status_code == 422
    message = re.search(r'id="err-specimen_area"[^>]*>(.*?)</p>', answer.text, re.S)
    assert message is not None
    assert "81 cm" in message.group(1)
    assert 'name="specimen_area" type="text" value="81"' in answer.text
    assert 'value="cm" selected' in _picker(answer.text, "specimen_area")


def test_duplicate_identifier(session: Session, lab: Lab, web_client: TestClient) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        "/apparatus", data={**NEW_PERMEAMETER, "identifier": "bal-t1"}, headers={**csrf, **HTMX}
    )
    assert answer.status_code == 409
    assert re.search(r'id="err-identifier"[^>]*>.*?already has an item', answer.text, re.S)


def test_edit_an_item(session: Session, lab: Lab, web_client: TestClient) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    page = web_client.get(f"/apparatus/{lab.balance.id}/edit")
    assert page.status_code == 200
    assert 'name="resolution" type="text" value="0.1"' in page.text
    assert 'value="g" selected' in _picker(page.text, "resolution")
    answer = web_client.post(
        f"/apparatus/{lab.balance.id}",
        data={
            "identifier": "BAL-T1",
            "resolution": "0.01 g",
            "calibrated_on": "2026-11-20",
            "calibration_due": "2027-11-20",
            "is_active": "on",
            "version": str(lab.balance.version),
        },
        headers={**csrf, **HTMX},
    )
    assert answer.status_code == 200
    assert answer.headers["hx-redirect"] == f"/apparatus?saved={lab.balance.id}"
    item = _item(session, "BAL-T1")
    assert item is not None
    assert item.resolution_si == pytest.approx(1e-5, rel=1e-12)
    assert item.version == 2


def test_edit_with_stale_version(session: Session, lab: Lab, web_client: TestClient) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    form = {
        "identifier": "BAL-T1",
        "description": "first edit",
        "resolution": "0.1 g",
        "is_active": "on",
        "version": "1",
    }
    assert (
        web_client.post(f"/apparatus/{lab.balance.id}", data=form, headers=csrf).status_code == 303
    )
    stale = web_client.post(
        f"/apparatus/{lab.balance.id}",
        data={**form, "description": "second edit"},
        headers={**csrf, **HTMX},
    )
    assert stale.status_code == 409
    compare = re.search(r'data-testid="stale-versions".*?</table>', stale.text, re.S)
    assert compare is not None
    assert "<td>1</td><td>2</td>" in compare.group(0)
    assert "<td>second edit</td><td>first edit</td>" in compare.group(0)
    assert 'value="second edit"' in stale.text  # yours is kept, against version 2
    assert 'name="version" value="2"' in stale.text


def test_edit_without_csrf_is_refused(session: Session, lab: Lab, web_client: TestClient) -> None:
    signed_in(session, web_client, lab.manager)
    answer = web_client.post(
        f"/apparatus/{lab.balance.id}", data={"identifier": "X-1", "version": "1"}
    )
    assert answer.status_code == 403
    assert _item(session, "BAL-T1") is not None


def test_geometry_fields_are_keypad_fields_with_unit_pickers(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    csrf = signed_in(session, web_client, lab.manager)
    form = web_client.get("/apparatus/new").text
    names = ("specimen_area", "port_spacing", "standpipe_area", "headwater_area")
    for name in (*names, "tailwater_area", "resolution"):
        field = re.search(rf'<input id="f-{name}" name="{name}"[^>]*>', form)
        assert field is not None, name
        assert 'inputmode="decimal"' in field.group(0), name
        assert f'name="{name}.unit"' in form, name
    # SI user: areas start in cm², the spacing in cm; a new balance's resolution in grams.
    assert 'value="cm**2" selected>cm²' in _picker(form, "standpipe_area")
    assert 'value="cm" selected' in _picker(form, "port_spacing")
    assert 'value="g" selected' in _picker(form, "resolution")
    # The number and the picked unit are stored as one typed text, as the API takes it.
    data = {
        **NEW_PERMEAMETER,
        "identifier": "PRM-K1",
        "kind": "flexible_wall_permeameter",
        "specimen_area": "",
        "port_spacing": "",
        "standpipe_area": "0,283",  # a keypad with a decimal comma
        "standpipe_area.unit": "cm**2",
        "headwater_area": "0.110",
        "headwater_area.unit": "in**2",
        "resolution": "1",
        "resolution.unit": "mm",
    }
    answer = web_client.post("/apparatus", data=data, headers=csrf)
    assert answer.status_code == 303
    item = _item(session, "PRM-K1")
    assert item is not None
    assert item.standpipe_area_text == "0.283 cm**2"
    # 1 cm² = 1e-4 m²; 1 in² = 6.4516e-4 m² (1 in = 0.0254 m exactly; NIST SP 811 B.8)
    assert item.standpipe_area_m2 == pytest.approx(0.283e-4, rel=1e-12)
    assert item.headwater_area_m2 == pytest.approx(0.110 * 0.0254**2, rel=1e-12)
    assert item.resolution_text == "1 mm"
    # Editing shows the stored text split back into figure and unit.
    edit = web_client.get(f"/apparatus/{item.id}/edit").text
    assert 'name="headwater_area" type="text" value="0.110"' in edit
    assert 'value="in**2" selected' in _picker(edit, "headwater_area")


def test_us_customary_manager_starts_in_inches(
    session: Session, lab: Lab, web_client: TestClient
) -> None:
    lab.manager.display_units = "us"
    session.add(lab.manager)
    session.commit()
    signed_in(session, web_client, lab.manager)
    form = web_client.get("/apparatus/new").text
    assert 'value="in**2" selected>in²' in _picker(form, "standpipe_area")
    assert 'value="in" selected' in _picker(form, "port_spacing")
