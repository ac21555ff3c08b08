"""Test set-up: a database built from the migrations once per run, a copy of it per process
(tests/databases.py), emptied after each test that used it.

DATABASE_URL selects the backend (CI runs the suite once on SQLite, once on PostgreSQL, each
with pytest-xdist); without it the databases are throwaway SQLite files."""

from __future__ import annotations

import os
from collections import Counter
from collections.abc import Iterator
from typing import Any

from tests.databases import for_this_process

# Chosen before any service module reads the settings.
DATABASES = for_this_process()
os.environ["DATABASE_URL"] = DATABASES.url
os.environ["ENVIRONMENT"] = "test"
os.environ["SECRET_KEY"] = "test-secret-key-not-for-production"
os.environ["ARGON2_TIME_COST"] = "1"
os.environ["ARGON2_MEMORY_COST_KIB"] = "64"
os.environ["SIGNING_KEY_PATH"] = str(DATABASES.own_dir / "signing_key.pem")

import pytest  # noqa: E402
import sqlalchemy as sa  # noqa: E402
from fastapi.testclient import TestClient  # noqa: E402
from sqlmodel import Session, SQLModel  # noqa: E402

import service.models  # noqa: E402, F401
from service import queue  # noqa: E402
from service.config import get_settings  # noqa: E402
from service.db import get_engine  # noqa: E402
from service.lab_tests import preview  # noqa: E402

DATABASE_URL = DATABASES.url
IS_POSTGRES = DATABASES.is_postgres
_TABLES = list(reversed(SQLModel.metadata.sorted_tables))
_SEQUENCES = (
    "SELECT string_agg(format('setval(%%L, 1, false)', s), ', ') FROM ("
    "SELECT pg_get_serial_sequence(quote_ident(c.table_name), c.column_name) AS s "
    "FROM information_schema.columns AS c WHERE c.table_schema = current_schema()) AS q "
    "WHERE s IS NOT NULL"
)
_restart_sequences: list[str] = []


def empty_all_tables(engine: sa.Engine) -> None:
    """DELETE, not TRUNCATE: on PostgreSQL a TRUNCATE of every table took 0.4-0.6 s per test
    (new files for each table), DELETE of a test's few rows a few milliseconds. Sequences
    start again at 1, as an emptied SQLite table's rowids do."""
    with engine.begin() as connection:
        for table in _TABLES:
            connection.execute(table.delete())
        if IS_POSTGRES:
            if not _restart_sequences:
                calls = connection.exec_driver_sql(_SEQUENCES).scalar_one()
                _restart_sequences.append(f"SELECT {calls}")
            connection.exec_driver_sql(_restart_sequences[0])


def pytest_terminal_summary(terminalreporter: Any, config: pytest.Config) -> None:
    """With --durations: the time spent per test directory (set-up, call and teardown summed
    over every process), to show where a run's time goes."""
    if config.option.durations is None:
        return
    spent: Counter[str] = Counter()
    for reports in terminalreporter.stats.values():
        for report in reports:
            if isinstance(report, pytest.TestReport):
                spent[report.nodeid.split("::")[0].rsplit("/", 1)[0]] += report.duration
    terminalreporter.write_sep("=", "time per directory (all processes)")
    for directory, seconds in spent.most_common():
        terminalreporter.write_line(f"{seconds:8.1f} s  {directory}")


def pytest_unconfigure(config: pytest.Config) -> None:
    if not hasattr(config, "workerinput"):  # the process that started the run
        DATABASES.finish_run()


@pytest.fixture(scope="session")
def migrated_engine() -> Iterator[sa.Engine]:
    """This process's copy of the migrated template (built on first use, see databases.py)."""
    DATABASES.create_own()
    get_settings.cache_clear()
    get_engine.cache_clear()
    engine = get_engine()
    yield engine
    engine.dispose()
    DATABASES.drop_own()


@pytest.fixture
def engine(migrated_engine: sa.Engine) -> Iterator[sa.Engine]:
    """The app's engine on a migrated database, emptied again after the test."""
    yield migrated_engine
    empty_all_tables(migrated_engine)
    queue.forget()  # what is kept a few seconds, or per test, is of the tables just emptied
    preview.forget()


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
