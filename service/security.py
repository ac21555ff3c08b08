"""Security at the edge of the app: response headers, the request-size limit, per-address
sign-in limiting, and refusals that are always safe to render.

`install_security(app)` is called once, last, in create_app(). It adds one ASGI middleware
and three exception handlers; each handler hands the final rendering to the handler the app
already has (JSON for /api/, the error page for pages), so both front doors keep their look.

Limits (all per process, in memory; several uvicorn workers each keep their own):

- Request bodies: `settings.max_body_bytes` (the certificate check upload: its own
  `verify_upload_max_bytes` plus the multipart envelope). A Content-Length over the limit is
  refused before anything is read; a body without one is counted as it streams in.
- Sign-in: per client address, after `SIGN_IN_FAILURES_PER_ADDRESS` refused sign-ins (401
  or 429) within `SIGN_IN_WINDOW` the address may try once every `SIGN_IN_ADDRESS_BACKOFF`
  seconds (429 with Retry-After in between): a short back-off, never a lock-out, so a lab
  behind one address still signs in. A browser holding a genuine device cookie (it signed in
  before) is counted against its user instead of the address, so colleagues behind one
  address do not share one count with an attacker there. This sits on top of the per-account
  and per-device limits of service/accounts/signin.py, which hold across workers (they live
  in the database).
  Sign-in posts whose Origin (or Referer) is another site are refused (login CSRF).
- The reduction endpoint, open to anonymous callers: they get `REDUCTIONS_PER_ADDRESS` calls
  per `REDUCTIONS_WINDOW` per address and a smaller body (`anonymous_reduction_max_bytes`);
  signed-in callers are not limited.
- The client address is the socket's peer unless FORWARDED_ALLOW_IPS names the reverse proxy
  (service/main.py): a client-supplied X-Forwarded-For is never believed otherwise.
- Every response but static files carries `Cache-Control: no-store` unless the route chose
  its own: pages, exports and certificates hold a lab's and its clients' data.
"""

from __future__ import annotations

import inspect
import logging
import math
import threading
import time
from collections import OrderedDict, deque
from collections.abc import Awaitable, Callable
from typing import Any
from urllib.parse import urlsplit

import sqlalchemy as sa
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import Response
from starlette.datastructures import Headers, MutableHeaders
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.requests import cookie_parser
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.accounts.signin import DEVICE_COOKIE, read_device_cookie
from service.config import get_settings
from service.deps import SESSION_COOKIE, OptionalUser
from service.errors import PermissionDenied, ServiceError, TooLarge, TooManyAttempts, Unavailable

LOG = logging.getLogger("seepline")
Handler = Callable[[Request, Any], Response | Awaitable[Response]]

API_PREFIX = "/api/"
# No inline script or style anywhere; htmx and our own JS are files under /static.
CONTENT_SECURITY_POLICY = (
    "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; "
    "font-src 'self'; connect-src 'self'; object-src 'none'; frame-ancestors 'none'; "
    "form-action 'self'; base-uri 'none'"
)
SECURITY_HEADERS = {
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
    "X-Frame-Options": "DENY",
    "Cross-Origin-Opener-Policy": "same-origin",
}
HSTS = "max-age=31536000"

BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
# Room for the multipart boundaries and part headers around an uploaded file.
MULTIPART_ENVELOPE_BYTES = 64 * 1024
# Routes whose own file limit is larger than the general body limit (they refuse the file
# itself, naming the field, below this).
LARGE_UPLOAD_PATHS = frozenset({"/verify", "/api/v1/certificates/verify"})

NO_STORE = "no-store"
STATIC_PREFIX = "/static/"

SIGN_IN_PATHS = frozenset({"/api/v1/auth/tokens", "/api/v1/auth/session", "/sign-in"})
SIGN_IN_FAILURES_PER_ADDRESS = 20
SIGN_IN_WINDOW = 15 * 60.0  # seconds
SIGN_IN_ADDRESS_BACKOFF = 10.0  # seconds between attempts once an address is over the limit
REDUCTIONS_PATH = "/api/v1/reductions"
REDUCTIONS_PER_ADDRESS = 30
REDUCTIONS_WINDOW = 60.0  # seconds
SIGN_IN_REFUSED = frozenset({401, 429})
# Memory bound: the least recently failing addresses are forgotten beyond this many.
MAX_TRACKED_ADDRESSES = 10_000

