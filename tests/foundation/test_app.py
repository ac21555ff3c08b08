"""The app factory, health check, OpenAPI and the refusal of an unmigrated database."""

from __future__ import annotations

from pathlib import Path

import pytest
from fastapi.testclient import TestClient

from service import db
from service.config import get_settings
from service.errors import DatabaseNotMigrated


def test_healthz_reports_database_and_revision(client: TestClient) -> None:
    response = client.get("/healthz")
    assert response.status_code == 200
    body = response.json()
    assert body["status"] == "ok"
    assert body["database"] == "reachable"
    assert body["migration_revision"] == db.head_revision()


def test_openapi_is_served(client: TestClient) -> None:
    response = client.get("/openapi.json")
    assert response.status_code == 200
    assert response.json()["info"]["title"] == "Seepline"


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
