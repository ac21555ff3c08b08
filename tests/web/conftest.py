"""Fixtures for the page tests: an app with the HTML error handling installed."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
import sqlalchemy as sa
from fastapi.testclient import TestClient


@pytest.fixture
def web_client(engine: sa.Engine) -> Iterator[TestClient]:
    """A TestClient over create_app() with the pages' error handling (idempotent if main.py
    already installs it) that does not follow redirects, so tests can see them."""
    from service.main import create_app
    from service.web.errors import install_web_error_handling

    app = create_app()
    install_web_error_handling(app)
    with TestClient(app, follow_redirects=False) as client:
        yield client