DATABASE_RETRY_SECONDS = 5
HIDDEN = "[hidden]"
# The smallest integer column of both databases (PostgreSQL INTEGER, the ids) holds this much.
LARGEST_WHOLE_NUMBER = 2**31 - 1


# --- request bodies ---------------------------------------------------------------------------


def _size_text(limit: int) -> str:
    if limit >= 1024 * 1024:
        return f"{limit / (1024 * 1024):.1f} MiB ({limit} bytes)"
    return f"{limit / 1024:.0f} KiB ({limit} bytes)"


class RequestBodyTooLarge(StarletteHTTPException):
    """A request body over the limit: 413 naming the limit."""

    def __init__(self, limit: int) -> None:
        super().__init__(
            status_code=413,
            detail=f"the request body is larger than {_size_text(limit)}, the most this "
            "service accepts; send a smaller file, or split it into several uploads",
        )
        self.limit = limit


def body_limit(path: str, *, anonymous: bool = False) -> int:
    """The most bytes a request body to `path` may carry (`anonymous`: sent without a token
    or session cookie)."""
    settings = get_settings()
    if anonymous and path == REDUCTIONS_PATH:
        return min(settings.max_body_bytes, settings.anonymous_reduction_max_bytes)
    if path in LARGE_UPLOAD_PATHS:
        return max(
            settings.max_body_bytes, settings.verify_upload_max_bytes + MULTIPART_ENVELOPE_BYTES
        )
    return settings.max_body_bytes


def _content_length(scope: Scope) -> int | None:
    value = Headers(scope=scope).get("content-length")
    if value is None or not value.strip().isdigit():
        return None
    return int(value)


# --- sign-in limiting -------------------------------------------------------------------------


class AddressLimiter:
    """Events per client address in a sliding window (thread-safe; one process).

    Below `limit` events in `window` an address waits for nothing. At the limit it waits
    until the oldest event ages out or, with `backoff`, only `backoff` seconds after its
    latest event (a slow-down rather than a stop)."""

    def __init__(
        self,
        limit: int = SIGN_IN_FAILURES_PER_ADDRESS,
        window: float = SIGN_IN_WINDOW,
        clock: Callable[[], float] = time.monotonic,
        backoff: float | None = SIGN_IN_ADDRESS_BACKOFF,
    ) -> None:
        self.limit = limit
        self.window = window
        self.clock = clock
        self.backoff = backoff
        self._failures: OrderedDict[str, deque[float]] = OrderedDict()
        self._lock = threading.Lock()

    def _recent(self, address: str, now: float) -> deque[float] | None:
        times = self._failures.get(address)
        if times is None:
            return None
        while times and times[0] <= now - self.window:
            times.popleft()
        if not times:
            del self._failures[address]
            return None
        return times

    def wait_seconds(self, address: str) -> int | None:
        """Seconds until `address` may try again, or None if it may now."""
        with self._lock:
            now = self.clock()
            times = self._recent(address, now)
            if times is None or len(times) < self.limit:
                return None
            if self.backoff is not None:
                wait = times[-1] + self.backoff - now
                return max(1, math.ceil(wait)) if wait > 0 else None
            return max(1, math.ceil(times[0] + self.window - now))

    def record(self, address: str) -> None:
        with self._lock:
            now = self.clock()
            times = self._recent(address, now) or deque()
            times.append(now)
            self._failures[address] = times
            self._failures.move_to_end(address)
            while len(self._failures) > MAX_TRACKED_ADDRESSES:
                self._failures.popitem(last=False)


def _client_address(scope: Scope) -> str:
    client = scope.get("client")
    return str(client[0]) if client else "unknown"


# --- the middleware ---------------------------------------------------------------------------


def _has_credentials(scope: Scope) -> bool:
    """Whether the request carries a bearer token or a session cookie (not yet checked)."""
    headers = Headers(scope=scope)
    return "authorization" in headers or SESSION_COOKIE in cookie_parser(headers.get("cookie", ""))


