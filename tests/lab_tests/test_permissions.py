"""Who may do what with a test: `allowed_actions` answers for the guards and the pages."""

from __future__ import annotations

import pytest

from service.common import Role, TestState
from service.lab_tests import service as lab_tests
from service.lab_tests.models import PermeabilityTest
from tests.factories import make_user
from tests.lab_tests.conftest import Lab
from tests.lab_tests.test_lifecycle import read, request_falling_head

Action = lab_tests.Action


def _limit(lab: Lab, test_id: int, user: object, value: str | None) -> int:
    version = read(lab, test_id)["version"]
    response = lab.client.patch(
        f"/api/v1/tests/{test_id}",
        json={"version": version, "spec_k_max": value},
        headers=lab.as_(user),  # type: ignore[arg-type]
    )
    return response.status_code


@pytest.mark.parametrize("value", ["1e-6 m/s", None], ids=["raised", "removed"])
def test_a_technician_may_not_loosen_the_limit_of_their_own_test(lab: Lab, value: str) -> None:
    # The project's limit is 1e-7 m/s; a manager holds this test to 1e-8 m/s. Raising it, or
    # removing the test's own limit (back to the project's), is for planners only.
    test_id = request_falling_head(lab)
    assert _limit(lab, test_id, lab.manager, "1e-8 m/s") == 200
    assert _limit(lab, test_id, lab.technician, value) == 403
    stored = read(lab, test_id)
    assert stored["spec_k_max_text"] == "1e-8 m/s"
    assert stored["spec_k_max_m_per_s"] == pytest.approx(1e-8)


def test_a_technician_may_still_change_the_conditions_of_their_test(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    version = read(lab, test_id)["version"]
    response = lab.client.patch(
        f"/api/v1/tests/{test_id}",
        json={"version": version, "cell_pressure": "550 kPa"},
        headers=lab.as_(lab.technician),
    )
    assert response.status_code == 200, response.text


def test_a_lab_manager_or_reviewer_changes_the_limit(lab: Lab) -> None:
    test_id = request_falling_head(lab)
    assert _limit(lab, test_id, lab.manager, "1e-6 m/s") == 200
    assert read(lab, test_id)["spec_k_max_m_per_s"] == pytest.approx(1e-6)
    assert _limit(lab, test_id, lab.reviewer, None) == 200  # back to the project's limit
    assert read(lab, test_id)["spec_k_max_text"] == "1e-7 m/s"


def _test(state: TestState, technician_id: int | None = None) -> PermeabilityTest:
    return PermeabilityTest(
        id=1, sample_id=1, method="falling_head", state=state, technician_id=technician_id
    )


def test_allowed_actions_follow_the_state_and_the_person(lab: Lab) -> None:
    technician, manager, reviewer = lab.technician, lab.manager, lab.reviewer
    running = _test(TestState.RUNNING, technician_id=technician.id)
    assert lab_tests.allowed_actions(running, technician) == {
        Action.EDIT,
        Action.RECORD,
        Action.SUBMIT,
    }
    other = make_user(lab.session, role=Role.TECHNICIAN)
    assert lab_tests.allowed_actions(running, other) == frozenset()
    assert Action.SET_LIMIT in lab_tests.allowed_actions(running, manager)
    submitted = _test(TestState.SUBMITTED, technician_id=technician.id)
    assert lab_tests.allowed_actions(submitted, reviewer) == {Action.APPROVE, Action.SEND_BACK}
    # nobody approves a test they performed
    assert Action.APPROVE not in lab_tests.allowed_actions(
        submitted, reviewer, performers={reviewer.id or 0}
    )
    issued = _test(TestState.ISSUED)
    assert lab_tests.allowed_actions(issued, reviewer) == {Action.CORRECT}
    issued.superseded_by_id = 2
    assert lab_tests.allowed_actions(issued, reviewer) == frozenset()
