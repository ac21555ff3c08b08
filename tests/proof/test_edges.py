"""The edge of the app: security headers, the session cookie, sign-in limits, oversized
bodies and refusals that are always renderable (NaN, passwords never echoed).

Header values follow the W3C Content Security Policy Level 3 directives and the OWASP Secure
Headers Project recommendations (common practice, no single normative source for the set)."""

from __future__ import annotations

import re
from collections.abc import Iterator

import pytest
from fastapi import Request
from fastapi.testclient import TestClient

from service.accounts.signin import DEVICE_COOKIE
from service.config import get_settings
from service.deps import SESSION_COOKIE
from service.security import SIGN_IN_ADDRESS_BACKOFF, SIGN_IN_FAILURES_PER_ADDRESS, AddressLimiter
from tests.proof.conftest import PASSWORD, Proof

# --- headers ------------------------------------------------------------------------------------


def _directives(policy: str) -> dict[str, list[str]]:
    parts = (p.strip().split() for p in policy.split(";") if p.strip())
    return {p[0]: p[1:] for p in parts}


def _assert_secure_headers(response: object, what: str) -> None:
    headers = response.headers  # type: ignore[attr-defined]
    policy = _directives(headers.get("content-security-policy", ""))
    assert policy.get("script-src") == ["'self'"], what
    assert policy.get("style-src") == ["'self'"], what
    assert policy.get("img-src") == ["'self'", "data:"], what
    assert policy.get("frame-ancestors") == ["'none'"], what
    assert policy.get("form-action") == ["'self'"], what
    assert policy.get("base-uri") == ["'none'"], what
    assert headers.get("x-content-type-options") == "nosniff", what
    assert headers.get("x-frame-options") == "DENY", what
    assert headers.get("referrer-policy") == "same-origin", what


def test_security_headers_on_pages_api_errors_and_static(proof: Proof) -> None:
    client = proof.client
    manager = proof.headers("lab_manager")
    answers = {
        "sign-in page": client.get("/sign-in"),
        "verify page": client.get("/verify"),
        "home page": client.get("/", headers=manager),
        "api read": client.get(f"/api/v1/samples/{proof.world.sample.id}", headers=manager),
        "api 401": client.get("/api/v1/auth/me"),
        "api 404": client.get("/api/v1/samples/999999", headers=manager),
        "api 422": client.post("/api/v1/projects", json={}, headers=manager),
        "no such page": client.get("/no-such-page"),
        "static file": client.get("/static/css/seepline.css"),
        "health": client.get("/healthz"),
    }
    for what, response in answers.items():
        assert response.status_code < 500, what
        _assert_secure_headers(response, what)
    assert "strict-transport-security" not in answers["health"].headers  # plain http


def test_https_requests_get_strict_transport_security(engine: object) -> None:
    from service.main import create_app

    with TestClient(create_app(), base_url="https://testserver") as client:
        response = client.get("/healthz")
    assert response.headers["strict-transport-security"].startswith("max-age=")


INLINE_SCRIPT = re.compile(r"<script(?![^>]*\bsrc=)[^>]*>", re.IGNORECASE)
EVENT_ATTRIBUTE = re.compile(r"<[^>]+\son[a-z]+\s*=", re.IGNORECASE)
STYLE_ATTRIBUTE = re.compile(r"<[^>]+\sstyle\s*=", re.IGNORECASE)


@pytest.mark.parametrize(
    ("path", "identity"),
    [("/sign-in", "anonymous"), ("/verify", "anonymous"), ("/", "lab_manager"), ("/", "client")],
)
def test_pages_need_no_inline_script_or_style(proof: Proof, path: str, identity: str) -> None:
    """The policy forbids inline script and style, so a page relying on them would break."""
    response = proof.client.get(path, headers=proof.headers(identity))
    assert response.status_code == 200
    html = response.text
    assert not INLINE_SCRIPT.search(html), INLINE_SCRIPT.search(html)
    assert not EVENT_ATTRIBUTE.search(html), EVENT_ATTRIBUTE.search(html)
    assert not STYLE_ATTRIBUTE.search(html), STYLE_ATTRIBUTE.search(html)


