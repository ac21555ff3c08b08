"""New passwords after NIST SP 800-63B §5.1.1.2: long enough, not a commonly used password,
not the user's own details, not a repeat or a run of characters; any other characters, spaces
included, are accepted. The attack run found 'aaaaaaaaaa', 'password12', ten spaces and the
user's own email address accepted."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service.accounts.models import User
from service.accounts.password_policy import common_passwords, password_problem
from tests.accounts.conftest import PASSWORD
from tests.auth_helpers import bearer

EMAIL = "morwenna.tallis@lab.example"
NAME = "Morwenna Tallis"


@pytest.mark.parametrize(
    ("password", "words"),
    [
        ("aaaaaaaaaa", "repeat or a run"),
        ("          ", "repeat or a run"),
        ("abababababab", "repeat or a run"),
        ("abcdefghijk", "repeat or a run"),
        ("1234567890", "most common"),
        ("zyxwvutsrqp", "repeat or a run"),
        ("password12", "most common"),  # 'password' is the list's second entry
        ("Iloveyou2026!", "most common"),  # a common password with digits added
        ("qwertyuiop", "most common"),
        (EMAIL, "your own name or email"),
        ("morwenna.tallis", "your own name or email"),
        ("Tallis-2026!", "your own name or email"),
        ("seepline2026", "your own name or email"),  # the service's own name
        ("short 1", "too short"),
    ],
)
def test_weak_passwords_are_refused_with_the_reason(password: str, words: str) -> None:
    problem = password_problem(password, email=EMAIL, full_name=NAME)
    assert problem is not None, password
    assert words in problem
    assert "accepted:" in problem


@pytest.mark.parametrize(
    "password",
    [PASSWORD, "demo-manager-2026", "kettle orbit lantern", "Ünïcødé pässwörd", "9 gravel drains"],
)
def test_other_passwords_of_ten_characters_or_more_are_accepted(password: str) -> None:
    assert password_problem(password, email=EMAIL, full_name=NAME) is None


def test_the_shipped_list_holds_ten_thousand_common_passwords() -> None:
    passwords = common_passwords()
    assert len(passwords) == 10_000
    # The head of every published list of leaked passwords (common practice, no source).
    assert {"123456", "password", "qwerty", "letmein", "iloveyou"} <= passwords


def test_a_weak_new_password_is_refused_through_the_api(
    client: TestClient, session: Session, technician: User
) -> None:
    response = client.post(
        "/api/v1/auth/password",
        json={"current_password": PASSWORD, "new_password": technician.email},
        headers=bearer(session, technician),
    )
    assert response.status_code == 422
    (problem,) = response.json()["errors"]
    assert problem["loc"] == ["body", "new_password"]
    assert "your own name or email" in problem["msg"]
