"""Account rules: organisations, users and their administration, token revocation."""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from datetime import datetime
from typing import Any

from sqlalchemy import func
from sqlmodel import Session, col, select

from service.accounts.models import AccessToken, Organisation, User
from service.accounts.password_policy import password_problem
from service.accounts.passwords import hash_password
from service.accounts.throttle import clear_failures
from service.accounts.tokens import revoke
from service.audit.service import apply_changes, record_change, record_created
from service.common import DisplayUnits, OrganisationKind, Role
from service.db import utcnow
from service.errors import Conflict, InvalidInput, NotFound, invalid, require_version

# Deliberately loose: one @, no spaces, a dot in the domain. Mail delivery is the real test.
_EMAIL = re.compile(r"^[^@\s]+@[^@\s]+\.[^@\s]+$")


def field_error(field: str, msg: str) -> InvalidInput:
    """A 422 naming the field."""
    return invalid((field,), msg)


def normalise_email(email: str) -> str:
    return email.strip().lower()


def check_email(email: str, field: str = "email") -> str:
    """The normalised email, or InvalidInput naming the field and the value."""
    normalised = normalise_email(email)
    if not _EMAIL.match(normalised) or len(normalised) > 254:
        raise field_error(
            field, f"{email!r} is not an email address (expected name@domain.tld, ≤ 254 characters)"
        )
    return normalised


def check_password_strength(
    password: str, field: str = "password", *, email: str = "", full_name: str = ""
) -> None:
    """Refuse a new password that password_policy refuses, naming `field`."""
    problem = password_problem(password, email=email, full_name=full_name)
    if problem is not None:
        raise field_error(field, f"the password {problem}")


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
    email = normalise_email(email)
    check_password_strength(password, email=email, full_name=full_name)
    if (role == Role.CLIENT) != (organisation.kind == OrganisationKind.CLIENT):
        raise invalid(
            ("role",),
            f"{role.value} does not fit a {organisation.kind} organisation",
            value=role.value,
            accepted="client users belong to client organisations, lab staff to the lab",
        )
    if session.exec(select(User).where(User.email == email)).first() is not None:
        raise Conflict(f"a user with {email} already exists", detail={"field": "email"})
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


# --- administration -------------------------------------------------------------------

USER_FIELDS = (
    "id",
    "organisation_id",
    "email",
    "full_name",
    "role",
    "is_active",
    "display_units",
    "failed_sign_ins",
    "locked_until",
    "created_at",
    "version",
)


def user_snapshot(user: User) -> dict[str, Any]:
    """The user's public fields as JSON-ready values (never the password hash)."""
    snapshot: dict[str, Any] = {}
    for name in USER_FIELDS:
        value = getattr(user, name)
        snapshot[name] = value.isoformat() if isinstance(value, datetime) else value
    return snapshot


def _check_role_fits(organisation: Organisation, role: Role) -> None:
    if (role == Role.CLIENT) != (organisation.kind == OrganisationKind.CLIENT):
        raise field_error(
            "role",
            f"{role.value!r} does not fit organisation {organisation.id} ({organisation.kind}): "
            "client users belong to client organisations, lab staff "
            "(technician, reviewer, lab_manager, admin) to the lab",
        )


def get_user(session: Session, user_id: int) -> User:
    user = session.get(User, user_id)
    if user is None:
        raise NotFound(f"user {user_id} not found")
    return user


def get_organisation(session: Session, organisation_id: int) -> Organisation:
    organisation = session.get(Organisation, organisation_id)
    if organisation is None:
        raise NotFound(f"organisation {organisation_id} not found")
    return organisation


def add_user(
    session: Session,
    *,
    actor: User,
    organisation_id: int,
    email: str,
    full_name: str,
    role: Role,
    password: str,
    display_units: DisplayUnits = DisplayUnits.SI,
) -> User:
    """An admin creates a user; every set field goes to the audit trail."""
    organisation = session.get(Organisation, organisation_id)
    if organisation is None:
        raise field_error("organisation_id", f"no organisation has id {organisation_id}")
    email = check_email(email)
    _check_role_fits(organisation, role)
    user = create_user(
        session,
        organisation=organisation,
        email=email,
        full_name=full_name,
        role=role,
        password=password,
    )
    user.display_units = display_units
    session.add(user)
    session.flush()
    record_created(session, user, actor_id=actor.id)
    return user


def _other_active_admins(session: Session, user: User) -> int:
    return session.exec(
        select(func.count())
        .select_from(User)
        .where(User.role == Role.ADMIN, col(User.is_active), User.id != user.id)
    ).one()


def update_user(
    session: Session, user: User, *, actor: User, version: int, changes: dict[str, Any]
) -> User:
    """Apply an admin's edit of role, name, active flag or display units.

    `version` is the one the admin read; a different current version raises StaleVersion
    with both. Deactivating a user revokes their sessions and tokens."""
    require_version(user, version, f"user {user.id}", yours=changes, current=user_snapshot(user))
    if "role" in changes:
        _check_role_fits(get_organisation(session, user.organisation_id), Role(changes["role"]))
    stays_admin = changes.get("role", user.role) == Role.ADMIN and changes.get(
        "is_active", user.is_active
    )
    last_admin = user.role == Role.ADMIN and user.is_active and not stays_admin
    if last_admin and _other_active_admins(session, user) == 0:
        raise Conflict(
            f"user {user.id} is the last active admin: make another admin first, "
            "or nobody could manage users"
        )
    was_active = user.is_active
    apply_changes(session, user, changes, actor_id=actor.id)
    if was_active and not user.is_active:
        revoke_all_tokens(session, user, actor=actor)
    return user


