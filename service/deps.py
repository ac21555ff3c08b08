"""FastAPI dependencies shared by both front doors: the request's session and its user.

A request is authenticated by an API bearer token (`Authorization: Bearer ...`) or by the
signed session cookie of the pages. Cookie-authenticated requests that change state must
carry the session's CSRF token (header `X-CSRF-Token`, or form field `csrf_token`)."""

from __future__ import annotations

import asyncio
import contextlib
import hmac
import weakref
from collections.abc import AsyncIterator, Callable, Iterator
from dataclasses import dataclass
from typing import Annotated, Any, TypeVar

from fastapi import Depends, Request, Response
from fastapi.concurrency import run_in_threadpool
from itsdangerous import BadSignature, URLSafeSerializer
from sqlmodel import Session

from service.accounts.models import AccessToken, User
from service.accounts.signin import DEVICE_COOKIE, DEVICE_COOKIE_DAYS
from service.accounts.tokens import find_live_token
from service.common import Role, TokenKind
from service.config import get_settings
from service.db import session_scope
from service.errors import NotAuthenticated, PermissionDenied

SESSION_COOKIE = "seepline_session"
CSRF_HEADER = "X-CSRF-Token"
SAFE_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})
LAB_STAFF = (Role.TECHNICIAN, Role.REVIEWER, Role.LAB_MANAGER, Role.ADMIN)


_write_gates: weakref.WeakKeyDictionary[asyncio.AbstractEventLoop, asyncio.Lock] = (
    weakref.WeakKeyDictionary()
)


@dataclass(frozen=True)
class Credentials:
    """What a request presented (bearer token or session cookie) and the live token and user
    it names, or None when it names none."""

    bearer: bool
    found: tuple[AccessToken, User] | None


def look_up_credentials(session: Session, request: Request) -> Credentials | None:
    """The request's credentials looked up (None when it presents none); no rule applied."""
    header = request.headers.get("authorization", "")
    if header.lower().startswith("bearer "):
        found = find_live_token(session, header[7:].strip(), kind=TokenKind.API)
        return Credentials(bearer=True, found=found)
    raw = _cookie_token(request)
    if raw is None:
        return None
    return Credentials(bearer=False, found=find_live_token(session, raw, kind=TokenKind.SESSION))


def _look_up_in_own_read(request: Request) -> Credentials | None:
    with session_scope() as session:
        return look_up_credentials(session, request)


async def _receive_body(request: Request) -> None:
    """Receive the whole body now (cached on the request for the route), unless the route's
    declared body parameters already did."""
    with contextlib.suppress(RuntimeError):  # "Stream consumed": the form was parsed already
        await request.body()


EndpointT = TypeVar("EndpointT", bound=Callable[..., Any])


def reads_only(endpoint: EndpointT) -> EndpointT:
    """Mark a POST route that stores nothing (a live preview): it takes neither SQLite's
    write gate nor its write lock, so it never queues behind the writers. Put it under the
    route's decorator."""
    endpoint.reads_only = True  # type: ignore[attr-defined]
    return endpoint


def writes(request: Request) -> bool:
    """Whether a request may write: any method but GET, HEAD or OPTIONS, except on a route
    marked `reads_only`."""
    if request.method in SAFE_METHODS:
        return False
    return not getattr(request.scope.get("endpoint"), "reads_only", False)


async def write_gate(request: Request) -> AsyncIterator[None]:
    """On SQLite, let one writing request per process at a time reach the database.

    SQLite has one writer. Without this gate every writing request takes a worker thread and
    waits there for the write lock (BEGIN IMMEDIATE); past the thread pool's size the lock
    holder cannot get a thread to finish, and everything stalls until the busy timeout. Here
    writers queue on the event loop instead, holding no thread and no connection.

    What does not need the lock is done before the gate, so it does not hold up the writers
    queued behind: the body is received (a slow tablet's upload), and the credentials are
    looked up in a read of their own (authenticate then uses them)."""
    if not writes(request) or not get_settings().is_sqlite:
        yield
        return
    await _receive_body(request)
    if "authorization" in request.headers or SESSION_COOKIE in request.cookies:
        request.state.credentials = await run_in_threadpool(_look_up_in_own_read, request)
    else:
        request.state.credentials = None
    loop = asyncio.get_running_loop()
    gate = _write_gates.get(loop)
    if gate is None:
        gate = _write_gates[loop] = asyncio.Lock()
    async with gate:
        yield


def request_session(
    request: Request, _gate: Annotated[None, Depends(write_gate, scope="function")]
) -> Iterator[Session]:
    """The request owns the transaction; writes take SQLite's write lock up front."""
    with session_scope(write=writes(request)) as session:
        yield session


