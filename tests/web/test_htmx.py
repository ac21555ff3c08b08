"""The htmx helpers: request details, fragment-or-page, Vary, redirects, safe `next`."""

from __future__ import annotations

import pytest
from fastapi import FastAPI, Request
from fastapi.responses import Response
from fastapi.testclient import TestClient

from service.web.display import number, sci
from service.web.htmx import HtmxDep, htmx_details, redirect, render, safe_next


@pytest.fixture
def tiny_client() -> TestClient:
    app = FastAPI()

    @app.get("/page")
    def page(request: Request, htmx: HtmxDep) -> Response:
        return render(
            request,
            "errors/error.html",
            {"status_code": 409, "title": "T", "message": f"boosted={htmx.boosted}"},
            fragment="errors/_error.html",
            headers={"Vary": "Accept-Encoding"},
        )

    @app.post("/go")
    def go(request: Request) -> Response:
        return redirect(request, "/elsewhere")

    return TestClient(app, follow_redirects=False)


def test_plain_request_gets_the_page(tiny_client: TestClient) -> None:
    response = tiny_client.get("/page")
    assert "<!doctype html>" in response.text
    assert response.headers["vary"] == "Accept-Encoding, HX-Request"


def test_htmx_request_gets_the_fragment(tiny_client: TestClient) -> None:
    response = tiny_client.get("/page", headers={"HX-Request": "true"})
    assert "<!doctype html>" not in response.text
    assert 'data-status="409"' in response.text
    assert "HX-Request" in response.headers["vary"]


@pytest.mark.parametrize("extra", [{"HX-Boosted": "true"}, {"HX-History-Restore-Request": "true"}])
def test_boosted_and_history_requests_get_the_page(tiny_client: TestClient, extra: dict) -> None:
    response = tiny_client.get("/page", headers={"HX-Request": "true", **extra})
    assert "<!doctype html>" in response.text


def test_redirect_is_303_or_hx_redirect(tiny_client: TestClient) -> None:
    plain = tiny_client.post("/go")
    assert plain.status_code == 303
    assert plain.headers["location"] == "/elsewhere"
    htmx = tiny_client.post("/go", headers={"HX-Request": "true"})
    assert htmx.status_code == 200
    assert htmx.headers["hx-redirect"] == "/elsewhere"
    assert "location" not in htmx.headers


def test_htmx_details_reads_the_htmx_4_headers() -> None:
    scope = {
        "type": "http",
        "method": "GET",
        "path": "/",
        "headers": [
            (b"hx-request", b"true"),
            (b"hx-target", b"div#bench-result"),
            (b"hx-source", b"input#f-specimen-length"),
            (b"hx-current-url", b"http://testserver/bench"),
        ],
    }
    details = htmx_details(Request(scope))
    assert details.is_htmx
    assert details.wants_fragment
    assert details.target == "div#bench-result"
    assert details.source == "input#f-specimen-length"
    assert details.current_url == "http://testserver/bench"


@pytest.mark.parametrize(
    ("target", "expected"),
    [
        ("/bench", "/bench"),
        ("/search?q=26-0001", "/search?q=26-0001"),
        ("//evil.example", "/"),
        ("https://evil.example/", "/"),
        ("/\\evil.example", "/"),
        ("", "/"),
        (None, "/"),
    ],
)
def test_safe_next_keeps_redirects_on_site(target: str | None, expected: str) -> None:
    assert safe_next(target) == expected


@pytest.mark.parametrize(
    ("value", "shown"),
    [
        (1.7622e-9, "1.76 × 10⁻⁹"),
        (9.996e-8, "1.00 × 10⁻⁷"),
        (0.0245, "0.0245"),
        (8.62, "8.62"),
        (None, "—"),
        (float("nan"), "—"),
    ],
)
def test_sci_shows_superscript_powers(value: float | None, shown: str) -> None:
    assert shown in str(sci(value))


def test_number_gives_significant_figures() -> None:
    assert number(17.0765) == "17.1"
    assert number(None) == "—"