def set_password(
    session: Session, user: User, new_password: str, *, actor: User, field: str = "new_password"
) -> None:
    """Check and store a new password (audited as changed, never its value); bumps the
    version. Callers decide what else it means (sessions revoked, the current one checked)."""
    assert user.id is not None
    check_password_strength(new_password, field=field, email=user.email, full_name=user.full_name)
    user.password_hash = hash_password(new_password)
    user.version += 1
    session.add(user)
    record_change(
        session,
        entity="app_user",
        entity_id=user.id,
        field="password",
        old=None,
        new="changed" if actor.id == user.id else "reset by an admin",
        actor_id=actor.id,
    )
    session.flush()


def reset_password(
    session: Session, user: User, *, actor: User, version: int, new_password: str
) -> int:
    """An admin gives a user a new password (to pass on by hand); the user's sessions and
    API tokens are revoked and any lock-out cleared. Returns how many tokens were revoked."""
    require_version(user, version, f"user {user.id}", yours={}, current=user_snapshot(user))
    set_password(session, user, new_password, actor=actor)
    unlock_user(session, user, actor=actor)
    return revoke_all_tokens(session, user, actor=actor)


def unlock_user(session: Session, user: User, *, actor: User) -> User:
    """Clear the failed sign-in counts and any back-off or lock-out."""
    clear_failures(session, user.email)
    apply_changes(session, user, {"failed_sign_ins": 0, "locked_until": None}, actor_id=actor.id)
    return user


def list_users(
    session: Session,
    *,
    limit: int,
    offset: int,
    organisation_id: int | None = None,
    role: Role | None = None,
) -> tuple[list[User], int]:
    """One page of users ordered by email, and how many match in all."""
    query = select(User)
    if organisation_id is not None:
        query = query.where(User.organisation_id == organisation_id)
    if role is not None:
        query = query.where(User.role == role)
    total = session.exec(select(func.count()).select_from(query.subquery())).one()
    rows = session.exec(query.order_by(col(User.email)).offset(offset).limit(limit)).all()
    return list(rows), total


def create_organisation(
    session: Session,
    *,
    actor: User,
    name: str,
    kind: OrganisationKind,
    address: str = "",
    contact_email: str = "",
) -> Organisation:
    name = name.strip()
    if not name:
        raise field_error("name", "must not be blank")
    clash = session.exec(
        select(Organisation).where(func.lower(Organisation.name) == name.lower())
    ).first()
    if clash is not None:
        raise Conflict(
            f"organisation {clash.id} is already called {clash.name!r}", detail={"field": "name"}
        )
    if contact_email:
        contact_email = check_email(contact_email, field="contact_email")
    organisation = Organisation(
        name=name, kind=kind, address=address.strip(), contact_email=contact_email
    )
    session.add(organisation)
    session.flush()
    record_created(session, organisation, actor_id=actor.id)
    return organisation


def list_organisations(
    session: Session, *, limit: int, offset: int, kind: OrganisationKind | None = None
) -> tuple[list[Organisation], int]:
    query = select(Organisation)
    if kind is not None:
        query = query.where(Organisation.kind == kind)
    total = session.exec(select(func.count()).select_from(query.subquery())).one()
    rows = session.exec(query.order_by(col(Organisation.name)).offset(offset).limit(limit)).all()
    return list(rows), total


# --- tokens -----------------------------------------------------------------------------


def live_tokens(session: Session, user: User, *, now: datetime | None = None) -> list[AccessToken]:
    """The user's unrevoked, unexpired sessions and API tokens, newest first."""
    now = now or utcnow()
    rows: Sequence[AccessToken] = session.exec(
        select(AccessToken)
        .where(AccessToken.user_id == user.id, col(AccessToken.revoked_at).is_(None))
        .order_by(col(AccessToken.created_at).desc(), col(AccessToken.id).desc())
    ).all()
    return [t for t in rows if t.expires_at is None or t.expires_at > now]


def get_token(session: Session, token_id: int, *, actor: User) -> AccessToken:
    """A token the actor may manage: their own, or anyone's for an admin; else NotFound."""
    token = session.get(AccessToken, token_id)
    if token is None or (token.user_id != actor.id and actor.role != Role.ADMIN):
        raise NotFound(f"token {token_id} not found")
    return token


def revoke_token(session: Session, token: AccessToken, *, actor: User) -> None:
    """Revoke a session or API token (again is harmless) and audit who did it."""
    if token.revoked_at is not None:
        return
    assert token.id is not None
    revoke(session, token)
    record_change(
        session,
        entity="access_token",
        entity_id=token.id,
        field="revoked_at",
        old=None,
        new=token.revoked_at,
        actor_id=actor.id,
    )


def revoke_all_tokens(
    session: Session, user: User, *, actor: User, keep: AccessToken | None = None
) -> int:
    """Revoke every live session and API token of `user` except `keep`; returns how many."""
    count = 0
    for token in live_tokens(session, user):
        if keep is not None and token.id == keep.id:
            continue
        revoke_token(session, token, actor=actor)
        count += 1
    return count


def names_of(session: Session, user_ids: Iterable[int | None]) -> dict[int, str]:
    """Full names of users by id (ids of nobody left out)."""
    wanted = {i for i in user_ids if i}
    if not wanted:
        return {}
    rows = session.exec(select(User.id, User.full_name).where(col(User.id).in_(wanted))).all()
    return {user_id: name for user_id, name in rows if user_id is not None}