def _limit_key(scope: Scope) -> str:
    """What refused sign-ins are counted against here: the user of a genuine device cookie
    (checked by its signature; each user one bucket, however many cookies they collect), else
    the client address."""
    cookies = cookie_parser(Headers(scope=scope).get("cookie", ""))
    device = read_device_cookie(cookies.get(DEVICE_COOKIE))
    return f"device-user:{device[0]}" if device else _client_address(scope)


def _own_origin(scope: Scope) -> set[str]:
    headers = Headers(scope=scope)
    scheme = scope.get("scheme", "http")
    origins = {f"{scheme}://{headers.get('host', '')}".lower()}
    public = urlsplit(get_settings().public_base_url)
    if public.netloc:
        origins.add(f"{public.scheme}://{public.netloc}".lower())
    return origins


def cross_site(scope: Scope) -> bool:
    """Whether a browser sent this request from another site: its Origin (or, without one,
    its Referer) names a different scheme, host or port. Requests with neither (scripts) are
    not cross-site."""
    headers = Headers(scope=scope)
    origin = headers.get("origin")
    if origin is None:
        referer = headers.get("referer")
        if not referer:
            return False
        parts = urlsplit(referer)
        origin = f"{parts.scheme}://{parts.netloc}"
    return origin.strip().lower() not in _own_origin(scope)


class SecurityMiddleware:
    """Headers on every response, the body limit, and sign-in limiting per address."""

    def __init__(self, app: ASGIApp, fastapi_app: FastAPI, limiter: AddressLimiter) -> None:
        self.app = app
        self.fastapi_app = fastapi_app
        self.limiter = limiter

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        path: str = scope.get("path", "")
        method: str = scope.get("method", "GET")
        https = scope.get("scheme") == "https"
        response_started = False
        status_code = 0

        async def send_with_headers(message: Message) -> None:
            nonlocal response_started, status_code
            if message["type"] == "http.response.start":
                response_started = True
                status_code = int(message["status"])
                _add_security_headers(MutableHeaders(scope=message), path, https=https)
            await send(message)

        sign_in = method == "POST" and path in SIGN_IN_PATHS
        if sign_in and cross_site(scope):
            refusal = PermissionDenied(
                "sign-in refused: the form was sent from another site; open this service's own "
                "sign-in page and sign in there"
            )
            await self._answer(scope, receive, send_with_headers, refusal)
            return
        key = _limit_key(scope)
        if sign_in and (wait := self.limiter.wait_seconds(key)) is not None:
            exc = TooManyAttempts(
                f"too many refused sign-ins from your address: try again in {wait} s",
                detail={"retry_after_seconds": wait},
            )
            await self._answer(scope, receive, send_with_headers, exc)
            return

        limit = body_limit(path, anonymous=not _has_credentials(scope))
        length = _content_length(scope) if method in BODY_METHODS else None
        if length is not None and length > limit:
            await self._answer(scope, receive, send_with_headers, RequestBodyTooLarge(limit))
            return

        received = 0

        async def receive_limited() -> Message:
            nonlocal received
            message = await receive()
            if message["type"] == "http.request":
                received += len(message.get("body", b""))
                if received > limit:
                    raise RequestBodyTooLarge(limit)
            return message

        try:
            await self.app(scope, receive_limited, send_with_headers)
        except RequestBodyTooLarge as exc:
            # Raised where no exception handler saw it (outside a route): answer here.
            if response_started:
                raise
            await self._answer(scope, receive, send_with_headers, exc)
        if sign_in and status_code in SIGN_IN_REFUSED:
            self.limiter.record(key)

    async def _answer(self, scope: Scope, receive: Receive, send: Send, exc: Exception) -> None:
        """Render `exc` with the app's own exception handlers, as if a route had raised it."""
        request = Request(scope, receive)
        response = await handle_with(self.fastapi_app, request, exc)
        await response(scope, receive, send)


def _add_security_headers(headers: MutableHeaders, path: str, *, https: bool) -> None:
    headers.setdefault("Content-Security-Policy", CONTENT_SECURITY_POLICY)
    if not path.startswith(STATIC_PREFIX):
        headers.setdefault("Cache-Control", NO_STORE)
    for name, value in SECURITY_HEADERS.items():
        headers.setdefault(name, value)
    if https:
        headers.setdefault("Strict-Transport-Security", HSTS)


