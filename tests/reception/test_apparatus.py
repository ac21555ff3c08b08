"""The apparatus register: typed geometry and resolutions, overdue calibration, versions."""

from __future__ import annotations

from datetime import date, timedelta

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.apparatus.models import Apparatus
from service.apparatus.service import calibration_problems
from service.db import utcnow
from service.lab_tests.models import TestApparatus
from tests.factories import make_test
from tests.reception.conftest import Lab

URL = "/api/v1/apparatus"


def _add(client: TestClient, lab: Lab, **fields: object) -> dict[str, object]:
    response = client.post(URL, json=fields, headers=lab.manager_headers)
    assert response.status_code == 201, response.text
    return dict(response.json())


@pytest.mark.parametrize(
    ("kind", "typed", "si"),
    [
        # 1 g = 1e-3 kg, 1 mm = 1e-3 m, 1 kPa = 1e3 Pa, 1 mL = 1e-6 m^3 (SI prefixes).
        ("balance", "0.1 g", 1e-4),
        ("caliper", "0.02 mm", 2e-5),
        ("timer", "0.1 s", 0.1),
        ("pressure_transducer", "0.1 kPa", 100.0),
        ("burette", "0.1 mL", 1e-7),
        # A step of 1 degree Celsius equals 1 kelvin (SI Brochure 2.3.1); 1 degF = 5/9 K.
        ("thermometer", "0.1 degC", 0.1),
        ("thermometer", "0.18 degF", 0.1),
    ],
)
def test_resolution_is_kept_as_typed_and_in_si(
    client: TestClient, lab: Lab, kind: str, typed: str, si: float
) -> None:
    item = _add(client, lab, identifier=f"X-{kind}-{typed}", kind=kind, resolution=typed)
    assert item["resolution_text"] == typed
    assert item["resolution_si"] == pytest.approx(si, rel=1e-9)


def test_resolution_of_the_wrong_dimension_is_refused(client: TestClient, lab: Lab) -> None:
    response = client.post(
        URL,
        json={"identifier": "BAL-9", "kind": "balance", "resolution": "0.1 mm"},
        headers=lab.manager_headers,
    )
    assert response.status_code == 422
    problem = response.json()["errors"][0]
    assert problem["loc"] == ["body", "resolution"]
    assert "mass" in problem["msg"]


def test_permeameter_geometry_as_typed(client: TestClient, lab: Lab) -> None:
    item = _add(
        client,
        lab,
        identifier="PRM-R01",
        kind="rigid_wall_permeameter",
        specimen_area="81.07 cm^2",
        port_spacing="100 mm",
        standpipe_area="0.5 cm^2",
    )
    # 1 cm^2 = 1e-4 m^2 and 1 mm = 1e-3 m (SI prefixes).
    assert item["specimen_area_m2"] == pytest.approx(81.07e-4, rel=1e-12)
    assert item["port_spacing_m"] == pytest.approx(0.1, rel=1e-12)
    assert item["standpipe_area_text"] == "0.5 cm^2"
    wrong = client.post(
        URL,
        json={"identifier": "PRM-R02", "kind": "rigid_wall_permeameter", "port_spacing": "1 cm^2"},
        headers=lab.manager_headers,
    )
    assert wrong.status_code == 422
    assert wrong.json()["errors"][0]["loc"] == ["body", "port_spacing"]


def test_overdue_flag_and_filter(client: TestClient, lab: Lab) -> None:
    today = utcnow().date()
    _add(
        client,
        lab,
        identifier="TMR-01",
        kind="timer",
        calibrated_on=str(today - timedelta(days=400)),
        calibration_due=str(today - timedelta(days=1)),
    )
    _add(client, lab, identifier="TMR-02", kind="timer", calibration_due=str(today))
    _add(client, lab, identifier="TMR-03", kind="timer")
    listed = client.get(URL, headers=lab.technician_headers).json()
    assert {i["identifier"]: i["overdue"] for i in listed["items"]} == {
        "TMR-01": True,
        "TMR-02": False,  # due today: still in calibration (common practice, no source)
        "TMR-03": False,
    }
    overdue = client.get(URL, params={"overdue": True}, headers=lab.technician_headers).json()
    assert [i["identifier"] for i in overdue["items"]] == ["TMR-01"]
    assert overdue["total"] == 1


