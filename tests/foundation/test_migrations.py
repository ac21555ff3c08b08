"""Migrations go up, down and up again on the backend under test, and match the models."""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
import sqlalchemy as sa
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlmodel import SQLModel

from service.db import alembic_config, head_revision
from tests.conftest import DATABASE_URL, IS_POSTGRES


@pytest.fixture
def scratch_url(tmp_path: Path) -> Iterator[str]:
    """A brand-new empty database of the backend under test."""
    if not IS_POSTGRES:
        yield f"sqlite:///{tmp_path / 'scratch.db'}"
        return
    name = f"seepline_scratch_{uuid.uuid4().hex[:10]}"
    admin = sa.create_engine(DATABASE_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as connection:
        connection.exec_driver_sql(f'CREATE DATABASE "{name}"')
    try:
        yield (
            sa.engine.make_url(DATABASE_URL)
            .set(database=name)
            .render_as_string(hide_password=False)
        )
    finally:
        with admin.connect() as connection:
            connection.exec_driver_sql(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
        admin.dispose()


def _tables(url: str) -> set[str]:
    engine = sa.create_engine(url)
    try:
        return set(sa.inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()


def test_upgrade_downgrade_upgrade(scratch_url: str) -> None:
    config = alembic_config(scratch_url)
    command.upgrade(config, "head")
    assert _tables(scratch_url) == set(SQLModel.metadata.tables)
    command.downgrade(config, "base")
    assert _tables(scratch_url) == set()
    command.upgrade(config, "head")
    assert _tables(scratch_url) == set(SQLModel.metadata.tables)


def test_models_and_migrations_agree(scratch_url: str) -> None:
    """The equivalent of `alembic check`: autogenerate finds nothing to add."""
    command.upgrade(alembic_config(scratch_url), "head")
    engine = sa.create_engine(scratch_url)
    try:
        with engine.connect() as connection:
            context = MigrationContext.configure(connection, opts={"compare_type": True})
            assert compare_metadata(context, SQLModel.metadata) == []
            assert context.get_current_revision() == head_revision()
    finally:
        engine.dispose()
