"""Findings of the attack run that are not about files or sign-in: anonymous CPU on the
reduction endpoint, 500s (a non-ASCII capital in an apparatus identifier, a dropped database
connection), caching of private answers, wildcards in project search.

Sources: RFC 9110 §15.6.4 (503 with Retry-After for a temporary condition), RFC 9111 §5.2.2.5
(no-store: a cache must not keep the response), RFC 6585 §4 (429 with Retry-After)."""

from __future__ import annotations

import subprocess
import sys
from typing import Any

import pytest
import sqlalchemy as sa
from sqlmodel import Session

from service.api.reductions import EXAMPLES
from service.config import get_settings
from service.db import PROJECT_ROOT
from service.security import REDUCTIONS_PER_ADDRESS
from tests.auth_helpers import sign_in_cookie
from tests.proof.conftest import Proof

REDUCTIONS = "/api/v1/reductions"


def _example() -> dict[str, Any]:
    return dict(EXAMPLES["constant_head"]["value"])


# --- unauthenticated CPU --------------------------------------------------------------------


def test_anonymous_reductions_are_rate_limited_per_address(proof: Proof) -> None:
    # The attack run: four anonymous 5 MB reductions at once pushed /healthz to 2.8 s.
    for _ in range(REDUCTIONS_PER_ADDRESS):
        assert proof.client.post(REDUCTIONS, json=_example()).status_code == 200
    limited = proof.client.post(REDUCTIONS, json=_example())
    assert limited.status_code == 429
    assert 0 < int(limited.headers["retry-after"]) <= 60
    assert "sign in" in limited.json()["detail"]
    # Signed-in callers are not limited; a made-up token is no way round it.
    signed_in = proof.client.post(REDUCTIONS, json=_example(), headers=proof.headers("client"))
    assert signed_in.status_code == 200
    forged = proof.client.post(
        REDUCTIONS, json=_example(), headers={"Authorization": "Bearer made-up"}
    )
    assert forged.status_code == 401


def test_anonymous_reductions_take_a_smaller_body(proof: Proof) -> None:
    limit = get_settings().anonymous_reduction_max_bytes
    big = _example()
    big["notes"] = "x" * (limit + 1)
    refused = proof.client.post(REDUCTIONS, json=big)
    assert refused.status_code == 413
    assert refused.json()["limit_bytes"] == limit
    # With a token the general limit applies: the body is read and judged on its content.
    allowed = proof.client.post(REDUCTIONS, json=big, headers=proof.headers("technician"))
    assert allowed.status_code == 422  # 'notes' is no field of the contract


# --- other 500s -------------------------------------------------------------------------------


def test_apparatus_identifiers_differing_only_in_a_non_ascii_capital_are_one(
    proof: Proof,
) -> None:
    # The attack run: 'ÉTUVE-1' then 'étuve-1' on SQLite (whose lower() folds ASCII only)
    # passed the duplicate check and hit the unique constraint: a 500.
    headers = proof.headers("lab_manager")
    first = {"identifier": "ÉTUVE-1", "kind": "balance"}
    created = proof.client.post("/api/v1/apparatus", json=first, headers=headers)
    assert created.status_code == 201, created.text
    for twin in ("ÉTUVE-1", "étuve-1", "E\u0301TUVE-1", "ÉTUVE-1\u200b"):
        again = proof.client.post(
            "/api/v1/apparatus", json={**first, "identifier": twin}, headers=headers
        )
        assert again.status_code == 409, (twin, again.text)
        assert "already has an item" in again.json()["detail"]


@pytest.fixture
def dropped_database(monkeypatch: pytest.MonkeyPatch) -> None:
    """Every statement fails as when the server closes the connection under the app."""

    def closed(*_args: object, **_kwargs: object) -> None:
        raise sa.exc.OperationalError(
            "SELECT 1", {}, Exception("server closed the connection unexpectedly")
        )

    monkeypatch.setattr(sa.orm.Session, "execute", closed)


def test_a_dropped_database_answers_503_with_retry_after(
    proof: Proof, dropped_database: None
) -> None:
    api = proof.client.get("/api/v1/projects", headers=proof.headers("lab_manager"))
    assert api.status_code == 503
    assert api.headers["retry-after"] == "5"
    assert api.headers["content-type"] == "application/problem+json"
    assert "try again" in api.json()["detail"]


def test_a_dropped_database_answers_a_503_page_on_the_web(proof: Proof, session: Session) -> None:
    sign_in_cookie(session, proof.client, proof.users["lab_manager"])
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr(
            sa.orm.Session,
            "execute",
            lambda *_a, **_k: (_ for _ in ()).throw(
                sa.exc.OperationalError("SELECT 1", {}, Exception("connection refused"))
            ),
        )
        page = proof.client.get("/projects")
    assert page.status_code == 503
    assert page.headers["retry-after"] == "5"
    assert page.headers["content-type"].startswith("text/html")
    assert "Briefly unavailable" in page.text


def test_the_served_app_checks_every_flush_for_control_characters() -> None:
    # The tests import every model (service/models.py) and with it the check; a served app
    # imports only what its routes need, so create_app() must install the check itself.
    script = (
        "import sqlalchemy as sa, sqlalchemy.orm, sys\n"
        "from service.main import create_app\n"
        "from service.stored_text import refuse_control_characters as check\n"
        "assert not sa.event.contains(sa.orm.Session, 'before_flush', check)\n"
        "create_app()\n"
        "sys.exit(0 if sa.event.contains(sa.orm.Session, 'before_flush', check) else 3)\n"
    )
    done = subprocess.run([sys.executable, "-c", script], cwd=PROJECT_ROOT, check=False)
    assert done.returncode == 0


# --- caching and search -------------------------------------------------------------------------


def test_private_answers_are_never_stored_by_a_cache(proof: Proof, session: Session) -> None:
    headers = proof.headers("lab_manager")
    certificate = proof.certificate
    session.commit()
    answers = {
        "api": proof.client.get("/api/v1/projects", headers=headers),
        "export": proof.client.get(
            f"/api/v1/projects/{proof.world.project.id}/results.csv", headers=headers
        ),
        "pdf": proof.client.get(f"/api/v1/certificates/{certificate.id}/pdf", headers=headers),
        "page": proof.client.get("/projects", headers=headers),
    }
    for what, response in answers.items():
        assert response.status_code == 200, (what, response.text[:200])
        assert response.headers["cache-control"] == "no-store", what
    static = proof.client.get("/static/css/seepline.css")
    assert "no-store" not in static.headers.get("cache-control", "")


@pytest.mark.parametrize(("search", "found"), [("%", 0), ("_", 0), ("HD-2026", 1)])
def test_project_search_takes_percent_and_underscore_literally(
    proof: Proof, search: str, found: int
) -> None:
    response = proof.client.get(
        "/api/v1/projects", params={"search": search}, headers=proof.headers("lab_manager")
    )
    assert response.status_code == 200
    assert response.json()["total"] == found
