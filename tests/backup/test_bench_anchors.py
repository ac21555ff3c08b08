"""The bare speed anchors of scripts/bench_load.py are not part of the service: absent unless
BENCH_ANCHORS=1, and never in production."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from fastapi.testclient import TestClient

from service.api import bench_anchors as bench
from service.config import get_settings


@pytest.fixture
def fresh_settings() -> Iterator[None]:
    get_settings.cache_clear()
    yield
    get_settings.cache_clear()


def test_no_anchor_routes_by_default(client: TestClient) -> None:
    assert bench.router is None
    assert client.get(f"{bench.PREFIX}/constant").status_code == 404
    assert not [r for r in client.app.routes if getattr(r, "path", "").startswith(bench.PREFIX)]


@pytest.mark.parametrize(
    ("environment", "served"), [("development", True), ("test", True), ("production", False)]
)
def test_anchors_are_served_only_outside_production(
    monkeypatch: pytest.MonkeyPatch, fresh_settings: None, environment: str, served: bool
) -> None:
    monkeypatch.setenv("BENCH_ANCHORS", "1")
    monkeypatch.setenv("ENVIRONMENT", environment)
    monkeypatch.setenv("PUBLIC_BASE_URL", "https://seepline.example-lab.test")
    get_settings.cache_clear()

    assert bench._enabled() is served
