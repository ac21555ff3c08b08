"""/api/v1/users and /api/v1/organisations: the admin's management of accounts."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Any

from fastapi import APIRouter, status
from pydantic import BaseModel, ConfigDict, Field, StringConstraints, field_validator

from service.accounts import service as accounts
from service.api.paging import Paging
from service.common import DisplayUnits, OrganisationKind, Role
from service.deps import Admin, LabStaff, SessionDep
from service.paging import Page

Name = Annotated[str, StringConstraints(strip_whitespace=True, min_length=1, max_length=200)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class UserRead(BaseModel):
    """A user as the API shows it (never the password hash)."""

    model_config = ConfigDict(from_attributes=True)

    id: int
    organisation_id: int
    email: str
    full_name: str
    role: Role
    is_active: bool
    display_units: DisplayUnits
    failed_sign_ins: int
    locked_until: datetime | None
    created_at: datetime
    version: int


class UserCreate(_Strict):
    organisation_id: int = Field(ge=1, description="the lab's id for staff, a client's for clients")
    email: str = Field(max_length=254, examples=["tech.example@lab.example"])
    full_name: Name
    role: Role
    password: str = Field(description="initial password, at least 10 characters")
    display_units: DisplayUnits = DisplayUnits.SI


class UserUpdate(_Strict):
    """Send only the fields to change, with the `version` you read."""

    version: int = Field(ge=1, description="the user's version when you read it")
    full_name: Name | None = None
    role: Role | None = None
    is_active: bool | None = None
    display_units: DisplayUnits | None = None

    @field_validator("full_name", "role", "is_active", "display_units", mode="before")
    @classmethod
    def _not_null(cls, value: Any) -> Any:
        if value is None:
            raise ValueError("leave the field out to keep it; null is not accepted")
        return value


class OrganisationRead(BaseModel):
    model_config = ConfigDict(from_attributes=True)

    id: int
    name: str
    kind: OrganisationKind
    address: str
    contact_email: str
    created_at: datetime
    version: int


class OrganisationCreate(_Strict):
    name: Name
    kind: OrganisationKind
    address: str = Field(default="", max_length=500)
    contact_email: str = Field(default="", max_length=254)


users_router = APIRouter(prefix="/api/v1/users", tags=["users"])
organisations_router = APIRouter(prefix="/api/v1/organisations", tags=["organisations"])


@users_router.get("", summary="List users (admin)")
def list_users(
    session: SessionDep,
    _admin: Admin,
    paging: Paging,
    organisation_id: int | None = None,
    role: Role | None = None,
) -> Page[UserRead]:
    rows, total = accounts.list_users(
        session, **paging.window, organisation_id=organisation_id, role=role
    )
    return paging.of(rows, total, UserRead.model_validate)


@users_router.post("", status_code=status.HTTP_201_CREATED, summary="Create a user (admin)")
def create_user(body: UserCreate, session: SessionDep, admin: Admin) -> UserRead:
    user = accounts.add_user(session, actor=admin, **body.model_dump())
    return UserRead.model_validate(user)


@users_router.get("/{user_id}", summary="One user (admin)")
def read_user(user_id: int, session: SessionDep, _admin: Admin) -> UserRead:
    return UserRead.model_validate(accounts.get_user(session, user_id))


@users_router.patch(
    "/{user_id}",
    summary="Change a user's role, name, active flag or display units (admin)",
    description="A stale `version` answers 409 with the version sent and the current record.",
)
def update_user(user_id: int, body: UserUpdate, session: SessionDep, admin: Admin) -> UserRead:
    user = accounts.get_user(session, user_id)
    changes = body.model_dump(exclude_unset=True, exclude={"version"})
    accounts.update_user(session, user, actor=admin, version=body.version, changes=changes)
    return UserRead.model_validate(user)


@users_router.post(
    "/{user_id}/unlock", summary="Clear a user's failed sign-ins and lock-out (admin)"
)
def unlock_user(user_id: int, session: SessionDep, admin: Admin) -> UserRead:
    user = accounts.unlock_user(session, accounts.get_user(session, user_id), actor=admin)
    return UserRead.model_validate(user)


@organisations_router.get("", summary="List organisations (lab staff)")
def list_organisations(
    session: SessionDep,
    _staff: LabStaff,
    paging: Paging,
    kind: OrganisationKind | None = None,
) -> Page[OrganisationRead]:
    rows, total = accounts.list_organisations(session, **paging.window, kind=kind)
    return paging.of(rows, total, OrganisationRead.model_validate)


@organisations_router.post(
    "", status_code=status.HTTP_201_CREATED, summary="Create an organisation (admin)"
)
def create_organisation(
    body: OrganisationCreate, session: SessionDep, admin: Admin
) -> OrganisationRead:
    organisation = accounts.create_organisation(session, actor=admin, **body.model_dump())
    return OrganisationRead.model_validate(organisation)


@organisations_router.get("/{organisation_id}", summary="One organisation (lab staff)")
def read_organisation(
    organisation_id: int, session: SessionDep, _staff: LabStaff
) -> OrganisationRead:
    return OrganisationRead.model_validate(accounts.get_organisation(session, organisation_id))


router = APIRouter()
router.include_router(users_router)
router.include_router(organisations_router)
