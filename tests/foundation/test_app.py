"""The app factory, health check, OpenAPI and the refusal of an unmigrated database."""

from __future__ import annotations

from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlmodel import Session

from service import db
from service.common import Role
from service.config import get_settings
from service.errors import DatabaseNotMigrated
from tests.auth_helpers import bearer
from tests.factories import make_user


def test_healthz_reports_database_and_revision(client: TestClient) -> None:
    response = client.get("/healthz")
    assert response.status_code == 200
    body = response.json()
    assert body["status"] == "ok"
    assert body["database"] == "reachable"
    assert body["migration_revision"] == db.head_revision()


def test_openapi_is_served_to_signed_in_users_only(client: TestClient, session: Session) -> None:
    # The attack run found /docs, /redoc and /openapi.json open to anyone in production, and
    # /docs loading its scripts from a CDN. No interactive docs; the document needs a sign-in.
    anonymous = client.get("/openapi.json", follow_redirects=False)
    assert anonymous.status_code in (303, 401)
    assert "paths" not in anonymous.text
    for path in ("/docs", "/redoc"):
        assert client.get(path).status_code == 404
    user = make_user(session, role=Role.CLIENT)
    response = client.get("/openapi.json", headers=bearer(session, user))
    assert response.status_code == 200
    assert response.json()["info"]["title"] == "Seepline"
    assert response.headers["cache-control"] == "no-store"


def test_unmigrated_database_is_refused_with_the_command(tmp_path: Path) -> None:
    engine = db.make_engine(f"sqlite:///{tmp_path / 'empty.db'}")
    with pytest.raises(DatabaseNotMigrated, match="seepline migrate"):
        db.require_migrated(engine)


def test_app_does_not_start_on_unmigrated_database(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from service.main import create_app

    monkeypatch.setenv("DATABASE_URL", f"sqlite:///{tmp_path / 'empty.db'}")
    get_settings.cache_clear()
    db.get_engine.cache_clear()
    try:
        with pytest.raises(DatabaseNotMigrated), TestClient(create_app()):
            pass
    finally:
        db.get_engine().dispose()
        monkeypatch.undo()
        get_settings.cache_clear()
        db.get_engine.cache_clear()