# --- the session cookie -------------------------------------------------------------------------


def _session_cookie_header(response: object) -> str:
    for name, value in response.headers.multi_items():  # type: ignore[attr-defined]
        if name == "set-cookie" and value.startswith(f"{SESSION_COOKIE}="):
            return str(value)
    raise AssertionError("no session cookie set")


def _credentials(proof: Proof, who: str = "technician") -> dict[str, str]:
    email = proof.users[who].email
    assert email is not None
    return {"email": email, "password": PASSWORD}


def test_session_cookie_is_httponly_and_samesite(proof: Proof) -> None:
    api = proof.client.post("/api/v1/auth/session", json=_credentials(proof))
    assert api.status_code == 200, api.text
    page = proof.client.post("/sign-in", data=_credentials(proof), follow_redirects=False)
    assert page.status_code in (200, 303), page.text
    for response in (api, page):
        cookie = _session_cookie_header(response).lower()
        assert "httponly" in cookie
        assert "samesite=lax" in cookie
        assert "secure" not in cookie  # plain http in this test: a secure cookie would be lost


def test_session_cookie_is_secure_over_https(proof: Proof) -> None:
    from service.main import create_app

    with TestClient(create_app(), base_url="https://testserver") as client:
        api = client.post("/api/v1/auth/session", json=_credentials(proof))
        page = client.post("/sign-in", data=_credentials(proof), follow_redirects=False)
    for response in (api, page):
        cookie = _session_cookie_header(response).lower()
        assert "; secure" in cookie
        assert "httponly" in cookie


def test_each_sign_in_starts_a_new_session_and_ends_the_old(proof: Proof) -> None:
    client = proof.client
    first = client.post("/api/v1/auth/session", json=_credentials(proof))
    old_cookie = client.cookies.get(SESSION_COOKIE)
    second = client.post("/api/v1/auth/session", json=_credentials(proof))
    new_cookie = client.cookies.get(SESSION_COOKIE)
    assert first.status_code == second.status_code == 200
    assert old_cookie
    assert new_cookie
    assert old_cookie != new_cookie
    assert first.json()["csrf_token"] != second.json()["csrf_token"]
    assert client.get("/api/v1/auth/me").status_code == 200
    client.cookies.clear()
    client.cookies.set(SESSION_COOKIE, old_cookie)
    assert client.get("/api/v1/auth/me").status_code == 401  # the replaced session is dead


# --- sign-in limits -----------------------------------------------------------------------------


def test_an_account_is_locked_after_repeated_failures_with_retry_after(proof: Proof) -> None:
    wrong = {**_credentials(proof), "password": "not the password"}
    statuses = [proof.client.post("/api/v1/auth/tokens", json=wrong).status_code for _ in range(2)]
    assert statuses == [401, 401]
    third = proof.client.post("/api/v1/auth/tokens", json=wrong)
    assert third.status_code == 401
    # After the third failure the account waits (service/accounts/signin.py BACKOFF).
    waiting = proof.client.post("/api/v1/auth/tokens", json=_credentials(proof))
    assert waiting.status_code == 429
    assert int(waiting.headers["retry-after"]) >= 1
    assert waiting.json()["retry_after_seconds"] == int(waiting.headers["retry-after"])


def _fail_from_one_address(proof: Proof, client: TestClient | None = None) -> None:
    client = client or proof.client
    for n in range(SIGN_IN_FAILURES_PER_ADDRESS):
        refused = client.post(
            "/api/v1/auth/tokens", json={"email": f"nobody{n}@example.test", "password": "guess"}
        )
        assert refused.status_code == 401


def test_one_address_trying_many_accounts_is_slowed_down_not_locked_out(proof: Proof) -> None:
    _fail_from_one_address(proof)
    # A browser that never signed in from here waits a short back-off: the address is slowed.
    for path, kwargs in (
        ("/api/v1/auth/tokens", {"json": _credentials(proof, "reviewer")}),
        ("/api/v1/auth/session", {"json": _credentials(proof, "reviewer")}),
        ("/sign-in", {"data": _credentials(proof, "reviewer")}),
    ):
        limited = proof.client.post(path, follow_redirects=False, **kwargs)
        assert limited.status_code == 429, path
        wait = int(limited.headers["retry-after"])
        assert 0 < wait <= SIGN_IN_ADDRESS_BACKOFF
        assert "too many" in limited.text.lower()
    # Other routes are not limited.
    assert proof.client.get("/api/v1/auth/me", headers=proof.headers("reviewer")).status_code == 200


