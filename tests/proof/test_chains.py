"""The hash chains stay whole when their very first entry is written inside a savepoint that
is rolled back (the schedule import checks a file that way before storing it)."""

from __future__ import annotations

from fastapi.testclient import TestClient
from sqlmodel import Session

from service.audit.chain import verify
from tests.auth_helpers import bearer
from tests.certificates.arrange import build_world


def test_a_first_import_on_empty_chains_keeps_them_whole(
    session: Session, client: TestClient
) -> None:
    world = build_world(session)  # rows written directly: both chains are still empty
    headers = bearer(session, world.manager)
    for _ in range(2):
        response = client.post(
            "/api/v1/imports/schedules",
            files={"file": ("schedule.csv", b"Sample type\ntube\n", "text/csv")},
            data={"project_id": str(world.project.id)},
            headers=headers,
        )
        assert response.status_code == 201, response.text
    session.expire_all()
    for chain in ("audit", "custody"):
        report = verify(session, chain)
        assert report.ok, report
