"""The lab of the lifecycle tests, and a flexible-wall test requested on it."""

from __future__ import annotations

from typing import Any

from service.common import ApparatusKind
from tests.lab_tests.conftest import Lab, lab, make_apparatus

__all__ = ["Lab", "flexible_test", "lab", "put_stage"]


def flexible_test(lab: Lab, *, standard: str = "ASTM D5084", rigid: bool = False) -> int:
    kind = (
        ApparatusKind.RIGID_WALL_PERMEAMETER if rigid else ApparatusKind.FLEXIBLE_WALL_PERMEAMETER
    )
    item = make_apparatus(lab.session, kind)
    lab.session.commit()
    body = {
        "method": "falling_head_rising_tail",
        "standard": standard,
        "technician_id": lab.technician.id,
        "apparatus_ids": [item.id],
    }
    response = lab.client.post(
        f"/api/v1/samples/{lab.sample.id}/tests", json=body, headers=lab.as_(lab.manager)
    )
    assert response.status_code == 201, response.text
    return int(response.json()["id"])


def put_stage(lab: Lab, test_id: int, stage: str, body: dict[str, Any], user: Any = None) -> Any:
    return lab.client.put(
        f"/api/v1/tests/{test_id}/stages/{stage}",
        json=body,
        headers=lab.as_(user or lab.technician),
    )
