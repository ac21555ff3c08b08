"""/api/v1/auth: sign-in to a cookie session or an API bearer token, sign-out, the signed-in
user, password change and the user's own tokens."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Request, Response, status
from itsdangerous import BadSignature
from pydantic import BaseModel, ConfigDict, Field
from sqlmodel import Session

from service.accounts import service as accounts
from service.accounts import signin
from service.accounts.models import AccessToken, Organisation, User
from service.accounts.tokens import find_live_token
from service.api.users import UserRead
from service.common import TokenKind
from service.deps import (
    CSRF_HEADER,
    SESSION_COOKIE,
    Authentication,
    CurrentUser,
    SessionDep,
    cookie_serializer,
    device_of,
    set_device_cookie,
    set_session_cookie,
)
from service.errors import NotAuthenticated

router = APIRouter(prefix="/api/v1/auth", tags=["auth"])


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Credentials(_Strict):
    email: str = Field(min_length=1, max_length=254)
    password: str = Field(min_length=1)


class TokenRequest(Credentials):
    label: str = Field(
        default="", max_length=100, description="what the token is for, e.g. 'field tablet 2'"
    )
    expires_in_days: int | None = Field(
        default=None,
        ge=1,
        le=signin.MAX_API_TOKEN_DAYS,
        description="leave out for a token that lasts until revoked",
    )


class TokenRead(BaseModel):
    """A session or API token, without its secret."""

    model_config = ConfigDict(from_attributes=True)

    id: int
    kind: TokenKind
    label: str
    created_at: datetime
    expires_at: datetime | None
    last_used_at: datetime | None
    current: bool = Field(False, description="the token that authenticated this request")


class IssuedToken(TokenRead):
    token: str = Field(description="the bearer secret: shown this once, stored only as a hash")


class SessionStarted(BaseModel):
    csrf_token: str = Field(description="send it in the X-CSRF-Token header with every write")
    csrf_header: str = CSRF_HEADER
    expires_at: datetime
    user: UserRead


class Me(BaseModel):
    user: UserRead
    organisation_name: str
    organisation_kind: str
    authenticated_by: Literal["session", "api"]
    csrf_token: str | None = Field(None, description="for cookie sessions only")


class PasswordChange(_Strict):
    current_password: str = Field(min_length=1)
    new_password: str = Field(description="at least 10 characters")


class PasswordChanged(BaseModel):
    revoked_tokens: int = Field(description="your other sessions and API tokens, now revoked")


def _signed_in(auth: Authentication) -> tuple[User, AccessToken]:
    if auth is None:
        raise NotAuthenticated("sign in first (session cookie or Authorization: Bearer token)")
    return auth


SignedIn = Annotated[tuple[User, AccessToken], Depends(_signed_in)]


def _cookie_session(request: Request, session: Session) -> AccessToken | None:
    cookie = request.cookies.get(SESSION_COOKIE)
    if not cookie:
        return None
    try:
        raw = cookie_serializer().loads(cookie)
    except BadSignature:
        return None
    found = find_live_token(session, raw, kind=TokenKind.SESSION) if isinstance(raw, str) else None
    return found[0] if found else None


def _token_read(token: AccessToken, current: AccessToken | None) -> TokenRead:
    read = TokenRead.model_validate(token)
    read.current = current is not None and token.id == current.id
    return read


@router.post(
    "/tokens",
    status_code=status.HTTP_201_CREATED,
    summary="Sign in for an API bearer token",
    description="Wrong email or password answers 401 with one message for both; repeated "
    "failures earn a wait, then a 15-minute lock-out (429 saying until when).",
)
def create_token(body: TokenRequest, request: Request, response: Response) -> IssuedToken:
    def issue(session: Session, user: User) -> tuple[str, AccessToken, str]:
        raw, token = signin.issue_api_token(
            session, user, label=body.label.strip(), expires_in_days=body.expires_in_days
        )
        return raw, token, signin.device_cookie(user)

    raw, token, device = signin.sign_in(
        email=body.email, password=body.password, device=device_of(request), then=issue
    )
    set_device_cookie(response, request, device)
    return IssuedToken(**_token_read(token, None).model_dump(), token=raw)


@router.get("/tokens", summary="My live sessions and API tokens (no secrets)")
def list_tokens(auth: SignedIn, session: SessionDep) -> list[TokenRead]:
    user, current = auth
    return [_token_read(t, current) for t in accounts.live_tokens(session, user)]


@router.delete(
    "/tokens/{token_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    summary="Revoke a session or API token (your own; an admin any)",
)
def revoke_token(token_id: int, user: CurrentUser, session: SessionDep) -> Response:
    token = accounts.get_token(session, token_id, actor=user)
    accounts.revoke_token(session, token, actor=user)
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.post(
    "/session",
    summary="Sign in to a cookie session (for pages)",
    description="Sets the signed, httponly session cookie and returns the CSRF token that "
    "cookie-authenticated writes must send. Each sign-in replaces any earlier session of "
    "this browser with a fresh one.",
)
def start_session(body: Credentials, request: Request, response: Response) -> SessionStarted:
    def start(session: Session, user: User) -> tuple[str, SessionStarted, str]:
        raw, token = signin.start_session(
            session, user, replacing=_cookie_session(request, session)
        )
        assert token.expires_at is not None
        started = SessionStarted(
            csrf_token=token.csrf_token,
            expires_at=token.expires_at,
            user=UserRead.model_validate(user),
        )
        return raw, started, signin.device_cookie(user)

    raw, started, device = signin.sign_in(
        email=body.email, password=body.password, device=device_of(request), then=start
    )
    set_session_cookie(response, request, raw)
    set_device_cookie(response, request, device)
    return started


@router.post(
    "/sign-out",
    status_code=status.HTTP_204_NO_CONTENT,
    summary="Sign out: revoke this session or bearer token and clear the cookie",
)
def sign_out(auth: Authentication, session: SessionDep) -> Response:
    if auth is not None:
        user, token = auth
        accounts.revoke_token(session, token, actor=user)
    response = Response(status_code=status.HTTP_204_NO_CONTENT)
    response.delete_cookie(SESSION_COOKIE, httponly=True, samesite="lax")
    return response


@router.get("/me", summary="The signed-in user")
def read_me(auth: SignedIn, session: SessionDep) -> Me:
    user, token = auth
    organisation = session.get(Organisation, user.organisation_id)
    assert organisation is not None
    is_session = token.kind == TokenKind.SESSION
    return Me(
        user=UserRead.model_validate(user),
        organisation_name=organisation.name,
        organisation_kind=organisation.kind,
        authenticated_by="session" if is_session else "api",
        csrf_token=token.csrf_token if is_session else None,
    )


@router.post(
    "/password",
    summary="Change my password",
    description="Needs the current password (wrong ones count towards the lock-out). Every "
    "other session and API token of yours is revoked; this one stays.",
)
def change_password(body: PasswordChange, auth: SignedIn, session: SessionDep) -> PasswordChanged:
    user, token = auth
    revoked = signin.change_password(
        session,
        user,
        current_password=body.current_password,
        new_password=body.new_password,
        keep=token,
    )
    return PasswordChanged(revoked_tokens=revoked)
