"""Database engine, metadata naming convention, column types and the request session."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from functools import lru_cache
from pathlib import Path
from typing import Any

import sqlalchemy as sa
from sqlalchemy.dialects.postgresql import JSONB
from sqlalchemy.engine import Dialect, Engine
from sqlalchemy.pool import ConnectionPoolEntry
from sqlmodel import Session, SQLModel

from service.config import get_settings
from service.errors import DatabaseNotMigrated

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}
SQLModel.metadata.naming_convention = NAMING_CONVENTION

PROJECT_ROOT = Path(__file__).resolve().parent.parent


def utcnow() -> datetime:
    return datetime.now(UTC)


class UTCDateTime(sa.types.TypeDecorator[datetime]):
    """Timezone-aware UTC timestamps on every backend; naive datetimes are refused."""

    impl = sa.DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, _dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime refused: give a timezone-aware UTC datetime")
        return value.astimezone(UTC)

    def process_result_value(self, value: datetime | None, _dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:  # SQLite returns naive values
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)


JSONType = sa.JSON().with_variant(JSONB(), "postgresql")


def _sqlite_pragmas(dbapi_connection: Any, _record: ConnectionPoolEntry) -> None:
    # Let SQLAlchemy's "begin" event emit BEGIN itself (see _sqlite_begin).
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute("PRAGMA journal_mode=WAL")
    cursor.execute("PRAGMA synchronous=NORMAL")
    cursor.execute("PRAGMA busy_timeout=10000")
    cursor.close()


def _sqlite_begin(connection: sa.Connection) -> None:
    """Writing transactions take SQLite's write lock up front (BEGIN IMMEDIATE): a deferred
    transaction that read first and writes later fails at once, without waiting, when another
    writer committed in between (SQLITE_BUSY_SNAPSHOT)."""
    immediate = connection.get_execution_options().get("sqlite_immediate", False)
    connection.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")


def make_engine(url: str) -> Engine:
    """Build an engine; SQLite gets WAL, foreign keys and a busy timeout on every connection."""
    if url.startswith("sqlite"):
        path = url.split("///", 1)[-1]
        if path and path != ":memory:":
            Path(path).parent.mkdir(parents=True, exist_ok=True)
        # Pooled: opening a connection and its four PRAGMAs cost a write ~8 % of its time,
        # inside the write gate. The overflow is unbounded so the pool never runs dry (a
        # request waiting for a connection on the event loop would stall every other one);
        # past pool_size, connections are closed when returned.
        engine = sa.create_engine(
            url,
            connect_args={"check_same_thread": False, "timeout": 10},
            poolclass=sa.pool.QueuePool,
            pool_size=20,
            max_overflow=-1,
        )
        sa.event.listen(engine, "connect", _sqlite_pragmas)
        sa.event.listen(engine, "begin", _sqlite_begin)
        return engine
    # Per worker: 20 kept open, 30 more at peaks (PostgreSQL allows 100 by default; size
    # max_connections to workers x 50 for a busy lab).
    return sa.create_engine(url, pool_pre_ping=True, pool_size=20, max_overflow=30, pool_timeout=10)


@lru_cache
def get_engine() -> Engine:
    return make_engine(get_settings().database_url)


@contextmanager
def session_scope(*, write: bool = False, engine: Engine | None = None) -> Iterator[Session]:
    """One unit of work: commit on success, roll back on any error.

    `write=True` takes the SQLite write lock at the start; PostgreSQL ignores the option."""
    with Session(engine or get_engine(), expire_on_commit=False) as session:
        if write:
            session.connection(execution_options={"sqlite_immediate": True})
        try:
            yield session
            session.commit()
        except BaseException:
            session.rollback()
            raise


def alembic_config(url: str | None = None) -> Any:
    from alembic.config import Config

    config = Config(str(PROJECT_ROOT / "alembic.ini"))
    config.set_main_option("script_location", str(PROJECT_ROOT / "migrations"))
    config.set_main_option("sqlalchemy.url", url or get_settings().database_url)
    return config


@lru_cache
def head_revision() -> str | None:
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    from alembic.runtime.migration import MigrationContext

    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()


def migrate(url: str | None = None, revision: str = "head") -> None:
    from alembic import command

    command.upgrade(alembic_config(url), revision)


def require_migrated(engine: Engine) -> str:
    """Refuse to serve a database that is not at the code's migration head."""
    current, head = current_revision(engine), head_revision()
    if current != head:
        raise DatabaseNotMigrated(
            f"The database is at migration {current or 'none (empty)'} but this code needs {head}. "
            "Run `seepline migrate` (or `make migrate`) and start again."
        )
    return current or ""
