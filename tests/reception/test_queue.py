"""The manager's queue: counts by state, overdue, technician load, filters, paging, order."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.common import Role
from service.db import utcnow
from tests.factories import make_organisation, make_project, make_sample, make_test, make_user
from tests.reception.conftest import Lab


@dataclass
class Queue:
    tests: dict[str, int]
    other_client_id: int
    second_technician_id: int


@pytest.fixture
def queue(session: Session, lab: Lab) -> Queue:
    today = utcnow().date()
    other_client = make_organisation(session, name="Client Three")
    other_project = make_project(session, client=other_client, number="C3-001")
    tech2 = make_user(session, role=Role.TECHNICIAN, organisation=lab.lab, full_name="Zed Tech")
    s1 = make_sample(session, project=lab.project, due_date=today - timedelta(days=3))
    s2 = make_sample(session, project=lab.project, due_date=today + timedelta(days=5))
    s3 = make_sample(session, project=other_project, due_date=today + timedelta(days=1))
    s4 = make_sample(session, project=other_project, due_date=today - timedelta(days=10))
    tech1 = lab.technician.id
    tests = {
        "t1": make_test(session, sample=s1, state="running", technician_id=tech1),
        "t2": make_test(session, sample=s2, state="planned", technician_id=tech1),
        "t3": make_test(session, sample=s3, state="submitted", technician_id=tech2.id),
        "t4": make_test(session, sample=s4, state="issued", technician_id=tech2.id),
        # A test's own due date overrides its sample's.
        "t5": make_test(
            session, sample=s2, series=2, state="planned", due_date=today - timedelta(days=1)
        ),
    }
    session.commit()
    assert other_client.id is not None
    assert tech2.id is not None
    return Queue(
        tests={name: int(test.id or 0) for name, test in tests.items()},
        other_client_id=other_client.id,
        second_technician_id=tech2.id,
    )


def _get(client: TestClient, lab: Lab, **params: Any) -> dict[str, Any]:
    response = client.get("/api/v1/queue", params=params, headers=lab.manager_headers)
    assert response.status_code == 200, response.text
    return dict(response.json())


def _names(queue: Queue, body: dict[str, Any]) -> list[str]:
    by_id = {test_id: name for name, test_id in queue.tests.items()}
    return [by_id[item["test_id"]] for item in body["tests"]["items"]]


def test_counts_overdue_and_default_order(client: TestClient, lab: Lab, queue: Queue) -> None:
    body = _get(client, lab)
    assert body["counts"] == {
        "planned": 2,
        "running": 1,
        "submitted": 1,
        "approved": 0,
        "issued": 1,
        "superseded": 0,
    }
    assert body["overdue"] == 2
    # Open tests only, earliest due first; issued t4 is done and never overdue.
    assert _names(queue, body) == ["t1", "t5", "t3", "t2"]
    assert body["tests"]["total"] == 4
    first = body["tests"]["items"][0]
    assert first["overdue"] is True
    assert first["client_name"] == "Client One"
    assert first["project_number"] == "C1-001"
    assert first["technician_name"] == "Tom Tech"
    assert first["sample_lab_id"]
    assert [item["overdue"] for item in body["tests"]["items"]] == [True, True, False, False]


def test_technician_load(client: TestClient, lab: Lab, queue: Queue) -> None:
    load = _get(client, lab)["load"]
    assert [(row["technician_name"], row["total"], row["overdue"]) for row in load] == [
        ("Tom Tech", 2, 1),
        ("Zed Tech", 1, 0),
        (None, 1, 1),  # t5, not yet assigned
    ]
    assert (load[0]["running"], load[0]["planned"]) == (1, 1)


@pytest.mark.parametrize(
    ("params", "expected"),
    [
        ({"state": "issued"}, ["t4"]),
        ({"state": ["planned", "running"]}, ["t1", "t5", "t2"]),
        ({"technician_id": "tech1"}, ["t1", "t2"]),
        ({"client_id": "other"}, ["t3"]),
        ({"project_id": "lab"}, ["t1", "t5", "t2"]),
        ({"due_before": "today"}, ["t1", "t5"]),
        ({"overdue": True}, ["t1", "t5"]),
        ({"overdue": False}, ["t3", "t2"]),
    ],
)
def test_filters(
    client: TestClient, lab: Lab, queue: Queue, params: dict[str, Any], expected: list[str]
) -> None:
    replacements = {
        "tech1": lab.technician.id,
        "other": queue.other_client_id,
        "lab": lab.project.id,
        "today": utcnow().date().isoformat(),
    }
    resolved = {k: replacements.get(v, v) if isinstance(v, str) else v for k, v in params.items()}
    body = _get(client, lab, **resolved)
    assert _names(queue, body) == expected
    assert body["tests"]["total"] == len(expected)


def test_counts_follow_the_client_filter(client: TestClient, lab: Lab, queue: Queue) -> None:
    counts = _get(client, lab, client_id=queue.other_client_id)["counts"]
    assert (counts["submitted"], counts["issued"], counts["planned"]) == (1, 1, 0)


def test_pagination_keeps_the_total(client: TestClient, lab: Lab, queue: Queue) -> None:
    body = _get(client, lab, limit=2, offset=1)
    assert _names(queue, body) == ["t5", "t3"]
    assert (body["tests"]["total"], body["tests"]["limit"], body["tests"]["offset"]) == (4, 2, 1)


def test_urgent_first_on_the_same_due_date(client: TestClient, session: Session, lab: Lab) -> None:
    due = utcnow().date() + timedelta(days=4)
    normal = make_test(session, sample=make_sample(session, project=lab.project, due_date=due))
    urgent = make_test(
        session,
        sample=make_sample(session, project=lab.project, due_date=due, priority="urgent"),
    )
    session.commit()
    items = _get(client, lab)["tests"]["items"]
    assert [item["test_id"] for item in items] == [urgent.id, normal.id]
    assert items[0]["priority"] == "urgent"


def test_bad_filters_are_refused(client: TestClient, lab: Lab) -> None:
    for params in ({"state": "lost"}, {"limit": 0}, {"limit": 10_000}, {"due_before": "soon"}):
        response = client.get("/api/v1/queue", params=params, headers=lab.manager_headers)
        assert response.status_code == 422, params


def test_clients_have_no_queue(client: TestClient, lab: Lab) -> None:
    assert client.get("/api/v1/queue", headers=lab.client_headers).status_code == 403


def test_tests_without_a_due_date_come_last(client: TestClient, session: Session, lab: Lab) -> None:
    undated = make_test(session, sample=make_sample(session, project=lab.project))
    dated = make_test(
        session,
        sample=make_sample(session, project=lab.project, due_date=utcnow().date()),
    )
    session.commit()
    body = _get(client, lab)
    assert [item["test_id"] for item in body["tests"]["items"]] == [dated.id, undated.id]
    assert body["tests"]["items"][1]["overdue"] is False
