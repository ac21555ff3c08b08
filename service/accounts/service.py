"""Account rules: creating organisations and users."""

from __future__ import annotations

from sqlmodel import Session, select

from service.accounts.models import Organisation, User
from service.accounts.passwords import hash_password
from service.common import OrganisationKind, Role
from service.errors import Conflict, InvalidInput

MIN_PASSWORD_LENGTH = 10


def check_password_strength(password: str, field: str = "password") -> None:
    if len(password) < MIN_PASSWORD_LENGTH:
        raise InvalidInput(
            f"{field}: at least {MIN_PASSWORD_LENGTH} characters are needed",
            detail=[
                {
                    "loc": ["body", field],
                    "msg": f"at least {MIN_PASSWORD_LENGTH} characters are needed",
                    "type": "value_error",
                }
            ],
        )


def get_or_create_organisation(session: Session, name: str, kind: OrganisationKind) -> Organisation:
    organisation = session.exec(select(Organisation).where(Organisation.name == name)).first()
    if organisation is None:
        organisation = Organisation(name=name, kind=kind)
        session.add(organisation)
        session.flush()
    return organisation


def create_user(
    session: Session,
    *,
    organisation: Organisation,
    email: str,
    full_name: str,
    role: Role,
    password: str,
) -> User:
    email = email.strip().lower()
    check_password_strength(password)
    if (role == Role.CLIENT) != (organisation.kind == OrganisationKind.CLIENT):
        raise InvalidInput(
            f"role: {role.value} does not fit a {organisation.kind} organisation; "
            "client users belong to client organisations, lab staff to the lab"
        )
    if session.exec(select(User).where(User.email == email)).first() is not None:
        raise Conflict(f"email: a user with {email} already exists")
    assert organisation.id is not None
    user = User(
        organisation_id=organisation.id,
        email=email,
        full_name=full_name,
        role=role,
        password_hash=hash_password(password),
    )
    session.add(user)
    session.flush()
    return user


def create_user_with_organisation(
    session: Session,
    *,
    email: str,
    full_name: str,
    role: Role,
    organisation_name: str,
    is_client: bool,
    password: str,
) -> User:
    kind = OrganisationKind.CLIENT if is_client else OrganisationKind.LAB
    organisation = get_or_create_organisation(session, organisation_name, kind)
    return create_user(
        session,
        organisation=organisation,
        email=email,
        full_name=full_name,
        role=role,
        password=password,
    )