# scope="function": commit before the response is sent, so a redirect or a client's next
# request never runs ahead of the write it follows.
SessionDep = Annotated[Session, Depends(request_session, scope="function")]


def cookie_serializer() -> URLSafeSerializer:
    return URLSafeSerializer(get_settings().secret_key, salt="seepline-session")


def sign_session_cookie(raw_token: str) -> str:
    return cookie_serializer().dumps(raw_token)


def set_session_cookie(response: Response, request: Request, raw_token: str) -> None:
    """The signed, httponly session cookie of a new sign-in session."""
    response.set_cookie(
        SESSION_COOKIE,
        sign_session_cookie(raw_token),
        max_age=get_settings().session_hours * 3600,
        httponly=True,
        samesite="lax",
        secure=request.url.scheme == "https",
    )


def device_of(request: Request) -> str | None:
    """The request's device cookie (checked by accounts.signin), if it sent one."""
    return request.cookies.get(DEVICE_COOKIE)


def set_device_cookie(response: Response, request: Request, value: str) -> None:
    """Remember this browser as one its user signs in from (accounts.signin's limits)."""
    response.set_cookie(
        DEVICE_COOKIE,
        value,
        max_age=DEVICE_COOKIE_DAYS * 86400,
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
        path="/",
    )


def _cookie_token(request: Request) -> str | None:
    cookie = request.cookies.get(SESSION_COOKIE)
    if not cookie:
        return None
    try:
        value: Any = cookie_serializer().loads(cookie)
    except BadSignature:
        return None
    return value if isinstance(value, str) else None


async def _csrf_ok(request: Request, token: AccessToken) -> bool:
    sent = request.headers.get(CSRF_HEADER)
    if sent is None and request.headers.get("content-type", "").startswith(
        ("application/x-www-form-urlencoded", "multipart/form-data")
    ):
        form = await request.form()
        field = form.get("csrf_token")
        sent = field if isinstance(field, str) else None
    return bool(sent) and hmac.compare_digest(sent or "", token.csrf_token)


async def authenticate(request: Request, session: SessionDep) -> tuple[User, AccessToken] | None:
    """The user behind this request and the token that proved it, or None if anonymous."""
    if hasattr(request.state, "credentials"):  # looked up before the write gate
        credentials: Credentials | None = request.state.credentials
        if credentials is not None and credentials.found is not None:
            # Into this request's session, without a query (they were read a moment ago).
            token, user = credentials.found
            found = (session.merge(token, load=False), session.merge(user, load=False))
            credentials = Credentials(bearer=credentials.bearer, found=found)
    else:
        # Database work stays off the event loop (a blocked loop stalls every request).
        credentials = await run_in_threadpool(look_up_credentials, session, request)
    if credentials is None:
        return None
    if credentials.found is None:
        if credentials.bearer:
            raise NotAuthenticated("the bearer token is unknown, expired or revoked")
        return None
    token, user = credentials.found
    if credentials.bearer:
        return user, token
    if request.method not in SAFE_METHODS and not await _csrf_ok(request, token):
        raise PermissionDenied(
            "CSRF token missing or wrong: reload the page and try again "
            f"(send the session's token in the {CSRF_HEADER} header or a csrf_token field)"
        )
    request.state.csrf_token = token.csrf_token
    return user, token


Authentication = Annotated[tuple[User, AccessToken] | None, Depends(authenticate)]


def current_user(auth: Authentication) -> User:
    if auth is None:
        raise NotAuthenticated("sign in first (session cookie or Authorization: Bearer token)")
    return auth[0]


def optional_user(auth: Authentication) -> User | None:
    return auth[0] if auth else None


CurrentUser = Annotated[User, Depends(current_user)]
OptionalUser = Annotated[User | None, Depends(optional_user)]


def require_roles(*roles: Role) -> Callable[[User], User]:
    """A dependency admitting only users who hold one of `roles`."""
    allowed = frozenset(roles)

    def dependency(user: CurrentUser) -> User:
        if user.role not in allowed:
            names = ", ".join(sorted(r.value for r in allowed))
            raise PermissionDenied(f"this needs one of the roles: {names}")
        return user

    return dependency


LabStaff = Annotated[User, Depends(require_roles(*LAB_STAFF))]
Reviewer = Annotated[User, Depends(require_roles(Role.REVIEWER, Role.LAB_MANAGER))]
Manager = Annotated[User, Depends(require_roles(Role.LAB_MANAGER, Role.ADMIN))]
Reception = Annotated[User, Depends(require_roles(Role.TECHNICIAN, Role.LAB_MANAGER, Role.ADMIN))]
Admin = Annotated[User, Depends(require_roles(Role.ADMIN))]
