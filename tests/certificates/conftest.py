"""Fixtures of the certificate tests; the arrangement itself is in arrange.py."""

from __future__ import annotations

import pytest
from sqlmodel import Session

from tests.certificates.arrange import World, build_world


@pytest.fixture
def world(session: Session) -> World:
    """A client, a project with a 1e-9 m/s limit, one sample with one approved test."""
    return build_world(session)
