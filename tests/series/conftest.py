from __future__ import annotations

import pytest
from sqlmodel import Session

from tests.series.arrange import SeriesWorld, build


@pytest.fixture
def world(session: Session) -> SeriesWorld:
    return build(session)
