"""Reception fixtures: the lab's people, a client with a project and a borehole."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import timedelta
from typing import Any

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import Organisation, User
from service.common import OrganisationKind, Role
from service.db import utcnow
from service.projects.models import Location, Project
from tests.auth_helpers import bearer
from tests.factories import make_location, make_organisation, make_project, make_user


@dataclass
class Lab:
    lab: Organisation
    manager: User
    technician: User
    client_org: Organisation
    client_user: User
    other_client_user: User
    project: Project
    borehole: Location
    manager_headers: dict[str, str]
    technician_headers: dict[str, str]
    client_headers: dict[str, str]
    other_client_headers: dict[str, str]


@pytest.fixture
def lab(session: Session) -> Lab:
    lab_org = make_organisation(session, kind=OrganisationKind.LAB, name="Reception Test Lab")
    manager = make_user(session, role=Role.LAB_MANAGER, organisation=lab_org, full_name="Ada Mgr")
    technician = make_user(
        session, role=Role.TECHNICIAN, organisation=lab_org, full_name="Tom Tech"
    )
    client_org = make_organisation(session, name="Client One")
    other_org = make_organisation(session, name="Client Two")
    client_user = make_user(session, role=Role.CLIENT, organisation=client_org)
    other_client_user = make_user(session, role=Role.CLIENT, organisation=other_org)
    project = make_project(session, client=client_org, number="C1-001", turnaround_days=10)
    borehole = make_location(session, project=project, name="BH-01")
    session.commit()
    return Lab(
        lab=lab_org,
        manager=manager,
        technician=technician,
        client_org=client_org,
        client_user=client_user,
        other_client_user=other_client_user,
        project=project,
        borehole=borehole,
        manager_headers=bearer(session, manager),
        technician_headers=bearer(session, technician),
        client_headers=bearer(session, client_user),
        other_client_headers=bearer(session, other_client_user),
    )


def batch_body(rows: list[dict[str, Any]] | None = None, **fields: Any) -> dict[str, Any]:
    """A reception batch received two days ago, by default of two tubes from BH-01."""
    received = utcnow() - timedelta(days=2)
    return {
        "received_at": received.isoformat(),
        "delivered_by": "courier",
        "samples": rows
        if rows is not None
        else [
            {
                "client_sample_id": "BH01-U1",
                "location": "BH-01",
                "depth_top": "1.50 m",
                "depth_bottom": "1.95 m",
                "sample_type": "tube",
                "condition": "ends waxed",
                "seal_intact": True,
                "storage_place": "Cold room A/1",
            },
            {
                "client_sample_id": "BH01-B2",
                "location": "bh-01",
                "depth_top": "5 ft",
                "depth_bottom": "6.5 ft",
                "sample_type": "bulk",
                "priority": "urgent",
            },
        ],
        **fields,
    }


def receive(client: TestClient, lab: Lab, body: dict[str, Any], key: str = "batch-key-0001") -> Any:
    return client.post(
        f"/api/v1/projects/{lab.project.id}/samples",
        json=body,
        headers={**lab.technician_headers, "Idempotency-Key": key},
    )