def test_colleagues_behind_one_address_still_sign_in(proof: Proof) -> None:
    # The attack run: once an address had 20 failures, right passwords from it were refused
    # too, so a lab behind one NAT address locked itself out. A colleague whose browser signed
    # in before (a device cookie) is not limited by the address at all.
    device_holder = proof.client.post("/api/v1/auth/session", json=_credentials(proof, "reviewer"))
    assert device_holder.status_code == 200
    assert proof.client.cookies.get(DEVICE_COOKIE)
    from service.main import create_app

    with TestClient(create_app()) as attacker:  # same address, no cookies
        _fail_from_one_address(proof, attacker)
        assert attacker.post("/api/v1/auth/tokens", json=_credentials(proof)).status_code == 429
    again = proof.client.post("/sign-in", data=_credentials(proof, "reviewer"))
    assert again.status_code == 200, again.text  # redirected home, signed in


def test_a_forwarded_for_header_does_not_escape_the_address_limit(proof: Proof) -> None:
    # docker/compose.yaml trusted X-Forwarded-For from anyone (FORWARDED_ALLOW_IPS=*), so each
    # guess could claim a new address. Without a configured proxy the header is ignored.
    for n in range(SIGN_IN_FAILURES_PER_ADDRESS):
        proof.client.post(
            "/api/v1/auth/tokens",
            json={"email": f"nobody{n}@example.test", "password": "guess"},
            headers={"X-Forwarded-For": f"198.51.100.{n}"},
        )
    spoofed = proof.client.post(
        "/api/v1/auth/tokens",
        json=_credentials(proof),
        headers={"X-Forwarded-For": "203.0.113.99"},
    )
    assert spoofed.status_code == 429