# --- exception handlers -----------------------------------------------------------------------


def _lookup(app: FastAPI, exc_type: type[BaseException], *, skip: Handler | None = None) -> Handler:
    for cls in exc_type.__mro__:
        handler = app.exception_handlers.get(cls)
        if handler is not None and handler is not skip:
            return handler
    raise LookupError(f"no exception handler for {exc_type.__name__}")


async def _call(handler: Handler, request: Request, exc: Exception) -> Response:
    answer = handler(request, exc)
    return await answer if inspect.isawaitable(answer) else answer


async def handle_with(app: FastAPI, request: Request, exc: Exception) -> Response:
    """The response the app's exception handlers give for `exc`."""
    return await _call(_lookup(app, type(exc)), request, exc)


def _is_api(request: Request) -> bool:
    return request.url.path.startswith(API_PREFIX)


def json_safe(value: Any) -> Any:
    """`value` with NaN and infinities as text and anything exotic as its str(), so that a
    refusal echoing what was sent can always be rendered as JSON."""
    if isinstance(value, float):
        return value if math.isfinite(value) else str(value)
    if value is None or isinstance(value, str | int | bool):
        return value
    if isinstance(value, dict):
        return {str(k): _hide_password_fields(str(k), json_safe(v)) for k, v in value.items()}
    if isinstance(value, list | tuple | set | frozenset):
        return [json_safe(v) for v in value]
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    return str(value)


def _hide_password_fields(key: str, value: Any) -> Any:
    return HIDDEN if "password" in key.lower() and value not in (None, "") else value


def safe_errors(errors: Any) -> list[dict[str, Any]]:
    """Validation errors that can always be rendered and never echo a password."""
    safe: list[dict[str, Any]] = []
    for error in errors:
        item = {str(k): json_safe(v) for k, v in dict(error).items() if k != "input"}
        loc = [str(part) for part in error.get("loc", ())]
        if "input" in error and not any("password" in part.lower() for part in loc):
            item["input"] = json_safe(error["input"])
        safe.append(item)
    return safe


def _fields_where(request: Request, bad: Callable[[str], bool]) -> list[dict[str, Any]]:
    """Path and query parameters whose text `bad` refuses, as {loc, input}."""
    found = []
    for where, params in (("path", request.path_params), ("query", request.query_params)):
        for name, value in params.items():
            if bad(str(value)):
                found.append({"loc": [where, name], "input": str(value).replace("\x00", "\\0")})
    return found


def _too_large_number(text: str) -> bool:
    digits = text.strip().lstrip("+-")
    return digits.isdigit() and int(digits) > LARGEST_WHOLE_NUMBER


def unstorable_problems(request: Request, kind: str) -> list[dict[str, Any]]:
    """A refusal for a value the database cannot store, naming the field where it can (path
    and query parameters; a body field is named only as the body)."""
    if kind == "out_of_range":
        accepted = f"a whole number from 0 to {LARGEST_WHOLE_NUMBER}"
        what = "the number is too large"
        fields = _fields_where(request, _too_large_number)
    else:
        accepted = "text without the NUL character (U+0000)"
        what = "the text contains a NUL character"
        fields = _fields_where(request, lambda text: "\x00" in text)
    fields = fields or [{"loc": ["body"], "input": None}]
    return [
        {
            **field,
            "msg": f"{'.'.join(map(str, field['loc']))}: {what}; accepted: {accepted}",
            "type": kind,
            "ctx": {"accepted": accepted},
        }
        for field in fields
    ]


def unstorable_kind(exc: BaseException) -> str | None:
    """'out_of_range' or 'nul_character' when the database (driver) refused a value sent by
    the client, else None."""
    if isinstance(exc, OverflowError):
        return "out_of_range"
    if not isinstance(exc, sa.exc.DataError):
        return None
    original = getattr(exc, "orig", None)
    # PostgreSQL SQLSTATE 22003 numeric_value_out_of_range (psycopg's NumericValueOutOfRange).
    if getattr(original, "sqlstate", "") == "22003":
        return "out_of_range"
    # psycopg refuses NUL in text before sending it ("cannot contain NUL (0x00) bytes");
    # PostgreSQL refuses \u0000 in JSONB (SQLSTATE 22P05 untranslatable_character).
    if "NUL (0x00)" in str(original) or getattr(original, "sqlstate", "") == "22P05":
        return "nul_character"
    return None


