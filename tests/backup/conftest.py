"""A populated SQLite database to back up: the demo scenario plus one more certificate issued
through the certificate service, built from the migrations in its own file."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pytest
import sqlalchemy as sa
from sqlmodel import Session

from service.db import make_engine, migrate
from tests.backup.arrange import populate


@dataclass(frozen=True)
class SqliteSource:
    url: str
    path: Path


@pytest.fixture(scope="module")
def sqlite_source(tmp_path_factory: pytest.TempPathFactory) -> SqliteSource:
    """A live SQLite database (WAL, like the service's) holding the demo and a new certificate."""
    path = tmp_path_factory.mktemp("backup-source") / "live.db"
    url = f"sqlite:///{path}"
    migrate(url)
    engine: sa.Engine = make_engine(url)
    try:
        with Session(engine, expire_on_commit=False) as session:
            populate(session)
            session.commit()
    finally:
        engine.dispose()
    return SqliteSource(url=url, path=path)