def test_forwarded_for_is_believed_only_from_the_named_proxy(
    engine: object, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.main import create_app

    seen: list[str] = []

    def app_with(proxies: str) -> TestClient:
        monkeypatch.setenv("FORWARDED_ALLOW_IPS", proxies)
        get_settings.cache_clear()
        app = create_app()

        @app.get("/_peer")
        def peer(request: Request) -> dict[str, str]:
            seen.append(request.client.host if request.client else "")
            return {}

        return TestClient(app)

    try:
        with app_with("") as client:  # nobody named: the socket's peer
            client.get("/_peer", headers={"X-Forwarded-For": "198.51.100.7"})
        with app_with("testclient") as client:  # the test client plays the proxy
            client.get("/_peer", headers={"X-Forwarded-For": "198.51.100.7"})
    finally:
        monkeypatch.delenv("FORWARDED_ALLOW_IPS")
        get_settings.cache_clear()
    assert seen == ["testclient", "198.51.100.7"]


def test_the_compose_file_believes_only_its_own_gateway() -> None:
    import yaml

    from service.db import PROJECT_ROOT

    compose = yaml.safe_load((PROJECT_ROOT / "docker" / "compose.yaml").read_text())
    trusted = compose["x-app"]["environment"]["FORWARDED_ALLOW_IPS"]
    gateway = compose["networks"]["default"]["ipam"]["config"][0]["gateway"]
    assert "*" not in trusted
    assert trusted == f"${{FORWARDED_ALLOW_IPS:-{gateway}}}"


def test_production_refuses_to_believe_every_proxy(monkeypatch: pytest.MonkeyPatch) -> None:
    from pydantic import ValidationError

    from service.config import Settings

    monkeypatch.setenv("ENVIRONMENT", "production")
    monkeypatch.setenv("SECRET_KEY", "a-real-production-secret-value")
    monkeypatch.setenv("PUBLIC_BASE_URL", "https://seepline.example-lab.test")
    monkeypatch.setenv("FORWARDED_ALLOW_IPS", "*")
    with pytest.raises(ValidationError, match="FORWARDED_ALLOW_IPS"):
        Settings()


def test_the_address_limit_slows_down_then_forgets_failures() -> None:
    now = [1000.0]
    limiter = AddressLimiter(limit=3, window=60.0, clock=lambda: now[0], backoff=10.0)
    for _ in range(3):
        assert limiter.wait_seconds("192.0.2.7") is None
        limiter.record("192.0.2.7")
        now[0] += 10
    # Over the limit the address waits 10 s after its latest failure, not the whole window.
    assert limiter.wait_seconds("192.0.2.7") is None  # the latest was 10 s ago
    limiter.record("192.0.2.7")
    assert limiter.wait_seconds("192.0.2.7") == 10
    assert limiter.wait_seconds("192.0.2.8") is None  # another address is not affected
    now[0] = 1200.0
    assert limiter.wait_seconds("192.0.2.7") is None


def test_a_sign_in_posted_from_another_site_is_refused(proof: Proof) -> None:
    # Login CSRF (OWASP CSRF Prevention Cheat Sheet, "Login CSRF"): another site's form must
    # not sign the browser in to an account of the attacker's choosing.
    for headers in ({"Origin": "https://evil.example"}, {"Referer": "https://evil.example/x"}):
        refused = proof.client.post(
            "/sign-in", data=_credentials(proof), headers=headers, follow_redirects=False
        )
        assert refused.status_code == 403, headers
        assert "another site" in refused.text
        assert SESSION_COOKIE not in refused.headers.get("set-cookie", "")
    own = proof.client.post(
        "/sign-in",
        data=_credentials(proof),
        headers={"Origin": "http://testserver"},
        follow_redirects=False,
    )
    assert own.status_code == 303


# --- oversized bodies ---------------------------------------------------------------------------


@pytest.fixture
def small_limit(monkeypatch: pytest.MonkeyPatch) -> int:
    limit = 4096
    monkeypatch.setattr(get_settings(), "max_body_bytes", limit)
    return limit


def _names_the_limit(response: object, limit: int) -> None:
    assert response.status_code == 413  # type: ignore[attr-defined]
    assert f"{limit} bytes" in response.text  # type: ignore[attr-defined]


def test_an_oversized_json_body_is_refused_naming_the_limit(proof: Proof, small_limit: int) -> None:
    body = {"name": "x" * (small_limit + 10), "kind": "borehole"}
    response = proof.client.post(
        f"/api/v1/projects/{proof.world.project.id}/locations",
        json=body,
        headers=proof.headers("lab_manager"),
    )
    _names_the_limit(response, small_limit)
    assert response.json()["code"] == "too_large"
    assert response.json()["limit_bytes"] == small_limit


def test_a_streamed_body_without_length_is_cut_off_at_the_limit(
    proof: Proof, small_limit: int
) -> None:
    def chunks() -> Iterator[bytes]:
        yield b'{"name": "'
        for _ in range(10):
            yield b"x" * 1024
        yield b'", "kind": "borehole"}'

    response = proof.client.post(
        f"/api/v1/projects/{proof.world.project.id}/locations",
        content=chunks(),
        headers={**proof.headers("lab_manager"), "Content-Type": "application/json"},
    )
    _names_the_limit(response, small_limit)


def test_an_oversized_upload_is_refused_on_the_api_and_a_page(
    proof: Proof, small_limit: int
) -> None:
    big = b"Sample ID,Type\n" + b"BH-1/U1,tube\n" * 1000
    api = proof.client.post(
        "/api/v1/imports/schedules/preview",
        files={"file": ("schedule.csv", big, "text/csv")},
        data={"project_id": str(proof.world.project.id)},
        headers=proof.headers("lab_manager"),
    )
    _names_the_limit(api, small_limit)
    page = proof.client.post("/sign-in", data={"email": "x" * (2 * small_limit), "password": "p"})
    _names_the_limit(page, small_limit)


def test_the_certificate_check_takes_files_up_to_its_own_limit(
    proof: Proof, small_limit: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(get_settings(), "verify_upload_max_bytes", 8 * small_limit)
    pdf = b"%PDF-1.4\n" + b"0" * (2 * small_limit)  # over the body limit, under the file limit
    response = proof.client.post(
        "/api/v1/certificates/verify", files={"file": ("c.pdf", pdf, "application/pdf")}
    )
    assert response.status_code == 200, response.text
    assert response.json()["genuine"] is False


# --- refusals that render -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("method", "path", "body", "field"),
    [
        ("PATCH", "/api/v1/projects/{project}", '{"version": NaN}', "version"),
        (
            "POST",
            "/api/v1/projects/{project}/locations",
            '{"name": "BH-9", "kind": "borehole", "easting_m": Infinity}',
            "easting_m",
        ),
        ("POST", "/api/v1/tests/{test}/trials", '{"head_initial": NaN}', "head_initial"),
        ("POST", "/api/v1/reductions", '{"method": NaN, "trials": []}', "method"),
    ],
)
def test_nan_and_infinity_are_refused_with_422_naming_the_field(
    proof: Proof, method: str, path: str, body: str, field: str
) -> None:
    url = path.format(project=proof.world.project.id, test=proof.running.id)
    response = proof.client.request(
        method,
        url,
        content=body,
        headers={
            **proof.headers("lab_manager"),
            "Content-Type": "application/json",
            "Idempotency-Key": "nan-check",
        },
    )
    assert response.status_code == 422, response.text
    problems = response.json()["errors"]
    assert any(field in p["loc"] for p in problems)
    assert all(p["msg"] for p in problems)


def test_a_refused_sign_in_never_echoes_the_password(proof: Proof) -> None:
    secret = "s3cret-horse-battery"
    missing_email = proof.client.post("/api/v1/auth/tokens", json={"password": secret})
    assert missing_email.status_code == 422
    assert secret not in missing_email.text
    wrong_type = proof.client.post(
        "/api/v1/auth/session", json={"email": "a@example.test", "password": [secret]}
    )
    assert wrong_type.status_code == 422
    assert secret not in wrong_type.text
    too_long = proof.client.post(
        "/sign-in", data={"email": "a@example.test", "password": secret * 60}
    )
    assert too_long.status_code == 422
    assert secret not in too_long.text


HUGE = 300918206850429553742440384430080  # far beyond any integer column (64-bit or 32-bit)


@pytest.mark.parametrize(
    ("method", "path", "body", "field"),
    [
        ("GET", "/api/v1/samples/{sample}/tests?offset={huge}", None, "offset"),
        ("GET", "/api/v1/samples/{huge}", None, "sample_id"),
        ("POST", "/api/v1/projects", {"client_id": HUGE, "number": "P-H", "name": "H"}, "body"),
    ],
)
def test_numbers_too_large_for_the_database_are_refused_not_crashed(
    proof: Proof, method: str, path: str, body: object, field: str
) -> None:
    url = path.format(sample=proof.world.sample.id, huge=HUGE)
    response = proof.client.request(method, url, json=body, headers=proof.headers("lab_manager"))
    # PostgreSQL compares an oversized id without complaint and finds nothing (404, or the
    # service's own refusal); SQLite's driver cannot bind it at all (422 naming the field).
    assert response.status_code in (404, 422), response.text
    if response.status_code == 422 and "out_of_range" in response.text:
        problem = response.json()["errors"][0]
        assert field in problem["loc"]
        assert "too large" in problem["msg"]
        assert "2147483647" in problem["accepted"]


def test_a_nul_character_in_text_is_refused_not_crashed(proof: Proof) -> None:
    sign_in = proof.client.post(
        "/api/v1/auth/tokens", json={"email": "a\u0000b@example.test", "password": "guess"}
    )
    assert sign_in.status_code == 401, sign_in.text  # no such account, on either database
    location = proof.client.post(
        f"/api/v1/projects/{proof.world.project.id}/locations",
        json={"name": "BH-\u00001", "kind": "borehole"},
        headers=proof.headers("lab_manager"),
    )
    # Refused on both databases (PostgreSQL could not store it; SQLite would store garbage).
    assert location.status_code == 422, location.text
    problem = location.json()["errors"][0]
    assert problem["loc"][-1] == "name"
    assert "contains the invisible control character U+0000" in problem["msg"]