def install_security(app: FastAPI) -> None:
    """Add the security middleware and safe refusals to `app`. Call it last in create_app():
    the handlers it adds wrap the ones already there. Safe to call twice."""
    if getattr(app.state, "security_installed", False):
        return
    app.state.security_installed = True
    previous_validation: Handler = _lookup(app, RequestValidationError)

    async def refused_input(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, RequestValidationError)
        safe = RequestValidationError(safe_errors(exc.errors()), endpoint_ctx=exc.endpoint_ctx)
        return await _call(previous_validation, request, safe)

    async def too_large(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, RequestBodyTooLarge)
        if _is_api(request):
            refusal = TooLarge(str(exc.detail), detail={"limit_bytes": exc.limit})
            return await _call(_lookup(app, ServiceError), request, refusal)
        return await _call(_lookup(app, StarletteHTTPException), request, exc)

    async def with_retry_after(request: Request, exc: Exception) -> Response:
        assert isinstance(exc, TooManyAttempts | Unavailable)
        response = await _call(_lookup(app, ServiceError, skip=with_retry_after), request, exc)
        wait = exc.detail.get("retry_after_seconds")
        if isinstance(wait, int | float) and math.isfinite(wait) and wait > 0:
            response.headers["Retry-After"] = str(math.ceil(wait))
        return response

    async def unstorable(request: Request, exc: Exception) -> Response:
        # A safety net: ids should be bounded and NUL refused where fields are declared, but
        # a value the database cannot store must never surface as a 500.
        kind = unstorable_kind(exc)
        if kind is None:
            raise exc
        problems = unstorable_problems(request, kind)
        return await _call(previous_validation, request, RequestValidationError(problems))

    app.add_exception_handler(RequestValidationError, refused_input)
    app.add_exception_handler(OverflowError, unstorable)
    app.add_exception_handler(sa.exc.DataError, unstorable)
    app.add_exception_handler(RequestBodyTooLarge, too_large)
    app.add_exception_handler(TooManyAttempts, with_retry_after)
    app.add_exception_handler(Unavailable, with_retry_after)

    async def database_unavailable(request: Request, exc: Exception) -> Response:
        # A dropped connection, a database that is down or restarting, a pool or lock that
        # stayed busy: nothing the caller did wrong, and worth trying again shortly.
        LOG.warning("database unavailable for %s %s: %r", request.method, request.url.path, exc)
        unavailable = Unavailable(
            "the database is not answering just now; nothing was changed, try again in "
            f"{DATABASE_RETRY_SECONDS} s",
            detail={"retry_after_seconds": DATABASE_RETRY_SECONDS},
        )
        return await with_retry_after(request, unavailable)

    for unreachable in (sa.exc.OperationalError, sa.exc.InterfaceError, sa.exc.TimeoutError):
        app.add_exception_handler(unreachable, database_unavailable)
    app.state.reduction_limiter = AddressLimiter(
        limit=REDUCTIONS_PER_ADDRESS, window=REDUCTIONS_WINDOW, backoff=None
    )
    app.add_middleware(SecurityMiddleware, fastapi_app=app, limiter=AddressLimiter())


def limit_anonymous_reductions(request: Request, user: OptionalUser) -> None:
    """A route dependency: anonymous callers get REDUCTIONS_PER_ADDRESS calls per
    REDUCTIONS_WINDOW seconds per address (429 with Retry-After beyond); signed-in ones any."""
    if user is not None:
        return
    limiter: AddressLimiter = request.app.state.reduction_limiter
    address = _client_address(request.scope)
    wait = limiter.wait_seconds(address)
    if wait is not None:
        raise TooManyAttempts(
            f"too many reductions from your address without signing in (at most "
            f"{REDUCTIONS_PER_ADDRESS} a minute): try again in {wait} s, or sign in "
            "(a bearer token or a session) for no limit",
            detail={"retry_after_seconds": wait},
        )
    limiter.record(address)
