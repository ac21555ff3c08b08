"""Who may do what with a test: one answer, `allowed_actions(test, actor)`, for the domain's
guards and for the pages (which offer a form only when its action is allowed).

An action needs the test in a state that takes it and an actor whose role (and assignment)
may do it. Refusals say which of the two failed: a wrong state is a 409 naming the state and
what it allows, a wrong person a 403.
"""

from __future__ import annotations

from collections.abc import Collection
from enum import StrEnum

from service.accounts.models import User
from service.common import Role, TestState
from service.errors import InvalidTransition, PermissionDenied
from service.lab_tests.models import PermeabilityTest


class Action(StrEnum):
    """Something a user may do with a test; the value is how a message words it."""

    EDIT = "edit"
    ASSIGN = "assign"
    SET_LIMIT = "change the specification limit"
    START = "start"
    RECORD = "record specimen, saturation and trials"
    SUBMIT = "submit"
    APPROVE = "approve"
    SEND_BACK = "send back"
    ISSUE = "issue"
    CORRECT = "correct (new revision)"


# Who requests tests, assigns them and sets their specification limit.
PLANNERS = frozenset({Role.LAB_MANAGER, Role.ADMIN, Role.REVIEWER})
# Who requests tests: the planners, and reception as the client's instructions arrive.
REQUESTERS = PLANNERS | {Role.RECEPTION}
# Who approves, sends back, issues and orders corrections.
REVIEWERS = frozenset({Role.REVIEWER, Role.LAB_MANAGER})
EDITABLE = frozenset({TestState.PLANNED, TestState.RUNNING})

STATE_ACTIONS: dict[str, tuple[Action, ...]] = {
    TestState.PLANNED: (Action.EDIT, Action.ASSIGN, Action.SET_LIMIT, Action.START, Action.RECORD),
    TestState.RUNNING: (Action.EDIT, Action.ASSIGN, Action.SET_LIMIT, Action.RECORD, Action.SUBMIT),
    TestState.SUBMITTED: (Action.APPROVE, Action.SEND_BACK),
    TestState.APPROVED: (Action.ISSUE, Action.CORRECT),
    TestState.ISSUED: (Action.CORRECT,),
    TestState.SUPERSEDED: (),
}
# Actions that only the current revision takes (a correction in progress replaces it).
CURRENT_ONLY = frozenset({Action.ISSUE, Action.CORRECT})


def is_writer(test: PermeabilityTest, actor: User) -> bool:
    """Test data is written by the technician assigned to it, or by a lab manager."""
    if actor.role == Role.LAB_MANAGER:
        return True
    return actor.role == Role.TECHNICIAN and test.technician_id == actor.id


def may_request_tests(actor: User) -> bool:
    """Whether `actor` may request a test on a sample."""
    return actor.role in REQUESTERS


def may_assign(actor: User) -> bool:
    """Whether `actor` may assign technicians and apparatus (any test)."""
    return actor.role in PLANNERS


def may_review(actor: User) -> bool:
    """Whether `actor` reviews tests (approves, sends back, issues, corrects)."""
    return actor.role in REVIEWERS


def _role_allows(
    test: PermeabilityTest, actor: User, action: Action, performers: Collection[int]
) -> bool:
    if action in (Action.ASSIGN, Action.SET_LIMIT):
        return actor.role in PLANNERS
    if action == Action.EDIT:
        return actor.role in PLANNERS or is_writer(test, actor)
    if action in (Action.START, Action.RECORD, Action.SUBMIT):
        return is_writer(test, actor)
    if action == Action.APPROVE:
        return actor.role in REVIEWERS and actor.id not in performers
    return actor.role in REVIEWERS


def _state_allows(test: PermeabilityTest, action: Action) -> bool:
    if action in CURRENT_ONLY and test.superseded_by_id is not None:
        return False
    return action in STATE_ACTIONS.get(test.state, ())


