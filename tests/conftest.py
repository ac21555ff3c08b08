"""Test set-up: a database built from the migrations, emptied after each test that used it.

DATABASE_URL selects the backend (CI runs the suite once on SQLite, once on PostgreSQL);
without it a throwaway SQLite file is used."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

# Chosen before any service module reads the settings.
_TMP = Path(tempfile.mkdtemp(prefix="seepline-tests-"))
os.environ.setdefault("DATABASE_URL", f"sqlite:///{_TMP / 'test.db'}")
os.environ["ENVIRONMENT"] = "test"
os.environ["SECRET_KEY"] = "test-secret-key-not-for-production"
os.environ["ARGON2_TIME_COST"] = "1"
os.environ["ARGON2_MEMORY_COST_KIB"] = "64"
os.environ.setdefault("SIGNING_KEY_PATH", str(_TMP / "signing_key.pem"))

import pytest  # noqa: E402
import sqlalchemy as sa  # noqa: E402
from fastapi.testclient import TestClient  # noqa: E402
from sqlmodel import Session, SQLModel  # noqa: E402

import service.models  # noqa: E402, F401
from service.config import get_settings  # noqa: E402
from service.db import get_engine, migrate  # noqa: E402

DATABASE_URL = os.environ["DATABASE_URL"]
IS_POSTGRES = DATABASE_URL.startswith("postgresql")


def empty_all_tables(engine: sa.Engine) -> None:
    tables = list(reversed(SQLModel.metadata.sorted_tables))
    with engine.begin() as connection:
        if IS_POSTGRES:
            names = ", ".join(f'"{table.name}"' for table in tables)
            connection.exec_driver_sql(f"TRUNCATE {names} RESTART IDENTITY CASCADE")
        else:
            for table in tables:
                connection.execute(table.delete())


@pytest.fixture(scope="session")
def migrated_engine() -> Iterator[sa.Engine]:
    get_settings.cache_clear()
    get_engine.cache_clear()
    migrate(DATABASE_URL)
    engine = get_engine()
    empty_all_tables(engine)
    yield engine
    engine.dispose()


@pytest.fixture
def engine(migrated_engine: sa.Engine) -> Iterator[sa.Engine]:
    """The app's engine on a migrated database, emptied again after the test."""
    yield migrated_engine
    empty_all_tables(migrated_engine)


@pytest.fixture
def session(engine: sa.Engine) -> Iterator[Session]:
    """A session for arranging and inspecting data; commit what the app must see."""
    with Session(engine, expire_on_commit=False) as db_session:
        yield db_session


@pytest.fixture
def client(engine: sa.Engine) -> Iterator[TestClient]:
    from service.main import create_app

    with TestClient(create_app()) as test_client:
        yield test_client
