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
    typed = {**NEW_PERMEAMETER, "specimen_area": "81 cm", "calibration_due": "2025-01-01"}
    answer = web_client.post("/apparatus", data=typed, headers={**csrf, **HTMX})
    assert answer.status_code == 422
    assert answer.text.lstrip().startswith('<section class="panel apparatus-form"')
    for name in ("identifier", "description", "specimen_area", "port_spacing", "resolution"):
        assert f'value="{typed[name]}"' in answer.text, name
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
    assert 'value="81 cm"' in answer.text


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
    assert 'value="0.1 g"' in page.text
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