def allowed_actions(
    test: PermeabilityTest, actor: User, *, performers: Collection[int] = ()
) -> frozenset[Action]:
    """What `actor` may do with `test` now.

    `performers` are the users who performed the test (its sign-offs; the assigned
    technician counts too): nobody approves their own test."""
    performed = {*performers, *([test.technician_id] if test.technician_id else [])}
    return frozenset(
        action
        for action in Action
        if _state_allows(test, action) and _role_allows(test, actor, action, performed)
    )


def state_words(state: str) -> str:
    """What a state allows, in words: 'edit, assign, ...' or 'nothing (read only)'."""
    return ", ".join(STATE_ACTIONS.get(state, ())) or "nothing (read only)"


def wrong_state(test: PermeabilityTest, doing: str) -> InvalidTransition:
    """409 naming the test's state and what it allows."""
    allowed = [str(a) for a in STATE_ACTIONS.get(test.state, ())]
    if test.superseded_by_id is not None:
        allowed = [a for a in allowed if Action(a) not in CURRENT_ONLY]
    return InvalidTransition(
        f"cannot {doing} test {test.id}: it is {test.state}; "
        f"allowed from {test.state}: {', '.join(allowed) or 'nothing (read only)'}",
        detail={"state": test.state, "allowed": allowed},
    )


def _not_editable(test: PermeabilityTest) -> InvalidTransition:
    hint = ""
    if test.superseded_by_id:
        hint = f"; revision {test.superseded_by_id} replaces it"
    elif test.state in (TestState.APPROVED, TestState.ISSUED):
        hint = "; a change now needs a correction (a new revision)"
    return InvalidTransition(
        f"test {test.id} is {test.state} and can no longer be edited{hint}",
        detail={"state": test.state, "allowed": [str(a) for a in STATE_ACTIONS[test.state]]},
    )


_WHO = {
    Action.ASSIGN: "assigning a technician or changing the method needs a lab manager, "
    "reviewer or admin",
    Action.SET_LIMIT: "changing the specification limit needs a lab manager, reviewer or admin; "
    "ask one to change it",
    Action.APPROVE: "approving a test needs a reviewer or a lab manager",
    Action.SEND_BACK: "sending a test back needs a reviewer or a lab manager",
    Action.ISSUE: "issuing a test needs a reviewer or a lab manager",
    Action.CORRECT: "ordering a correction needs a reviewer or a lab manager",
}


def _not_allowed(test: PermeabilityTest, actor: User, action: Action) -> PermissionDenied:
    if action == Action.APPROVE and actor.role in REVIEWERS:
        return PermissionDenied(
            f"you performed test {test.id}; another reviewer or lab manager must approve it"
        )
    if action in _WHO:
        return PermissionDenied(_WHO[action])
    if action == Action.SUBMIT:
        return PermissionDenied(
            f"test {test.id} is submitted by its assigned technician or a lab manager"
        )
    if actor.role == Role.TECHNICIAN:
        return PermissionDenied(
            f"test {test.id} is not assigned to you; only its technician or a lab manager "
            "may record on it"
        )
    return PermissionDenied(
        f"recording on test {test.id} is for its assigned technician or a lab manager"
    )


def require(
    test: PermeabilityTest,
    actor: User,
    action: Action,
    *,
    performers: Collection[int] = (),
    doing: str = "",
) -> None:
    """Refuse unless `action` is allowed: 403 for the wrong person (checked first, so nobody
    learns more about a test they may not touch), 409 for the wrong state."""
    performed = {*performers, *([test.technician_id] if test.technician_id else [])}
    if not _role_allows(test, actor, action, performed):
        raise _not_allowed(test, actor, action)
    if not _state_allows(test, action):
        if action in (Action.EDIT, Action.RECORD, Action.ASSIGN, Action.SET_LIMIT):
            raise _not_editable(test)
        raise wrong_state(test, doing or str(action))