def test_due_before_calibration_is_refused(client: TestClient, lab: Lab) -> None:
    response = client.post(
        URL,
        json={
            "identifier": "BAL-2",
            "kind": "balance",
            "calibrated_on": "2026-06-01",
            "calibration_due": "2026-05-01",
        },
        headers=lab.manager_headers,
    )
    assert response.status_code == 422
    problem = response.json()["errors"][0]
    assert problem["loc"] == ["body", "calibration_due"]
    assert "before the calibration date" in problem["msg"]


def test_identifier_is_unique(client: TestClient, lab: Lab) -> None:
    _add(client, lab, identifier="BAL-01", kind="balance")
    again = client.post(
        URL, json={"identifier": "bal-01", "kind": "balance"}, headers=lab.manager_headers
    )
    assert again.status_code == 409


def test_stale_version_and_update(client: TestClient, lab: Lab) -> None:
    item = _add(client, lab, identifier="BAL-03", kind="balance", resolution="1 g")
    url = f"{URL}/{item['id']}"
    done = client.patch(
        url, json={"version": 1, "resolution": "0.01 g"}, headers=lab.manager_headers
    )
    assert done.status_code == 200
    assert done.json()["resolution_si"] == pytest.approx(1e-5)
    stale = client.patch(url, json={"version": 1, "description": "x"}, headers=lab.manager_headers)
    assert stale.status_code == 409
    assert stale.json()["current"]["version"] == 2


def test_technicians_read_but_do_not_edit(client: TestClient, lab: Lab) -> None:
    response = client.post(
        URL, json={"identifier": "T-1", "kind": "timer"}, headers=lab.technician_headers
    )
    assert response.status_code == 403
    assert client.get(URL, headers=lab.client_headers).status_code == 403


def test_used_apparatus_cannot_be_deleted(client: TestClient, session: Session, lab: Lab) -> None:
    used = _add(client, lab, identifier="BAL-04", kind="balance")
    spare = _add(client, lab, identifier="BAL-05", kind="balance")
    test = make_test(session)
    assert test.id is not None
    session.add(TestApparatus(test_id=test.id, apparatus_id=int(str(used["id"]))))
    session.commit()
    assert client.delete(f"{URL}/{used['id']}", headers=lab.manager_headers).status_code == 409
    assert client.delete(f"{URL}/{spare['id']}", headers=lab.manager_headers).status_code == 204
    assert client.get(f"{URL}/{spare['id']}", headers=lab.manager_headers).status_code == 404


def test_calibration_problems_names_overdue_retired_and_unknown(session: Session) -> None:
    on = date(2026, 11, 2)
    items = [
        Apparatus(identifier="OK-1", kind="balance", calibration_due=on),
        Apparatus(identifier="LATE-1", kind="timer", calibration_due=on - timedelta(days=1)),
        Apparatus(identifier="OLD-1", kind="caliper", is_active=False),
        Apparatus(identifier="NODATE", kind="rigid_wall_permeameter"),
    ]
    session.add_all(items)
    session.flush()
    ids = [item.id for item in items if item.id is not None]
    problems = calibration_problems(session, [*ids, 987654], on=on)
    assert [(p.identifier, p.reason) for p in problems] == [
        ("", "unknown"),
        ("LATE-1", "overdue"),
        ("OLD-1", "retired"),
    ]
    assert "2026-11-01" in problems[1].message
    assert calibration_problems(session, [ids[0], ids[3]], on=on) == []
    assert calibration_problems(session, [], on=on) == []
